"""Reference for the viewer's "model input" view: reads the model input
written as NIfTI with nibabel and, for a RAS point in millimetres, returns the
nearest voxel (by the inverse of the header's affine, NIfTI-1 sform), its
centre in RAS mm and its value. Usage: model_input_voxel.py FILE X Y Z"""
import json
import sys

import nibabel as nib
import numpy as np

img = nib.load(sys.argv[1])
world = np.array([float(a) for a in sys.argv[2:5]] + [1.0])
ijk = np.rint(np.linalg.inv(img.affine) @ world)[:3].astype(int)
data = np.asanyarray(img.dataobj)
centre = img.affine @ np.append(ijk, 1.0)
print(json.dumps({"voxel": ijk.tolist(), "world": centre[:3].tolist(), "value": float(data[tuple(ijk)])}))
