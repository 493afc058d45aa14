"""Reference values for the logistic-regression tests of internal/stats,
computed with Debian's python3-statsmodels and python3-sklearn 1.2.

Reads a JSON job from the file named by the first argument:
  {"calibration": [{"p": [...], "y": [0/1...]}, ...],
   "cv": [{"x": [[...]], "y": [...], "folds": [...], "C": 1.0}, ...]}
Writes, per calibration case, the calibration-in-the-large (statsmodels
GLM Binomial with offset logit(p), intercept only), the calibration slope
and its intercept (statsmodels Logit of y on [1, logit(p)]), their
log-likelihoods, and sklearn's brier_score_loss; per cv case the AUROC of
out-of-fold probabilities from make_pipeline(StandardScaler(),
LogisticRegression(C)) with the given folds (PredefinedSplit,
cross_val_predict), and those probabilities.
"""
import json
import sys

import numpy as np
import statsmodels.api as sm
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import brier_score_loss, roc_auc_score
from sklearn.model_selection import PredefinedSplit, cross_val_predict
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

with open(sys.argv[1]) as f:
    job = json.load(f)
out = {"calibration": [], "cv": []}
for c in job["calibration"]:
    p = np.clip(np.array(c["p"]), 1e-12, 1 - 1e-12)
    y = np.array(c["y"], dtype=float)
    lp = np.log(p / (1 - p))
    cil = sm.GLM(y, np.ones((len(y), 1)), family=sm.families.Binomial(), offset=lp).fit(tol=1e-12)
    slope = sm.Logit(y, sm.add_constant(lp)).fit(disp=0, tol=1e-12)
    out["calibration"].append({"intercept": float(cil.params[0]), "ll_intercept": float(cil.llf),
                               "slope_intercept": float(slope.params[0]), "slope": float(slope.params[1]),
                               "ll_slope": float(slope.llf), "brier": float(brier_score_loss(y, p))})
for c in job["cv"]:
    x, y = np.array(c["x"]), np.array(c["y"])
    model = make_pipeline(StandardScaler(), LogisticRegression(C=c["C"], tol=1e-10, max_iter=10000))
    oof = cross_val_predict(model, x, y, cv=PredefinedSplit(np.array(c["folds"])), method="predict_proba")[:, 1]
    out["cv"].append({"auroc": float(roc_auc_score(y, oof)), "oof": oof.tolist()})
json.dump(out, sys.stdout)
