package register

import (
	"context"
	"math/rand/v2"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"
)

// BenchmarkAlignPhantom1mm times the affine NCC alignment of a 1 mm
// 160×192×160 phantom (moved by a known random transform) to the 2 mm
// rendering of the same head, on all cores, and dipy 1.6's
// AffineRegistration (testdata/dipy_align.py: MI, centres of mass →
// translation → rigid → affine) on the same pair in the same run. It
// reports both times, their ratio (goal ≤ 0.25), both mean displacement
// errors over the head (goal: ours no larger) and the peak resident memory
// of this process (which also rendered the phantoms) and of dipy's.
func BenchmarkAlignPhantom1mm(b *testing.B) {
	if os.Getenv("BRIGHTFOLD_BENCH_ALIGN") != "1" {
		b.Skip("slow (renders a 1 mm phantom and runs dipy): scripts/bench.sh runs it with BRIGHTFOLD_BENCH_ALIGN=1")
	}
	tpl := phantomCase(b, 2, "")
	src := phantomCase(b, 1, "")
	truth := randomAffine(rand.New(rand.NewPCG(14, 9)), [3]float64{})
	scan := moveScan(b, src.Volume, truth, 1, [3]int{160, 192, 160})
	src = nil
	b.ResetTimer()
	var ours float64
	var res *Result
	for i := 0; i < b.N; i++ {
		t0 := time.Now()
		r, err := Register(context.Background(), tpl.Volume, scan, Options{})
		if err != nil {
			b.Fatal(err)
		}
		ours += time.Since(t0).Seconds()
		res = r
	}
	b.StopTimer()
	ours /= float64(b.N)
	mean, _ := displacement(tpl.Volume, headOf(tpl), res.Transform, truth)
	b.ReportMetric(ours, "s/align")
	b.ReportMetric(mean, "mean_error_mm")
	b.ReportMetric(peakRSSMiB(), "peak_MiB")
	if os.Getenv("BRIGHTFOLD_BENCH_DIPY") == "0" {
		return
	}
	dir := b.TempDir()
	pairs := []map[string]string{{"template": writeNIfTI(b, dir, "template.nii", tpl.Volume), "scan": writeNIfTI(b, dir, "scan.nii", scan)}}
	d := runDipy(b, pairs)[0]
	dmean, _ := displacement(tpl.Volume, headOf(tpl), d.Matrix, truth)
	b.ReportMetric(d.Seconds, "dipy_s/align")
	b.ReportMetric(dmean, "dipy_mean_error_mm")
	b.ReportMetric(d.PeakMiB, "dipy_peak_MiB")
	b.ReportMetric(ours/d.Seconds, "time_ratio_vs_dipy")
}

// peakRSSMiB is this process's peak resident memory (VmHWM, Linux).
func peakRSSMiB() float64 {
	b, err := os.ReadFile("/proc/self/status")
	if err != nil {
		return 0
	}
	for _, line := range strings.Split(string(b), "\n") {
		if f := strings.Fields(line); len(f) >= 2 && f[0] == "VmHWM:" {
			kb, _ := strconv.ParseFloat(f[1], 64)
			return kb / 1024
		}
	}
	return 0
}
