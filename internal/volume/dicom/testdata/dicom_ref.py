#!/usr/bin/python3
"""Reference values for the DICOM tests, from Debian's python3-pydicom (2.3)
and python3-nibabel (5.0, nibabel.nicom). Run with /usr/bin/python3.

  dicom_ref.py pixels DIR FILE...  pixel values after the modality LUT (rescale),
                                written to DIR as little-endian float64 files
  dicom_ref.py series FILE...   slices sorted by nibabel's slice indicator,
                                the first slice's nibabel affine, the stacked data
  dicom_ref.py strict FILE...   read with pydicom's validation set to raise,
                                and report the header fields we write (the
                                SOP class named by pydicom's UID dictionary,
                                every keyword present and those left empty)
  dicom_ref.py multiframe FILE  nibabel's MultiframeWrapper affine and data

Prints JSON on standard output.
"""
import json
import os
import sys
import warnings

import numpy as np
import pydicom
from pydicom.pixel_data_handlers.util import apply_modality_lut


def pixels(outdir, paths):
    out = []
    for n, p in enumerate(paths):
        rec = {"file": p}
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                ds = pydicom.dcmread(p)
                arr = ds.pixel_array
                # PS3.3 C.11.1.1.2: Rescale Slope and Intercept, as pydicom applies them.
                val = apply_modality_lut(arr, ds).astype(np.float64)
            rec["ok"] = True
            rec["shape"] = list(val.shape)
            rec["values"] = os.path.join(outdir, "ref%03d.f64" % n)
            val.astype("<f8").ravel().tofile(rec["values"])
        except Exception as e:  # the test decides whether an error is expected
            rec["ok"] = False
            rec["error"] = "%s: %s" % (type(e).__name__, e)
        out.append(rec)
    return out


def series(paths):
    from nibabel.nicom import dicomwrappers

    ws = []
    for p in paths:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ws.append((dicomwrappers.wrapper_from_file(p), p))
    ws.sort(key=lambda w: w[0].slice_indicator)
    first = ws[0][0]
    data = np.stack([apply_modality_lut(w.dcm_data.pixel_array, w.dcm_data) for w, _ in ws], axis=-1)
    return {
        "files": [p for _, p in ws],
        "formula_lps": formula_affine([w.dcm_data for w, _ in ws]),
        "slice_indicator": [float(w.slice_indicator) for w, _ in ws],
        # nibabel's affine: array index (row, column, slice) to DICOM LPS mm.
        "affine_lps_rcs": first.affine.tolist(),
        "shape_rcs": list(data.shape),
        "sum": float(data.astype(np.float64).sum()),
    }


def formula_affine(dss):
    """DICOM PS3.3 C.7.6.2.1.1: P = S + X*dc*i + Y*dr*j for voxel (column i,
    row j), with X, Y the row and column direction cosines of
    ImageOrientationPatient, dc = PixelSpacing[1], dr = PixelSpacing[0] and
    S = ImagePositionPatient; the slice axis is the step between the first
    and last positions after sorting them along X cross Y. Computed here from
    pydicom's values, independently of the Go reader."""
    iop = np.array([float(x) for x in dss[0].ImageOrientationPatient])
    x, y = iop[:3], iop[3:]
    n = np.cross(x, y)
    pos = sorted((np.array([float(v) for v in ds.ImagePositionPatient]) for ds in dss),
                 key=lambda p: float(np.dot(p, n)))
    dr, dc = (float(v) for v in dss[0].PixelSpacing)
    aff = np.eye(4)
    aff[:3, 0] = x * dc
    aff[:3, 1] = y * dr
    aff[:3, 2] = (pos[-1] - pos[0]) / (len(pos) - 1) if len(pos) > 1 else n
    aff[:3, 3] = pos[0]
    return aff.tolist()


def strict(paths):
    from pydicom import config

    config.settings.reading_validation_mode = config.RAISE
    out = []
    for p in paths:
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            ds = pydicom.dcmread(p)
            ds.decode()
            arr = apply_modality_lut(ds.pixel_array, ds).astype(np.float64)
        out.append({
            "file": p,
            "transfer_syntax": str(ds.file_meta.TransferSyntaxUID),
            "sop_class": str(ds.SOPClassUID),
            "media_sop_class": str(ds.file_meta.MediaStorageSOPClassUID),
            "sop_instance": str(ds.SOPInstanceUID),
            "media_sop_instance": str(ds.file_meta.MediaStorageSOPInstanceUID),
            "series_uid": str(ds.SeriesInstanceUID),
            "study_uid": str(ds.StudyInstanceUID),
            "patient_name": str(ds.PatientName),
            "patient_id": str(ds.PatientID),
            "modality": str(ds.Modality),
            "manufacturer": str(ds.Manufacturer),
            "institution": str(ds.InstitutionName),
            "series_description": str(ds.SeriesDescription),
            "field_strength": optional_float(ds, "MagneticFieldStrength"),
            "image_comments": str(ds.ImageComments),
            "iop": [float(x) for x in ds.ImageOrientationPatient],
            "ipp": [float(x) for x in ds.ImagePositionPatient],
            "pixel_spacing": [float(x) for x in ds.PixelSpacing],
            "slice_thickness": float(ds.SliceThickness),
            "spacing_between_slices": optional_float(ds, "SpacingBetweenSlices"),
            "values": arr.ravel().tolist(),
            "shape": list(arr.shape),
            # pydicom's UID dictionary (PS3.6 Annex A) names the SOP class.
            "sop_class_name": ds.SOPClassUID.name,
            "image_type": [str(x) for x in ds.ImageType],
            "rescale_type": str(ds.get("RescaleType", "")),
            "kvp": optional_float(ds, "KVP"),
            "samples_per_pixel": int(ds.SamplesPerPixel),
            "photometric": str(ds.PhotometricInterpretation),
            "bits_allocated": int(ds.BitsAllocated),
            "bits_stored": int(ds.BitsStored),
            "high_bit": int(ds.HighBit),
            # Every top-level keyword present, and those present with no value.
            "keywords": sorted(e.keyword for e in ds if e.keyword),
            "empty": sorted(e.keyword for e in ds if e.keyword and e.value in (None, "", b"")),
        })
    return out


def optional_float(ds, keyword):
    v = ds.get(keyword)
    return None if v is None or v == "" else float(v)


def multiframe(path):
    from nibabel.nicom import dicomwrappers

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        w = dicomwrappers.wrapper_from_file(path)
        data = w.get_data()
    return {
        "class": type(w).__name__,
        "affine_lps_rcs": w.affine.tolist(),
        "shape_rcs": list(data.shape),
        "sum": float(np.asarray(data, dtype=np.float64).sum()),
    }


def main():
    mode, args = sys.argv[1], sys.argv[2:]
    if mode == "pixels":
        res = pixels(args[0], args[1:])
    elif mode == "series":
        res = series(args)
    elif mode == "strict":
        res = strict(args)
    elif mode == "multiframe":
        res = multiframe(args[0])
    else:
        raise SystemExit("unknown mode " + mode)
    json.dump(res, sys.stdout)


if __name__ == "__main__":
    main()
