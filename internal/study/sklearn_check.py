"""Recomputes Brightfold's evaluation figures from its per-case CSV with
outside references, for the evaluation (tools/evaluate) and the tests of
package study. Run with Debian's interpreter:

    /usr/bin/python3 - CASES.csv < sklearn_check.py

Every AUROC is sklearn.metrics.roc_auc_score (python3-sklearn) on the same
per-case scores Brightfold used; the expected calibration error is
Guo et al. 2017 (ICML), Eq. 3, with 15 equal-width bins
B_m = ((m-1)/M, m/M], written here independently with numpy.digitize, on
probabilities recomputed from the class logits with scipy.special.softmax.
Prints one JSON object. Research use only. Not a diagnosis.
"""
import csv
import json
import sys

import numpy as np
import scipy
import sklearn
from sklearn.metrics import brier_score_loss
from scipy.special import softmax
from sklearn.metrics import roc_auc_score

LOGIT = "class_logit_"
SEVERITY = "severity_"
BINS = 15


def auroc(y, s):
    """roc_auc_score, or None when a class is empty."""
    y = np.asarray(y, dtype=int)
    if len(y) == 0 or y.min() == y.max():
        return None
    return float(roc_auc_score(y, np.asarray(s, dtype=float)))


def ece(conf, correct, bins=BINS):
    """Guo et al. 2017, Eq. 3: sum_m |B_m|/n |acc(B_m) - conf(B_m)|."""
    conf = np.asarray(conf, dtype=float)
    correct = np.asarray(correct, dtype=float)
    edges = np.linspace(0.0, 1.0, bins + 1)
    # right=True: edges[m-1] < c <= edges[m] -> bin m-1 (0 goes to bin 0)
    which = np.digitize(conf, edges[1:-1], right=True)
    total = 0.0
    for m in range(bins):
        sel = which == m
        if sel.any():
            total += sel.mean() * abs(correct[sel].mean() - conf[sel].mean())
    return float(total)


def main(path):
    with open(path, newline="") as f:
        rows = list(csv.DictReader(f))
    if not rows:
        raise SystemExit("no cases in " + path)
    cols = list(rows[0].keys())
    logit_cols = [c for c in cols if c.startswith(LOGIT)]
    sev_cols = [c for c in cols if c.startswith(SEVERITY)]
    notices = {r["notice"] for r in rows}
    ind = [r for r in rows if r["shift"] == "none"]
    ind_ok = [r for r in ind if r["not_prepared"] == ""]  # the model ran
    shifts = []
    for r in rows:
        if r["shift"] != "none" and r["shift"] not in shifts:
            shifts.append(r["shift"])

    out = {
        "sklearn_version": sklearn.__version__,
        "numpy_version": np.__version__,
        "scipy_version": scipy.__version__,
        "rows": len(rows),
        "notices": sorted(notices),
    }
    # held-out: the calibrated positive-class probability, pattern vs none
    out["held_out_auroc"] = auroc([int(r["label"]) for r in ind_ok], [float(r["probability"]) for r in ind_ok])

    # calibration: probabilities recomputed from the logits
    z = np.array([[float(r[c]) for c in logit_cols] for r in ind_ok], dtype=float)
    y = np.array([int(r["true_class"]) for r in ind_ok], dtype=int)
    T = float(ind_ok[0]["temperature"]) if ind_ok else 1.0
    res = {}
    for name, t in (("before", 1.0), ("after", T)):
        p = softmax(z / t, axis=1)
        pred = p.argmax(axis=1)
        res[name] = ece(p.max(axis=1), pred == y)
    out["ece_before"], out["ece_after"] = res["before"], res["after"]
    # Brier score of the positive-class probability (sklearn brier_score_loss);
    # the positive column is the one that reproduces the reported probability
    pos_col = int(np.argmin([np.abs(softmax(z / T, axis=1)[:, k] - np.array([float(r["probability"]) for r in ind_ok])).max()
                             for k in range(z.shape[1])])) if ind_ok else 0
    yb = np.array([int(r["true_class"]) == pos_col for r in ind_ok], dtype=int)
    for name, t in (("before", 1.0), ("after", T)):
        out["brier_" + name] = float(brier_score_loss(yb, softmax(z / t, axis=1)[:, pos_col])) if ind_ok else None
    # the probability Brightfold reported equals softmax(z / T) of the
    # positive class (the column whose logit is the positive class is found
    # as the one that reproduces it best)
    p = softmax(z / T, axis=1)
    reported = np.array([float(r["probability"]) for r in ind_ok])
    out["probability_max_abs_diff"] = float(min(np.abs(p[:, k] - reported).max() for k in range(p.shape[1])))

    # false alarms: in-distribution cases with an out-of-distribution verdict
    out["false_alarm_rate"] = float(np.mean([r["verdict"] == "out-of-distribution" for r in ind]))

    out["shift_auroc"], out["flag_rate"], out["check_auroc"] = {}, {}, {}
    for sh in shifts:
        cases = [r for r in rows if r["shift"] == sh]
        both = ind + cases
        out["shift_auroc"][sh] = auroc([int(r["shift"] == sh) for r in both], [float(r["fit_score"]) for r in both])
        out["flag_rate"][sh] = float(np.mean([r["verdict"] == "out-of-distribution" for r in cases]))
        per = {}
        for c in sev_cols:
            sel = [r for r in both if r[c] != ""]
            per[c[len(SEVERITY):]] = auroc([int(r["shift"] == sh) for r in sel], [float(r[c]) for r in sel])
        out["check_auroc"][sh] = per
    json.dump(out, sys.stdout)


if __name__ == "__main__":
    main(sys.argv[1])
