// Package study evaluates a model folder on cohorts: it generates fresh
// synthetic phantoms in memory (package phantom), scores each through
// inference.Session.Score — the same path as `brightfold score` — and
// computes the figures of the evaluation:
//
//   - held-out AUROC of the positive-class probability on fresh
//     in-distribution phantoms (pattern against no pattern);
//   - for each shift type, the AUROC of the fit score (the largest
//     required-check severity, the continuous score behind the verdict) of
//     the shifted cases against the in-distribution cases, the fraction
//     flagged, and the same AUROC for every single check's severity;
//   - the false-alarm rate: the fraction of in-distribution cases whose
//     verdict is out-of-distribution;
//   - the expected calibration error (15 equal-width bins, Guo et al. 2017,
//     Eq. 3) before and after the card's temperature scaling;
//   - the verdict and the failed checks' sentences on real reference scans
//     (Debian's nibabel and pydicom test data).
//
// Every AUROC and ECE is written per case to a CSV (WriteCasesCSV) so that
// an outside reference recomputes them: CheckWithSklearn runs sklearn's
// roc_auc_score on the same scores with Debian's Python. Every output
// carries notice.Full.
//
// The figures describe the synthetic phantom generator, not any disease or
// real population. Research use only. Not a diagnosis.
package study
