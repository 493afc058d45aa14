package onnx

import (
	"encoding/binary"
	"fmt"
	"math"

	"google.golang.org/protobuf/encoding/protowire"
)

// Encode serialises the model as an ONNX ModelProto. Tensors are written
// with raw_data (little-endian), which ONNX Runtime reads directly. Fields
// kept opaque by Decode are written back unchanged.
func (m *Model) Encode() ([]byte, error) {
	if m.Graph == nil {
		return nil, fmt.Errorf("encode model: no graph")
	}
	var b []byte
	b = appendVarintField(b, fModelIRVersion, uint64(m.IRVersion))
	b = appendStringField(b, fModelProducerName, m.ProducerName)
	b = appendStringField(b, fModelProducerVersion, m.ProducerVersion)
	b = appendStringField(b, fModelDomain, m.Domain)
	if m.ModelVersion != 0 {
		b = appendVarintField(b, fModelModelVersion, uint64(m.ModelVersion))
	}
	b = appendStringField(b, fModelDocString, m.DocString)
	g, err := m.Graph.encode()
	if err != nil {
		return nil, fmt.Errorf("encode model: %w", err)
	}
	b = appendBytesField(b, fModelGraph, g)
	for _, o := range m.OpsetImports {
		var ob []byte
		ob = appendStringField(ob, fOpsetDomain, o.Domain)
		ob = appendVarintField(ob, fOpsetVersion, uint64(o.Version))
		b = appendBytesField(b, fModelOpsetImport, ob)
	}
	return append(b, m.unknown...), nil
}

func (g *Graph) encode() ([]byte, error) {
	var b []byte
	for _, n := range g.Nodes {
		nb, err := n.encode()
		if err != nil {
			return nil, err
		}
		b = appendBytesField(b, fGraphNode, nb)
	}
	b = appendStringField(b, fGraphName, g.Name)
	for _, in := range g.Initializers {
		tb, err := in.encode()
		if err != nil {
			return nil, err
		}
		b = appendBytesField(b, fGraphInitializer, tb)
	}
	b = appendStringField(b, fGraphDocString, g.DocString)
	for _, list := range []struct {
		num  protowire.Number
		vals []*ValueInfo
	}{{fGraphInput, g.Inputs}, {fGraphOutput, g.Outputs}, {fGraphValueInfo, g.ValueInfo}} {
		for _, v := range list.vals {
			b = appendBytesField(b, list.num, v.encode())
		}
	}
	return append(b, g.unknown...), nil
}

func (n *Node) encode() ([]byte, error) {
	var b []byte
	for _, s := range n.Inputs {
		b = protowire.AppendTag(b, fNodeInput, protowire.BytesType)
		b = protowire.AppendString(b, s)
	}
	for _, s := range n.Outputs {
		b = protowire.AppendTag(b, fNodeOutput, protowire.BytesType)
		b = protowire.AppendString(b, s)
	}
	b = appendStringField(b, fNodeName, n.Name)
	b = appendStringField(b, fNodeOpType, n.OpType)
	for _, a := range n.Attrs {
		ab, err := a.encode()
		if err != nil {
			return nil, fmt.Errorf("%s: %w", n.Describe(), err)
		}
		b = appendBytesField(b, fNodeAttribute, ab)
	}
	b = appendStringField(b, fNodeDocString, n.DocString)
	b = appendStringField(b, fNodeDomain, n.Domain)
	return append(b, n.unknown...), nil
}

func (a *Attribute) encode() ([]byte, error) {
	var b []byte
	b = appendStringField(b, fAttrName, a.Name)
	switch a.Type {
	case AttrFloat:
		b = protowire.AppendTag(b, fAttrF, protowire.Fixed32Type)
		b = protowire.AppendFixed32(b, math.Float32bits(a.F))
	case AttrInt:
		b = protowire.AppendTag(b, fAttrI, protowire.VarintType)
		b = protowire.AppendVarint(b, uint64(a.I))
	case AttrString:
		b = protowire.AppendTag(b, fAttrS, protowire.BytesType)
		b = protowire.AppendBytes(b, a.S)
	case AttrTensor:
		if a.T != nil {
			tb, err := encodeTensor("", a.T)
			if err != nil {
				return nil, fmt.Errorf("attribute %q: %w", a.Name, err)
			}
			b = appendBytesField(b, fAttrT, tb)
		}
	case AttrFloats:
		if len(a.Floats) > 0 {
			pb := make([]byte, 0, 4*len(a.Floats))
			for _, f := range a.Floats {
				pb = protowire.AppendFixed32(pb, math.Float32bits(f))
			}
			b = appendBytesField(b, fAttrFloats, pb)
		}
	case AttrInts:
		// Unpacked, as onnx.proto (proto2) declares the field without packed=true.
		for _, v := range a.Ints {
			b = protowire.AppendTag(b, fAttrInts, protowire.VarintType)
			b = protowire.AppendVarint(b, uint64(v))
		}
	case AttrStrings:
		for _, s := range a.Strings {
			b = protowire.AppendTag(b, fAttrStrings, protowire.BytesType)
			b = protowire.AppendBytes(b, s)
		}
	}
	b = appendStringField(b, fAttrDocString, a.DocString)
	b = protowire.AppendTag(b, fAttrType, protowire.VarintType)
	b = protowire.AppendVarint(b, uint64(a.Type))
	b = appendStringField(b, fAttrRefAttrName, a.RefAttrName)
	return append(b, a.unknown...), nil
}

func (in *Initializer) encode() ([]byte, error) {
	if in.Tensor == nil {
		if in.raw == nil {
			return nil, fmt.Errorf("initializer %q has no tensor", in.Name)
		}
		return in.raw, nil
	}
	b, err := encodeTensor(in.Name, in.Tensor)
	if err != nil {
		return nil, fmt.Errorf("initializer %q: %w", in.Name, err)
	}
	return b, nil
}

// EncodeTensor serialises t as a TensorProto called name, with raw_data.
func EncodeTensor(name string, t *Tensor) ([]byte, error) { return encodeTensor(name, t) }

func encodeTensor(name string, t *Tensor) ([]byte, error) {
	if err := t.Check(); err != nil {
		return nil, err
	}
	dt := t.DType
	if dt == Undefined {
		dt = Float
	}
	var b []byte
	for _, d := range t.Shape {
		b = protowire.AppendTag(b, fTensorDims, protowire.VarintType)
		b = protowire.AppendVarint(b, uint64(d))
	}
	b = protowire.AppendTag(b, fTensorDataType, protowire.VarintType)
	b = protowire.AppendVarint(b, uint64(dt))
	b = appendStringField(b, fTensorName, name)
	var raw []byte
	if dt == Float {
		raw = make([]byte, 4*len(t.Data))
		for i, v := range t.Data {
			binary.LittleEndian.PutUint32(raw[4*i:], math.Float32bits(v))
		}
	} else {
		w := rawWidth[dt]
		raw = make([]byte, w*len(t.Ints))
		for i, v := range t.Ints {
			putRawInt(raw[w*i:], w, v)
		}
	}
	b = protowire.AppendTag(b, fTensorRawData, protowire.BytesType)
	return protowire.AppendBytes(b, raw), nil
}

func putRawInt(b []byte, w int, v int64) {
	switch w {
	case 8:
		binary.LittleEndian.PutUint64(b, uint64(v))
	case 4:
		binary.LittleEndian.PutUint32(b, uint32(v))
	case 2:
		binary.LittleEndian.PutUint16(b, uint16(v))
	default:
		b[0] = byte(v)
	}
}

func (v *ValueInfo) encode() []byte {
	var b []byte
	b = appendStringField(b, fValueName, v.Name)
	switch {
	case v.notTensor:
		b = appendBytesField(b, fValueType, v.typeRaw)
	case v.hasType || v.ElemType != Undefined || v.HasShape:
		var tt []byte
		tt = protowire.AppendTag(tt, fTensorElemType, protowire.VarintType)
		tt = protowire.AppendVarint(tt, uint64(v.ElemType))
		if v.HasShape || len(v.Shape) > 0 {
			var sb []byte
			for _, d := range v.Shape {
				var db []byte
				switch {
				case d.Param != "":
					db = appendStringField(db, fDimParam, d.Param)
				case d.Known:
					db = protowire.AppendTag(db, fDimValue, protowire.VarintType)
					db = protowire.AppendVarint(db, uint64(d.Value))
				}
				sb = appendBytesField(sb, fShapeDim, db)
			}
			tt = appendBytesField(tt, fTensorShape, sb)
		}
		b = appendBytesField(b, fValueType, appendBytesField(nil, fTypeTensor, tt))
	}
	return appendStringField(b, fValueDocString, v.DocString)
}

func appendStringField(b []byte, num protowire.Number, s string) []byte {
	if s == "" {
		return b
	}
	b = protowire.AppendTag(b, num, protowire.BytesType)
	return protowire.AppendString(b, s)
}

func appendBytesField(b []byte, num protowire.Number, v []byte) []byte {
	b = protowire.AppendTag(b, num, protowire.BytesType)
	return protowire.AppendBytes(b, v)
}

func appendVarintField(b []byte, num protowire.Number, v uint64) []byte {
	b = protowire.AppendTag(b, num, protowire.VarintType)
	return protowire.AppendVarint(b, v)
}
