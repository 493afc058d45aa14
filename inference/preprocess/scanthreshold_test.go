package preprocess_test

import (
	"encoding/binary"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"brightfold/inference/internal/scantest"
	"brightfold/inference/preprocess"
	"brightfold/internal/refcheck"
)

// ScanHeadThreshold is the head-mask rule applied to the scan's own voxels,
// not to the block-mean image (whose percentiles are narrower): checked
// against numpy.percentile on the raw voxels of a noisy head.
func TestScanHeadThreshold(t *testing.T) {
	refcheck.PythonModule(t, "numpy")
	v := scantest.EllipsoidHead([3]int{48, 48, 56}, [3]float64{0, 0, 2}, [3]float64{18, 20, 22})
	rng := rand.New(rand.NewPCG(3, 4))
	for i := range v.Data {
		v.Data[i] += float32(15 * rng.NormFloat64())
	}
	p := scantest.Spec()
	pr, err := preprocess.Prepare(v, p)
	if err != nil {
		t.Fatal(err)
	}
	f := filepath.Join(t.TempDir(), "raw.f32")
	b := make([]byte, 4*len(v.Data))
	for i, x := range v.Data {
		binary.LittleEndian.PutUint32(b[4*i:], math.Float32bits(x))
	}
	if err := os.WriteFile(f, b, 0o644); err != nil {
		t.Fatal(err)
	}
	var ref struct{ Threshold float64 }
	h := p.HeadMask
	refcheck.RunPython(t, "testdata/ref_scan_threshold.py", &ref, f,
		fmt.Sprint(h.LowPercentile), fmt.Sprint(h.HighPercentile), fmt.Sprint(h.Fraction))
	if math.Abs(pr.ScanHeadThreshold-ref.Threshold) > 1e-4*math.Abs(ref.Threshold) {
		t.Errorf("scan head threshold %v, numpy %v", pr.ScanHeadThreshold, ref.Threshold)
	}
	if math.Abs(pr.Head.Threshold-ref.Threshold) < 1e-3*math.Abs(ref.Threshold) {
		t.Errorf("block-mean threshold %v equals the raw one %v: the test cannot tell them apart", pr.Head.Threshold, ref.Threshold)
	}
	t.Logf("threshold on the raw voxels %.3f, on the block-mean image %.3f", pr.ScanHeadThreshold, pr.Head.Threshold)
}
