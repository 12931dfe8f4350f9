"""Reference values for integrate.area (Simpson, non-uniform spacing, odd and even
numbers of intervals) from scipy.integrate.simpson and trapezoid.

Library: scipy 1.14.1 (numpy 2.1.3) from PyPI. Since scipy 1.11, simpson handles an
odd number of intervals with Cartwright's correction on the last interval.
Run from the repository root:  .venv/bin/python tests/refgen/simpson_scipy.py
Writes tests/data/simpson_scipy.json.
"""
import json
import numpy as np
import scipy
from scipy.integrate import simpson, trapezoid

cases = []
for n in [5, 6, 51, 52, 200, 201]:
    # A deterministic non-uniform grid: x_k = 10 (k/(n-1))^1.3 + (0.2/n) sin(k).
    k = np.arange(n)
    x = 10.0 * (k / (n - 1)) ** 1.3 + (0.2 / n) * np.sin(k)
    x[0] = 0.0
    y = np.exp(-((x - 4.0) ** 2) / 2.0) * (1.0 + 0.3 * np.cos(3.0 * x)) + 0.1 * x
    cases.append({"x": x.tolist(), "y": y.tolist(), "simpson": float(simpson(y, x=x)),
                  "trapezoid": float(trapezoid(y, x=x))})
out = {"library": f"scipy {scipy.__version__}, numpy {np.__version__}", "cases": cases}
with open("tests/data/simpson_scipy.json", "w") as fh:
    json.dump(out, fh, indent=1)
