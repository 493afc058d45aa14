"""Reference values for Brightfold's NIfTI tests, computed with Debian's
python3-nibabel 5.0 (and numpy/scipy). Run with /usr/bin/python3.

  nifti_ref.py info FILE [INDEX]      dims, affine, axis codes, descrip, codes,
                                      and min/max/sum of frame INDEX (default 0)
  nifti_ref.py infos FILE[@INDEX]...  a JSON list of info, one per file
  nifti_ref.py make DIR               writes NIfTI-1/2 and Analyze files with nibabel
                                      (every scalar dtype, both byte orders, scaling,
                                      sform/qform/neither, pairs, gzip, 2D, 5D) and
                                      prints their names
  nifti_ref.py dump FILE OUT [INDEX]  writes frame INDEX as little-endian float32,
                                      first index fastest (Fortran order)
  nifti_ref.py canonical FILE OUT     as_closest_canonical: writes its data as in
                                      dump and prints its dims, affine, axis codes
  nifti_ref.py axcodes AFFINES.json  aff2axcodes of each 4x4 affine in the list
  nifti_ref.py resample IN.f32 NX NY NZ MAP.json ORDER CVAL OUT
                                      scipy.ndimage.map_coordinates of the float32
                                      volume IN (first index fastest) at the voxel
                                      coordinates A·(i,j,k,1) for every output voxel
                                      of dims in MAP.json {"affine", "dims"}
  nifti_ref.py batch JOBS.json        runs a JSON list of commands (each a list of
                                      the arguments above) in one process and
                                      prints the list of their results
Prints the result as JSON on standard output.
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


def rotation(axis, angle):
    axis = np.asarray(axis, dtype=np.float64)
    x, y, z = axis / np.linalg.norm(axis)
    c, s, C = np.cos(angle), np.sin(angle), 1 - np.cos(angle)
    return np.array([[x * x * C + c, x * y * C - z * s, x * z * C + y * s],
                     [y * x * C + z * s, y * y * C + c, y * z * C - x * s],
                     [z * x * C - y * s, z * y * C + x * s, z * z * C + c]])


def oblique(zooms, offset, flip=False):
    a = np.eye(4)
    a[:3, :3] = rotation([0.3, -0.5, 1.0], 0.6) @ np.diag(zooms)
    if flip:
        a[:3, 0] = -a[:3, 0]
    a[:3, 3] = offset
    return a


def make(outdir):
    """Writes test images through nibabel's own writers."""
    import os
    rng = np.random.default_rng(20261201)
    names = []

    def save(img, name):
        path = os.path.join(outdir, name)
        img.to_filename(path)
        names.append(path)

    shape = (6, 5, 4)
    base = rng.normal(size=shape)
    aff = oblique([1.1, 0.9, 2.5], [-30.0, 12.5, 8.25], flip=True)
    for dt in ["u1", "i1", "i2", "u2", "i4", "u4", "f4", "f8", "i8", "u8"]:
        for end in "<>":
            if dt[0] == "f":
                data = base * 1234.5
                data[0, 0, 0] = np.nan
            else:
                # A range wider than int8/uint8 makes nibabel choose scl_slope/inter.
                data = (base - base.min()) * 300.25 + 3.0
            hdr = nib.Nifti1Header(endianness=end)
            img = nib.Nifti1Image(data, aff, header=hdr)
            img.set_data_dtype(np.dtype(end + dt))
            save(img, "dt_%s_%s.nii" % (dt, "le" if end == "<" else "be"))
    # qform only (sform_code 0), oblique and left-handed.
    hdr = nib.Nifti1Header()
    hdr.set_data_shape(shape)
    hdr.set_data_dtype(np.float32)
    hdr.set_qform(aff, code=1)
    hdr.set_sform(aff, code=0)
    save(nib.Nifti1Image(base.astype(np.float32), None, header=hdr), "qform_only.nii")
    # Neither code: nibabel's base affine from pixdim.
    hdr = nib.Nifti1Header()
    hdr.set_data_shape(shape)
    hdr.set_data_dtype(np.int16)
    hdr.set_zooms((1.5, 2.0, 3.0))
    hdr.set_qform(None, code=0)
    hdr.set_sform(None, code=0)
    save(nib.Nifti1Image((base * 100).astype(np.int16), None, header=hdr), "no_xform.nii")
    # Right-handed oblique sform and qform, NIfTI-2, single and pair, gzip.
    aff2 = oblique([0.8, 0.8, 1.2], [90.0, -126.0, -72.0])
    d4 = rng.normal(size=(5, 4, 3, 3)) * 50
    save(nib.Nifti2Image(d4.astype(np.float32), aff2), "n2_4d.nii.gz")
    save(nib.Nifti2Pair((base * 100).astype(np.int16), aff2), "n2_pair.hdr")
    save(nib.Nifti1Pair((base * 100).astype(np.int16), aff2), "n1_pair.img.gz")
    # 2D and 5D.
    save(nib.Nifti1Image((base[:, :, 0] * 10).astype(np.int16), aff2), "two_d.nii")
    d5 = rng.normal(size=(4, 3, 2, 2, 3)).astype(np.float32)
    save(nib.Nifti1Image(d5, aff2), "five_d.nii.gz")
    # Analyze (SPM2 flavour) with origin and slope, and plain with no origin.
    img = nib.Spm2AnalyzeImage((base * 1000).astype(np.float64), np.diag([2.0, 2.5, 3.0, 1.0]))
    img.set_data_dtype(np.int16)
    hdr = img.header
    hdr["origin"][:3] = [3, 2, 2]
    save(img, "spm_origin.hdr")
    # nibabel also writes an SPM .mat sidecar, which it would prefer to the
    # header; Brightfold reads headers only, so compare on the header alone.
    os.remove(os.path.join(outdir, "spm_origin.mat"))
    img = nib.AnalyzeImage((base * 10).astype(np.uint8), np.diag([-1.0, 1.0, 1.0, 1.0]))
    save(img, "analyze_plain.img")
    return names


def dump(data, out):
    np.asarray(data, dtype="<f4").ravel(order="F").tofile(out)


def run(args):
    """Runs one command (args without the script name) and returns its result."""
    cmd = args[0]
    if cmd == "infos":
        out = []
        for arg in args[1:]:
            path, _, index = arg.rpartition("@")
            out.append(info(path, int(index or 0)))
        return out
    if cmd == "make":
        return make(args[1])
    if cmd == "info":
        return info(args[1], int(args[2]) if len(args) > 2 else 0)
    if cmd == "dump":
        index = int(args[3]) if len(args) > 3 else 0
        data = frame(nib.load(args[1]), index)
        dump(data, args[2])
        return {"shape": list(data.shape)}
    if cmd == "canonical":
        img = nib.as_closest_canonical(nib.load(args[1]))
        dump(frame(img, 0), args[2])
        return {"shape": [int(s) for s in img.shape], "affine": img.affine.tolist(),
                "axcodes": "".join(nib.aff2axcodes(img.affine))}
    if cmd == "axcodes":
        affs = json.load(open(args[1]))
        return ["".join(nib.aff2axcodes(np.array(a))) for a in affs]
    if cmd == "resample":
        return resample(args[1:])
    if cmd == "batch":
        return [run(job) for job in json.load(open(args[1]))]
    raise SystemExit("unknown command " + cmd)


def resample(args):
    from scipy import ndimage
    dims = [int(a) for a in args[1:4]]
    src = np.fromfile(args[0], dtype="<f4").reshape(dims, order="F").astype(np.float64)
    spec = json.load(open(args[4]))
    a = np.array(spec["affine"], dtype=np.float64)
    out_dims = spec["dims"]
    ii, jj, kk = np.meshgrid(*[np.arange(n, dtype=np.float64) for n in out_dims], indexing="ij")
    pts = np.stack([ii.ravel(order="F"), jj.ravel(order="F"), kk.ravel(order="F"),
                    np.ones(ii.size)])
    coords = (a @ pts)[:3]
    vals = ndimage.map_coordinates(src, coords, order=int(args[5]), mode="constant",
                                   cval=float(args[6]), prefilter=False)
    np.asarray(vals, dtype="<f4").tofile(args[7])
    return {"n": int(vals.size)}


if __name__ == "__main__":
    print(json.dumps(run(sys.argv[1:])))
