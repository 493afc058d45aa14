package cohort

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"sync"

	"brightfold/inference"
	"brightfold/internal/inputerr"
	"brightfold/internal/notice"
	"brightfold/internal/report"
	"brightfold/internal/volume"
	_ "brightfold/internal/volume/formats"
	"brightfold/internal/volume/nifti"
	"brightfold/overlay"
)

// Options are a sweep's settings.
type Options struct {
	Model    *inference.ModelFolder
	Session  *inference.Session // shared by all jobs
	Map      string             // relevance method, or "none"
	Jobs     int                // cases scored at a time (0 means 1)
	Shard    Shard              // zero value: all cases
	Progress io.Writer          // nil for none
	Terminal bool               // draw a progress bar instead of lines
	By       Generator
}

// Summary counts a sweep's cases.
type Summary struct {
	Cases, Skipped, Scored, NotScored int
}

// Sweep scores the cases of o.Shard into out. Cases whose outputs are
// complete and made with the same model folder and options are skipped.
// An unreadable scan is a "not scored" result. It stops with ctx's error
// when ctx is done; what was finished stays.
func Sweep(ctx context.Context, d *Dataset, out string, o Options) (Summary, error) {
	if o.Shard.Count == 0 {
		o.Shard = All
	}
	if o.Map == "" {
		o.Map = "none"
	}
	jobs := max(1, o.Jobs)
	cases := o.Shard.Cases(d)
	sum := Summary{Cases: len(cases)}
	if err := os.MkdirAll(out, 0o755); err != nil {
		return sum, inputerr.Wrap(out, fmt.Errorf("create output folder: %w", err))
	}
	if err := writeDescription(out, d, o.By); err != nil {
		return sum, inputerr.Wrap(out, err)
	}
	prov := optionsKey(o.Model.SHA256, o.Map)
	var method overlay.Method
	if o.Map != "none" {
		m, err := checkMethod(o)
		if err != nil {
			return sum, err
		}
		method = m
	}
	prog := newProgress(o.Progress, len(cases), o.Terminal)
	defer prog.finish()
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	work := make(chan Case)
	var mu sync.Mutex
	var firstErr error
	var wg sync.WaitGroup
	for w := 0; w < jobs; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			s := &scorer{o: o, out: out, prov: prov, method: method}
			for c := range work {
				skipped, status, err := s.run(ctx, d, c)
				mu.Lock()
				if err != nil {
					if firstErr == nil {
						firstErr = err
					}
					cancel()
				} else if skipped {
					sum.Skipped++
				} else if status == StatusScored {
					sum.Scored++
				} else {
					sum.NotScored++
				}
				mu.Unlock()
				if err == nil {
					prog.caseDone(c.Entities, status, skipped)
				}
			}
		}()
	}
feed:
	for _, c := range cases {
		select {
		case work <- c:
		case <-ctx.Done():
			break feed
		}
	}
	close(work)
	wg.Wait()
	if firstErr != nil {
		return sum, firstErr
	}
	if err := ctx.Err(); err != nil {
		return sum, err
	}
	return sum, nil
}

// checkMethod parses --map and checks that the model folder supports it.
func checkMethod(o Options) (overlay.Method, error) {
	m, err := overlay.ParseMethod(o.Map)
	if err != nil {
		return "", inputerr.New("", "--map %q: %v", o.Map, err)
	}
	ex, err := overlay.New(o.Model, o.Session)
	if err != nil {
		return "", err
	}
	for _, a := range ex.Available() {
		if a.Method == m && !a.Available {
			return "", inputerr.New(o.Model.Source, "--map %s: %s", m, a.Reason)
		}
	}
	return m, nil
}

// scorer is one job: it owns its relevance explainer.
type scorer struct {
	o      Options
	out    string
	prov   Provenance
	method overlay.Method
	ex     *overlay.Explainer
}

// run scores one case unless its outputs are complete. The returned error
// stops the sweep (cancellation, a full disk); a scan that cannot be read
// or prepared is a result.
func (s *scorer) run(ctx context.Context, d *Dataset, c Case) (skipped bool, status string, err error) {
	if err := ctx.Err(); err != nil {
		return false, "", err
	}
	resPath := filepath.Join(s.out, ResultPath(c))
	if r, ok := complete(s.out, c, s.prov); ok {
		return true, r.Status + " (kept)", nil
	}
	prov := s.prov
	var files []string
	if s.method != "" {
		nii, side := mapPaths(c, string(s.method))
		files = append(files, filepath.Join(s.out, nii), filepath.Join(s.out, side))
	}
	removeTemporaries(append(files, resPath)...)
	rec := &Record{Participant: "sub-" + c.Participant, Source: c.Source, Covariates: c.Covariates}
	if c.Session != "" {
		rec.Session = "ses-" + c.Session
	}
	if c.Label >= 0 {
		l := c.Label
		rec.Label = &l
	}
	v, err := volume.Load(c.Paths, volume.LoadOptions{})
	if err != nil {
		rec.Status = StatusNotScored + ": " + s.hidePath(c, err)
	} else if err := s.score(ctx, c, v, rec, &prov); err != nil {
		return false, "", err
	}
	rec.Sweep = prov
	rec.Notice = notice.Full
	if err := writeJSON(resPath, rec); err != nil {
		return false, "", inputerr.Wrap(s.out, err)
	}
	return false, rec.Status, nil
}

// hidePath replaces the scan's full path in a message by its path in the dataset.
func (s *scorer) hidePath(c Case, err error) string {
	msg := err.Error()
	for _, p := range c.Paths {
		msg = strings.ReplaceAll(msg, p, c.Source)
	}
	return msg
}

func (s *scorer) score(ctx context.Context, c Case, v *volume.Volume, rec *Record, prov *Provenance) error {
	res, err := s.o.Session.ScoreContext(ctx, v, nil)
	var np *inference.NotPreparedError
	switch {
	case errors.As(err, &np):
		rec.Result = s.newScore(c, v, np.Result)
		rec.Status = StatusNotScored + ": " + s.hidePath(c, np)
		return nil
	case ctx.Err() != nil:
		return ctx.Err()
	case err != nil:
		rec.Status = StatusNotScored + ": " + s.hidePath(c, err)
		return nil
	}
	rec.Result = s.newScore(c, v, res)
	rec.Status = StatusScored
	if s.method == "" {
		return nil
	}
	files, err := s.writeMap(ctx, c, v, res)
	if err != nil {
		return err
	}
	prov.Outputs = files
	rec.Result.Relevance = &report.Relevance{Method: string(s.method), File: filepath.Base(files[0])}
	return nil
}

// newScore is the case's result with the notice and without full paths.
func (s *scorer) newScore(c Case, v *volume.Volume, res *inference.Result) *report.Score {
	r := report.NewScore(c.Source, v, s.o.Model, res)
	r.Notice = notice.Full
	r.Model.Source = filepath.Base(s.o.Model.Source)
	return r
}

// writeMap computes the relevance map, carries it onto the scan and writes
// it with its sidecar; it returns their paths relative to OUTDIR.
func (s *scorer) writeMap(ctx context.Context, c Case, v *volume.Volume, res *inference.Result) ([]string, error) {
	if s.ex == nil {
		ex, err := overlay.New(s.o.Model, s.o.Session)
		if err != nil {
			return nil, err
		}
		s.ex = ex
	}
	m, err := s.ex.Compute(ctx, s.method, res.Prepared.Tensor, overlay.Options{Tolerance: 0.01})
	if err != nil {
		if ctx.Err() != nil {
			return nil, ctx.Err()
		}
		return nil, fmt.Errorf("%s: relevance map (%s): %w", c.Source, s.method, err)
	}
	onScan, err := m.ToScan(res.Prepared.Transform)
	if err != nil {
		return nil, err
	}
	nii, side := mapPaths(c, string(s.method))
	checks := map[string]report.Number{}
	for k, x := range m.Checks {
		checks[k] = report.Number(x)
	}
	info := mapSidecar{RelevanceInfo: report.RelevanceInfo{Notice: notice.Full, File: filepath.Base(nii),
		Method: string(s.method), MethodName: s.method.Title(), Reference: s.method.Reference(), About: s.method.About(),
		Rule: m.Rule, TargetClass: m.Class, TargetLogit: report.Number(m.Target),
		Probability: report.Number(res.Prediction.Probabilities[m.Class]), Units: mapUnits(m), Input: c.Source,
		Space: "the source scan's voxel grid", Dims: onScan.Dims, Affine: onScan.Affine,
		ModelGrid: report.ModelGrid{Dims: res.Prepared.Transform.GridDims, Affine: res.Prepared.Transform.GridAffine},
		Checks:    checks, Settings: m.Settings, Passes: m.Passes,
		Model:    report.Model{Name: s.o.Model.Card.Name, Version: s.o.Model.Card.Version, SHA256: s.o.Model.SHA256},
		FitCheck: res.Verdict}, Sources: []string{"bids:raw:" + c.Source}}
	o := *onScan
	o.Patient, o.Source = volume.Identifiers{}, ""
	if err := os.MkdirAll(filepath.Join(s.out, caseDir(c)), 0o755); err != nil {
		return nil, inputerr.Wrap(s.out, err)
	}
	if err := nifti.Write(filepath.Join(s.out, nii), &o, nifti.WriteOptions{DataType: nifti.DTFloat32, Description: notice.Short}); err != nil {
		return nil, inputerr.Wrap(s.out, err)
	}
	if err := writeJSON(filepath.Join(s.out, side), info); err != nil {
		return nil, inputerr.Wrap(s.out, err)
	}
	return []string{filepath.ToSlash(nii), filepath.ToSlash(side)}, nil
}

// mapSidecar is the relevance map's JSON sidecar: what the map is, plus the
// BIDS Sources field naming the scan it was computed from.
type mapSidecar struct {
	report.RelevanceInfo
	Sources []string `json:"Sources"`
}

func mapUnits(m *overlay.Map) string {
	if m.Additive {
		return "share of the logit per voxel"
	}
	return "logit drop"
}
