package onnx

import "fmt"

// AttrInt returns the int attribute name, or def when absent; an attribute
// of another type is an error.
func (n *Node) AttrInt(name string, def int64) (int64, error) {
	a := n.Attr(name)
	if a == nil {
		return def, nil
	}
	if a.Type != AttrInt {
		return 0, fmt.Errorf("%s: attribute %q has type %d, want int", n.Describe(), name, a.Type)
	}
	return a.I, nil
}

// AttrFloat returns the float attribute name, or def when absent.
func (n *Node) AttrFloat(name string, def float32) (float32, error) {
	a := n.Attr(name)
	if a == nil {
		return def, nil
	}
	if a.Type != AttrFloat {
		return 0, fmt.Errorf("%s: attribute %q has type %d, want float", n.Describe(), name, a.Type)
	}
	return a.F, nil
}

// AttrInts returns the ints attribute name, or def when absent.
func (n *Node) AttrInts(name string, def []int64) ([]int64, error) {
	a := n.Attr(name)
	if a == nil {
		return def, nil
	}
	if a.Type != AttrInts {
		return nil, fmt.Errorf("%s: attribute %q has type %d, want ints", n.Describe(), name, a.Type)
	}
	return a.Ints, nil
}

// AttrString returns the string attribute name, or def when absent.
func (n *Node) AttrString(name, def string) (string, error) {
	a := n.Attr(name)
	if a == nil {
		return def, nil
	}
	if a.Type != AttrString {
		return "", fmt.Errorf("%s: attribute %q has type %d, want string", n.Describe(), name, a.Type)
	}
	return string(a.S), nil
}

// IntAttr returns an int attribute.
func IntAttr(name string, v int64) *Attribute {
	return &Attribute{Name: name, Type: AttrInt, I: v}
}

// FloatAttr returns a float attribute.
func FloatAttr(name string, v float32) *Attribute {
	return &Attribute{Name: name, Type: AttrFloat, F: v}
}

// IntsAttr returns an ints attribute.
func IntsAttr(name string, v ...int64) *Attribute {
	return &Attribute{Name: name, Type: AttrInts, Ints: append([]int64{}, v...)}
}

// StringAttr returns a string attribute.
func StringAttr(name, v string) *Attribute {
	return &Attribute{Name: name, Type: AttrString, S: []byte(v)}
}

// TensorAttr returns a tensor attribute.
func TensorAttr(name string, t *Tensor) *Attribute {
	return &Attribute{Name: name, Type: AttrTensor, T: t}
}
