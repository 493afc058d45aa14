package cohort

import (
	"path/filepath"
	"testing"

	"brightfold/assets"
	"brightfold/inference"
	"brightfold/internal/phantom"
	"brightfold/internal/refcheck"
)

// writeTestBIDS writes a BIDS dataset of the first n phantoms of seed at
// mm millimetres and returns its folder.
func writeTestBIDS(t testing.TB, dir string, seed uint64, n int, mm float64) string {
	t.Helper()
	root := filepath.Join(dir, "bids")
	must(t, WritePhantomBIDS(root, phantom.Cohort(seed, n, false), mm))
	return root
}

func must(t testing.TB, err error) {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
}

// demoSession opens the embedded demo model folder on ONNX Runtime.
func demoSession(t testing.TB) (*inference.ModelFolder, *inference.Session) {
	t.Helper()
	lib := refcheck.ORTLib(t)
	must(t, inference.InitRuntime(lib))
	mf, err := inference.LoadModelFolderFS(assets.DemoModelFolder())
	must(t, err)
	mf.Source = assets.DemoModelFolderName
	s, err := inference.NewSession(mf, inference.SessionOptions{IntraOpThreads: 1})
	must(t, err)
	t.Cleanup(func() { s.Close() })
	return mf, s
}

// readTree reads every file below dir without timing fields.
func readTree(t testing.TB, dir string) map[string]string {
	t.Helper()
	m, err := ReadOutputs(dir)
	must(t, err)
	return m
}
