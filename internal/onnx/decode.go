package onnx

import (
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"os"

	"brightfold/internal/inputerr"

	"google.golang.org/protobuf/encoding/protowire"
)

// Field numbers of the ONNX IR (onnx/onnx.proto). Only the messages and
// fields this package interprets are listed; everything else is kept as
// encoded bytes.
const (
	// ModelProto
	fModelIRVersion       = 1
	fModelProducerName    = 2
	fModelProducerVersion = 3
	fModelDomain          = 4
	fModelModelVersion    = 5
	fModelDocString       = 6
	fModelGraph           = 7
	fModelOpsetImport     = 8

	// OperatorSetIdProto
	fOpsetDomain  = 1
	fOpsetVersion = 2

	// GraphProto
	fGraphNode        = 1
	fGraphName        = 2
	fGraphInitializer = 5
	fGraphDocString   = 10
	fGraphInput       = 11
	fGraphOutput      = 12
	fGraphValueInfo   = 13

	// NodeProto
	fNodeInput     = 1
	fNodeOutput    = 2
	fNodeName      = 3
	fNodeOpType    = 4
	fNodeAttribute = 5
	fNodeDocString = 6
	fNodeDomain    = 7

	// AttributeProto
	fAttrName        = 1
	fAttrF           = 2
	fAttrI           = 3
	fAttrS           = 4
	fAttrT           = 5
	fAttrFloats      = 7
	fAttrInts        = 8
	fAttrStrings     = 9
	fAttrDocString   = 13
	fAttrType        = 20
	fAttrRefAttrName = 21

	// TensorProto
	fTensorDims         = 1
	fTensorDataType     = 2
	fTensorSegment      = 3
	fTensorFloatData    = 4
	fTensorInt32Data    = 5
	fTensorInt64Data    = 7
	fTensorName         = 8
	fTensorRawData      = 9
	fTensorDoubleData   = 10
	fTensorUint64Data   = 11
	fTensorDocString    = 12
	fTensorExternalData = 13
	fTensorDataLocation = 14

	// ValueInfoProto
	fValueName      = 1
	fValueType      = 2
	fValueDocString = 3

	// TypeProto, TypeProto.Tensor, TensorShapeProto, Dimension
	fTypeTensor     = 1
	fTensorElemType = 1
	fTensorShape    = 2
	fShapeDim       = 1
	fDimValue       = 1
	fDimParam       = 2
)

// MaxModelBytes bounds the size of a model Load reads (the protobuf limit).
const MaxModelBytes = 2 << 30

// Load reads and decodes the ONNX model file at path. Problems are input
// errors (inputerr) naming the file.
func Load(path string) (*Model, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, inputerr.Wrap(path, fmt.Errorf("open ONNX model: %w", err))
	}
	defer f.Close()
	b, err := io.ReadAll(io.LimitReader(f, MaxModelBytes+1))
	if err != nil {
		return nil, inputerr.Wrap(path, fmt.Errorf("read ONNX model: %w", err))
	}
	if len(b) > MaxModelBytes {
		return nil, inputerr.New(path, "ONNX model larger than %d bytes", MaxModelBytes)
	}
	m, err := Decode(b)
	if err != nil {
		return nil, inputerr.Wrap(path, err)
	}
	return m, nil
}

// Decode parses an encoded ONNX ModelProto. It checks every length against
// the input, so truncated or hostile bytes give an error, never a panic or
// an allocation larger than a small multiple of len(b).
func Decode(b []byte) (*Model, error) {
	if err := CheckNoExternalData(b); errors.Is(err, ErrExternalData) {
		return nil, fmt.Errorf("not a usable ONNX model: %w", err)
	} else if err != nil {
		return nil, fmt.Errorf("not a valid ONNX model: %w", err)
	}
	m, err := decodeModel(b)
	if err != nil {
		return nil, fmt.Errorf("not a valid ONNX model: %w", err)
	}
	if m.Graph == nil {
		return nil, errors.New("not a valid ONNX model: no graph")
	}
	return m, nil
}

// field is one decoded protobuf field.
type field struct {
	num protowire.Number
	typ protowire.Type
	v   uint64 // varint, fixed32 or fixed64 payload
	b   []byte // length-delimited payload
	raw []byte // the whole field, tag included
}

// fields walks the fields of message b, calling fn for each.
func fields(b []byte, fn func(f field) error) error {
	for len(b) > 0 {
		num, typ, n := protowire.ConsumeTag(b)
		if n < 0 {
			return fmt.Errorf("bad field tag: %w", protowire.ParseError(n))
		}
		f := field{num: num, typ: typ}
		m := protowire.ConsumeFieldValue(num, typ, b[n:])
		if m < 0 {
			return fmt.Errorf("field %d: %w", num, protowire.ParseError(m))
		}
		f.raw = b[:n+m]
		val := b[n : n+m]
		switch typ {
		case protowire.VarintType:
			f.v, _ = protowire.ConsumeVarint(val)
		case protowire.Fixed32Type:
			v, _ := protowire.ConsumeFixed32(val)
			f.v = uint64(v)
		case protowire.Fixed64Type:
			f.v, _ = protowire.ConsumeFixed64(val)
		case protowire.BytesType:
			f.b, _ = protowire.ConsumeBytes(val)
		}
		if err := fn(f); err != nil {
			return err
		}
		b = b[n+m:]
	}
	return nil
}

func (f field) want(t protowire.Type) error {
	if f.typ != t {
		return fmt.Errorf("field %d has wire type %d, want %d", f.num, f.typ, t)
	}
	return nil
}

func (f field) str() (string, error) {
	if err := f.want(protowire.BytesType); err != nil {
		return "", err
	}
	return string(f.b), nil
}

func (f field) int64() (int64, error) {
	if err := f.want(protowire.VarintType); err != nil {
		return 0, err
	}
	return int64(f.v), nil
}

// varints appends a repeated varint field, packed or not.
func (f field) varints(dst []int64) ([]int64, error) {
	switch f.typ {
	case protowire.VarintType:
		return append(dst, int64(f.v)), nil
	case protowire.BytesType:
		b := f.b
		for len(b) > 0 {
			v, n := protowire.ConsumeVarint(b)
			if n < 0 {
				return nil, fmt.Errorf("field %d: packed varint: %w", f.num, protowire.ParseError(n))
			}
			dst = append(dst, int64(v))
			b = b[n:]
		}
		return dst, nil
	}
	return nil, fmt.Errorf("field %d has wire type %d, want varint", f.num, f.typ)
}

// floats appends a repeated float field, packed or not.
func (f field) floats(dst []float32) ([]float32, error) {
	switch f.typ {
	case protowire.Fixed32Type:
		return append(dst, math.Float32frombits(uint32(f.v))), nil
	case protowire.BytesType:
		if len(f.b)%4 != 0 {
			return nil, fmt.Errorf("field %d: packed floats of %d bytes", f.num, len(f.b))
		}
		if dst == nil {
			dst = make([]float32, 0, len(f.b)/4)
		}
		for i := 0; i+4 <= len(f.b); i += 4 {
			dst = append(dst, math.Float32frombits(binary.LittleEndian.Uint32(f.b[i:])))
		}
		return dst, nil
	}
	return nil, fmt.Errorf("field %d has wire type %d, want fixed32", f.num, f.typ)
}

func decodeModel(b []byte) (*Model, error) {
	m := &Model{}
	err := fields(b, func(f field) error {
		var err error
		switch f.num {
		case fModelIRVersion:
			m.IRVersion, err = f.int64()
		case fModelProducerName:
			m.ProducerName, err = f.str()
		case fModelProducerVersion:
			m.ProducerVersion, err = f.str()
		case fModelDomain:
			m.Domain, err = f.str()
		case fModelModelVersion:
			m.ModelVersion, err = f.int64()
		case fModelDocString:
			m.DocString, err = f.str()
		case fModelGraph:
			if err = f.want(protowire.BytesType); err == nil {
				if m.Graph != nil {
					return errors.New("two graphs in the model")
				}
				m.Graph, err = decodeGraph(f.b)
			}
		case fModelOpsetImport:
			var o OpsetID
			if err = f.want(protowire.BytesType); err == nil {
				o, err = decodeOpset(f.b)
				m.OpsetImports = append(m.OpsetImports, o)
			}
		default:
			m.unknown = append(m.unknown, f.raw...)
		}
		if err != nil {
			return fmt.Errorf("ModelProto: %w", err)
		}
		return nil
	})
	return m, err
}

func decodeOpset(b []byte) (OpsetID, error) {
	var o OpsetID
	err := fields(b, func(f field) error {
		var err error
		switch f.num {
		case fOpsetDomain:
			o.Domain, err = f.str()
		case fOpsetVersion:
			o.Version, err = f.int64()
		}
		return err
	})
	if err != nil {
		return o, fmt.Errorf("OperatorSetIdProto: %w", err)
	}
	return o, nil
}

func decodeGraph(b []byte) (*Graph, error) {
	g := &Graph{}
	err := fields(b, func(f field) error {
		var err error
		switch f.num {
		case fGraphNode:
			var n *Node
			if err = f.want(protowire.BytesType); err == nil {
				if n, err = decodeNode(f.b); err == nil {
					g.Nodes = append(g.Nodes, n)
				}
			}
		case fGraphName:
			g.Name, err = f.str()
		case fGraphInitializer:
			var in *Initializer
			if err = f.want(protowire.BytesType); err == nil {
				if in, err = decodeInitializer(f.b); err == nil {
					g.Initializers = append(g.Initializers, in)
				}
			}
		case fGraphDocString:
			g.DocString, err = f.str()
		case fGraphInput, fGraphOutput, fGraphValueInfo:
			var v *ValueInfo
			if err = f.want(protowire.BytesType); err == nil {
				if v, err = decodeValueInfo(f.b); err == nil {
					switch f.num {
					case fGraphInput:
						g.Inputs = append(g.Inputs, v)
					case fGraphOutput:
						g.Outputs = append(g.Outputs, v)
					default:
						g.ValueInfo = append(g.ValueInfo, v)
					}
				}
			}
		default:
			g.unknown = append(g.unknown, f.raw...)
		}
		if err != nil {
			return fmt.Errorf("GraphProto: %w", err)
		}
		return nil
	})
	return g, err
}

func decodeNode(b []byte) (*Node, error) {
	n := &Node{}
	err := fields(b, func(f field) error {
		var err error
		var s string
		switch f.num {
		case fNodeInput:
			if s, err = f.str(); err == nil {
				n.Inputs = append(n.Inputs, s)
			}
		case fNodeOutput:
			if s, err = f.str(); err == nil {
				n.Outputs = append(n.Outputs, s)
			}
		case fNodeName:
			n.Name, err = f.str()
		case fNodeOpType:
			n.OpType, err = f.str()
		case fNodeDomain:
			n.Domain, err = f.str()
		case fNodeDocString:
			n.DocString, err = f.str()
		case fNodeAttribute:
			var a *Attribute
			if err = f.want(protowire.BytesType); err == nil {
				if a, err = decodeAttribute(f.b); err == nil {
					n.Attrs = append(n.Attrs, a)
				}
			}
		default:
			n.unknown = append(n.unknown, f.raw...)
		}
		if err != nil {
			return fmt.Errorf("NodeProto %q: %w", n.Name, err)
		}
		return nil
	})
	return n, err
}

func decodeAttribute(b []byte) (*Attribute, error) {
	a := &Attribute{}
	err := fields(b, func(f field) error {
		var err error
		switch f.num {
		case fAttrName:
			a.Name, err = f.str()
		case fAttrType:
			var v int64
			v, err = f.int64()
			a.Type = AttrType(v)
		case fAttrF:
			if err = f.want(protowire.Fixed32Type); err == nil {
				a.F = math.Float32frombits(uint32(f.v))
			}
		case fAttrI:
			a.I, err = f.int64()
		case fAttrS:
			if err = f.want(protowire.BytesType); err == nil {
				a.S = append([]byte{}, f.b...)
			}
		case fAttrT:
			if err = f.want(protowire.BytesType); err == nil {
				var tp *tensorProto
				if tp, err = decodeTensorProto(f.b); err == nil {
					if tp.tensor != nil {
						a.T = tp.tensor
					} else {
						a.unknown = append(a.unknown, f.raw...)
					}
				}
			}
		case fAttrFloats:
			a.Floats, err = f.floats(a.Floats)
		case fAttrInts:
			a.Ints, err = f.varints(a.Ints)
		case fAttrStrings:
			if err = f.want(protowire.BytesType); err == nil {
				a.Strings = append(a.Strings, append([]byte{}, f.b...))
			}
		case fAttrDocString:
			a.DocString, err = f.str()
		case fAttrRefAttrName:
			a.RefAttrName, err = f.str()
		default:
			a.unknown = append(a.unknown, f.raw...)
		}
		if err != nil {
			return fmt.Errorf("AttributeProto %q: %w", a.Name, err)
		}
		return nil
	})
	return a, err
}

// tensorProto is a decoded TensorProto: tensor is nil when its element type
// is not one this package computes with.
type tensorProto struct {
	name   string
	dtype  DataType
	tensor *Tensor
}

func decodeInitializer(b []byte) (*Initializer, error) {
	tp, err := decodeTensorProto(b)
	if err != nil {
		return nil, err
	}
	in := &Initializer{Name: tp.name, DType: tp.dtype, Tensor: tp.tensor}
	if tp.tensor == nil {
		in.raw = append([]byte{}, b...)
	}
	return in, nil
}

// DecodeTensor parses an encoded TensorProto (such as the input_N.pb and
// output_N.pb files of the ONNX conformance data) and returns its name and
// values. Element types other than float32 and the integer/boolean types are
// an error.
func DecodeTensor(b []byte) (string, *Tensor, error) {
	tp, err := decodeTensorProto(b)
	if err != nil {
		return "", nil, err
	}
	if tp.tensor == nil {
		return tp.name, nil, fmt.Errorf("TensorProto %q: element type %v not supported", tp.name, tp.dtype)
	}
	return tp.name, tp.tensor, nil
}

// tensorFields collects a TensorProto's fields before they are checked.
type tensorFields struct {
	dims                       []int64
	dtype                      int64
	floats                     []float32
	int32s, int64s, uint64s    []int64
	raw                        []byte
	hasRaw, hasTyped, external bool
}

func decodeTensorProto(b []byte) (*tensorProto, error) {
	tp := &tensorProto{}
	var tf tensorFields
	err := fields(b, func(f field) error {
		var err error
		switch f.num {
		case fTensorDims:
			tf.dims, err = f.varints(tf.dims)
		case fTensorDataType:
			tf.dtype, err = f.int64()
		case fTensorSegment:
			err = errors.New("segmented tensors are not supported")
		case fTensorFloatData:
			tf.floats, err = f.floats(tf.floats)
			tf.hasTyped = true
		case fTensorInt32Data:
			tf.int32s, err = f.varints(tf.int32s)
			tf.hasTyped = true
		case fTensorInt64Data:
			tf.int64s, err = f.varints(tf.int64s)
			tf.hasTyped = true
		case fTensorUint64Data:
			tf.uint64s, err = f.varints(tf.uint64s)
			tf.hasTyped = true
		case fTensorName:
			tp.name, err = f.str()
		case fTensorRawData:
			if err = f.want(protowire.BytesType); err == nil {
				tf.raw, tf.hasRaw = f.b, true
			}
		case fTensorDataLocation:
			var v int64
			if v, err = f.int64(); err == nil && v == 1 {
				tf.external = true
			}
		case fTensorExternalData:
			tf.external = true
		}
		return err
	})
	if err != nil {
		return nil, fmt.Errorf("TensorProto %q: %w", tp.name, err)
	}
	if tf.external {
		return nil, fmt.Errorf("TensorProto %q: external data files are not supported", tp.name)
	}
	tp.dtype = DataType(tf.dtype)
	shape, n, err := tensorShape(tf.dims)
	if err != nil {
		return nil, fmt.Errorf("TensorProto %q: %w", tp.name, err)
	}
	t, err := tf.values(tp.dtype, shape, n)
	if err != nil {
		return nil, fmt.Errorf("TensorProto %q: %w", tp.name, err)
	}
	tp.tensor = t
	return tp, nil
}

// tensorShape converts and bounds the dims of a TensorProto.
func tensorShape(dims []int64) ([]int, int, error) {
	shape := make([]int, len(dims))
	for i, d := range dims {
		if d < 0 || d > MaxElements {
			return nil, 0, fmt.Errorf("dimension %d out of range in %v", d, dims)
		}
		shape[i] = int(d)
	}
	n, err := CheckedNumel(shape)
	return shape, n, err
}

// rawWidth is the raw_data byte width of the integer element types.
var rawWidth = map[DataType]int{Int64: 8, Int32: 4, Uint32: 4, Int16: 2, Uint16: 2, Int8: 1, Uint8: 1, Bool: 1}

// values builds the tensor from whichever data field was used; nil (no
// error) for element types that are kept opaque.
func (tf *tensorFields) values(dt DataType, shape []int, n int) (*Tensor, error) {
	switch {
	case dt == Float:
		data, err := tf.floatValues(n)
		if err != nil {
			return nil, err
		}
		return &Tensor{Shape: shape, Data: data, DType: Float}, nil
	case dt.IsInt():
		ints, err := tf.intValues(dt, n)
		if err != nil {
			return nil, err
		}
		return &Tensor{Shape: shape, Ints: ints, DType: dt}, nil
	case dt == Undefined:
		return nil, errors.New("data_type missing")
	}
	return nil, nil
}

func (tf *tensorFields) floatValues(n int) ([]float32, error) {
	if tf.hasRaw {
		if len(tf.raw) != 4*n {
			return nil, fmt.Errorf("raw_data has %d bytes, want %d for %d float32 values", len(tf.raw), 4*n, n)
		}
		data := make([]float32, n)
		for i := range data {
			data[i] = math.Float32frombits(binary.LittleEndian.Uint32(tf.raw[4*i:]))
		}
		return data, nil
	}
	if len(tf.floats) != n {
		return nil, fmt.Errorf("float_data has %d values, want %d", len(tf.floats), n)
	}
	if tf.floats == nil {
		return []float32{}, nil
	}
	return tf.floats, nil
}

func (tf *tensorFields) intValues(dt DataType, n int) ([]int64, error) {
	if tf.hasRaw {
		w := rawWidth[dt]
		if len(tf.raw) != w*n {
			return nil, fmt.Errorf("raw_data has %d bytes, want %d for %d %v values", len(tf.raw), w*n, n, dt)
		}
		out := make([]int64, n)
		for i := range out {
			out[i] = rawInt(dt, tf.raw[w*i:])
		}
		return out, nil
	}
	src := tf.int32s
	switch dt {
	case Int64:
		src = tf.int64s
	case Uint32:
		src = tf.uint64s
	}
	if len(src) != n {
		return nil, fmt.Errorf("%v data has %d values, want %d", dt, len(src), n)
	}
	out := make([]int64, n)
	for i, v := range src {
		out[i] = NormaliseInt(dt, v)
	}
	return out, nil
}

// rawInt reads one little-endian element of type dt.
func rawInt(dt DataType, b []byte) int64 {
	switch dt {
	case Int64:
		return int64(binary.LittleEndian.Uint64(b))
	case Int32:
		return int64(int32(binary.LittleEndian.Uint32(b)))
	case Uint32:
		return int64(binary.LittleEndian.Uint32(b))
	case Int16:
		return int64(int16(binary.LittleEndian.Uint16(b)))
	case Uint16:
		return int64(binary.LittleEndian.Uint16(b))
	case Int8:
		return int64(int8(b[0]))
	case Bool:
		if b[0] != 0 {
			return 1
		}
		return 0
	}
	return int64(b[0])
}

// NormaliseInt truncates a varint-decoded value to dt's range, as the
// int32_data field stores the narrower types widened.
func NormaliseInt(dt DataType, v int64) int64 {
	switch dt {
	case Int32:
		return int64(int32(v))
	case Uint32:
		return int64(uint32(v))
	case Int16:
		return int64(int16(v))
	case Uint16:
		return int64(uint16(v))
	case Int8:
		return int64(int8(v))
	case Uint8:
		return int64(uint8(v))
	case Bool:
		if v != 0 {
			return 1
		}
		return 0
	}
	return v
}

func decodeValueInfo(b []byte) (*ValueInfo, error) {
	v := &ValueInfo{}
	err := fields(b, func(f field) error {
		var err error
		switch f.num {
		case fValueName:
			v.Name, err = f.str()
		case fValueDocString:
			v.DocString, err = f.str()
		case fValueType:
			if err = f.want(protowire.BytesType); err == nil {
				err = v.decodeType(f.b)
			}
		}
		return err
	})
	if err != nil {
		return nil, fmt.Errorf("ValueInfoProto %q: %w", v.Name, err)
	}
	return v, nil
}

// decodeType reads a TypeProto; a type other than a plain tensor type is
// kept opaque.
func (v *ValueInfo) decodeType(b []byte) error {
	v.hasType = true
	var tensor []byte
	other := false
	err := fields(b, func(f field) error {
		if f.num == fTypeTensor {
			if err := f.want(protowire.BytesType); err != nil {
				return err
			}
			tensor = f.b
		} else {
			other = true
		}
		return nil
	})
	if err != nil {
		return err
	}
	if tensor == nil || other {
		v.notTensor = true
		v.typeRaw = append([]byte{}, b...)
		return nil
	}
	return fields(tensor, func(f field) error {
		switch f.num {
		case fTensorElemType:
			e, err := f.int64()
			v.ElemType = DataType(e)
			return err
		case fTensorShape:
			if err := f.want(protowire.BytesType); err != nil {
				return err
			}
			v.HasShape = true
			return v.decodeShape(f.b)
		}
		return nil
	})
}

func (v *ValueInfo) decodeShape(b []byte) error {
	return fields(b, func(f field) error {
		if f.num != fShapeDim {
			return nil
		}
		if err := f.want(protowire.BytesType); err != nil {
			return err
		}
		var d Dim
		err := fields(f.b, func(g field) error {
			var err error
			switch g.num {
			case fDimValue:
				d.Value, err = g.int64()
				d.Known = true
			case fDimParam:
				d.Param, err = g.str()
			}
			return err
		})
		v.Shape = append(v.Shape, d)
		return err
	})
}
