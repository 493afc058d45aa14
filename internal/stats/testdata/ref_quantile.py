"""Reference quantiles for internal/stats tests, computed with Debian's
python3-numpy (1.24) at its default method ("linear", Hyndman & Fan 1996
definition 7).

Reads a JSON job from the file named by the first argument:
  [{"x": [...], "levels": [...], "percentiles": [...]}, ...]
Writes, per case, numpy.quantile(x, levels) and numpy.percentile(x,
percentiles), both with numpy's default method.
"""
import json
import sys

import numpy as np

with open(sys.argv[1]) as f:
    job = json.load(f)
out = [{"quantiles": np.quantile(np.array(c["x"]), c["levels"]).tolist(),
        "percentiles": np.percentile(np.array(c["x"]), c["percentiles"]).tolist()} for c in job]
json.dump(out, sys.stdout)
