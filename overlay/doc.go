// Package overlay computes relevance maps for a model folder's positive-class
// score (or any class the caller picks) with published explanation methods,
// each with the check that its own definition implies:
//
//   - LRP, layer-wise relevance propagation (Bach et al. 2015), on the Go
//     executor of package internal/onnx/exec, node by node over a forward
//     Trace. The default composite (RuleComposite) applies the w² rule at
//     the input layer, alpha1-beta0 in the convolutions above it and LRP-0
//     in the dense layers (Montavon et al. 2019, section 10.1;
//     Kohlbrenner et al. 2020); z^B (with the bounds of the card's
//     intensity normalisation) or the flat rule at the input layer, and
//     epsilon or LRP-γ in the upper convolutions, are options. BatchNormalization after a convolution is folded
//     into it first (onnx.FoldBatchNorm); ReLU, Dropout, Identity and the
//     shape operators pass relevance on unchanged; max pooling routes it to
//     the winner; average pooling splits it in proportion to the inputs.
//     Figures: input_share, the part of the logit the voxels carry, and
//     the parts the biases and the stabilisers keep (the three add up to
//     1); consistency_error checks that they do, a check of the
//     implementation, not of the explanation.
//   - Gradient × input (Shrikumar et al. 2016; for ReLU networks equal to
//     LRP-0, Ancona et al. 2018).
//   - Integrated gradients (Sundararajan et al. 2017) from a zero or a
//     blurred baseline with m steps, batched through the executor. Check:
//     completeness, the attributions sum to f(x) − f(baseline); their
//     input_share is 1 − f(baseline)/f(x).
//   - Occlusion sensitivity (Zeiler & Fergus 2014): the drop of the target
//     logit when a cube of the input is set to a fill value, through ONNX
//     Runtime (inference.Session) in batches. It needs only the model's
//     outputs, so it works on any model folder, also one whose operators the Go
//     executor lacks.
//
// Maps are computed on the model grid (Map, in grid order: x fastest) and
// carried back onto the scan's own voxel grid by ToScan through the inverse
// of the preprocessing transform, so that a written map has the scan's dims
// and affine.
//
// Explainer.Available lists, for a model folder, which methods can run and why not
// (an operator without a Go kernel or without an LRP rule switches off the
// executor methods with the reason; occlusion stays). The slow methods take
// a context.Context for cancellation and report progress through
// Options.Progress.
//
// Research use only. Not a diagnosis.
package overlay
