package dicom

import (
	"bytes"
	"fmt"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"testing"

	"brightfold/internal/refcheck"
	"brightfold/internal/volume"
)

const dicomBenchScript = "testdata/dicom_bench.py"

// peakDirEnv names the series folder for the peak-memory helper process.
const peakDirEnv = "BRIGHTFOLD_DICOM_PEAK_DIR"

// dcmBenchSeries writes a 176-slice 256×256 int16 series (the size of a
// common 1 mm sagittal T1) into a new folder.
func dcmBenchSeries(b *testing.B) string {
	b.Helper()
	v := dcmObliqueVolume(b, [3]int{256, 256, 176}, true)
	for i := range v.Data {
		v.Data[i] = float32((i*7919)%3000 - 200)
	}
	dir := b.TempDir()
	if err := WriteSeries(dir, v, dcmDemoOptions("HMRU-BENCH/T1")); err != nil {
		b.Fatal(err)
	}
	return dir
}

// BenchmarkLoadDICOMSeries loads a 176-slice 256×256 series written by the
// bench, and times a pydicom loop with numpy stacking on the same files in
// the same run (testdata/dicom_bench.py). It reports the ratio of our load
// time to pydicom's best of 3, and the peak resident memory of a process
// that only loads the series, ours and pydicom's.
func BenchmarkLoadDICOMSeries(b *testing.B) {
	dir := dcmBenchSeries(b)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		v, err := volume.Load([]string{dir}, volume.LoadOptions{})
		if err != nil {
			b.Fatal(err)
		}
		if v.Dims != [3]int{256, 256, 176} {
			b.Fatalf("dims %v", v.Dims)
		}
	}
	b.StopTimer()
	ours := b.Elapsed().Seconds() / float64(b.N)
	refcheck.PythonModule(b, "pydicom")
	var ref struct {
		Best   float64 `json:"best_s"`
		Median float64 `json:"median_s"`
		Shape  []int   `json:"shape"`
		Peak   float64 `json:"peak_rss_kib"`
	}
	refcheck.RunPython(b, dicomBenchScript, &ref, dir, "3")
	if len(ref.Shape) != 3 || ref.Shape[0] != 256 || ref.Shape[2] != 176 {
		b.Fatalf("pydicom shape %v", ref.Shape)
	}
	b.ReportMetric(ours/ref.Best, "ratio_vs_pydicom")
	b.ReportMetric(ref.Best*1000, "pydicom_ms")
	b.ReportMetric(ref.Peak/1024, "pydicom_peak_MiB")
	b.ReportMetric(float64(dcmPeakRSS(b, dir))/1024, "peak_MiB")
}

// dcmPeakRSS runs this test binary once more, loading dir in
// TestDICOMLoadPeakHelper only, and returns that process's peak RSS in KiB.
func dcmPeakRSS(b *testing.B, dir string) int64 {
	cmd := exec.Command(os.Args[0], "-test.run=^TestDICOMLoadPeakHelper$", "-test.count=1")
	cmd.Env = append(os.Environ(), peakDirEnv+"="+dir)
	var out bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &out
	if err := cmd.Run(); err != nil {
		b.Fatalf("peak helper: %v\n%s", err, out.String())
	}
	for _, line := range strings.Split(out.String(), "\n") {
		if f := strings.Fields(line); len(f) == 2 && f[0] == "PEAK_RSS_KIB" {
			n, err := strconv.ParseInt(f[1], 10, 64)
			if err == nil {
				return n
			}
		}
	}
	b.Fatalf("peak helper printed no PEAK_RSS_KIB:\n%s", out.String())
	return 0
}

// TestDICOMLoadPeakHelper is the child process of dcmPeakRSS; without
// BRIGHTFOLD_DICOM_PEAK_DIR it does nothing.
func TestDICOMLoadPeakHelper(t *testing.T) {
	dir := os.Getenv(peakDirEnv)
	if dir == "" {
		return
	}
	if _, err := volume.Load([]string{dir}, volume.LoadOptions{}); err != nil {
		t.Fatal(err)
	}
	// VmHWM, not getrusage's ru_maxrss, which keeps the parent's
	// high-water mark across exec.
	status, err := os.ReadFile("/proc/self/status")
	if err != nil {
		t.Fatal(err)
	}
	for _, line := range strings.Split(string(status), "\n") {
		if f := strings.Fields(line); len(f) >= 2 && f[0] == "VmHWM:" {
			fmt.Printf("PEAK_RSS_KIB %s\n", f[1])
		}
	}
}
