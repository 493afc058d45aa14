"""Writes inference/testdata/tiny3d.onnx, a small 3D CNN used only by the
inference tests (it is not a medical model and was never trained).

Run with Debian's python3-torch 1.13:  /usr/bin/python3 make_test_model.py OUT.onnx
With "--bench GRID" it writes instead a larger stand-in of the same shape of
network for the score-overhead benchmark (input [N, 1, GRID, GRID, GRID],
three convolution stages of 8, 16 and 32 channels); nothing is printed then.
With "--moderate" it writes a stand-in of moderate size for a structural
brain-MRI CNN (input [N, 1, 96, 96, 96], 2 mm; seven 3x3x3 convolutions in
four stages of 16, 32, 64 and 128 channels, batch norm, max pooling, global
average pooling, about 8 G multiply-adds per case), untrained: only its
running time matters. "--large" writes a larger one of the same form
(input [N, 1, 128, 128, 128], 1.5 mm; stages of 24, 48, 96 and 192 channels,
about 44 G multiply-adds per case).
Fixed seed, fixed weights. Input "scan" [N, 1, 16, 16, 16] (NCDHW, dynamic N);
output "logits" [N, 2]. The penultimate features (the Flatten output, [N, 8])
are an intermediate tensor, not a graph output, so that the model folder loader
must add it to the graph outputs. The script prints, as JSON, the feature
tensor's name, three fixed inputs and PyTorch's logits and features for them,
for the tests to compare with ONNX Runtime.
"""
import json
import sys

import torch
from torch import nn


class Tiny3D(nn.Module):
    def __init__(self):
        super().__init__()
        self.conv1 = nn.Conv3d(1, 4, 3, padding=1)
        self.bn1 = nn.BatchNorm3d(4)
        self.pool = nn.MaxPool3d(2)
        self.conv2 = nn.Conv3d(4, 8, 3, padding=1)
        self.gap = nn.AdaptiveAvgPool3d(1)
        self.flat = nn.Flatten()
        self.drop = nn.Dropout(0.2)
        self.fc = nn.Linear(8, 2)

    def forward(self, x):
        x = self.pool(torch.relu(self.bn1(self.conv1(x))))
        x = torch.relu(self.conv2(x))
        f = self.flat(self.gap(x))
        return self.fc(self.drop(f))


class Bench3D(nn.Module):
    def __init__(self):
        super().__init__()
        self.body = nn.Sequential(
            nn.Conv3d(1, 8, 3, padding=1), nn.BatchNorm3d(8), nn.ReLU(), nn.MaxPool3d(2),
            nn.Conv3d(8, 16, 3, padding=1), nn.ReLU(), nn.MaxPool3d(2),
            nn.Conv3d(16, 32, 3, padding=1), nn.ReLU(), nn.AdaptiveAvgPool3d(1))
        self.flat = nn.Flatten()
        self.fc = nn.Linear(32, 2)

    def forward(self, x):
        return self.fc(self.flat(self.body(x)))


class Moderate3D(nn.Module):
    def __init__(self, w=16):
        super().__init__()

        def block(cin, cout):
            return [nn.Conv3d(cin, cout, 3, padding=1), nn.BatchNorm3d(cout), nn.ReLU()]
        self.body = nn.Sequential(
            *block(1, w), nn.MaxPool3d(2),
            *block(w, 2 * w), *block(2 * w, 2 * w), nn.MaxPool3d(2),
            *block(2 * w, 4 * w), *block(4 * w, 4 * w), nn.MaxPool3d(2),
            *block(4 * w, 8 * w), *block(8 * w, 8 * w), nn.AdaptiveAvgPool3d(1))
        self.flat = nn.Flatten()
        self.fc = nn.Linear(8 * w, 2)

    def forward(self, x):
        return self.fc(self.flat(self.body(x)))


def moderate(out, w=16, grid=96):
    torch.manual_seed(11)
    m = Moderate3D(w).eval()
    x = torch.randn(1, 1, grid, grid, grid)
    torch.onnx.export(m, x, out, input_names=["scan"], output_names=["logits"],
                      dynamic_axes={"scan": {0: "batch"}, "logits": {0: "batch"}},
                      opset_version=13, do_constant_folding=True)


def bench(out, grid):
    torch.manual_seed(7)
    m = Bench3D().eval()
    x = torch.randn(1, 1, grid, grid, grid)
    torch.onnx.export(m, x, out, input_names=["scan"], output_names=["logits"],
                      dynamic_axes={"scan": {0: "batch"}, "logits": {0: "batch"}},
                      opset_version=13, do_constant_folding=True)


def main():
    out = sys.argv[1]
    if len(sys.argv) == 3 and sys.argv[2] == "--moderate":
        moderate(out)
        return
    if len(sys.argv) == 3 and sys.argv[2] == "--large":
        moderate(out, 24, 128)
        return
    if len(sys.argv) == 4 and sys.argv[2] == "--bench":
        bench(out, int(sys.argv[3]))
        return
    torch.manual_seed(20261201)
    m = Tiny3D()
    with torch.no_grad():
        m.bn1.running_mean.uniform_(-0.2, 0.2)
        m.bn1.running_var.uniform_(0.5, 1.5)
    m.eval()
    x = torch.randn(1, 1, 16, 16, 16)
    torch.onnx.export(m, x, out, input_names=["scan"], output_names=["logits"],
                      dynamic_axes={"scan": {0: "batch"}, "logits": {0: "batch"}},
                      opset_version=13, do_constant_folding=True)
    inputs = torch.stack([torch.full((1, 16, 16, 16), 0.5),
                          torch.linspace(-1, 1, 4096).reshape(1, 16, 16, 16),
                          torch.cos(torch.arange(4096.0) / 50).reshape(1, 16, 16, 16)])
    with torch.no_grad():
        logits = m(inputs)
        feats = m.flat(m.gap(torch.relu(m.conv2(m.pool(torch.relu(m.bn1(m.conv1(inputs))))))))
    # torch 1.13 names the Flatten output after the module scope.
    json.dump({"feature_name": "/flat/Flatten_output_0", "inputs": inputs.reshape(3, -1).tolist(),
               "logits": logits.tolist(), "features": feats.tolist()}, sys.stdout)


if __name__ == "__main__":
    main()
