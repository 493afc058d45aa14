package onnx

import (
	"errors"
	"testing"

	"google.golang.org/protobuf/encoding/protowire"
)

// msg appends field num holding the bytes of a sub-message.
func msg(b []byte, num protowire.Number, sub []byte) []byte {
	b = protowire.AppendTag(b, num, protowire.BytesType)
	return protowire.AppendBytes(b, sub)
}

// externalTensor is a TensorProto (onnx.proto) named w whose data is in the
// file "weights.bin": data_location = EXTERNAL (1) and an external_data entry.
func externalTensor(location bool) []byte {
	var t []byte
	t = protowire.AppendTag(t, 8, protowire.BytesType) // name
	t = protowire.AppendString(t, "w")
	if location {
		t = protowire.AppendTag(t, extTensorLocation, protowire.VarintType)
		return protowire.AppendVarint(t, 1)
	}
	var kv []byte
	kv = protowire.AppendTag(kv, 1, protowire.BytesType)
	kv = protowire.AppendString(kv, "location")
	kv = protowire.AppendTag(kv, 2, protowire.BytesType)
	kv = protowire.AppendString(kv, "weights.bin")
	return msg(t, extTensorExternal, kv)
}

// TestExternalDataInSubgraphs: an external-data tensor is found however deep
// it is nested (onnx.proto field numbers: ModelProto.graph 7, GraphProto.node
// 1 and initializer 5, NodeProto.attribute 5, AttributeProto.g 6 and graphs
// 11, SparseTensorProto.values 1, ModelProto.functions 25).
func TestExternalDataInSubgraphs(t *testing.T) {
	graphWith := func(init []byte) []byte { return msg(nil, extGraphInitializer, init) }
	node := func(attr []byte) []byte { return msg(nil, extNodeAttribute, attr) }
	ifNode := func(sub []byte) []byte { return node(msg(nil, extAttrG, sub)) }
	for _, loc := range []bool{true, false} {
		ext := externalTensor(loc)
		cases := map[string][]byte{
			"main graph":       msg(nil, extModelGraph, graphWith(ext)),
			"If branch":        msg(nil, extModelGraph, msg(nil, extGraphNode, ifNode(graphWith(ext)))),
			"Loop in If":       msg(nil, extModelGraph, msg(nil, extGraphNode, ifNode(msg(nil, extGraphNode, node(msg(nil, extAttrGraphs, graphWith(ext))))))),
			"Constant value":   msg(nil, extModelGraph, msg(nil, extGraphNode, node(msg(nil, extAttrT, ext)))),
			"sparse init":      msg(nil, extModelGraph, msg(nil, extGraphSparseInit, msg(nil, extSparseValues, ext))),
			"function":         msg(nil, extModelFunctions, msg(nil, extFunctionNode, node(msg(nil, extAttrT, ext)))),
			"sparse attribute": msg(nil, extModelGraph, msg(nil, extGraphNode, node(msg(nil, extAttrSparseTensors, msg(nil, extSparseIndices, ext))))),
		}
		for name, b := range cases {
			if err := CheckNoExternalData(b); !errors.Is(err, ErrExternalData) {
				t.Errorf("%s (data_location %v): %v, want ErrExternalData", name, loc, err)
			}
			if _, err := Decode(b); err == nil {
				t.Errorf("%s: Decode accepted external data", name)
			}
		}
	}
	inline := msg(nil, extModelGraph, msg(nil, extGraphNode, ifNode(graphWith([]byte{0x42, 0x01, 'w'}))))
	if err := CheckNoExternalData(inline); err != nil {
		t.Errorf("inline tensor in an If branch refused: %v", err)
	}
}
