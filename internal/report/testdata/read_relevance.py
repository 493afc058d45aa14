#!/usr/bin/python3
"""Reads a relevance map with Debian's python3-nibabel and prints what the
tests compare: shape, the sform affine, the descrip field, the stored data
type, the intent and the sum of the voxel values. Usage: read_relevance.py FILE"""

import json
import sys

import nibabel as nib
import numpy as np

img = nib.load(sys.argv[1])
hdr = img.header
data = np.asarray(img.dataobj, dtype=np.float64)
print(json.dumps({
    "shape": list(img.shape),
    "affine": img.get_sform().tolist(),
    "descrip": hdr["descrip"].tobytes().rstrip(b"\0").decode("ascii"),
    "dtype": str(hdr.get_data_dtype()),
    "sum": float(data.sum()),
    "max": float(data.max()),
}))
