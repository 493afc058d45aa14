"""Reference for viewer's orientation handling, computed with nibabel.

Loads a NIfTI file, prints its stored voxels (first index fastest) and affine,
and the three radiological planes through the centre of nibabel's closest
canonical (RAS) reorientation, built by index flips written out here:
axial img[v, u] = ras[n0-1-u, n1-1-v, k], coronal img[v, u] = ras[n0-1-u, j,
n2-1-v], sagittal img[v, u] = ras[i, n1-1-u, n2-1-v].
"""
import json
import sys

import nibabel as nib
import numpy as np

img = nib.load(sys.argv[1])
data = np.asanyarray(img.dataobj).astype(np.float64)
ras = nib.as_closest_canonical(img)
rd = np.asanyarray(ras.dataobj).astype(np.float64)
n0, n1, n2 = rd.shape[:3]
i, j, k = (n0 - 1) // 2, (n1 - 1) // 2, (n2 - 1) // 2
centre = ras.affine @ np.array([i, j, k, 1.0])
planes = {
    "axial": rd[::-1, ::-1, k].T,
    "coronal": rd[::-1, j, ::-1].T,
    "sagittal": rd[i, ::-1, ::-1].T,
}
json.dump({
    "orientation": "".join(nib.aff2axcodes(img.affine)),
    "dims": list(data.shape[:3]),
    "data": data.ravel(order="F").tolist(),
    "affine": img.affine.tolist(),
    "centre": centre[:3].tolist(),
    "planes": {name: {"height": p.shape[0], "width": p.shape[1], "values": p.ravel().tolist()}
               for name, p in planes.items()},
}, sys.stdout)
