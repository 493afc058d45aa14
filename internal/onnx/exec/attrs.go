package exec

import "brightfold/internal/onnx"

// attrReader reads several attributes of one node, keeping the first error,
// so that op constructors stay short.
type attrReader struct {
	n   *onnx.Node
	err error
}

func (r *attrReader) int(name string, def int64) int64 {
	v, err := r.n.AttrInt(name, def)
	r.keep(err)
	return v
}

func (r *attrReader) float(name string, def float32) float32 {
	v, err := r.n.AttrFloat(name, def)
	r.keep(err)
	return v
}

func (r *attrReader) ints(name string, def []int64) []int64 {
	v, err := r.n.AttrInts(name, def)
	r.keep(err)
	return v
}

func (r *attrReader) str(name, def string) string {
	v, err := r.n.AttrString(name, def)
	r.keep(err)
	return v
}

func (r *attrReader) keep(err error) {
	if r.err == nil {
		r.err = err
	}
}
