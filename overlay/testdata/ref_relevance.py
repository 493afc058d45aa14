#!/usr/bin/python3
"""Reference relevance maps for the PyTorch fixture (testdata/pytorch), in
float64 with Debian's python3-torch, written from the papers' definitions
independently of the Go code:

  * gradient x input (Shrikumar et al. 2016) through torch.autograd;
  * integrated gradients (Sundararajan et al. 2017, eq. 3) from the zero
    baseline with the midpoint rule on M steps;
  * LRP with the epsilon rule in every weighted layer (Bach et al. 2015,
    eq. 58; epsilon = EPS x the RMS of the layer's pre-activations), and the
    composite of Montavon et al. 2019 (section 10.1) as the Go package plans
    it for this two-convolution network: z^B at conv1 with bounds [LO, HI],
    epsilon at conv2, LRP-0 at the dense layer; max pooling winner-take-all,
    average pooling proportional, BatchNorm folded into the convolutions;
    the composite with alpha1-beta0 at conv2 (Bach et al. 2015, eq. 60 with
    alpha = 1, beta = 0: on conv2's non-negative input, the z+ rule with W+
    and no bias), the product's default; and the epsilon rule with every
    bias left out of z (z_j = sum_i a_i w_ij, so the inputs share all of R_j
    but what the stabiliser keeps).
    Each rule is applied with the "gradient trick" of Montavon et al. 2019
    (section 10.2): z = layer(a); s = R / z; c = d(z.s)/da; R_in = a * c.

The fixture's network and weights are rebuilt by scripts/make-pytorch-fixture.py
(same seed). Prints JSON. Usage: ref_relevance.py CLASS EPS LO HI M
"""

import importlib.util
import json
import os
import sys

import torch
import torch.nn.functional as F

HERE = os.path.dirname(os.path.abspath(__file__))
FIXTURE = os.path.join(HERE, "..", "..", "scripts", "make-pytorch-fixture.py")
TINY = 1e-9


def load_fixture():
    spec = importlib.util.spec_from_file_location("fixture", FIXTURE)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    torch.set_num_threads(1)
    net, x = mod.build()
    return net.double().eval(), x.double()


def fold(conv, bn):
    a = bn.weight / torch.sqrt(bn.running_var + bn.eps)
    w = conv.weight * a.view(-1, 1, 1, 1, 1)
    b = (conv.bias - bn.running_mean) * a + bn.bias
    return w.detach(), b.detach()


def stab(z, rel):
    eps = rel * torch.sqrt((z * z).mean())
    d = z + eps * torch.where(z >= 0, torch.ones_like(z), -torch.ones_like(z))
    return d


def rule_linear(fn, a, r, rel):
    """epsilon rule: R_i = a_i * [d(z . s)/da]_i with s = R / (z + eps sign z)."""
    a = a.detach().requires_grad_(True)
    z = fn(a)
    s = (r / stab(z, rel)).detach()
    (z * s).sum().backward()
    return (a * a.grad).detach()


def rule_zb(w, conv_kw, x, r, lo, hi):
    wp, wn = w.clamp(min=0), w.clamp(max=0)
    xa = x.detach().requires_grad_(True)
    l = torch.full_like(x, lo).requires_grad_(True)
    h = torch.full_like(x, hi).requires_grad_(True)
    z = F.conv3d(xa, w, **conv_kw) - F.conv3d(l, wp, **conv_kw) - F.conv3d(h, wn, **conv_kw)
    s = (r / stab(z, TINY)).detach()
    (z * s).sum().backward()
    return (xa * xa.grad + l * l.grad + h * h.grad).detach()


def rule_blind(w, conv_kw, x, r, flat):
    """w^2 rule (flat: every weight 1): R_i = sum_j w_ij^2 R_j / sum_i w_ij^2,
    the sums over the real (unpadded) inputs."""
    v = torch.ones_like(w) if flat else w * w
    a = torch.ones_like(x).requires_grad_(True)
    z = F.conv3d(a, v, **conv_kw)
    s = (r / stab(z, TINY)).detach()
    (z * s).sum().backward()
    return a.grad.detach()


def lrp(net, x, cls, eps, lo, hi, composite, conv2="epsilon", bias=True, first="zb", gamma=0.0):
    w1, b1 = fold(net.conv1, net.bn1)
    w2, b2 = fold(net.conv2, net.bn2)
    k1 = dict(padding=1)
    k2 = dict(padding=1, stride=2)
    z1 = F.conv3d(x, w1, b1, **k1)
    a1 = F.relu(z1)
    p1 = F.max_pool3d(a1, 2)
    z2 = F.conv3d(p1, w2, b2, **k2)
    a2 = F.relu(z2)
    g = a2.mean(dim=(2, 3, 4))
    z3 = F.linear(g, net.fc.weight, net.fc.bias)
    r = torch.zeros_like(z3)
    r[0, cls] = z3[0, cls]
    dense_eps = TINY if composite else eps
    fcb, cb2, cb1 = (net.fc.bias, b2, b1) if bias else (None, None, None)
    r = rule_linear(lambda a: F.linear(a, net.fc.weight, fcb), g, r, dense_eps)
    r = rule_linear(lambda a: a.mean(dim=(2, 3, 4)), a2, r, TINY)
    if conv2 == "zplus":
        r = rule_linear(lambda a: F.conv3d(a, w2.clamp(min=0), None, **k2), p1, r, TINY)
    elif conv2 == "gamma":
        # LRP-gamma (Montavon et al. 2019, section 10.1) on non-negative
        # inputs: weights w + gamma w+, the bias left out
        r = rule_linear(lambda a: F.conv3d(a, w2 + gamma * w2.clamp(min=0), None, **k2), p1, r, TINY)
    else:
        r = rule_linear(lambda a: F.conv3d(a, w2, cb2, **k2), p1, r, eps)
    # max pooling: the relevance goes to the winner (the gradient of the max)
    a = a1.detach().requires_grad_(True)
    (F.max_pool3d(a, 2) * r).sum().backward()
    r = a.grad.detach()
    if composite and first != "zb":
        r = rule_blind(w1, k1, x, r, first == "flat")
    elif composite:
        r = rule_zb(w1, k1, x, r, lo, hi)
    else:
        r = rule_linear(lambda a: F.conv3d(a, w1, cb1, **k1), x, r, eps)
    return r, z3[0, cls].item()


def grad(net, x, cls):
    xa = x.detach().requires_grad_(True)
    logits, _ = net(xa)
    logits[:, cls].sum().backward()
    return xa.grad.detach(), logits.detach()


def main():
    cls, eps, lo, hi, m = int(sys.argv[1]), float(sys.argv[2]), float(sys.argv[3]), float(sys.argv[4]), int(sys.argv[5])
    net, x = load_fixture()
    g, logits = grad(net, x, cls)
    base = torch.zeros_like(x)
    acc = torch.zeros_like(x)
    for k in range(m):
        a = (k + 0.5) / m
        gk, _ = grad(net, base + a * (x - base), cls)
        acc += gk
    ig = (x - base) * acc / m
    with torch.no_grad():
        f_base = net(base)[0][0, cls].item()
    r_eps, f = lrp(net, x, cls, eps, lo, hi, composite=False)
    r_comp, _ = lrp(net, x, cls, eps, lo, hi, composite=True)
    r_comp_ab, _ = lrp(net, x, cls, eps, lo, hi, composite=True, conv2="zplus")
    r_eps_nobias, _ = lrp(net, x, cls, eps, lo, hi, composite=False, bias=False)
    r_w2, _ = lrp(net, x, cls, eps, lo, hi, composite=True, conv2="zplus", first="w2")
    r_flat, _ = lrp(net, x, cls, eps, lo, hi, composite=True, conv2="zplus", first="flat")
    r_gamma, _ = lrp(net, x, cls, eps, lo, hi, composite=True, conv2="gamma", bias=False, gamma=0.5)
    out = {
        "logit": f,
        "baseline_logit": f_base,
        "gradinput": (x * g).flatten().tolist(),
        "ig": ig.flatten().tolist(),
        "lrp_epsilon": r_eps.flatten().tolist(),
        "lrp_composite": r_comp.flatten().tolist(),
        "lrp_composite_alpha_beta": r_comp_ab.flatten().tolist(),
        "lrp_epsilon_no_bias": r_eps_nobias.flatten().tolist(),
        "lrp_composite_w2": r_w2.flatten().tolist(),
        "lrp_composite_flat": r_flat.flatten().tolist(),
        "lrp_composite_gamma": r_gamma.flatten().tolist(),
    }
    json.dump(out, sys.stdout)


if __name__ == "__main__":
    main()
