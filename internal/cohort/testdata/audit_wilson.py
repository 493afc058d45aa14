"""Reference for audit_test.go: statsmodels proportion_confint(method =
"wilson", alpha = 0.05) of the sensitivity and specificity at probability
0.5 read from a sweep's scores.tsv (rows with status "scored" and a
label). Usage: audit_wilson.py scores.tsv; prints JSON."""
import csv
import json
import sys

from statsmodels.stats.proportion import proportion_confint

tp = fn = tn = fp = 0
with open(sys.argv[1]) as f:
    for row in csv.DictReader(f, delimiter="\t"):
        if row["status"] != "scored" or row["label"] == "n/a":
            continue
        pos, hit = row["label"] == "1", float(row["probability"]) >= 0.5
        if pos:
            tp, fn = tp + hit, fn + (not hit)
        else:
            tn, fp = tn + (not hit), fp + hit
out = {}
for name, k, n in (("sensitivity", tp, tp + fn), ("specificity", tn, tn + fp)):
    lo, hi = proportion_confint(k, n, alpha=0.05, method="wilson")
    out[name] = {"value": k / n, "lo": lo, "hi": hi}
json.dump(out, sys.stdout)
