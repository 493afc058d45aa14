#!/usr/bin/python3
"""Times loading a DICOM series with Debian's python3-pydicom and numpy, the
way a script would: read every file, take pixel_array, apply RescaleSlope and
RescaleIntercept as float32, sort the slices along the slice normal and stack
them. Run with /usr/bin/python3.

  dicom_bench.py DIR [REPEATS]

Prints JSON: best and median seconds of REPEATS loads, the volume shape, and
this process's peak resident memory in KiB (VmHWM of /proc/self/status: unlike
ru_maxrss it does not inherit the parent's high-water mark across exec).
"""
import glob
import json
import os
import statistics
import sys
import time

import numpy as np
import pydicom


def load(folder):
    slices = []
    for path in sorted(glob.glob(os.path.join(folder, "**", "*"), recursive=True)):
        if not os.path.isfile(path):
            continue
        ds = pydicom.dcmread(path)
        arr = ds.pixel_array.astype(np.float32)
        slope = float(getattr(ds, "RescaleSlope", 1))
        inter = float(getattr(ds, "RescaleIntercept", 0))
        iop = np.array([float(v) for v in ds.ImageOrientationPatient])
        normal = np.cross(iop[:3], iop[3:])
        pos = float(np.dot([float(v) for v in ds.ImagePositionPatient], normal))
        slices.append((pos, arr * np.float32(slope) + np.float32(inter)))
    slices.sort(key=lambda s: s[0])
    return np.stack([s[1] for s in slices], axis=-1)


def peak_rss_kib():
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmHWM:"):
                return int(line.split()[1])
    return 0


def main():
    folder = sys.argv[1]
    repeats = int(sys.argv[2]) if len(sys.argv) > 2 else 3
    times = []
    shape = None
    for _ in range(repeats):
        t0 = time.perf_counter()
        vol = load(folder)
        times.append(time.perf_counter() - t0)
        shape = list(vol.shape)
        del vol
    json.dump({
        "best_s": min(times),
        "median_s": statistics.median(times),
        "shape": shape,
        "peak_rss_kib": peak_rss_kib(),
    }, sys.stdout)


if __name__ == "__main__":
    main()
