package main

import (
	"crypto/sha256"
	"encoding/hex"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"testing"

	"google.golang.org/protobuf/encoding/protowire"

	"brightfold/inference"
	"brightfold/internal/onnx"
)

// Hand-encoded ONNX pieces (onnx.proto field numbers) for hostile model
// folders: the graph builder has no subgraph attributes, so Loop and If
// nodes are written as protobuf here and spliced into the test model.

func pbBytes(b []byte, num protowire.Number, v []byte) []byte {
	b = protowire.AppendTag(b, num, protowire.BytesType)
	return protowire.AppendBytes(b, v)
}

func pbVarint(b []byte, num protowire.Number, v uint64) []byte {
	b = protowire.AppendTag(b, num, protowire.VarintType)
	return protowire.AppendVarint(b, v)
}

// pbTensor is a TensorProto: dims 1, data_type 2, int32_data 5, int64_data
// 7, name 8; data_location 14 = EXTERNAL with external_data 13 when ext.
func pbTensor(name string, dtype uint64, dims []int64, ints []int64, ext bool) []byte {
	var b []byte
	for _, d := range dims {
		b = pbVarint(b, 1, uint64(d))
	}
	b = pbVarint(b, 2, dtype)
	for _, v := range ints {
		if dtype == 1 { // FLOAT in float_data
			b = protowire.AppendTag(b, 4, protowire.Fixed32Type)
			b = protowire.AppendFixed32(b, math.Float32bits(float32(v)))
			continue
		}
		if dtype == 9 { // BOOL in int32_data
			b = pbVarint(b, 5, uint64(v))
		} else {
			b = pbVarint(b, 7, uint64(v))
		}
	}
	b = pbBytes(b, 8, []byte(name))
	if ext {
		kv := pbBytes(pbBytes(nil, 1, []byte("location")), 2, []byte("../outside.bin"))
		b = pbBytes(b, 13, kv)
		b = pbVarint(b, 14, 1)
	}
	return b
}

// pbValueInfo is a ValueInfoProto of a tensor; scalar gives an empty shape.
func pbValueInfo(name string, elem uint64, scalar bool) []byte {
	tt := pbVarint(nil, 1, elem)
	if scalar {
		tt = pbBytes(tt, 2, nil)
	}
	return pbBytes(pbBytes(nil, 1, []byte(name)), 2, pbBytes(nil, 1, tt))
}

// pbNode is a NodeProto: input 1, output 2, name 3, op_type 4, attribute 5.
func pbNode(op, name string, in, out []string, attrs ...[]byte) []byte {
	var b []byte
	for _, s := range in {
		b = pbBytes(b, 1, []byte(s))
	}
	for _, s := range out {
		b = pbBytes(b, 2, []byte(s))
	}
	b = pbBytes(b, 3, []byte(name))
	b = pbBytes(b, 4, []byte(op))
	for _, a := range attrs {
		b = pbBytes(b, 5, a)
	}
	return b
}

// pbAttrTensor and pbAttrGraph are AttributeProtos (name 1, t 5, g 6, type 20).
func pbAttrTensor(name string, t []byte) []byte {
	return pbVarint(pbBytes(pbBytes(nil, 1, []byte(name)), 5, t), 20, 4)
}

func pbAttrGraph(name string, g []byte) []byte {
	return pbVarint(pbBytes(pbBytes(nil, 1, []byte(name)), 6, g), 20, 5)
}

// pbGraph is a GraphProto: node 1, name 2, initializer 5, input 11, output 12.
func pbGraph(name string, nodes, inits, ins, outs [][]byte) []byte {
	var b []byte
	for _, n := range nodes {
		b = pbBytes(b, 1, n)
	}
	b = pbBytes(b, 2, []byte(name))
	for _, t := range inits {
		b = pbBytes(b, 5, t)
	}
	for _, v := range ins {
		b = pbBytes(b, 11, v)
	}
	for _, v := range outs {
		b = pbBytes(b, 12, v)
	}
	return b
}

// spliceNodes puts nodes before the existing ones of the model's graph
// (ModelProto.graph is field 7).
func spliceNodes(t *testing.T, model []byte, nodes ...[]byte) []byte {
	t.Helper()
	var out []byte
	for b := model; len(b) > 0; {
		num, typ, n := protowire.ConsumeTag(b)
		m := protowire.ConsumeFieldValue(num, typ, b[n:])
		if n < 0 || m < 0 {
			t.Fatal("bad model bytes")
		}
		if num == 7 {
			g, _ := protowire.ConsumeBytes(b[n:])
			var prefix []byte
			for _, nd := range nodes {
				prefix = pbBytes(prefix, 1, nd)
			}
			out = pbBytes(out, 7, append(prefix, g...))
		} else {
			out = append(out, b[:n+m]...)
		}
		b = b[n+m:]
	}
	return out
}

// hostileModelFolder writes the test model changed by edit (on the decoded
// graph, may be nil) and then spliced with nodes, with its card's sha256.
func hostileModelFolder(t *testing.T, edit func(m *onnx.Model), nodes ...[]byte) string {
	t.Helper()
	dir := tinyModelFolder(t)
	data, err := os.ReadFile(filepath.Join(dir, inference.ModelFile))
	if err != nil {
		t.Fatal(err)
	}
	if edit != nil {
		m, err := onnx.Decode(data)
		if err != nil {
			t.Fatal(err)
		}
		edit(m)
		if data, err = m.Encode(); err != nil {
			t.Fatal(err)
		}
	}
	data = spliceNodes(t, data, nodes...)
	raw, _ := os.ReadFile(filepath.Join(dir, inference.CardFile))
	card, err := inference.ParseCard(raw)
	if err != nil {
		t.Fatal(err)
	}
	sum := sha256.Sum256(data)
	card.ModelSHA256 = hex.EncodeToString(sum[:])
	if err := inference.WriteModelFolderDir(dir, card, data); err != nil {
		t.Fatal(err)
	}
	return dir
}

// renameInput makes every node read from instead of the graph input.
func renameInput(from string) func(m *onnx.Model) {
	return func(m *onnx.Model) {
		in := m.Graph.RealInputs()[0].Name
		for _, n := range m.Graph.Nodes {
			for i, x := range n.Inputs {
				if x == in {
					n.Inputs[i] = from
				}
			}
		}
	}
}

// loopModel is a model whose input first passes a Loop of INT64_MAX
// iterations (ONNX Loop-1: M, cond, carried value); with identity the body
// copies through Identity nodes, else its outputs are its inputs (no node).
func loopModel(t *testing.T, identity bool) string {
	const int64Max = 1<<63 - 1
	ins := [][]byte{pbValueInfo("iter", 7, true), pbValueInfo("cond_in", 9, true), pbValueInfo("v_in", 1, false)}
	var body []byte
	if identity {
		body = pbGraph("body", [][]byte{
			pbNode("Identity", "id_cond", []string{"cond_in"}, []string{"cond_out"}),
			pbNode("Identity", "id_v", []string{"v_in"}, []string{"v_out"}),
		}, nil, ins, [][]byte{pbValueInfo("cond_out", 9, true), pbValueInfo("v_out", 1, false)})
	} else {
		body = pbGraph("body", nil, nil, ins, [][]byte{pbValueInfo("cond_in", 9, true), pbValueInfo("v_in", 1, false)})
	}
	in := "scan"
	return hostileModelFolder(t, renameInput("looped"),
		pbNode("Constant", "trip", nil, []string{"trip_count"}, pbAttrTensor("value", pbTensor("trip", 7, nil, []int64{int64Max}, false))),
		pbNode("Constant", "keep", nil, []string{"keep_going"}, pbAttrTensor("value", pbTensor("keep", 9, nil, []int64{1}, false))),
		pbNode("Loop", "forever", []string{"trip_count", "keep_going", in}, []string{"looped"}, pbAttrGraph("body", body)),
	)
}

// ifExternalModel has an If node whose then branch keeps its initializer in
// an external file outside the folder.
func ifExternalModel(t *testing.T, inMain bool) string {
	branch := func(ext bool) []byte {
		return pbGraph("branch", nil, [][]byte{pbTensor("w", 1, []int64{1}, []int64{1}, ext)}, nil, [][]byte{pbValueInfo("w", 1, false)})
	}
	if inMain {
		return hostileModelFolder(t, nil,
			pbNode("Constant", "c", nil, []string{"ext_value"}, pbAttrTensor("value", pbTensor("w", 1, []int64{1}, []int64{1}, true))))
	}
	return hostileModelFolder(t, nil,
		pbNode("Constant", "keep", nil, []string{"flag"}, pbAttrTensor("value", pbTensor("keep", 9, nil, []int64{1}, false))),
		pbNode("If", "choose", []string{"flag"}, []string{"chosen"}, pbAttrGraph("then_branch", branch(true)), pbAttrGraph("else_branch", branch(false))))
}

// bigAllocModel asks a node for elements from constant inputs alone.
func bigAllocModel(t *testing.T, op string) string {
	shape := pbNode("Constant", "shape", nil, []string{"big_shape"}, pbAttrTensor("value", pbTensor("s", 7, []int64{2}, []int64{50000, 25000}, false)))
	switch op {
	case "Expand":
		one := pbNode("Constant", "one", nil, []string{"one"}, pbAttrTensor("value", pbTensor("o", 1, []int64{1}, []int64{1}, false)))
		return hostileModelFolder(t, nil, shape, one, pbNode("Expand", "grow", []string{"one", "big_shape"}, []string{"big"}))
	case "Range":
		c := func(name string, v int64) []byte {
			return pbNode("Constant", name, nil, []string{name}, pbAttrTensor("value", pbTensor(name, 7, nil, []int64{v}, false)))
		}
		return hostileModelFolder(t, nil, c("r0", 0), c("r1", 5<<30), c("r2", 1), pbNode("Range", "grow", []string{"r0", "r1", "r2"}, []string{"big"}))
	}
	return hostileModelFolder(t, nil, shape, pbNode("ConstantOfShape", "grow", []string{"big_shape"}, []string{"big"}))
}

// mismatchModel takes any spatial size at its input (dynamic dims) but
// reshapes the scan to 16³ inside, while its card says 20³: the graph
// cannot run on the card's shape, which only a run shows.
func mismatchModel(t *testing.T) string {
	dir := hostileModelFolder(t, func(m *onnx.Model) {
		in := m.Graph.RealInputs()[0]
		for i := 2; i < len(in.Shape); i++ {
			in.Shape[i] = onnx.Dim{Param: "d" + strconv.Itoa(i)}
		}
		renameInput("fixed")(m)
	},
		pbNode("Constant", "shape", nil, []string{"fixed_shape"}, pbAttrTensor("value", pbTensor("s", 7, []int64{5}, []int64{1, 1, 16, 16, 16}, false))),
		pbNode("Reshape", "fix", []string{"scan", "fixed_shape"}, []string{"fixed"}),
	)
	raw, _ := os.ReadFile(filepath.Join(dir, inference.CardFile))
	card, err := inference.ParseCard(raw)
	if err != nil {
		t.Fatal(err)
	}
	card.Input.Shape = []int64{-1, 1, 20, 20, 20}
	card.Preprocessing.Shape = [3]int{20, 20, 20}
	model, _ := os.ReadFile(filepath.Join(dir, inference.ModelFile))
	if err := inference.WriteModelFolderDir(dir, card, model); err != nil {
		t.Fatal(err)
	}
	return dir
}
