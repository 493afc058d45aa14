package onnx

import (
	"errors"
	"fmt"

	"google.golang.org/protobuf/encoding/protowire"
)

// ErrExternalData marks a model that refers to tensor data in other files.
// A model folder is self-contained: ONNX Runtime would open such files
// relative to its working directory, so the same folder could give
// different results from different places.
var ErrExternalData = errors.New("external data files are not supported (a model folder is self-contained)")

// maxSubgraphDepth bounds the nesting of graphs in attributes (If, Loop, Scan
// bodies inside each other) that checkExternal walks.
const maxSubgraphDepth = 64

// Protobuf field numbers of onnx.proto walked by checkExternal.
const (
	extModelGraph        = 7
	extModelFunctions    = 25
	extFunctionNode      = 7
	extGraphNode         = 1
	extGraphInitializer  = 5
	extGraphSparseInit   = 15
	extNodeAttribute     = 5
	extAttrT             = 5
	extAttrG             = 6
	extAttrTensors       = 10
	extAttrGraphs        = 11
	extAttrSparseTensor  = 22
	extAttrSparseTensors = 23
	extSparseValues      = 1
	extSparseIndices     = 2
	extTensorExternal    = 13
	extTensorLocation    = 14
)

// extKind is the message type of a walked field.
type extKind int

const (
	extModel extKind = iota
	extFunction
	extGraph
	extNode
	extAttr
	extTensor
	extSparse
)

// extChildren maps a message kind to its walked fields and their kinds.
var extChildren = map[extKind]map[protowire.Number]extKind{
	extModel:    {extModelGraph: extGraph, extModelFunctions: extFunction},
	extFunction: {extFunctionNode: extNode},
	extGraph:    {extGraphNode: extNode, extGraphInitializer: extTensor, extGraphSparseInit: extSparse},
	extNode:     {extNodeAttribute: extAttr},
	extAttr: {extAttrT: extTensor, extAttrG: extGraph, extAttrTensors: extTensor, extAttrGraphs: extGraph,
		extAttrSparseTensor: extSparse, extAttrSparseTensors: extSparse},
	extSparse: {extSparseValues: extTensor, extSparseIndices: extTensor},
}

// CheckNoExternalData walks every tensor of an encoded ModelProto, in the
// main graph, in every subgraph of If, Loop and Scan nodes (to any depth),
// in sparse initializers and in model-local functions, and refuses any that
// keeps its data in an external file (TensorProto.data_location EXTERNAL or
// external_data entries, onnx.proto). Nothing is opened.
func CheckNoExternalData(b []byte) error {
	return checkExternal(b, extModel, 0)
}

func checkExternal(b []byte, kind extKind, depth int) error {
	if depth > maxSubgraphDepth {
		return fmt.Errorf("graphs nested more than %d deep", maxSubgraphDepth)
	}
	return fields(b, func(f field) error {
		if kind == extTensor {
			switch {
			case f.num == extTensorExternal:
				return ErrExternalData
			case f.num == extTensorLocation && f.typ == protowire.VarintType && f.v == 1:
				return ErrExternalData
			}
			return nil
		}
		child, ok := extChildren[kind][f.num]
		if !ok || f.typ != protowire.BytesType {
			return nil
		}
		next := depth
		if child == extGraph {
			next++
		}
		return checkExternal(f.b, child, next)
	})
}
