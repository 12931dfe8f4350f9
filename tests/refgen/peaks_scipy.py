"""Reference values for peaks.find from scipy.signal.find_peaks, peak_prominences and
peak_widths (rel_height=0.5: full width at half prominence).

Library: scipy 1.14.1 (numpy 2.1.3) from PyPI.
Run from the repository root:  .venv/bin/python tests/refgen/peaks_scipy.py
Writes tests/data/peaks_scipy.json. The x grid has unit spacing, so scipy's sample
distances and widths equal x distances.
"""
import json
import numpy as np
import scipy
from scipy.signal import find_peaks, peak_prominences, peak_widths

x = np.arange(500, dtype=float)
centres = [40, 95, 102, 180, 260, 262.5, 330, 410, 470]
heights = [10, 4, 6, 2, 8, 7.5, 1.0, 12, 3]
sigmas = [5, 3, 2, 10, 4, 3, 1.5, 15, 2]
y = 0.01 * x + sum(h * np.exp(-((x - c) ** 2) / (2 * s * s)) for c, h, s in zip(centres, heights, sigmas))
y += 0.05 * np.sin(0.9 * x) + 0.03 * np.cos(2.3 * x)   # deterministic ripple: many small maxima
# A flat-topped peak to exercise plateau handling.
y[300:305] = y[300:305].max() + 1.0

out = {"library": f"scipy {scipy.__version__}, numpy {np.__version__}", "x": x.tolist(), "y": y.tolist(), "cases": []}
for kw in [dict(), dict(prominence=0.5), dict(prominence=0.5, width=5.0), dict(height=3.0, prominence=0.2),
           dict(distance=20, prominence=0.1), dict(prominence=1.0, width=3.0, distance=8, height=1.0)]:
    peaks, props = find_peaks(y, **kw)
    prom, lb, rb = peak_prominences(y, peaks)
    w, wh, lips, rips = peak_widths(y, peaks, rel_height=0.5, prominence_data=(prom, lb, rb))
    out["cases"].append({
        "min_prominence": kw.get("prominence", 0.0),
        "min_width": kw.get("width", 0.0),
        "min_height": kw.get("height"),
        "min_separation": kw.get("distance", 0),
        "peaks": peaks.tolist(), "prominences": prom.tolist(), "widths": w.tolist(),
    })
with open("tests/data/peaks_scipy.json", "w") as fh:
    json.dump(out, fh, indent=1)
