"""Reference models and figures for the model make test (cmd/brightfold).

train DIR: trains two small 3D CNNs with PyTorch on the tensors `brightfold
prepare` wrote (DIR/cases.json lists {tensor, label}), and exports each with
torch.onnx.export (dynamic batch): plain.onnx (Conv3d, BatchNorm3d, ReLU,
MaxPool3d, Linear; opset 13) and residual.onnx (Add skips,
AdaptiveAvgPool3d, Dropout; opset 17).
probs DIR NAME T: torch softmax(logits / T) of each tensor in DIR/score.json.
figures FILE: AUROC with DeLong interval (R pROC ci.auc), Wilson intervals
(statsmodels proportion_confint), calibration intercept and slope
(statsmodels Logit / GLM with offset), ECE (15 bins) and Brier (numpy) of
the probabilities in FILE ({p, conf, correct, y}), and the likelihood-ratio
tests of the closed recalibration procedure.
Prints JSON.
"""
import json
import subprocess
import sys

import numpy as np


def load(path):
    import nibabel as nib
    a = np.asarray(nib.load(path).dataobj, dtype=np.float32)  # x, y, z
    return np.ascontiguousarray(a.transpose(2, 1, 0))  # z, y, x = NCDHW's D, H, W


def nets():
    import torch
    from torch import nn

    class Plain(nn.Module):
        def __init__(self):
            super().__init__()
            ch = [1, 4, 8, 16, 16]
            layers = []
            for a, b in zip(ch, ch[1:]):
                layers += [nn.Conv3d(a, b, 3, padding=1, bias=False), nn.BatchNorm3d(b), nn.ReLU(), nn.MaxPool3d(2)]
            self.body = nn.Sequential(*layers)
            self.fc = nn.Linear(16 * 2 * 2 * 2, 2)

        def forward(self, x):
            return self.fc(torch.flatten(self.body(x), 1))

    class Block(nn.Module):
        def __init__(self, c):
            super().__init__()
            self.c1 = nn.Conv3d(c, c, 3, padding=1, bias=False)
            self.b1 = nn.BatchNorm3d(c)
            self.c2 = nn.Conv3d(c, c, 3, padding=1, bias=False)
            self.b2 = nn.BatchNorm3d(c)

        def forward(self, x):
            y = torch.relu(self.b1(self.c1(x)))
            return torch.relu(x + self.b2(self.c2(y)))

    class Residual(nn.Module):
        def __init__(self):
            super().__init__()
            self.stem = nn.Sequential(nn.Conv3d(1, 8, 3, padding=1, bias=False), nn.BatchNorm3d(8), nn.ReLU(), nn.MaxPool3d(2))
            self.block = Block(8)
            self.pool = nn.AdaptiveAvgPool3d(1)
            self.drop = nn.Dropout(0.2)
            self.fc = nn.Linear(8, 2)

        def forward(self, x):
            x = self.block(self.stem(x))
            return self.fc(self.drop(torch.flatten(self.pool(x), 1)))

    return {"plain": (Plain, 13), "residual": (Residual, 17)}


def train(d):
    import torch
    torch.manual_seed(7)
    torch.set_num_threads(1)
    cases = json.load(open(d + "/cases.json"))
    x = torch.from_numpy(np.stack([load(c["tensor"]) for c in cases])[:, None])
    y = torch.tensor([c["label"] for c in cases])
    out = {}
    for name, (cls, opset) in nets().items():
        net = cls()
        opt = torch.optim.Adam(net.parameters(), lr=3e-3)
        net.train()
        for epoch in range(25):
            perm = torch.randperm(len(y))
            for i in range(0, len(y), 8):
                b = perm[i:i + 8]
                opt.zero_grad()
                loss = torch.nn.functional.cross_entropy(net(x[b]), y[b])
                loss.backward()
                opt.step()
        net.eval()
        path = "%s/%s.onnx" % (d, name)
        torch.onnx.export(net, x[:1], path, opset_version=opset, input_names=["image"], output_names=["logits"],
                          dynamic_axes={"image": {0: "batch"}, "logits": {0: "batch"}})
        with torch.no_grad():
            acc = float((net(x).argmax(1) == y).float().mean())
        torch.save(net.state_dict(), "%s/%s.pt" % (d, name))
        out[name] = {"path": path, "opset": opset, "train_accuracy": acc}
    print(json.dumps(out))


def torch_probs(d, name, T):
    import torch
    torch.set_num_threads(1)
    net = nets()[name][0]()
    net.load_state_dict(torch.load("%s/%s.pt" % (d, name)))
    net.eval()
    items = json.load(open(d + "/score.json"))
    out = []
    with torch.no_grad():
        for it in items:
            x = torch.from_numpy(load(it["tensor"])[None, None])
            z = net(x).double()
            out.append(torch.softmax(z / float(T), dim=1)[0].tolist())
    print(json.dumps(out))


def figures(path):
    import statsmodels.api as sm
    from statsmodels.stats.proportion import proportion_confint
    f = json.load(open(path))
    p = np.array(f["p"], dtype=float)
    y = np.array(f["y"], dtype=int)
    conf = np.array(f["conf"], dtype=float)
    correct = np.array(f["correct"], dtype=float)
    r = "library(pROC); d <- read.csv(file('stdin')); r <- roc(d$y, d$p, direction='<', levels=c(0,1), quiet=TRUE); " \
        "ci <- ci.auc(r, method='delong'); cat(sprintf('%.15g %.15g %.15g', ci[2], ci[1], ci[3]))"
    csv = "y,p\n" + "".join("%d,%.17g\n" % (a, b) for a, b in zip(y, p))
    auc = [float(v) for v in subprocess.run(["Rscript", "-e", r], input=csv, capture_output=True, text=True, check=True).stdout.split()]
    tp = int(((p >= 0.5) & (y == 1)).sum()); npos = int((y == 1).sum())
    tn = int(((p < 0.5) & (y == 0)).sum()); nneg = int((y == 0).sum())
    sens = list(proportion_confint(tp, npos, alpha=0.05, method="wilson"))
    spec = list(proportion_confint(tn, nneg, alpha=0.05, method="wilson"))
    edges = np.linspace(0, 1, 16)
    ece = 0.0
    for i in range(15):
        lo, hi = edges[i], edges[i + 1]
        m = (conf > lo) & (conf <= hi) if i > 0 else (conf >= lo) & (conf <= hi)
        if m.any():
            ece += m.mean() * abs(correct[m].mean() - conf[m].mean())
    brier = float(np.mean((p - y) ** 2))
    q = np.clip(p, 1e-12, 1 - 1e-12)
    lp = np.log(q / (1 - q))
    ones = np.ones((len(y), 1))
    m1 = sm.GLM(y, ones, family=sm.families.Binomial(), offset=lp).fit()
    m2 = sm.Logit(y, sm.add_constant(lp)).fit(disp=0)
    ll0 = float(np.sum(y * lp - np.log1p(np.exp(lp))))
    out = {"auc": auc, "sens": sens, "spec": spec, "ece": ece, "brier": brier,
           "intercept": [float(m1.params[0]), *[float(v) for v in m1.conf_int()[0]]],
           "slope": [float(m2.params[1]), *[float(v) for v in m2.conf_int()[1]]],
           "lr_full_vs_none": 2 * (float(m2.llf) - ll0), "lr_full_vs_intercept": 2 * (float(m2.llf) - float(m1.llf))}
    print(json.dumps(out))


if __name__ == "__main__":
    cmd = sys.argv[1]
    if cmd == "train":
        train(sys.argv[2])
    elif cmd == "probs":
        torch_probs(sys.argv[2], sys.argv[3], sys.argv[4])
    elif cmd == "figures":
        figures(sys.argv[2])
