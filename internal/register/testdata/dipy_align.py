"""Reference registrations with dipy 1.6 (python3-dipy) for internal/register tests.

Usage: dipy_align.py PAIRS.json
PAIRS.json is a list of {"template": path, "scan": path, "mask": optional
path of a template-grid mask, passed as static_mask, "dof": 6 to stop after
the rigid stage}. For each pair it runs
dipy.align.imaffine.AffineRegistration with Mattes mutual information (32 bins)
over a 3-level pyramid (level_iters [1000, 100, 10], sigmas [3, 1, 0],
factors [4, 2, 1]) from the centres of mass, then translation -> rigid ->
affine, each stage starting from the previous one (dipy's documented
recipe). It prints one JSON list: per pair the 4x4 matrix (dipy's
convention: static = template world -> moving = scan world, the same as
internal/register's), the wall time of the registration in seconds
(loading excluded) and the process's peak resident memory (MiB). With "single_thread"
set, numpy/BLAS are limited to one thread by the caller's environment.
"""
import json
import resource
import sys
import time

import nibabel as nib
import numpy as np
from dipy.align.imaffine import (AffineRegistration, MutualInformationMetric,
                                 transform_centers_of_mass)
from dipy.align.transforms import (AffineTransform3D, RigidTransform3D,
                                   TranslationTransform3D)


def align(template, scan, mask=None, dof=12):
    s = nib.load(template)
    static_mask = None
    if mask:
        static_mask = (np.asanyarray(nib.load(mask).dataobj) != 0).astype(np.int32)
    m = nib.load(scan)
    static = np.nan_to_num(np.asanyarray(s.dataobj, dtype=np.float64))
    moving = np.nan_to_num(np.asanyarray(m.dataobj, dtype=np.float64))
    t0 = time.perf_counter()
    com = transform_centers_of_mass(static, s.affine, moving, m.affine)
    reg = AffineRegistration(metric=MutualInformationMetric(32, None),
                             level_iters=[1000, 100, 10], sigmas=[3.0, 1.0, 0.0],
                             factors=[4, 2, 1], verbosity=0)
    start = com.affine
    stages = [TranslationTransform3D(), RigidTransform3D()]
    if dof == 12:
        stages.append(AffineTransform3D())
    for tf in stages:
        mapping = reg.optimize(static, moving, tf, None, s.affine, m.affine,
                               starting_affine=start, static_mask=static_mask)
        start = mapping.affine
    return start, time.perf_counter() - t0


def main():
    pairs = json.load(open(sys.argv[1]))
    out = []
    for p in pairs:
        a, secs = align(p["template"], p["scan"], p.get("mask"), int(p.get("dof", 12)))
        out.append({"matrix": a.tolist(), "seconds": secs})
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    for o in out:
        o["peak_mib"] = peak
    json.dump(out, sys.stdout)


if __name__ == "__main__":
    main()
