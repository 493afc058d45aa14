"""Reference for viewer's window/level, computed with pydicom.

Reads a JSON file {"windows": [[center, width, function], ...], "x": [...]}
and prints, for each window, pydicom's apply_windowing (DICOM PS3.3
C.11.2.1.2.1 LINEAR and C.11.2.1.3.2 LINEAR_EXACT) of the x values onto the
8-bit unsigned output range 0..255.
"""
import json
import sys

import numpy as np
from pydicom.dataset import Dataset
from pydicom.pixel_data_handlers.util import apply_windowing

with open(sys.argv[1]) as f:
    spec = json.load(f)
x = np.array(spec["x"], dtype=np.float64)
out = []
for center, width, function in spec["windows"]:
    ds = Dataset()
    ds.PhotometricInterpretation = "MONOCHROME2"
    ds.BitsStored = 8          # unsigned 8-bit: ymin 0, ymax 255
    ds.PixelRepresentation = 0
    ds.WindowCenter = center
    ds.WindowWidth = width
    ds.VOILUTFunction = function
    out.append(apply_windowing(x.copy(), ds).tolist())
json.dump(out, sys.stdout)
