"""Reads a Brightfold demo cohort with reference libraries (Python's csv,
Debian's python3-nibabel and python3-pydicom) and prints what they see as JSON:
per case the NIfTI shape, affine, descrip, value range and mask counts, and
the first DICOM file's identifiers and geometry tags."""
import csv
import json
import os
import sys

import nibabel as nib
import numpy as np
import pydicom

root = sys.argv[1]
out = {"columns": None, "cases": []}
with open(os.path.join(root, "cohort.csv"), newline="") as f:
    rows = list(csv.reader(f))
out["columns"] = rows[0]
for rec in rows[1:]:
    row = dict(zip(rows[0], rec))
    img = nib.load(os.path.join(root, row["nifti_path"]))
    data = np.asarray(img.dataobj)
    mask = np.asarray(nib.load(os.path.join(root, row["mask_path"])).dataobj)
    case = {
        "row": row,
        "shape": list(img.shape),
        "affine": img.affine.tolist(),
        "zooms": [float(z) for z in img.header.get_zooms()],
        "descrip": img.header["descrip"].item().decode("ascii", "replace"),
        "datatype": str(img.get_data_dtype()),
        "min": float(data.min()),
        "max": float(data.max()),
        "sum": float(data.astype(np.float64).sum()),
        "mask_dtype": str(mask.dtype),
        "mask_nonzero": int(np.count_nonzero(mask)),
        "mask_max": int(mask.max()),
    }
    if row["dicom_path"]:
        d = os.path.join(root, row["dicom_path"])
        names = sorted(os.listdir(d))
        ds = pydicom.dcmread(os.path.join(d, names[0]))
        case["dicom"] = {
            "files": len(names),
            "PatientName": str(ds.PatientName),
            "PatientID": str(ds.PatientID),
            "InstitutionName": str(ds.InstitutionName),
            "Modality": str(ds.Modality),
            "SliceThickness": float(ds.SliceThickness),
            "PixelSpacing": [float(x) for x in ds.PixelSpacing],
            "Rows": int(ds.Rows),
            "Columns": int(ds.Columns),
        }
    out["cases"].append(case)
json.dump(out, sys.stdout)
