"""Reference for wilson_test.go: statsmodels proportion_confint(method="wilson").

Usage: python3 wilson_statsmodels.py K1,N1 K2,N2 ... ; prints a JSON list of [lo, hi] at 95 %.
"""
import json
import sys

from statsmodels.stats.proportion import proportion_confint

out = []
for arg in sys.argv[1:]:
    k, n = (int(x) for x in arg.split(","))
    lo, hi = proportion_confint(k, n, alpha=0.05, method="wilson")
    out.append([float(lo), float(hi)])
print(json.dumps(out))
