"""Reference loop for the sweep benchmark (scripts/bench.sh): what a
Python user would write without `brightfold sweep`. For each case of a
phantom cohort folder (cohort.csv), load the scan with nibabel
(get_fdata, as_closest_canonical), then score it with the same model
folder through ONNX Runtime's Go path: `brightfold score FILE --json` in a
child process (one ONNX Runtime session per case; Debian has no Python
ONNX Runtime). Usage: bench-sweep.py COHORT_DIR BRIGHTFOLD. Prints JSON:
cases, seconds, cases_per_minute, nibabel_seconds.
"""
import csv
import json
import os
import subprocess
import sys
import time

import nibabel as nib

root, exe = sys.argv[1], sys.argv[2]
with open(os.path.join(root, "cohort.csv")) as f:
    paths = [os.path.join(root, r["nifti_path"]) for r in csv.DictReader(f)]
t0 = time.perf_counter()
t_nib = 0.0
for p in paths:
    t1 = time.perf_counter()
    img = nib.as_closest_canonical(nib.load(p))
    img.get_fdata()
    t_nib += time.perf_counter() - t1
    subprocess.run([exe, "score", p, "--json", "--threads", "1"], check=True, stdout=subprocess.DEVNULL)
dt = time.perf_counter() - t0
json.dump({"cases": len(paths), "seconds": dt, "cases_per_minute": 60 * len(paths) / dt, "nibabel_seconds": t_nib}, sys.stdout)
print()
