#!/usr/bin/env python3
"""Writes the invented demo data under recipes-demo/data/.

Everything here is made up for the demo: the lab, the samples, the compositions and
every number. The physics used to shape the curves is standard (Tauc-type absorption
edges, Lorentzian plasmon bands, Shirley-type steps under photoelectron peaks,
Kramers-type bremsstrahlung, Bragg's law, log-normal particle sizes), so the recipes
have realistic work to do, but no file is a real measurement.

Deterministic: each file has its own seeded generator (Python's Mersenne Twister, whose
sequence for a given seed is stable across Python versions), and numbers are written
with fixed formats. Standard library only. Run:  python3 recipes-demo/generate.py
"""

import math
import os
import random
import struct
import zlib

HERE = os.path.dirname(os.path.abspath(__file__))
DATA = os.path.join(HERE, "data")
HC_EV_NM = 1239.841984  # CODATA 2018 hc in eV nm

# The invented series: tin-doped, silver-decorated titania coatings, batch "TS".
# mol% Sn (invented), indirect optical gap (invented), plasmon centre nm (0 = no silver).
COATINGS = [
    ("TS-0", 0, 3.21, 0.0),
    ("TS-2", 2, 3.17, 428.0),
    ("TS-5", 5, 3.12, 434.0),
    ("TS-8", 8, 3.06, 441.0),
]


def rng_for(name):
    return random.Random(zlib.crc32(name.encode()))


def poisson(rng, lam):
    """Poisson deviate: inversion for small means, rounded normal for large ones."""
    if lam <= 0:
        return 0
    if lam < 40:
        l, k, p = math.exp(-lam), 0, 1.0
        while True:
            p *= rng.random()
            if p <= l:
                return k
            k += 1
    return max(0, int(round(rng.gauss(lam, math.sqrt(lam)))))


def gauss(x, c, fwhm):
    s = fwhm / (2 * math.sqrt(2 * math.log(2)))
    return math.exp(-0.5 * ((x - c) / s) ** 2)


def lorentz(x, c, fwhm):
    g = fwhm / 2
    return g * g / ((x - c) ** 2 + g * g)


def pseudo_voigt(x, c, fwhm, eta=0.3):
    return eta * lorentz(x, c, fwhm) + (1 - eta) * gauss(x, c, fwhm)


def write(rel, text):
    path = os.path.join(DATA, rel)
    os.makedirs(os.path.dirname(path), exist_ok=True)
    with open(path, "w", newline="\n") as f:
        f.write(text)


def write_png16(rel, width, height, samples):
    """16-bit greyscale PNG (colour type 0), rows unfiltered, big-endian samples."""
    raw = bytearray()
    for r in range(height):
        raw.append(0)
        row = samples[r * width:(r + 1) * width]
        raw += struct.pack(">%dH" % width, *[max(0, min(65535, int(round(v)))) for v in row])

    def chunk(kind, data):
        c = kind + data
        return struct.pack(">I", len(data)) + c + struct.pack(">I", zlib.crc32(c) & 0xFFFFFFFF)

    png = b"\x89PNG\r\n\x1a\n"
    png += chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 16, 0, 0, 0, 0))
    png += chunk(b"IDAT", zlib.compress(bytes(raw), 9))
    png += chunk(b"IEND", b"")
    path = os.path.join(DATA, rel)
    os.makedirs(os.path.dirname(path), exist_ok=True)
    with open(path, "wb") as f:
        f.write(png)


# ---------------------------------------------------------------- UV-vis
def uvvis():
    d_nm = 250.0  # film thickness, invented
    for name, _sn, gap, plasmon in COATINGS:
        rng = rng_for("uvvis" + name)
        lines = ["# Tern Hollow Materials Lab (fictional) - UV-vis, coating on fused silica",
                 "# sample: %s; film thickness 250 nm (invented)" % name,
                 "Wavelength (nm),Absorbance"]
        for i in range(0, 501):
            lam = 300.0 + i
            e = HC_EV_NM / lam
            # Indirect allowed edge: alpha*hv ~ (hv - Eg)^2, plus an Urbach tail below it.
            alpha = 0.0
            if e > gap:
                alpha = 1.0e6 * (e - gap) ** 2 / e  # 1/cm
            alpha += 1.5e3 * math.exp((e - gap) / 0.06) if e < gap + 0.05 else 0.0
            a = alpha * d_nm * 1e-7 / math.log(10)
            a += 0.020 + 0.012 * (400.0 / lam) ** 4  # scattering baseline
            if plasmon > 0:
                a += 0.18 * lorentz(lam, plasmon, 85.0)
            a += rng.gauss(0, 0.0015)
            lines.append("%.1f,%.5f" % (lam, a))
        write("uvvis/%s.csv" % name, "\n".join(lines) + "\n")
    # The deliberately bad file: an export cut short, with a spreadsheet error cell.
    rng = rng_for("uvvis-bad")
    lines = ["# sample: TS-9 (export interrupted)", "Wavelength (nm),Absorbance"]
    for i in range(0, 70):
        lines.append("%.1f,%.5f" % (300.0 + i, 1.2 - 0.004 * i + rng.gauss(0, 0.002)))
    lines.append("370.0,#N/A")
    write("uvvis/TS-9.csv", "\n".join(lines) + "\n")


# ---------------------------------------------------------------- XPS
# Regions: (name, low BE, high BE, peaks [(label, BE, fwhm, relative area)]).
XPS_REGIONS = {
    "C1s": (280.0, 294.0, [("cc", 284.8, 1.3, 0.68), ("co", 286.3, 1.3, 0.21), ("oco", 288.8, 1.3, 0.11)]),
    "O1s": (524.0, 538.0, [("lattice", 529.9, 1.2, 0.82), ("hydroxyl", 531.5, 1.6, 0.18)]),
    "Ti2p": (452.0, 472.0, [("ti2p3", 458.7, 1.1, 2.0), ("ti2p1", 464.4, 2.0, 1.0)]),
    "Sn3d": (482.0, 500.0, [("sn3d5", 486.6, 1.3, 3.0), ("sn3d3", 495.0, 1.3, 2.0)]),
}
# Invented surface composition (atomic fraction) per coating; areas scale with these.
XPS_FRACTIONS = {
    "TS-0": {"C1s": 0.18, "O1s": 0.56, "Ti2p": 0.26, "Sn3d": 0.0},
    "TS-5": {"C1s": 0.16, "O1s": 0.57, "Ti2p": 0.24, "Sn3d": 0.03},
    "TS-8": {"C1s": 0.15, "O1s": 0.57, "Ti2p": 0.23, "Sn3d": 0.05},
}
# Invented instrument response per region (stands in for sensitivity x transmission).
XPS_RESPONSE = {"C1s": 1.0, "O1s": 2.93, "Ti2p": 7.9, "Sn3d": 25.0}
XPS_CHARGING = {"TS-0": 0.62, "TS-5": 0.85, "TS-8": 0.47}  # eV, invented


def xps():
    for sample, fractions in XPS_FRACTIONS.items():
        shift = XPS_CHARGING[sample]
        for region, (lo, hi, peaks) in XPS_REGIONS.items():
            rng = rng_for("xps" + sample + region)
            total = sum(p[3] for p in peaks)
            scale = 1.8e4 * fractions[region] * XPS_RESPONSE[region]
            n = int(round((hi - lo) / 0.1)) + 1
            bes = [hi - 0.1 * i for i in range(n)]  # exported high-to-low
            # peak signal on an ascending grid for the Shirley-type step
            asc = sorted(bes)
            sig = []
            for be in asc:
                s = 0.0
                for _l, c, w, a in peaks:
                    s += scale * (a / total) * pseudo_voigt(be, c + shift, w)
                sig.append(s)
            # Shirley-type step: background grows with the peak area at lower BE.
            cum, acc = [], 0.0
            for s in sig:
                acc += s
                cum.append(acc)
            k = 0.15 * max(sig) / cum[-1] if cum[-1] > 0 else 0.0  # step: 15% of the peak height
            base = 600.0 + 0.02 * scale + 900.0 * (region == "Sn3d")
            rows = {}
            for be, s, c in zip(asc, sig, cum):
                bg = base + k * c + 8.0 * (be - lo)
                rows[round(be, 2)] = poisson(rng, s + bg)
            lines = ["# Tern Hollow Materials Lab (fictional) - XPS, Al Ka monochromated",
                     "# sample: %s; region: %s; pass energy 20 eV (invented)" % (sample, region),
                     "binding_energy_eV,counts"]
            for be in bes:
                lines.append("%.2f,%d" % (be, rows[round(be, 2)]))
            write("xps/%s_%s.csv" % (sample, region), "\n".join(lines) + "\n")


# ---------------------------------------------------------------- EDS
EDS_LINES = [  # (label, keV, relative intensity); energies as tabulated for these lines
    ("C Ka", 0.277, 0.05), ("O Ka", 0.525, 0.55), ("Ti La", 0.452, 0.08),
    ("Si Ka", 1.740, 0.35), ("Ag La", 2.984, 0.10), ("Sn La", 3.444, 0.12),
    ("Sn Lb1", 3.663, 0.06), ("Ti Ka", 4.511, 1.00), ("Ti Kb", 4.932, 0.13),
]


def eds():
    rng = rng_for("eds")
    e0 = 15.0  # beam energy, keV
    lines = ["# Tern Hollow Materials Lab (fictional) - EDS point spectrum, 15 kV",
             "# sample: TS-5, spot 1 (invented)", "Energy (keV),Counts"]
    for ch in range(2048):
        e = 0.01 + ch * 0.005
        kramers = 1800.0 * (e0 - e) / e if e < e0 else 0.0
        kramers *= 1 - math.exp(-(e / 0.9) ** 3)  # low-energy absorption
        s = 0.0
        for _n, c, rel in EDS_LINES:
            fwhm = math.sqrt(0.130 ** 2 * (c / 5.895) + 0.045 ** 2)  # ~130 eV at Mn Ka
            s += 9000.0 * rel * gauss(e, c, fwhm)
        lines.append("%.3f,%d" % (e, poisson(rng, kramers + s)))
    write("eds/TS-5_spot1.csv", "\n".join(lines) + "\n")


# ---------------------------------------------------------------- NMR (JCAMP-DX, AFFN)
def nmr_spectrum(rng, purity, m_a, m_std):
    """1H at 400.13 MHz: invented ligand L1 + 1,3,5-trimethoxybenzene standard in CDCl3."""
    mhz = 400.13
    m_a_molar, m_std_molar, p_std = 250.30, 168.19, 0.999
    # Integral per proton of analyte relative to standard, from the qNMR equation.
    ratio_per_h = (purity / p_std) * (m_a / m_std) * (m_std_molar / m_a_molar)
    lw_hz = 1.0
    signals = []  # (ppm, protons, multiplet pattern as [(offset Hz, weight)])

    def mult(n_lines, j):
        w = [math.comb(n_lines - 1, k) for k in range(n_lines)]
        tot = sum(w)
        return [((k - (n_lines - 1) / 2) * j, w[k] / tot) for k in range(n_lines)]

    signals += [(6.08, 3.0, mult(1, 0)), (3.76, 9.0, mult(1, 0))]  # standard
    for ppm, h, pat in [(7.94, 2, mult(2, 8.4)), (7.21, 2, mult(2, 8.4)),
                        (4.35, 2, mult(4, 7.1)), (1.38, 3, mult(3, 7.1))]:
        signals.append((ppm, h * ratio_per_h, pat))
    signals.append((7.26, 0.04, mult(1, 0)))  # residual CHCl3
    signals.append((0.00, 0.6, mult(1, 0)))  # TMS
    offset = 0.031  # referencing error of the raw axis, ppm (invented)
    first, last, n = 10.0, -1.0, 16384
    step = (last - first) / (n - 1)
    ys = []
    for i in range(n):
        ppm = first + i * step
        y = 0.0
        for c, h, pat in signals:
            for off_hz, w in pat:
                cc = c + offset + off_hz / mhz
                g = lw_hz / mhz / 2
                # Lorentzian of unit area in ppm, times protons
                y += h * w * (g / math.pi) / ((ppm - cc) ** 2 + g * g)
        ys.append(y * 2.0e4 + rng.gauss(0, 25.0))
    return first, last, n, step, ys, mhz


def nmr():
    lots = [("ligand_lot07", 0.962, 20.15, 10.32), ("ligand_ref", 0.995, 18.40, 9.87)]
    for name, purity, m_a, m_std in lots:
        rng = rng_for("nmr" + name)
        first, last, n, step, ys, mhz = nmr_spectrum(rng, purity, m_a, m_std)
        yfactor = 1.0
        out = ["##TITLE=%s 1H qNMR, internal standard 1,3,5-trimethoxybenzene (invented data)" % name,
               "##JCAMP-DX=4.24", "##DATA TYPE=NMR SPECTRUM", "##ORIGIN=Tern Hollow Materials Lab (fictional)",
               "##OWNER=public domain (invented demo data)",
               "##.OBSERVE FREQUENCY=%.2f" % mhz, "##.OBSERVE NUCLEUS=^1H", "##.SOLVENT NAME=CDCl3",
               "##$ANALYTE MASS MG=%.2f" % m_a, "##$STANDARD MASS MG=%.2f" % m_std,
               "##XUNITS=PPM", "##YUNITS=ARBITRARY UNITS",
               "##XFACTOR=1.0", "##YFACTOR=%.1f" % yfactor,
               "##FIRSTX=%.6f" % first, "##LASTX=%.6f" % last, "##DELTAX=%.9f" % step,
               "##NPOINTS=%d" % n, "##FIRSTY=%d" % int(round(ys[0])), "##XYDATA=(X++(Y..Y))"]
        for i in range(0, n, 8):
            chunk = " ".join("%d" % int(round(v)) for v in ys[i:i + 8])
            out.append("%.6f %s" % (first + i * step, chunk))
        out.append("##END=")
        write("nmr/%s.jdx" % name, "\n".join(out) + "\n")


# ---------------------------------------------------------------- XRD
ANATASE = [(25.28, 1.0), (37.80, 0.20), (48.05, 0.35), (53.89, 0.20), (55.06, 0.20), (62.69, 0.14)]


def xrd():
    for name, size_nm in [("TS-0", 18.0), ("TS-5", 13.5)]:
        rng = rng_for("xrd" + name)
        lam = 0.15406
        lines = ["# Tern Hollow Materials Lab (fictional) - XRD, Cu Ka, sample %s (invented)" % name,
                 "2theta_deg,counts"]
        for i in range(3001):
            tt = 20.0 + 0.02 * i
            y = 120.0 + 900.0 * math.exp(-tt / 12.0)
            for pos, rel in ANATASE:
                th = math.radians(pos / 2)
                beta = math.degrees(0.9 * lam / (size_nm * math.cos(th)))
                fwhm = math.sqrt(beta ** 2 + 0.08 ** 2)
                y += 2400.0 * rel * pseudo_voigt(tt, pos, fwhm, 0.4)
            lines.append("%.2f,%d" % (tt, poisson(rng, y)))
        write("xrd/%s.csv" % name, "\n".join(lines) + "\n")


# ---------------------------------------------------------------- TEM particles
def tem_particles(name, seed_count, size=640, px_nm=0.8):
    rng = rng_for("tem" + name)
    bar_rows = 48
    h_img = size + bar_rows
    img = [0.0] * (size * h_img)
    # Bright-field: bright background with a gentle illumination gradient.
    for r in range(size):
        for c in range(size):
            img[r * size + c] = 42000.0 + 3000.0 * (c / size) - 2000.0 * (r / size)
    placed = []
    tries = 0
    while len(placed) < seed_count and tries < 20000:
        tries += 1
        d_nm = math.exp(rng.gauss(math.log(11.0), 0.22))
        rad = d_nm / px_nm / 2
        cx, cy = rng.uniform(0, size), rng.uniform(0, size)
        ok = all(math.hypot(cx - x, cy - y) > 0.85 * (rad + r2) for x, y, r2 in placed)
        if ok:
            placed.append((cx, cy, rad))
    for cx, cy, rad in placed:
        for r in range(max(0, int(cy - rad - 3)), min(size, int(cy + rad + 4))):
            for c in range(max(0, int(cx - rad - 3)), min(size, int(cx + rad + 4))):
                d = math.hypot(c + 0.5 - cx, r + 0.5 - cy)
                t = min(1.0, max(0.0, rad + 0.5 - d))  # anti-aliased edge
                img[r * size + c] -= 24000.0 * t * (img[r * size + c] > 20000.0 or t > 0)
    for i in range(size * size):
        img[i] = max(0.0, img[i] + rng.gauss(0, 1200.0))
    # Data bar with a 100 px (80 nm) white scale bar.
    for r in range(size, h_img):
        for c in range(size):
            img[r * size + c] = 0.0
    for r in range(size + 20, size + 28):
        for c in range(40, 140):
            img[r * size + c] = 65535.0
    write_png16("tem/%s.png" % name, size, h_img, img)
    return len(placed)


def hrtem_lattice():
    rng = rng_for("hrtem")
    size, px_nm = 384, 0.025
    d1, d2, ang = 0.2359, 0.2044, math.radians(54.74)  # fcc (111), (200) spacings of an invented film
    img = []
    for r in range(size):
        for c in range(size):
            x, y = c * px_nm, r * px_nm
            k1 = 2 * math.pi / d1
            k2 = 2 * math.pi / d2
            v = 30000.0 + 9000.0 * math.cos(k1 * (x * math.cos(0.3) + y * math.sin(0.3)))
            v += 6000.0 * math.cos(k2 * (x * math.cos(0.3 + ang) + y * math.sin(0.3 + ang)))
            img.append(v + rng.gauss(0, 3000.0))
    write_png16("tem/lattice_TS-5.png", size, size, img)


def ring_pattern():
    rng = rng_for("saed")
    size = 512
    cx, cy = 259.3, 252.7
    k_px_a = 250.0  # camera constant in px*angstrom (invented)
    rings = [(2.359, 1.0), (2.043, 0.55), (1.445, 0.40), (1.232, 0.45)]
    img = []
    for r in range(size):
        for c in range(size):
            rad = math.hypot(c - cx, r - cy)
            v = 3000.0 + 40000.0 * math.exp(-rad / 25.0)
            for d, rel in rings:
                v += 12000.0 * rel * gauss(rad, k_px_a / d, 3.0)
            img.append(v + rng.gauss(0, 600.0))
    write_png16("ediff/Ag_rings.png", size, size, img)


# ---------------------------------------------------------------- AFM
def afm(name, sq_target, seed):
    rng = random.Random(seed)
    n, px_nm = 256, 39.0625
    # Rough surface: a sum of random Gaussian bumps, then a tilt the recipe must level.
    z = [0.0] * (n * n)
    for _ in range(900):
        cx, cy = rng.uniform(0, n), rng.uniform(0, n)
        w = rng.uniform(2.0, 7.0)
        a = rng.gauss(0, 1.0)
        for r in range(max(0, int(cy - 3 * w)), min(n, int(cy + 3 * w) + 1)):
            for c in range(max(0, int(cx - 3 * w)), min(n, int(cx + 3 * w) + 1)):
                z[r * n + c] += a * math.exp(-((c - cx) ** 2 + (r - cy) ** 2) / (2 * w * w))
    mean = sum(z) / len(z)
    sq = math.sqrt(sum((v - mean) ** 2 for v in z) / len(z))
    lines = ["# Tern Hollow Materials Lab (fictional) - AFM height map, 10 um x 10 um",
             "# sample: %s; heights in nm; %d x %d; pixel 39.0625 nm (invented)" % (name, n, n)]
    for r in range(n):
        row = []
        for c in range(n):
            v = (z[r * n + c] - mean) * sq_target / sq + 0.004 * c * px_nm / 10 - 0.002 * r * px_nm / 10
            row.append("%.4f" % v)
        lines.append(" ".join(row))
    write("afm/%s.txt" % name, "\n".join(lines) + "\n")


def main():
    uvvis()
    xps()
    eds()
    nmr()
    xrd()
    counts = [tem_particles("TS-5_area%d" % i, 60) for i in (1, 2, 3)]
    hrtem_lattice()
    ring_pattern()
    afm("TS-0", 2.1, 11)
    afm("TS-5", 3.4, 12)
    print("demo data written to", DATA, "; particles per TEM image:", counts)


if __name__ == "__main__":
    main()
