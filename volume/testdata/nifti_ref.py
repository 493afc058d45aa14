"""Reference values for Brightfold's NIfTI tests, computed with Debian's
python3-nibabel 5.0 (and numpy/scipy). Run with /usr/bin/python3.

  nifti_ref.py info FILE [INDEX]      dims, affine, axis codes, descrip, codes,
                                      and min/max/sum of frame INDEX (default 0)
  nifti_ref.py dump FILE OUT [INDEX]  writes frame INDEX as little-endian float32,
                                      first index fastest (Fortran order)
  nifti_ref.py canonical FILE OUT     as_closest_canonical: writes its data as in
                                      dump and prints its dims, affine, axis codes
  nifti_ref.py resample IN.f32 NX NY NZ MAP.json ORDER CVAL OUT
                                      scipy.ndimage.map_coordinates of the float32
                                      volume IN (first index fastest) at the voxel
                                      coordinates A·(i,j,k,1) for every output voxel
                                      of dims in MAP.json {"affine", "dims"}
Prints one JSON object on standard output.
"""
import json
import sys

import numpy as np
import nibabel as nib


def frame(img, index):
    """Frame `index` of img as float64, with dims beyond the third flattened
    in file order (the same rule as Brightfold's loader)."""
    shape = img.shape
    data = np.asanyarray(img.dataobj)
    if data.dtype.kind not in "biuf":
        raise SystemExit("non-scalar dtype %s" % data.dtype)
    data = data.astype(np.float64)
    if len(shape) > 3:
        data = data.reshape(shape[:3] + (-1,), order="F")[..., index]
    while data.ndim < 3:
        data = data[..., np.newaxis]
    return data


def header_text(hdr, name):
    try:
        v = hdr[name]
    except (KeyError, ValueError):
        return None
    return v.item().decode("latin-1").rstrip("\x00") if hasattr(v, "item") else str(v)


def code(hdr, name):
    try:
        return int(hdr[name])
    except (KeyError, ValueError):
        return None


def info(path, index=0):
    img = nib.load(path)
    hdr = img.header
    data = frame(img, index)
    return {
        "class": type(img).__name__,
        "shape": [int(s) for s in img.shape],
        "affine": img.affine.tolist(),
        "axcodes": "".join(nib.aff2axcodes(img.affine)),
        "min": float(np.nanmin(data)),
        "max": float(np.nanmax(data)),
        "sum": float(np.nansum(data)),
        "descrip": header_text(hdr, "descrip"),
        "sform_code": code(hdr, "sform_code"),
        "qform_code": code(hdr, "qform_code"),
        "qform": hdr.get_qform().tolist() if hasattr(hdr, "get_qform") else None,
        "dtype": str(hdr.get_data_dtype()),
    }


def dump(data, out):
    np.asarray(data, dtype="<f4").ravel(order="F").tofile(out)


def main(argv):
    cmd = argv[1]
    if cmd == "info":
        print(json.dumps(info(argv[2], int(argv[3]) if len(argv) > 3 else 0)))
    elif cmd == "dump":
        index = int(argv[4]) if len(argv) > 4 else 0
        data = frame(nib.load(argv[2]), index)
        dump(data, argv[3])
        print(json.dumps({"shape": list(data.shape)}))
    elif cmd == "canonical":
        img = nib.as_closest_canonical(nib.load(argv[2]))
        dump(frame(img, 0), argv[3])
        print(json.dumps({"shape": [int(s) for s in img.shape], "affine": img.affine.tolist(),
                          "axcodes": "".join(nib.aff2axcodes(img.affine))}))
    elif cmd == "resample":
        from scipy import ndimage
        dims = [int(a) for a in argv[3:6]]
        src = np.fromfile(argv[2], dtype="<f4").reshape(dims, order="F").astype(np.float64)
        spec = json.load(open(argv[6]))
        a = np.array(spec["affine"], dtype=np.float64)
        out_dims = spec["dims"]
        ii, jj, kk = np.meshgrid(*[np.arange(n, dtype=np.float64) for n in out_dims], indexing="ij")
        pts = np.stack([ii.ravel(order="F"), jj.ravel(order="F"), kk.ravel(order="F"),
                        np.ones(ii.size)])
        coords = (a @ pts)[:3]
        vals = ndimage.map_coordinates(src, coords, order=int(argv[7]), mode="constant",
                                       cval=float(argv[8]), prefilter=False)
        np.asarray(vals, dtype="<f4").tofile(argv[9])
        print(json.dumps({"n": int(vals.size)}))
    else:
        raise SystemExit("unknown command " + cmd)


if __name__ == "__main__":
    main(sys.argv)
