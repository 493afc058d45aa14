package nifti

import (
	"compress/gzip"
	"math"
	"math/rand"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"

	"brightfold/internal/parallel"
	"brightfold/internal/volume"
	"brightfold/internal/volume/internal/niiref"
)

// niiBenchDims is the size of a typical 1 mm T1-weighted head scan.
var niiBenchDims = [3]int{256, 256, 176}

// niiBenchVolume is a synthetic head-like volume: a bright ellipsoid with
// smooth intensity changes, a darker core, and noise, so that gzip
// compresses it about as much as it compresses a real scan.
func niiBenchVolume() *volume.Volume { return niiHeadLike(niiBenchDims) }

// niiHeadLike is niiBenchVolume's head on a grid of the given dims (the
// ellipsoid scaled with the grid).
func niiHeadLike(dims [3]int) *volume.Volume {
	v, _ := volume.New(dims, volume.Diag([3]float64{1, 1, 1}, [3]float64{-float64(dims[0]) / 2, -float64(dims[1]) / 2, -float64(dims[2]) / 2}))
	c := [3]float64{float64(dims[0]) / 2, float64(dims[1]) / 2, float64(dims[2]) / 2}
	r := [3]float64{90 * float64(dims[0]) / 256, 110 * float64(dims[1]) / 256, 75 * float64(dims[2]) / 176}
	parallel.Each(v.Dims[2], 0, func(_, k int) {
		rng := rand.New(rand.NewSource(int64(k)))
		for j := 0; j < v.Dims[1]; j++ {
			for i := 0; i < v.Dims[0]; i++ {
				x, y, z := (float64(i)-c[0])/r[0], (float64(j)-c[1])/r[1], (float64(k)-c[2])/r[2]
				d := x*x + y*y + z*z
				val := 0.0
				if d < 1 {
					val = 600 + 200*math.Sin(6*x)*math.Cos(5*y) + 100*z
					if d < 0.3 {
						val -= 250
					}
				}
				val += 8 * rng.NormFloat64()
				v.Data[v.Index(i, j, k)] = float32(math.Round(math.Max(val, 0)))
			}
		}
	})
	return v
}

// niiBenchFile writes (once) the benchmark's .nii.gz: into
// $BRIGHTFOLD_BENCH_DIR when set, so that scripts/bench.sh can time nibabel
// on the same file, else into a temporary folder.
func niiBenchFile(b *testing.B) string {
	b.Helper()
	dir := os.Getenv("BRIGHTFOLD_BENCH_DIR")
	if dir == "" {
		dir = b.TempDir()
	}
	p := filepath.Join(dir, "bench-256x256x176-int16.nii.gz")
	if _, err := os.Stat(p); err == nil {
		return p
	}
	if err := Write(p, niiBenchVolume(), WriteOptions{DataType: DTInt16}); err != nil {
		b.Fatal(err)
	}
	return p
}

// peakRSSMB is this process's peak resident memory (VmHWM) in MB.
func peakRSSMB() float64 {
	b, err := os.ReadFile("/proc/self/status")
	if err != nil {
		return math.NaN()
	}
	for _, line := range strings.Split(string(b), "\n") {
		if f := strings.Fields(line); len(f) >= 2 && f[0] == "VmHWM:" {
			kb, _ := strconv.ParseFloat(f[1], 64)
			return kb / 1024
		}
	}
	return math.NaN()
}

// cpuSeconds is the user and system CPU time of this process so far.
func cpuSeconds() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return math.NaN()
	}
	return float64(ru.Utime.Nano()+ru.Stime.Nano()) / 1e9
}

// BenchmarkLoadNIfTIGz loads a 256×256×176 int16 .nii.gz into float32.
// scripts/bench.sh compares it with nibabel's get_fdata on the same file.
func BenchmarkLoadNIfTIGz(b *testing.B) {
	p := niiBenchFile(b)
	cpu0 := cpuSeconds()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		v, err := volume.Load([]string{p}, volume.LoadOptions{})
		if err != nil {
			b.Fatal(err)
		}
		if v.Dims != niiBenchDims {
			b.Fatalf("dims %v", v.Dims)
		}
	}
	b.StopTimer()
	b.ReportMetric((cpuSeconds()-cpu0)/float64(b.N), "cpu-s/op")
	b.ReportMetric(peakRSSMB(), "peak-RSS-MB")
}

// BenchmarkReorient turns a 256×256×176 LPI-stored volume into RAS order.
func BenchmarkReorient(b *testing.B) {
	v, _ := volume.New(niiBenchDims, volume.Affine{{0, 0, -1, 90}, {-1, 0, 0, 120}, {0, -1, 0, 100}, {0, 0, 0, 1}})
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := volume.Reorient(v); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkResampleTrilinear resamples a 256×256×176 volume onto an oblique
// grid of the same size.
func BenchmarkResampleTrilinear(b *testing.B) {
	v, _ := volume.New(niiBenchDims, volume.Diag([3]float64{1, 1, 1}, [3]float64{-128, -128, -88}))
	target, _ := niiref.ObliqueTarget(v)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := volume.Resample(v, target, niiBenchDims, volume.Trilinear); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkEncodeInts quantises a 256×256×176 volume for the NIfTI writer:
// integers stored as they are (int16 and a uint8 label map), and
// non-integral values spread over the int16 range through scl_slope/inter.
// The "first" variants run the first, voxel-at-a-time quantiser
// (encodeIntsMinMax) on the same data, for a ratio measured in the same run.
func BenchmarkEncodeInts(b *testing.B) {
	v := niiBenchVolume()
	frac := v.Clone()
	labels := v.Clone()
	for i, x := range v.Data {
		frac.Data[i] = x*0.37 + 0.25
		labels.Data[i] = float32(int(x) % 4)
	}
	cases := []struct {
		name string
		data []float32
		dt   DataType
	}{{"int16-exact", v.Data, DTInt16}, {"int16-scaled", frac.Data, DTInt16}, {"uint8-labels", labels.Data, DTUint8}}
	for _, c := range cases {
		lo, hi, size := float64(math.MinInt16), float64(math.MaxInt16), 2
		if c.dt == DTUint8 {
			lo, hi, size = 0, math.MaxUint8, 1
		}
		b.Run(c.name, func(b *testing.B) {
			b.SetBytes(int64(4 * len(c.data)))
			for i := 0; i < b.N; i++ {
				if _, _, _, err := encodeInts(c.data, lo, hi, size); err != nil {
					b.Fatal(err)
				}
			}
		})
		b.Run(c.name+"-first", func(b *testing.B) {
			b.SetBytes(int64(4 * len(c.data)))
			for i := 0; i < b.N; i++ {
				if _, _, _, err := encodeIntsMinMax(c.data, lo, hi, size); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkWriteNIfTIGzLevels writes the noisy 256×256×176 int16 benchmark
// volume as .nii.gz at three WriteOptions.GzipLevel values and reports
// each file's size, so that speed and size can be weighed in one run.
func BenchmarkWriteNIfTIGzLevels(b *testing.B) {
	v := niiBenchVolume()
	for _, l := range []struct {
		name  string
		level int
	}{{"default", 0}, {"huffman-only", gzip.HuffmanOnly}, {"best-speed", gzip.BestSpeed}} {
		b.Run(l.name, func(b *testing.B) {
			p := filepath.Join(b.TempDir(), "bench.nii.gz")
			for i := 0; i < b.N; i++ {
				if err := Write(p, v, WriteOptions{DataType: DTInt16, GzipLevel: l.level}); err != nil {
					b.Fatal(err)
				}
			}
			b.StopTimer()
			if fi, err := os.Stat(p); err == nil {
				b.ReportMetric(float64(fi.Size())/1e6, "MB-file")
			}
		})
	}
}
