"""Reference for TestMultiVolumeSeries: reads every .dcm file in the folder
named by the first argument with Debian's python3-pydicom and writes JSON
{"volumes": [[slice means in position order], ...]}: the images grouped by
ImagePositionPatient projected on the slice normal (DICOM PS3.3
C.7.6.2.1.1), the k images at each position ordered by InstanceNumber, and
volume v made of the v-th image at every position; each slice mean is that
of the rescaled pixel values (RescaleSlope/Intercept)."""
import glob
import json
import sys

import numpy as np
import pydicom

items = []
for p in sorted(glob.glob(sys.argv[1] + "/*.dcm")):
    ds = pydicom.dcmread(p)
    o = np.array(ds.ImageOrientationPatient, dtype=float)
    n = np.cross(o[:3], o[3:])
    z = float(np.dot(n, np.array(ds.ImagePositionPatient, dtype=float)))
    px = ds.pixel_array.astype(float) * float(getattr(ds, "RescaleSlope", 1)) + float(getattr(ds, "RescaleIntercept", 0))
    items.append((round(z, 3), int(ds.InstanceNumber), float(px.mean())))
zs = sorted({z for z, _, _ in items})
k = len(items) // len(zs)
vols = [[] for _ in range(k)]
for z in zs:
    at = sorted([it for it in items if it[0] == z], key=lambda it: it[1])
    for v in range(k):
        vols[v].append(at[v][2])
json.dump({"volumes": vols}, sys.stdout)
