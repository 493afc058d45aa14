// Package cohort runs a model folder over a whole cohort: it reads the
// cohort (a BIDS dataset, a folder of scans or a CSV manifest), partitions
// it into shards by participant, scores each case into BIDS Derivatives
// outputs that a rerun skips when they are complete, merges the shards, and
// writes the site audit (discrimination, calibration, subgroups and
// confounds). Every output carries the research-use notice.
package cohort
