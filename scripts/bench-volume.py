#!/usr/bin/env python3
"""Times nibabel's NIfTI loading on the file Brightfold's BenchmarkLoadNIfTIGz
wrote and prints the ratio of Brightfold's time to nibabel's.

usage: /usr/bin/python3 scripts/bench-volume.py FILE.nii.gz GO_LINE [GO_PEAK_LINE]

GO_LINE is the "BenchmarkLoadNIfTIGz-N  n  T ns/op  C cpu-s/op  P peak-RSS-MB
..." line of `go test -bench` from the same run; GO_PEAK_LINE, when given, is
the line of a run with -benchtime 1x, whose peak-RSS-MB is that of a process
that loaded the file once. nibabel is timed as
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


def metric(line, unit):
    fields = line.split()
    return float(fields[fields.index(unit) - 1]) if unit in fields else float("nan")


def main(path, go_line, peak_line=None):
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
    go_s = metric(go_line, "ns/op") / 1e9
    go_cpu = metric(go_line, "cpu-s/op")
    go_peak = metric(peak_line or go_line, "peak-RSS-MB")
    print("nibabel get_fdata: %.3f s wall, %.3f s CPU (medians of 5); peak RSS %.0f MB (%.0f MB after imports)"
          % (nib_s, nib_cpu, rss_mb(), base))
    print("brightfold Load:   %.3f s wall, %.3f s CPU (means); peak RSS %.0f MB (%s)"
          % (go_s, go_cpu, go_peak, "whole process, one load" if peak_line else "whole benchmark process"))
    print("ratio brightfold/nibabel: %.2f wall (goal <= 1.0), %.2f CPU" % (go_s / nib_s, go_cpu / nib_cpu))


if __name__ == "__main__":
    main(*sys.argv[1:4])
