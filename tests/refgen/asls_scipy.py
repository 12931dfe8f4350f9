"""Reference baseline for background.asls: Eilers & Boelens (2005) asymmetric least
squares, solved with scipy.sparse (spsolve on W + lambda D'D, D = second differences),
the weights iterated until none changes (at most max_iter), exactly as in their paper.

Library: scipy 1.14.1 (numpy 2.1.3) from PyPI.
Run from the repository root:  .venv/bin/python tests/refgen/asls_scipy.py
Writes tests/data/asls_scipy.json with the input data and the baseline.
"""
import json
import numpy as np
import scipy
from scipy import sparse
from scipy.sparse.linalg import spsolve


def asls(y, lam, p, max_iter):
    n = len(y)
    D = sparse.diags([1.0, -2.0, 1.0], [0, 1, 2], shape=(n - 2, n), format="csc")
    DtD = lam * (D.T @ D)
    w = np.ones(n)
    z = None
    for it in range(1, max_iter + 1):
        W = sparse.diags(w, 0, shape=(n, n), format="csc")
        z = spsolve((W + DtD).tocsc(), w * y)
        nw = np.where(y > z, p, 1.0 - p)
        if np.array_equal(nw, w):
            return z, it
        w = nw
    return z, max_iter


n = 600
x = np.linspace(0.0, 60.0, n)
background = 20.0 + 0.4 * x + 8.0 * np.exp(-x / 25.0)
peaks = 40.0 * np.exp(-((x - 15.0) ** 2) / 2.0) + 25.0 * np.exp(-((x - 38.0) ** 2) / 4.5) \
    + 15.0 * np.exp(-((x - 47.0) ** 2) / 1.0)
ripple = 0.3 * np.sin(1.7 * x) + 0.2 * np.cos(5.3 * x)   # deterministic "noise"
y = background + peaks + ripple
out = {"library": f"scipy {scipy.__version__}, numpy {np.__version__}", "x": x.tolist(),
       "y": y.tolist(), "true_background": background.tolist(), "cases": []}
for lam, p in [(1e5, 0.01), (1e7, 0.001), (1e3, 0.05)]:
    z, it = asls(y, lam, p, 50)
    out["cases"].append({"lambda": lam, "p": p, "max_iter": 50, "iterations": it,
                         "baseline": z.tolist()})
with open("tests/data/asls_scipy.json", "w") as fh:
    json.dump(out, fh, indent=1)
