#!/usr/bin/env python3
"""Side-by-side benchmark of retort's kernels against scipy on the same files.

Reference library: scipy 1.17.0 with numpy 2.4.6 (pinned in bench/side_by_side.sh).

The Rust harness (`retort-bench --write-data`) writes N generated 2,000-point spectra
(three Voigt peaks on a linear background with seeded Gaussian noise) and their truth.
Then, in rounds, this script runs `retort-bench --side` on those files (Savitzky-Golay,
AsLS, the three-Voigt fit) and straight after it the scipy counterparts on the same
files, so each round's ratio compares runs made seconds apart on the same machine:

- scipy.signal.savgol_filter(y, 11, 3), called spectrum by spectrum (and, for
  information, once on the stacked array);
- AsLS after Eilers & Boelens (2005) with scipy.sparse (spsolve of (W + lambda D'D) z = W y),
  lambda 1e5, p 0.01, at most 10 iterations, stopping when no weight changes -- the same
  rule as retort's `background.asls` (and, for information, a banded solver,
  scipy.linalg.solveh_banded);
- scipy.optimize.curve_fit (Levenberg-Marquardt, numerical Jacobian) of three
  scipy.special.voigt_profile peaks plus a linear background c0 + c1 (x - x_mid), from
  the same start values as retort.

Times are CPU seconds of this process (time.process_time) with BLAS threads limited to
one by the shell script, so figures are per core. Accuracy is the RMS relative error of
centres, areas and FWHMs (Olivero & Longbothum 1977 Voigt FWHM, as retort reports it)
against the generated truth.
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

import numpy as np
import scipy
from scipy import linalg, sparse
from scipy.optimize import curve_fit
from scipy.signal import savgol_filter
from scipy.sparse.linalg import spsolve
from scipy.special import voigt_profile

LAMBDA, P, MAX_ITER = 1e5, 0.01, 10
# Olivero & Longbothum (1977), J. Quant. Spectrosc. Radiat. Transfer 17, 233.
OL_A, OL_B = 0.5346, 0.2166


def load_average():
    try:
        with open("/proc/loadavg") as f:
            return " ".join(f.read().split()[:3])
    except OSError:
        return "unknown"


def cpu(fn):
    t0 = time.process_time()
    out = fn()
    return out, time.process_time() - t0


def asls_sparse(y):
    n = len(y)
    d = sparse.diags([1.0, -2.0, 1.0], [0, -1, -2], shape=(n, n - 2))
    dtd = LAMBDA * d.dot(d.T)
    w = np.ones(n)
    wm = sparse.spdiags(w, 0, n, n)
    z = None
    for it in range(1, MAX_ITER + 1):
        wm.setdiag(w)
        z = spsolve((wm + dtd).tocsc(), w * y)
        nw = np.where(y > z, P, 1.0 - P)
        if np.array_equal(nw, w):
            return z, it
        w = nw
    return z, MAX_ITER


def asls_banded(y):
    n = len(y)
    # Upper banded form of lambda D'D (pentadiagonal): rows = super-diagonals 2, 1, main.
    d0 = np.full(n, 6.0)
    d0[[0, -1]] = 1.0
    d0[[1, -2]] = 5.0
    d1 = np.full(n, -4.0)
    d1[[1, -1]] = -2.0
    d2 = np.ones(n)
    ab = np.vstack([LAMBDA * d2, LAMBDA * d1, LAMBDA * d0])
    ab[0, :2] = 0.0
    ab[1, :1] = 0.0
    w = np.ones(n)
    z = None
    for it in range(1, MAX_ITER + 1):
        a = ab.copy()
        a[2] += w
        z = linalg.solveh_banded(a, w * y, check_finite=False)
        nw = np.where(y > z, P, 1.0 - P)
        if np.array_equal(nw, w):
            return z, it
        w = nw
    return z, MAX_ITER


def fwhm(sigma, gamma):
    fg = 2.0 * np.sqrt(2.0 * np.log(2.0)) * abs(sigma)
    fl = 2.0 * abs(gamma)
    return OL_A * fl + np.sqrt(OL_B * fl * fl + fg * fg)


def make_model(xmid):
    def model(x, *p):
        out = p[12] + p[13] * (x - xmid)
        for k in range(3):
            c, a, s, g = p[4 * k : 4 * k + 4]
            out = out + a * voigt_profile(x - c, s, g)
        return out

    return model


def scipy_round(xs, ys, truth, starts):
    r = {}
    _, t = cpu(lambda: [savgol_filter(y, 11, 3) for y in ys])
    r["savitzky_golay_us"] = t / len(ys) * 1e6
    stacked = np.vstack(ys)
    _, t = cpu(lambda: savgol_filter(stacked, 11, 3, axis=-1))
    r["savitzky_golay_stacked_us"] = t / len(ys) * 1e6
    out, t = cpu(lambda: [asls_sparse(y) for y in ys])
    r["asls_us"] = t / len(ys) * 1e6
    r["asls_mean_iterations"] = float(np.mean([o[1] for o in out]))
    outb, t = cpu(lambda: [asls_banded(y) for y in ys])
    r["asls_banded_us"] = t / len(ys) * 1e6
    r["asls_sparse_vs_banded_max_diff"] = float(
        max(np.max(np.abs(a[0] - b[0])) for a, b in zip(out, outb))
    )
    p0 = [v for s in starts for v in s] + [0.0, 0.0]
    sq = np.zeros(3)
    terms, fails = 0, 0
    fevs = []

    def fit_all():
        nonlocal terms, fails
        for x, y, tr in zip(xs, ys, truth):
            model = make_model(0.5 * (x[0] + x[-1]))
            try:
                popt, _, info, _, _ = curve_fit(model, x, y, p0=p0, full_output=True)
            except RuntimeError:
                fails += 1
                continue
            fevs.append(info["nfev"])
            for k in range(3):
                c, a, s, g = popt[4 * k : 4 * k + 4]
                sq[0] += ((c - tr["center"][k]) / tr["center"][k]) ** 2
                sq[1] += ((a - tr["area"][k]) / tr["area"][k]) ** 2
                sq[2] += ((fwhm(s, g) - tr["fwhm"][k]) / tr["fwhm"][k]) ** 2
                terms += 1

    _, t = cpu(fit_all)
    r["fit_per_s"] = len(ys) / t
    r["fit_failures"] = fails
    r["fit_mean_function_evaluations"] = float(np.mean(fevs)) if fevs else None
    rms = np.sqrt(sq / max(terms, 1))
    r["fit_rms_rel_error"] = {"centre": rms[0], "area": rms[1], "fwhm": rms[2]}
    return r


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--rust-bench", required=True, help="path of the retort-bench binary")
    ap.add_argument("--count", type=int, default=100, help="spectra (default 100)")
    ap.add_argument("--rounds", type=int, default=3, help="interleaved rounds (default 3)")
    ap.add_argument("--json", help="write the figures to this file")
    a = ap.parse_args()
    load_before = load_average()
    with tempfile.TemporaryDirectory() as d:
        subprocess.run(
            [a.rust_bench, "--write-data", d, "--count", str(a.count)],
            check=True,
            stdout=subprocess.DEVNULL,
        )
        with open(os.path.join(d, "truth.json")) as f:
            doc = json.load(f)
        truth, starts = doc["truth"], doc["starts"]
        xs, ys = [], []
        for i in range(a.count):
            m = np.loadtxt(os.path.join(d, "spectra", f"s{i:05}.csv"), delimiter=",", skiprows=1)
            xs.append(np.ascontiguousarray(m[:, 0]))
            ys.append(np.ascontiguousarray(m[:, 1]))
        rounds = []
        for k in range(a.rounds):
            out = subprocess.run(
                [a.rust_bench, "--side", d, "--count", str(a.count)],
                check=True,
                capture_output=True,
                text=True,
            )
            rust = json.loads(out.stdout.strip().splitlines()[-1])
            py = scipy_round(xs, ys, truth, starts)
            rounds.append({"rust": rust, "scipy": py, "load_average": load_average()})
            print(
                f"round {k + 1}: fit {rust['fit_per_s']:.1f} vs {py['fit_per_s']:.2f} spectra/s, "
                f"SG {rust['savitzky_golay_us']:.1f} vs {py['savitzky_golay_us']:.1f} us, "
                f"AsLS {rust['asls_us']:.1f} vs {py['asls_us']:.1f} us; load {rounds[-1]['load_average']}",
                flush=True,
            )

    def med(f):
        return float(np.median([f(r) for r in rounds]))

    rows = [
        ("fit, 3 Voigt + linear (spectra/s/core)", med(lambda r: r["rust"]["fit_per_s"]),
         med(lambda r: r["scipy"]["fit_per_s"]), med(lambda r: r["rust"]["fit_per_s"] / r["scipy"]["fit_per_s"]), 20.0),
        ("Savitzky-Golay 11/3, per spectrum (us)", med(lambda r: r["rust"]["savitzky_golay_us"]),
         med(lambda r: r["scipy"]["savitzky_golay_us"]), med(lambda r: r["scipy"]["savitzky_golay_us"] / r["rust"]["savitzky_golay_us"]), 5.0),
        ("  scipy on the stacked array (info)", med(lambda r: r["rust"]["savitzky_golay_us"]),
         med(lambda r: r["scipy"]["savitzky_golay_stacked_us"]), med(lambda r: r["scipy"]["savitzky_golay_stacked_us"] / r["rust"]["savitzky_golay_us"]), None),
        ("AsLS, scipy.sparse, per spectrum (us)", med(lambda r: r["rust"]["asls_us"]),
         med(lambda r: r["scipy"]["asls_us"]), med(lambda r: r["scipy"]["asls_us"] / r["rust"]["asls_us"]), 5.0),
        ("  scipy banded solver (info)", med(lambda r: r["rust"]["asls_us"]),
         med(lambda r: r["scipy"]["asls_banded_us"]), med(lambda r: r["scipy"]["asls_banded_us"] / r["rust"]["asls_us"]), None),
    ]
    print(f"\nside by side on {a.count} spectra, {a.rounds} rounds (median), numpy {np.__version__}, scipy {scipy.__version__}")
    print(f"{'workload':<42} {'retort':>10} {'scipy':>10} {'ratio':>8}  goal")
    for name, rv, pv, ratio, goal in rows:
        g = "" if goal is None else (f">= {goal:g}x " + ("met" if ratio >= goal else "NOT met"))
        print(f"{name:<42} {rv:>10.2f} {pv:>10.2f} {ratio:>7.1f}x  {g}")
    last = rounds[-1]
    ra, pa = last["rust"]["fit_rms_rel_error"], last["scipy"]["fit_rms_rel_error"]
    print("fit accuracy, RMS relative error against the truth (retort | scipy):")
    for k in ("centre", "area", "fwhm"):
        print(f"  {k:<7} {ra[k]:.3e} | {pa[k]:.3e}")
    print(f"  failures {last['rust']['fit_failures']} | {last['scipy']['fit_failures']}; "
          f"retort mean iterations {last['rust']['fit_mean_iterations']:.1f}, "
          f"curve_fit mean function evaluations {last['scipy']['fit_mean_function_evaluations']}")
    print(f"  AsLS mean iterations retort {last['rust']['asls_note']} | scipy {last['scipy']['asls_mean_iterations']:.2f}")
    print(f"load average before {load_before}, after {load_average()}")
    if a.json:
        with open(a.json, "w") as f:
            json.dump({"count": a.count, "numpy": np.__version__, "scipy": scipy.__version__,
                       "load_average_before": load_before, "load_average_after": load_average(),
                       "rounds": rounds,
                       "summary": [{"workload": n, "retort": rv, "scipy": pv, "ratio": ratio, "goal": goal}
                                   for n, rv, pv, ratio, goal in rows]}, f, indent=1)


if __name__ == "__main__":
    sys.exit(main())
