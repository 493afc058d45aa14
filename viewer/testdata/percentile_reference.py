"""Reference for viewer's percentiles and Otsu threshold.

Reads a JSON file {"values": [...], "p": [...]} and prints numpy.percentile
of the values at p (numpy's default "linear" method, Hyndman & Fan type 7).
"""
import json
import sys

import numpy as np

with open(sys.argv[1]) as f:
    spec = json.load(f)
v = np.array(spec["values"], dtype=np.float32).astype(np.float64)
json.dump(np.percentile(v, spec["p"]).tolist(), sys.stdout)
