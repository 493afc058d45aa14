// Package onnx holds the ONNX IR in Go: models, graphs, nodes, attributes
// and tensors, their protobuf decoding and encoding, and graph rewrites such
// as folding BatchNormalization into the preceding convolution.
//
// # Models
//
// Decode parses a serialised ONNX ModelProto (written from the field numbers
// of the ONNX IR specification, onnx/onnx.proto, with protowire); Load does
// the same for a file and returns inputerr errors naming it. Model, Graph,
// Node, Attribute, Initializer and ValueInfo mirror the protobuf messages;
// fields the package does not interpret are kept and written back by
// (*Model).Encode, so decode → edit → encode keeps a model intact. Decoding
// never panics and never allocates more than a small multiple of the input
// size, whatever the bytes say.
//
// (*Model).AddOutput exposes an intermediate value as an extra graph output,
// for example the penultimate features, so that ONNX Runtime returns it.
// (*Model).Clone makes a deep copy (for example to randomise weights), and
// FoldBatchNorm returns a copy with every BatchNormalization that follows a
// Conv folded into the convolution's weights and bias.
//
// # Tensors
//
// Tensor is a dense row-major array: float32 values in Data, or integer and
// boolean values in Ints (DType says which; the zero DType means float32).
// Shape nil is a scalar. Values in an executor trace (package exec) may be shared between nodes and
// with the model's initializers: treat them as read-only.
//
// # Running and building
//
// The Go executor (forward, backward, the operator kernels) and the Builder,
// which checks every model it assembles by a trial run, are in the
// sub-package exec; this package imports no executor.
package onnx
