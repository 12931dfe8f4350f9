"""Reference values for smooth.gaussian from scipy.ndimage.gaussian_filter1d.

Library: scipy 1.14.1 (numpy 2.1.3) from PyPI.
Run from the repository root:  .venv/bin/python tests/refgen/gaussian_scipy.py
Writes tests/data/gaussian_scipy.json. scipy truncates the kernel at
int(4 sigma + 0.5) points and normalises it; the sigmas used here have 4 sigma with a
fractional part below 0.5, so the kernel reach equals retort's |dx| <= 4 sigma. Only
points at least that reach away from the ends are compared (edge handling differs by
design: scipy reflects, retort renormalises).
"""
import json
import numpy as np
import scipy
from scipy.ndimage import gaussian_filter1d

x = np.arange(300) * 0.05
y = 1.0 + 0.2 * x + 4.0 * np.exp(-((x - 5.0) ** 2) / 0.1) + 0.3 * np.sin(11.0 * x)
out = {"library": f"scipy {scipy.__version__}, numpy {np.__version__}", "x": x.tolist(), "y": y.tolist(), "cases": []}
for sigma in [0.8, 1.3, 3.3, 6.1]:
    f = gaussian_filter1d(y, sigma, mode="reflect", truncate=4.0)
    out["cases"].append({"sigma_points": sigma, "radius": int(4.0 * sigma + 0.5), "y": f.tolist()})
with open("tests/data/gaussian_scipy.json", "w") as fh:
    json.dump(out, fh, indent=1)
