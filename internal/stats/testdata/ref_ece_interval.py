"""Reference values for internal/stats/ece_interval.go, computed with Debian's
python3-sklearn and python3-scipy.

Reads a JSON job {"prob": [...], "positive": [0/1...], "conf": [...],
"correct": [0/1...], "bins": M} from the file named by the first argument and
writes {"brier": sklearn.metrics.brier_score_loss(positive, prob),
"ece": binned ECE (Guo et al. 2017, Eq. 3) computed with numpy,
"lo": .., "hi": ..} where lo, hi is scipy.stats.bootstrap's percentile 95 %
interval of that ECE (4999 resamples, its own generator).
"""
import json
import sys

import numpy as np
from scipy import stats
from sklearn.metrics import brier_score_loss

with open(sys.argv[1]) as f:
    job = json.load(f)
M = job["bins"]


def ece(conf, correct):
    conf = np.asarray(conf, dtype=float)
    correct = np.asarray(correct, dtype=float)
    b = np.clip(np.ceil(conf * M).astype(int) - 1, 0, M - 1)
    e = 0.0
    for m in range(M):
        s = b == m
        if s.any():
            e += s.sum() / len(conf) * abs(correct[s].mean() - conf[s].mean())
    return e


conf = np.array(job["conf"])
correct = np.array(job["correct"])
res = stats.bootstrap((conf, correct), ece, paired=True, vectorized=False, n_resamples=4999,
                      confidence_level=0.95, method="percentile", random_state=np.random.default_rng(7))
print(json.dumps({"brier": float(brier_score_loss(np.array(job["positive"]), np.array(job["prob"]))),
                  "ece": float(ece(conf, correct)),
                  "lo": float(res.confidence_interval.low), "hi": float(res.confidence_interval.high)}))
