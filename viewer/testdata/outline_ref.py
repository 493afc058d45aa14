"""Reference for viewer's template outline: the edge of one axial slice of a
mask, as scipy.ndimage defines it (the mask less its binary erosion with the
4-connected cross, voxels beyond the slice counting as outside).

Usage: outline_ref.py MASK.nii K  ->  JSON {"edges": [[i, j], ...]}
"""
import json
import sys

import nibabel as nib
import numpy as np
from scipy import ndimage

img = nib.as_closest_canonical(nib.load(sys.argv[1]))
k = int(sys.argv[2])
m = np.asarray(img.dataobj)[:, :, k] > 0
cross = ndimage.generate_binary_structure(2, 1)
edge = m & ~ndimage.binary_erosion(m, structure=cross, border_value=0)
print(json.dumps({"edges": [[int(i), int(j)] for i, j in zip(*np.nonzero(edge))]}))
