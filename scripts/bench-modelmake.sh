#!/usr/bin/env bash
# model make on 100 1 mm demo phantoms with the demo-sized model (the demo
# model.onnx), against `brightfold score` of the same cases one by one; prints
# cases per second of each, their ratio (goal: ≥ 1, the model maker not
# slower per case than scoring) and the peak resident memory of model make
# (goal ≤ 1 GiB). Research use only.
set -euo pipefail
cd "$(dirname "$0")/.."
export BRIGHTFOLD_ORT_LIB="${BRIGHTFOLD_ORT_LIB:-$PWD/.cache/onnxruntime/libonnxruntime.so.1}"
n="${MODELMAKE_BENCH_N:-100}"
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
go build -o "$work/brightfold" ./cmd/brightfold
"$work/brightfold" demo cohort "$work/cohort" --n "$n" --seed 77 >/dev/null
# cohort.csv → a manifest with class names (label 1 = atrophy_pattern)
/usr/bin/python3 - "$work/cohort/cohort.csv" "$work/cohort/cases.csv" <<'PY'
import csv, sys
rows = list(csv.DictReader(open(sys.argv[1])))
with open(sys.argv[2], "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["path", "label", "site", "age", "sex"])
    for r in rows:
        w.writerow([r["nifti_path"], "atrophy_pattern" if r["label"] == "1" else "no_pattern", r["site"], r["age"], r["sex"]])
PY
t0=$(date +%s.%N)
/usr/bin/time -f "%M" -o "$work/peak_kb" "$work/brightfold" model make assets/demo-model/model.onnx --cases "$work/cohort/cases.csv" \
  --classes no_pattern,atrophy_pattern --out "$work/made" >/dev/null 2>"$work/make.log"
t1=$(date +%s.%N)
for p in "$work"/cohort/HMRU-*/t1.nii.gz; do "$work/brightfold" score "$p" --json >/dev/null; done
t2=$(date +%s.%N)
/usr/bin/python3 - "$n" "$t0" "$t1" "$t2" "$(cat "$work/peak_kb")" <<'PY'
import sys
n, t0, t1, t2, kb = int(sys.argv[1]), *map(float, sys.argv[2:])
make, score = n / (t1 - t0), n / (t2 - t1)
print("model make: %.2f cases/s, score one by one: %.2f cases/s, ratio %.2f (goal >= 1); model make peak RSS %.0f MiB (goal <= 1024)" % (make, score, make / score, kb / 1024))
PY
