"""Reference values for smooth.savitzky_golay from scipy.signal.

Library: scipy 1.14.1 (numpy 2.1.3), installed from PyPI:
    python3 -m venv .venv && .venv/bin/pip install scipy==1.14.1 numpy==2.1.3
Run from the repository root:
    .venv/bin/python tests/refgen/savgol_scipy.py
Writes tests/data/savgol_scipy.json: convolution weights from savgol_coeffs
(use='dot', i.e. in window order) and filtered signals from savgol_filter with
mode='interp' (polynomial fitted to the edge windows), including derivatives with delta.
"""
import json
import numpy as np
import scipy
from scipy.signal import savgol_coeffs, savgol_filter

out = {"library": f"scipy {scipy.__version__}, numpy {np.__version__}", "coeffs": [], "filters": []}

for window, order, deriv in [(5, 2, 0), (7, 2, 0), (9, 4, 0), (11, 6, 0), (5, 2, 1), (7, 3, 1),
                             (9, 2, 2), (13, 4, 2), (21, 5, 1), (3, 0, 0), (15, 6, 2)]:
    c = savgol_coeffs(window, order, deriv=deriv, use="dot")
    out["coeffs"].append({"window": window, "order": order, "deriv": deriv, "c": c.tolist()})

# A deterministic test signal: two Gaussian bands on a sloping line plus a sine ripple,
# on a grid with step 0.05.
x = np.arange(200) * 0.05
y = (2.0 + 0.3 * x + 5.0 * np.exp(-((x - 3.0) ** 2) / 0.18) + 2.5 * np.exp(-((x - 7.2) ** 2) / 0.5)
     + 0.2 * np.sin(7.0 * x))
out["x"] = x.tolist()
out["y"] = y.tolist()
for window, order, deriv in [(5, 2, 0), (11, 3, 0), (15, 6, 0), (9, 2, 1), (11, 4, 1),
                             (13, 3, 2), (21, 6, 2), (7, 0, 0)]:
    f = savgol_filter(y, window, order, deriv=deriv, delta=0.05, mode="interp")
    out["filters"].append({"window": window, "order": order, "deriv": deriv, "delta": 0.05,
                           "y": f.tolist()})

with open("tests/data/savgol_scipy.json", "w") as fh:
    json.dump(out, fh, indent=1)
