"""Reference for TestScanHeadThreshold: the head-mask rule (a fraction of the
way from the low to the high percentile, numpy.percentile's default linear
method) applied to the raw voxels read as float32 from the file named by the
first argument; the percentiles and fraction follow.
Writes JSON {"threshold": ...}.
"""
import json
import sys

import numpy as np

data = np.fromfile(sys.argv[1], dtype="<f4").astype(float)
lo_p, hi_p, frac = (float(x) for x in sys.argv[2:5])
lo, hi = np.percentile(data, [lo_p, hi_p])
json.dump({"threshold": float(lo + frac * (hi - lo))}, sys.stdout)
