"""Resamples a real MR scan onto the demo model's 1 mm grid.

Usage: resample_anatomical.py IN.nii OUT.nii SCALE

Loads IN with nibabel, and writes OUT: 160 x 192 x 160 voxels of 1 mm, axes
along RAS, centred on IN's centre, sampled with scipy.ndimage.map_coordinates
(order 1, trilinear; 0 outside IN). SCALE > 1 enlarges the head about its
centre (world point p of OUT samples IN at c + (p - c) / SCALE), so that its
volume can reach the training range while its contrast, texture and noise
stay those of the real scan. Prints JSON with the grids.
"""
import json
import sys

import nibabel as nib
import numpy as np
from scipy import ndimage

DIMS = (160, 192, 160)


def main():
    src, dst, scale = sys.argv[1], sys.argv[2], float(sys.argv[3])
    img = nib.load(src)
    data = np.asarray(img.dataobj, dtype=np.float64)
    while data.ndim > 3:
        data = data[..., 0]
    aff = img.affine
    centre = aff @ np.append((np.array(data.shape) - 1) / 2.0, 1.0)
    out_aff = np.eye(4)
    out_aff[:3, 3] = centre[:3] - (np.array(DIMS) - 1) / 2.0
    ijk = np.indices(DIMS, dtype=np.float64).reshape(3, -1)
    world = out_aff[:3, :3] @ ijk + out_aff[:3, 3:4]
    world = centre[:3, None] + (world - centre[:3, None]) / scale
    vox = np.linalg.inv(aff) @ np.vstack([world, np.ones((1, world.shape[1]))])
    out = ndimage.map_coordinates(data, vox[:3], order=1, cval=0.0).reshape(DIMS)
    o = nib.Nifti1Image(out.astype(np.float32), out_aff)
    o.set_sform(out_aff, code=1)
    o.set_qform(out_aff, code=1)
    nib.save(o, dst)
    print(json.dumps({"input_dims": list(data.shape), "input_zooms": [float(z) for z in img.header.get_zooms()[:3]],
                      "dims": list(DIMS), "scale": scale, "nibabel": nib.__version__}))


if __name__ == "__main__":
    main()
