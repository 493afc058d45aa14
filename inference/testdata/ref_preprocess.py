"""Reference values for inference/preprocess_test.go, computed with Debian's
python3-nibabel, python3-scipy and numpy.

Reads a JSON job from the file named by the first argument:
  {"affines": [4x4,...], "volume": {"dims": [x,y,z], "data": [...x fastest]},
   "points": [[i,j,k],...], "percentiles": {"values": [...], "p": [...]}}
Writes JSON: canonical affines (nibabel.as_closest_canonical), trilinear
samples (scipy.ndimage.map_coordinates, order=1, mode="nearest") and
percentiles (numpy.percentile, method "linear").
"""
import json
import sys

import nibabel as nib
import numpy as np
from scipy import ndimage

with open(sys.argv[1]) as f:
    job = json.load(f)
out = {"canonical": [], "samples": [], "percentiles": []}
for a in job["affines"]:
    a = np.array(a, dtype=float)
    img = nib.Nifti1Image(np.zeros((3, 4, 5), dtype=np.float32), a)
    out["canonical"].append(nib.as_closest_canonical(img).affine.tolist())
vol = job["volume"]
d = vol["dims"]
arr = np.array(vol["data"], dtype=np.float64).reshape(d[2], d[1], d[0]).transpose(2, 1, 0)
pts = np.array(job["points"], dtype=float).T
out["samples"] = ndimage.map_coordinates(arr, pts, order=1, mode="nearest").tolist()
pv = job["percentiles"]
out["percentiles"] = [float(np.percentile(np.array(pv["values"]), p)) for p in pv["p"]]
json.dump(out, sys.stdout)
