package main

import (
	"fmt"
	"strings"
	"testing"
	"time"

	"brightfold/inference"
	"brightfold/internal/refcheck"
)

// Models that ask ONNX Runtime for memory only while they run: sizes
// computed from the input, and allocations inside If and Loop bodies, which
// no check of the graph before the run can bound. ONNX Runtime's CPU
// allocator is a BFC arena limited to inference.ModelMemoryLimit, so each
// run must be refused with exit 2 and one line naming the limit, with peak
// RSS under 1 GiB. (The graph builder of internal/onnx/exec cannot make
// these graphs: it has no subgraph attributes and its trial run would
// execute them in Go; they are written as protobuf like the other hostile
// graphs.)

// pbAttrInt is an INT AttributeProto (name 1, i 3, type 20 = 2).
func pbAttrInt(name string, v int64) []byte {
	return pbVarint(pbVarint(pbBytes(nil, 1, []byte(name)), 3, uint64(v)), 20, 2)
}

// pbConst is a Constant node giving an int64 tensor (dims nil: a scalar).
func pbConst(name string, dims []int64, v ...int64) []byte {
	return pbNode("Constant", name, nil, []string{name}, pbAttrTensor("value", pbTensor(name, 7, dims, v, false)))
}

// feedsScan makes a model whose scan input passes Add(scan, grown) first,
// where grown is the scalar the hostile nodes compute (zero if they ever
// finished), so that ONNX Runtime cannot prune them.
func feedsScan(t *testing.T, nodes ...[]byte) string {
	nodes = append(nodes, pbNode("Add", "use", []string{"scan", "grown"}, []string{"scan_plus"}))
	return hostileModelFolder(t, renameInput("scan_plus"), nodes...)
}

// sumAll reduces value x to the scalar out (ReduceSum over all axes).
func sumAll(x, out string) []byte {
	return pbNode("ReduceSum", "sum_"+out, []string{x}, []string{out}, pbAttrInt("keepdims", 0))
}

// runtimeShape computes [N, 1, 1072, 1072, 1072] from the scan's shape
// (16³ times 67 per axis): 1.23 G float32 elements, 4.9 GB.
func runtimeShape() [][]byte {
	return [][]byte{
		pbNode("Shape", "shape_of", []string{"scan"}, []string{"scan_shape"}),
		pbConst("factor", []int64{5}, 1, 1, 67, 67, 67),
		pbNode("Mul", "grow_shape", []string{"scan_shape", "factor"}, []string{"big_shape"}),
	}
}

// runtimeConstantOfShapeModel: Shape → Mul → ConstantOfShape asks for 4.9 GB.
func runtimeConstantOfShapeModel(t *testing.T) string {
	nodes := append(runtimeShape(),
		pbNode("ConstantOfShape", "fill", []string{"big_shape"}, []string{"big"}),
		sumAll("big", "grown"))
	return feedsScan(t, nodes...)
}

// runtimeExpandModel: Expand of one value to the run-time shape, 4.9 GB.
func runtimeExpandModel(t *testing.T) string {
	nodes := append(runtimeShape(),
		pbNode("Constant", "one", nil, []string{"one"}, pbAttrTensor("value", pbTensor("one", 1, []int64{1}, []int64{1}, false))),
		pbNode("Expand", "grow", []string{"one", "big_shape"}, []string{"big"}),
		sumAll("big", "grown"))
	return feedsScan(t, nodes...)
}

// ifBranchModel: an If whose condition depends on the input (the scan has
// elements) and whose then branch fills a constant shape of 50000×25000
// float32 (5 GB); the else branch gives 0.
func ifBranchModel(t *testing.T) string {
	scalarOut := [][]byte{pbValueInfo("branch_out", 1, true)}
	then := pbGraph("then", [][]byte{
		pbConst("then_shape", []int64{2}, 50000, 25000),
		pbNode("ConstantOfShape", "then_fill", []string{"then_shape"}, []string{"then_big"}),
		sumAll("then_big", "branch_out"),
	}, nil, nil, scalarOut)
	els := pbGraph("else", [][]byte{
		pbNode("Constant", "else_zero", nil, []string{"branch_out"}, pbAttrTensor("value", pbTensor("z", 1, nil, []int64{0}, false))),
	}, nil, nil, scalarOut)
	return feedsScan(t,
		pbNode("Size", "size_of", []string{"scan"}, []string{"scan_size"}),
		pbConst("zero", nil, 0),
		pbNode("Greater", "has_voxels", []string{"scan_size", "zero"}, []string{"cond"}),
		pbNode("If", "choose", []string{"cond"}, []string{"grown"}, pbAttrGraph("then_branch", then), pbAttrGraph("else_branch", els)),
	)
}

// loopConcatModel: a Loop of 64 iterations whose carried tensor doubles
// each time (Concat of itself along axis 0): the scan's 16 KiB would pass
// 5 GB after 19 iterations.
func loopConcatModel(t *testing.T) string {
	ins := [][]byte{pbValueInfo("iter", 7, true), pbValueInfo("cond_in", 9, true), pbValueInfo("v_in", 1, false)}
	body := pbGraph("body", [][]byte{
		pbNode("Identity", "keep", []string{"cond_in"}, []string{"cond_out"}),
		pbNode("Concat", "double", []string{"v_in", "v_in"}, []string{"v_out"}, pbAttrInt("axis", 0)),
	}, nil, ins, [][]byte{pbValueInfo("cond_out", 9, true), pbValueInfo("v_out", 1, false)})
	return feedsScan(t,
		pbConst("trips", nil, 64),
		pbNode("Constant", "go_on", nil, []string{"go_on"}, pbAttrTensor("value", pbTensor("go_on", 9, nil, []int64{1}, false))),
		pbNode("Loop", "grow", []string{"trips", "go_on", "scan"}, []string{"looped"}, pbAttrGraph("body", body)),
		sumAll("looped", "grown"),
	)
}

// loopScanOutputModel: a Loop of INT64_MAX iterations that emits the scan
// (an outer value, 16 KiB) as 64 scan outputs each time. ONNX Runtime
// keeps a record of every iteration's outputs on its C++ heap, outside the
// arena, to concatenate them when the loop ends, which it never does.
func loopScanOutputModel(t *testing.T) string {
	const outs = 64
	ins := [][]byte{pbValueInfo("iter", 7, true), pbValueInfo("cond_in", 9, true)}
	nodes := [][]byte{pbNode("Identity", "keep", []string{"cond_in"}, []string{"cond_out"})}
	bodyOuts := [][]byte{pbValueInfo("cond_out", 9, true)}
	loopOuts := make([]string, outs)
	for i := range loopOuts {
		each := fmt.Sprintf("each%d", i)
		nodes = append(nodes, pbNode("Identity", "emit"+each, []string{"scan"}, []string{each}))
		bodyOuts = append(bodyOuts, pbValueInfo(each, 1, false))
		loopOuts[i] = fmt.Sprintf("stacked%d", i)
	}
	body := pbGraph("body", nodes, nil, ins, bodyOuts)
	return feedsScan(t,
		pbConst("trips", nil, 1<<63-1),
		pbNode("Constant", "go_on", nil, []string{"go_on"}, pbAttrTensor("value", pbTensor("go_on", 9, nil, []int64{1}, false))),
		pbNode("Loop", "grow", []string{"trips", "go_on"}, loopOuts, pbAttrGraph("body", body)),
		sumAll("stacked0", "grown"),
	)
}

// TestHostileModelMemory runs each run-time allocation model through
// `model check`, `score` and `score --map lrp --out` as the real command
// line: exit 2, one line naming the model memory limit and how to raise it
// (not the run budget, which would stop them later), and peak RSS
// (ru_maxrss of the child) at most 1 GiB.
func TestHostileModelMemory(t *testing.T) {
	lib := refcheck.ORTLib(t)
	dir := t.TempDir()
	scan := headNIfTI(t)
	// the arena refuses the first four at once; the fifth grows outside it
	// (about 35 MB/s here, 15-35 s to the ceiling) until the process ceiling
	// stops it, so it runs under model check and score only, with a run
	// budget long enough that a slow or loaded machine still reaches the
	// ceiling first
	models := []struct {
		name, dir string
		commands  int
		seconds   int
	}{
		{"ConstantOfShape in an If branch", ifBranchModel(t), 3, 55},
		{"ConstantOfShape of a run-time shape", runtimeConstantOfShapeModel(t), 3, 55},
		{"Loop doubling by Concat", loopConcatModel(t), 3, 55},
		{"Expand to a run-time shape", runtimeExpandModel(t), 3, 55},
		{"Loop stacking scan outputs", loopScanOutputModel(t), 2, 240},
	}
	L := []string{"--ort-lib", lib}
	for _, m := range models {
		budget := []string{fmt.Sprintf("%s=%d", inference.RunBudgetEnv, m.seconds)}
		for _, args := range [][]string{
			append([]string{"model", "check", m.dir}, L...),
			append([]string{"score", scan, "--model", m.dir}, L...),
			append([]string{"score", scan, "--model", m.dir, "--map", "lrp", "--out", dir + "/out"}, L...),
		}[:m.commands] {
			name := m.name + ": " + strings.Join(args[:len(args)-2], " ")
			r := runHostileFor(t, time.Duration(m.seconds+5)*time.Second, dir, budget, args...)
			t.Logf("%s: exit %d, peak RSS %d MiB, %.1f s", name, r.code, r.peakRSS>>20, r.wall.Seconds())
			switch {
			case r.killed != "":
				t.Errorf("%s: killed at the %s", name, r.killed)
			case r.code != 2:
				t.Errorf("%s: exit %d, want 2\nstderr %q", name, r.code, r.stderr)
			case strings.Count(strings.TrimRight(r.stderr, "\n"), "\n") != 0:
				t.Errorf("%s: stderr is not one line: %q", name, r.stderr)
			case !strings.Contains(r.stderr, inference.ModelMemoryEnv) || !strings.Contains(r.stderr, "MiB"):
				t.Errorf("%s: stderr does not name the memory limit: %q", name, r.stderr)
			}
			if r.peakRSS > hostileMemLimit {
				t.Errorf("%s: peak RSS %d MiB > 1 GiB", name, r.peakRSS>>20)
			}
		}
	}
}

// outerProductModel multiplies the scan (4096 values) as a column by itself
// as a row: a 4096×4096 tensor of 64 MiB, which ONNX Runtime's arena holds,
// but which the Go executor of relevance maps makes with two broadcast index
// tables (320 MiB in all), over the limit of 256 MiB.
func outerProductModel(t *testing.T) string {
	return feedsScan(t,
		pbConst("col_shape", []int64{2}, 4096, 1),
		pbConst("row_shape", []int64{2}, 1, 4096),
		pbNode("Reshape", "as_col", []string{"scan", "col_shape"}, []string{"col"}),
		pbNode("Reshape", "as_row", []string{"scan", "row_shape"}, []string{"row"}),
		pbNode("Mul", "outer", []string{"col", "row"}, []string{"outer_product"}),
		sumAll("outer_product", "outer_sum"),
		pbNode("Constant", "nought", nil, []string{"nought"}, pbAttrTensor("value", pbTensor("nought", 1, nil, []int64{0}, false))),
		pbNode("Mul", "silence", []string{"outer_sum", "nought"}, []string{"grown"}),
	)
}

// TestHostileGoExecutorMemory: the same model scores (ONNX Runtime stays
// within its arena), and its gradient × input map, computed by the Go
// executor, is refused before the allocation with exit 2 and one line
// naming the limit; peak RSS stays under 1 GiB.
func TestHostileGoExecutorMemory(t *testing.T) {
	lib := refcheck.ORTLib(t)
	dir := t.TempDir()
	scan := headNIfTI(t)
	model := outerProductModel(t)
	L := []string{"--ort-lib", lib}
	r := runHostile(t, dir, nil, append([]string{"score", scan, "--model", model}, L...)...)
	if r.code != 0 {
		t.Fatalf("score without a map: exit %d\n%s", r.code, r.stderr)
	}
	r = runHostile(t, dir, nil, append([]string{"score", scan, "--model", model, "--map", "gradinput", "--out", dir + "/out"}, L...)...)
	t.Logf("--map gradinput: exit %d, peak RSS %d MiB, %.1f s: %s", r.code, r.peakRSS>>20, r.wall.Seconds(), r.stderr)
	switch {
	case r.killed != "":
		t.Errorf("killed at the %s", r.killed)
	case r.code != 2:
		t.Errorf("exit %d, want 2\nstderr %q", r.code, r.stderr)
	case strings.Count(strings.TrimRight(r.stderr, "\n"), "\n") != 0:
		t.Errorf("stderr is not one line: %q", r.stderr)
	case !strings.Contains(r.stderr, inference.ModelMemoryEnv) || !strings.Contains(r.stderr, "256 MiB"):
		t.Errorf("stderr does not name the memory limit: %q", r.stderr)
	}
	if r.peakRSS > hostileMemLimit {
		t.Errorf("peak RSS %d MiB > 1 GiB", r.peakRSS>>20)
	}
}
