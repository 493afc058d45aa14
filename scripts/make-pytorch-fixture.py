#!/usr/bin/python3
"""Writes the PyTorch compatibility fixture for the Go graph executor.

A small 3D CNN (Conv3d, BatchNorm3d, ReLU, MaxPool3d, adaptive average
pooling, Flatten, Dropout, Linear) with fixed-seed weights and non-trivial
batch-norm running statistics is exported to ONNX (opset 13) by Debian's
python3-torch in evaluation mode, with two outputs (logits and the
penultimate features), together with an input and PyTorch's own outputs as
raw little-endian float32 files and a JSON description. The script prints
the outputs as JSON on standard output.

Run with Debian's interpreter:  /usr/bin/python3 scripts/make-pytorch-fixture.py [--out DIR]
(default DIR: testdata/pytorch). Same seed, same numbers.
"""

import argparse
import json
import os
import sys

import torch
from torch import nn
from torch.onnx import symbolic_helper

SEED = 20261201
SIZE = 16


class SmallNet(nn.Module):
    def __init__(self):
        super().__init__()
        self.conv1 = nn.Conv3d(1, 4, kernel_size=3, padding=1)
        self.bn1 = nn.BatchNorm3d(4)
        self.pool = nn.MaxPool3d(2)
        self.conv2 = nn.Conv3d(4, 8, kernel_size=3, padding=1, stride=2)
        self.bn2 = nn.BatchNorm3d(8)
        self.gap = nn.AdaptiveAvgPool3d(1)
        self.drop = nn.Dropout(0.3)
        self.flat = nn.Flatten()
        self.fc = nn.Linear(8, 2)

    def forward(self, x):
        x = self.pool(torch.relu(self.bn1(self.conv1(x))))
        x = torch.relu(self.bn2(self.conv2(x)))
        features = self.flat(self.gap(x))
        return self.fc(self.drop(features)), features


def dropout_symbolic(g, x, p, train):
    """Keeps nn.Dropout as an inference-mode ONNX Dropout (ratio input,
    training_mode false). PyTorch's own eval-mode export leaves the node
    out; the fixture keeps it so that the executor meets it as other
    exporters write it."""
    ratio = g.op("Constant", value_t=torch.tensor(symbolic_helper._maybe_get_const(p, "f"), dtype=torch.float))
    mode = g.op("Constant", value_t=torch.tensor(False))
    return g.op("Dropout", x, ratio, mode)


def build():
    torch.manual_seed(SEED)
    net = SmallNet()
    with torch.no_grad():
        for bn in (net.bn1, net.bn2):
            bn.weight.uniform_(0.5, 1.5)
            bn.bias.uniform_(-0.2, 0.2)
            bn.running_mean.uniform_(-0.3, 0.3)
            bn.running_var.uniform_(0.5, 2.0)
    net.eval()
    x = torch.randn(1, 1, SIZE, SIZE, SIZE)
    return net, x


def write_f32(path, t):
    with open(path, "wb") as f:
        f.write(t.detach().contiguous().to(torch.float32).numpy().astype("<f4").tobytes())


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", default=os.path.join(os.path.dirname(__file__), "..", "testdata", "pytorch"))
    args = ap.parse_args()
    os.makedirs(args.out, exist_ok=True)
    torch.set_num_threads(1)
    net, x = build()
    with torch.no_grad():
        logits, features = net(x)
    torch.onnx.register_custom_op_symbolic("::dropout", dropout_symbolic, 13)
    model_path = os.path.join(args.out, "small3d.onnx")
    torch.onnx.export(
        net, x, model_path,
        opset_version=13,
        input_names=["input"], output_names=["logits", "features"],
        dynamic_axes={"input": {0: "N"}, "logits": {0: "N"}, "features": {0: "N"}},
        # PRESERVE exports the modules as they are (eval mode) without
        # folding BatchNorm3d into the convolutions, as EVAL would.
        training=torch.onnx.TrainingMode.PRESERVE,
        do_constant_folding=False,
    )
    write_f32(os.path.join(args.out, "input.f32"), x)
    write_f32(os.path.join(args.out, "logits.f32"), logits)
    write_f32(os.path.join(args.out, "features.f32"), features)
    meta = {
        "description": "PyTorch compatibility fixture for the Go graph executor; synthetic weights, not a trained model",
        "torch_version": torch.__version__,
        "seed": SEED,
        "opset": 13,
        "model": "small3d.onnx",
        "input": {"name": "input", "file": "input.f32", "shape": list(x.shape)},
        "outputs": [
            {"name": "logits", "file": "logits.f32", "shape": list(logits.shape)},
            {"name": "features", "file": "features.f32", "shape": list(features.shape)},
        ],
        "dtype": "float32 little-endian",
    }
    with open(os.path.join(args.out, "fixture.json"), "w") as f:
        json.dump(meta, f, indent=2)
        f.write("\n")
    json.dump({"logits": logits.flatten().tolist(), "features": features.flatten().tolist()}, sys.stdout)


if __name__ == "__main__":
    main()
