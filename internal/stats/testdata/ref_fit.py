"""Reference values for internal/stats tests, computed with Debian's
python3-sklearn 1.2 and python3-scipy.

Reads a JSON job from the file named by the first argument:
  {"auroc": [{"scores": [...], "labels": [0/1...]}, ...],
   "ledoit_wolf": [[...], ...]           (rows, already centred),
   "wasserstein": [{"a": [...], "b": [...]}, ...],
   "temperature": {"logits": [[...]], "labels": [...]},
   "clopper_pearson": [{"k": .., "n": .., "confidence": ..}, ...],
   "betainc": [{"a": .., "b": .., "x": ..}, ...]}
Writes JSON with sklearn.metrics.roc_auc_score per AUROC case,
sklearn.covariance.ledoit_wolf(assume_centered=True) covariance and
shrinkage, scipy.stats.wasserstein_distance per pair, and the temperature
minimising the NLL by scipy.optimize.minimize_scalar (bounded, on 1/T),
the one-sided Clopper-Pearson lower bound as stats.beta.ppf(1 - confidence,
k, n - k + 1), and special.betainc(a, b, x).
"""
import json
import sys

import numpy as np
from scipy import optimize, special, stats
from sklearn.covariance import ledoit_wolf
from sklearn.metrics import roc_auc_score

with open(sys.argv[1]) as f:
    job = json.load(f)
out = {}
out["auroc"] = [float(roc_auc_score(np.array(c["labels"]), np.array(c["scores"]))) for c in job["auroc"]]
cov, shrink = ledoit_wolf(np.array(job["ledoit_wolf"]), assume_centered=True)
out["lw_cov"] = cov.tolist()
out["lw_shrinkage"] = float(shrink)
out["wasserstein"] = [float(stats.wasserstein_distance(c["a"], c["b"])) for c in job["wasserstein"]]
z = np.array(job["temperature"]["logits"])
y = np.array(job["temperature"]["labels"])


def nll(beta):
    s = z * beta
    return float(np.mean(special.logsumexp(s, axis=1) - s[np.arange(len(y)), y]))


r = optimize.minimize_scalar(nll, bounds=(1 / 20, 20), method="bounded", options={"xatol": 1e-10})
out["temperature"] = float(1 / r.x)
out["clopper_pearson"] = [float(stats.beta.ppf(1 - c["confidence"], c["k"], c["n"] - c["k"] + 1)) for c in job["clopper_pearson"]]
out["betainc"] = [float(special.betainc(c["a"], c["b"], c["x"])) for c in job["betainc"]]
json.dump(out, sys.stdout)
