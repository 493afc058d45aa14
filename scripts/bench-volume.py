#!/usr/bin/env python3
"""Times nibabel's NIfTI loading on the file Brightfold's BenchmarkLoadNIfTIGz
wrote and prints the ratio of Brightfold's time to nibabel's.

usage: /usr/bin/python3 scripts/bench-volume.py FILE.nii.gz GO_BENCH_LINE

GO_BENCH_LINE is the "BenchmarkLoadNIfTIGz-N  n  T ns/op  P peak-RSS-MB ..."
line of `go test -bench` from the same run. nibabel is timed as
nib.load(FILE).get_fdata() (a fresh image each time, since get_fdata caches),
median of 5 runs after one warm-up, wall and CPU time; peak memory is this process's ru_maxrss
minus its size after the imports.
"""
import resource
import statistics
import sys
import time

import nibabel as nib


def rss_mb():
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def main(path, go_line):
    base = rss_mb()
    nib.load(path).get_fdata()  # warm the page cache
    times, cpu = [], []
    for _ in range(5):
        t0, c0 = time.perf_counter(), time.process_time()
        data = nib.load(path).get_fdata()
        times.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
        del data
    nib_s, nib_cpu = statistics.median(times), statistics.median(cpu)
    fields = go_line.split()
    go_s = float(fields[fields.index("ns/op") - 1]) / 1e9
    go_cpu = float(fields[fields.index("cpu-s/op") - 1]) if "cpu-s/op" in fields else float("nan")
    go_peak = float(fields[fields.index("peak-RSS-MB") - 1]) if "peak-RSS-MB" in fields else float("nan")
    print("nibabel get_fdata: %.3f s wall, %.3f s CPU (medians of 5); peak RSS %.0f MB above %.0f MB after imports"
          % (nib_s, nib_cpu, rss_mb() - base, base))
    print("brightfold Load:   %.3f s wall, %.3f s CPU (means); peak RSS %.0f MB (whole benchmark process)"
          % (go_s, go_cpu, go_peak))
    print("ratio brightfold/nibabel: %.2f wall (goal <= 1.0), %.2f CPU" % (go_s / nib_s, go_cpu / nib_cpu))


if __name__ == "__main__":
    main(sys.argv[1], sys.argv[2])
