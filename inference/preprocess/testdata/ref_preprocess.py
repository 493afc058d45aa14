"""Reference values for inference/preprocess_test.go, computed with Debian's
python3-nibabel and numpy.

Reads a JSON job from the file named by the first argument:
  {"affines": [4x4,...], "percentiles": {"values": [...], "p": [...]}}
Writes JSON: canonical affines (nibabel.as_closest_canonical) and
percentiles (numpy.percentile, method "linear").
"""
import json
import sys

import nibabel as nib
import numpy as np

with open(sys.argv[1]) as f:
    job = json.load(f)
out = {"canonical": [], "percentiles": []}
for a in job["affines"]:
    a = np.array(a, dtype=float)
    img = nib.Nifti1Image(np.zeros((3, 4, 5), dtype=np.float32), a)
    out["canonical"].append(nib.as_closest_canonical(img).affine.tolist())
pv = job["percentiles"]
out["percentiles"] = [float(np.percentile(np.array(pv["values"]), p)) for p in pv["p"]]
json.dump(out, sys.stdout)
