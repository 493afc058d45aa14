package exec

import (
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"brightfold/internal/onnx"
	"brightfold/internal/refcheck"
)

// conformanceDir holds ONNX's node conformance cases as Debian's
// libonnx-testdata installs them (ONNX 1.12): each test_* folder has
// model.onnx and test_data_set_0/{input,output}_N.pb TensorProto files.
const conformanceDir = "/usr/share/libonnx-testdata/data/node"

// conformanceTol is the agreement required: |got − want| ≤ 1e-4·(1 + |want|)
// (absolute 1e-4 near zero, relative 1e-4 for large values).
const conformanceTol = 1e-4

type caseResult struct {
	name, op string
	status   string // "pass", "fail", "unsupported"
	reason   string
}

// TestConformance runs every case of the ONNX node conformance data whose
// operator the executor supports: single-node models by their node's
// operator, multi-node ("_expanded") models by the operator their folder is
// named after. Cases the executor refuses (an attribute value or element
// type it does not support) are counted and explained, not dropped.
func TestConformance(t *testing.T) {
	dir := refcheck.Path(t, conformanceDir)
	entries, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var results []caseResult
	for _, e := range entries {
		if !e.IsDir() || !strings.HasPrefix(e.Name(), "test_") {
			continue
		}
		if r, ok := runCase(filepath.Join(dir, e.Name())); ok {
			results = append(results, r)
		}
	}
	if len(results) == 0 {
		t.Fatalf("no conformance cases matched in %s", dir)
	}
	reportConformance(t, results)
}

// caseOp decides which supported operator a case tests, if any.
func caseOp(name string, m *onnx.Model) (string, bool) {
	supported := map[string]bool{}
	for _, op := range SupportedOps() {
		supported[op] = true
	}
	if len(m.Graph.Nodes) == 1 {
		op := m.Graph.Nodes[0].OpType
		return op, supported[op]
	}
	best := ""
	short := strings.TrimPrefix(name, "test_")
	for op := range supported {
		if strings.HasPrefix(short, strings.ToLower(op)) && len(op) > len(best) {
			best = op
		}
	}
	return best, best != ""
}

func runCase(dir string) (caseResult, bool) {
	name := filepath.Base(dir)
	b, err := os.ReadFile(filepath.Join(dir, "model.onnx"))
	if err != nil {
		return caseResult{}, false
	}
	m, err := onnx.Decode(b)
	if err != nil {
		// A model we cannot even decode is a failure only if its name
		// claims one of our operators.
		for _, op := range SupportedOps() {
			if strings.HasPrefix(strings.TrimPrefix(name, "test_"), strings.ToLower(op)) {
				return caseResult{name, op, "fail", "decode: " + err.Error()}, true
			}
		}
		return caseResult{}, false
	}
	op, ok := caseOp(name, m)
	if !ok {
		return caseResult{}, false
	}
	res := caseResult{name: name, op: op}
	res.status, res.reason = checkCase(dir, m)
	return res, true
}

func checkCase(dir string, m *onnx.Model) (string, string) {
	e, err := NewExecutorWorkers(m, 2)
	var ue *UnsupportedError
	if errors.As(err, &ue) {
		return "unsupported", ue.Error()
	}
	if err != nil {
		return "fail", err.Error()
	}
	inputs := map[string]*onnx.Tensor{}
	real := e.Inputs()
	for i, vi := range real {
		_, tt, err := readTensorFile(filepath.Join(dir, "test_data_set_0", fmt.Sprintf("input_%d.pb", i)))
		if err != nil {
			if strings.Contains(err.Error(), "not supported") {
				return "unsupported", "input " + vi.Name + ": " + err.Error()
			}
			return "fail", err.Error()
		}
		inputs[vi.Name] = tt
	}
	tr, err := e.Forward(inputs)
	if errors.As(err, &ue) {
		return "unsupported", ue.Error()
	}
	if err != nil {
		return "fail", err.Error()
	}
	for i, vo := range m.Graph.Outputs {
		_, want, err := readTensorFile(filepath.Join(dir, "test_data_set_0", fmt.Sprintf("output_%d.pb", i)))
		if err != nil {
			if strings.Contains(err.Error(), "not supported") {
				return "unsupported", "output " + vo.Name + ": " + err.Error()
			}
			return "fail", err.Error()
		}
		if msg := compareTensors(tr.Value(vo.Name), want); msg != "" {
			return "fail", fmt.Sprintf("output %s: %s", vo.Name, msg)
		}
	}
	return "pass", ""
}

func readTensorFile(path string) (string, *onnx.Tensor, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return "", nil, err
	}
	name, t, err := onnx.DecodeTensor(b)
	if err != nil {
		return "", nil, fmt.Errorf("%s: %w", filepath.Base(path), err)
	}
	return name, t, nil
}

// compareTensors returns "" when got matches want within conformanceTol
// (floats) or exactly (integers), else what differs.
func compareTensors(got, want *onnx.Tensor) string {
	if got == nil {
		return "not computed"
	}
	if !onnx.SameShape(got.Shape, want.Shape) {
		return fmt.Sprintf("shape %v, want %v", got.Shape, want.Shape)
	}
	if got.IsFloat() != want.IsFloat() {
		return fmt.Sprintf("type %v, want %v", got.DType, want.DType)
	}
	if !want.IsFloat() {
		for i := range want.Ints {
			if got.Ints[i] != want.Ints[i] {
				return fmt.Sprintf("element %d is %d, want %d", i, got.Ints[i], want.Ints[i])
			}
		}
		return ""
	}
	for i := range want.Data {
		g, w := float64(got.Data[i]), float64(want.Data[i])
		if math.IsNaN(w) && math.IsNaN(g) || g == w {
			continue
		}
		if !(math.Abs(g-w) <= conformanceTol*(1+math.Abs(w))) {
			return fmt.Sprintf("element %d is %g, want %g", i, g, w)
		}
	}
	return ""
}

func reportConformance(t *testing.T, results []caseResult) {
	type counts struct{ pass, fail, unsup int }
	per := map[string]*counts{}
	var ops []string
	var total counts
	for _, r := range results {
		c := per[r.op]
		if c == nil {
			c = &counts{}
			per[r.op] = c
			ops = append(ops, r.op)
		}
		switch r.status {
		case "pass":
			c.pass++
			total.pass++
		case "fail":
			c.fail++
			total.fail++
			t.Errorf("conformance %s (%s): %s", r.name, r.op, r.reason)
		default:
			c.unsup++
			total.unsup++
			t.Logf("unsupported %s (%s): %s", r.name, r.op, r.reason)
		}
	}
	sort.Strings(ops)
	t.Logf("ONNX node conformance (%s), tolerance %g:", conformanceDir, conformanceTol)
	t.Logf("%-20s %6s %6s %12s", "operator", "passed", "failed", "unsupported")
	for _, op := range ops {
		c := per[op]
		t.Logf("%-20s %6d %6d %12d", op, c.pass, c.fail, c.unsup)
	}
	t.Logf("%-20s %6d %6d %12d", "total", total.pass, total.fail, total.unsup)
}
