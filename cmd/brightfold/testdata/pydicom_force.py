"""Reference for the hostile-input suite: how pydicom reads files without the
DICOM PS3.10 preamble. Prints, for each path, whether pydicom reads it only
with force=True and whether the data set then holds PixelData (7FE0,0010)."""
import json
import sys

import pydicom
from pydicom.errors import InvalidDicomError

out = {}
for path in sys.argv[1:]:
    try:
        pydicom.dcmread(path)
        plain = True
    except InvalidDicomError:
        plain = False
    ds = pydicom.dcmread(path, force=True)
    out[path] = {"plain": plain, "pixels": "PixelData" in ds}
print(json.dumps(out))
