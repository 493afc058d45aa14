// Package exec runs ONNX graphs (the IR types of package onnx) in Go,
// forward and backward, for the layer types CNN classifiers use, and builds
// such models in Go.
//
// # Building models
//
// Builder assembles a CNN in Go: Input, Conv, BatchNorm, Relu, LeakyRelu,
// MaxPool, AveragePool, GlobalAveragePool, Flatten, Dropout, Gemm, Softmax,
// Add, Mul, the generic Node, and Output. Parameters become initializers
// named after the layer (name+".weight", name+".bias", ...), and
// onnx.Graph.Params returns them by name for an optimiser.
//
// # Running models
//
// NewExecutor compiles a model, rejecting unsupported operators or attribute
// values with an *UnsupportedError naming the operator and the node;
// Unsupported lists every such problem without failing at the first.
// Supported (default ONNX domain, opsets 7 to 17): Conv (1D to 3D; pads,
// strides, dilations, group, auto_pad), BatchNormalization (inference),
// Relu, LeakyRelu, Sigmoid, MaxPool (with Indices), AveragePool
// (count_include_pad, ceil_mode), GlobalAveragePool, GlobalMaxPool, Flatten,
// Reshape, Transpose, Squeeze, Unsqueeze, Concat, Gemm, MatMul, Add, Sub,
// Mul, Div (broadcasting), Softmax (both the opset < 13 and ≥ 13 meanings),
// Exp, ReduceSum, ReduceMean, ReduceMax, Dropout (inference), Identity,
// Constant, Shape, Gather and Cast (float32 and integer types).
// SupportedOps lists them. Every float op has a backward pass.
//
// (*Executor).Forward(inputs) returns a Trace with every value of the pass by
// name. (*Executor).Backward(trace, seeds) propagates seed gradients (for
// example a one-hot vector on the logits output, or dLoss/dLogits) back to
// every float value: Grads.Of(name) gives the gradient with respect to a
// graph input (relevance maps) or an initializer (training). BackwardWith
// skips the parameter or the input gradients when they are not needed.
//
// Per-node access for relevance rules implemented elsewhere: Nodes lists the
// nodes in execution order (OpType, Inputs, Outputs, Attr and the typed
// AttrInt, AttrInts, AttrFloat, AttrString); Trace.NodeInputs and
// NodeOutputs give a node's values; Apply re-runs one node on other inputs
// (for example with positive weights only) and VJP gives one node's
// vector-Jacobian product, from which the standard LRP rules follow as
// x ⊙ VJP(s) with s = R/z.
//
// Convolutions write im2col column blocks straight into packed panels and
// multiply them with a 4×16 register-tiled kernel (AVX2 and FMA assembly on
// amd64 CPUs that have them, portable Go otherwise), on as many goroutines
// as GOMAXPROCS (or the count given to NewExecutorWorkers). An Executor holds no per-run state and is
// safe for concurrent use while the model is not modified; optimisers may
// update initializer tensors in place between passes.
package exec
