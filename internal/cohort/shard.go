package cohort

import (
	"fmt"
	"strconv"
	"strings"
)

// Shard is shard Index of Count (0 ≤ Index < Count).
type Shard struct{ Index, Count int }

// All is the one shard holding every case.
var All = Shard{0, 1}

// ParseShard reads "I/N".
func ParseShard(s string) (Shard, error) {
	a, b, ok := strings.Cut(s, "/")
	i, err1 := strconv.Atoi(strings.TrimSpace(a))
	n, err2 := strconv.Atoi(strings.TrimSpace(b))
	if !ok || err1 != nil || err2 != nil || n < 1 || i < 0 || i >= n {
		return Shard{}, fmt.Errorf("--shard %q: want I/N with 0 <= I < N, e.g. 0/4", s)
	}
	return Shard{i, n}, nil
}

// String is "I/N".
func (s Shard) String() string { return fmt.Sprintf("%d/%d", s.Index, s.Count) }

// Cases returns the cases of shard s: participants sorted by label are
// dealt round-robin to the shards, so all scans of one participant fall in
// one shard, shard sizes differ by at most one participant, and the
// partition depends only on the set of participants.
func (s Shard) Cases(d *Dataset) []Case {
	if s.Count <= 1 {
		return d.Cases
	}
	mine := map[string]bool{}
	for k, p := range d.Participants() {
		if k%s.Count == s.Index {
			mine[p] = true
		}
	}
	var out []Case
	for _, c := range d.Cases {
		if mine[c.Participant] {
			out = append(out, c)
		}
	}
	return out
}
