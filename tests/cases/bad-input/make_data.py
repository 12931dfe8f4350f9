"""Writes the bad data files of the reliability corpus (tests/cases/bad-input/data/).

Standard library only (python3); the output is committed, tests never run this.
Each file is one way a real export goes wrong; `data.expected` holds what retort
must say about it.
"""
import math, os, struct, zlib

here = os.path.dirname(os.path.abspath(__file__))


def put(rel, data):
    p = os.path.join(here, "data", rel)
    os.makedirs(os.path.dirname(p), exist_ok=True)
    if isinstance(data, str):
        data = data.encode("utf-8")
    with open(p, "wb") as f:
        f.write(data)


def spectrum(n=40, f=lambda i: 1.0 + math.exp(-((i - 20) / 4.0) ** 2)):
    return "".join(f"{1.0 + 0.05 * i:.3f},{f(i):.6f}\n" for i in range(n))


H = "energy_eV,absorbance\n"
# ---- delimited text
put("text/good_a.csv", H + spectrum())
put("text/good_crlf.csv", (H + spectrum()).replace("\n", "\r\n"))
put("text/empty.csv", b"")
put("text/header_only.csv", H)
put("text/only_comments.csv", "# exported\n# nothing measured\n")
lines = (H + spectrum()).splitlines(True)
put("text/ragged.csv", "".join(lines[:10]) + "1.500\n" + "".join(lines[10:]))
put("text/non_numeric.csv", "".join(lines[:7]) + "1.300,n/a\n" + "".join(lines[8:]))
put("text/nan_cell.csv", "".join(lines[:5]) + "1.200,NaN\n" + "".join(lines[6:]))
put("text/inf_cell.csv", "".join(lines[:5]) + "1.200,inf\n" + "".join(lines[6:]))
put("text/duplicate_x.csv", "".join(lines[:5]) + lines[4] + "".join(lines[5:]))
rows = lines[1:]
put("text/non_monotonic_x.csv", H + "".join(rows[:10] + [rows[15]] + rows[10:15] + rows[16:]))
put("text/descending_x.csv", H + "".join(reversed(rows)))
put("text/one_point.csv", H + "1.000,0.5\n")
put("text/two_points.csv", H + "1.000,0.5\n1.050,0.7\n")
put("text/enormous.csv", H + spectrum(f=lambda i: 1e307 * (1 + (i % 7))))
put("text/overflow.csv", H + "1.000,1e999\n1.050,2\n1.100,3\n")
put("text/all_zero.csv", H + spectrum(f=lambda i: 0.0))
put("text/single_column.csv", "energy_eV\n" + "".join(f"{1 + 0.05 * i:.3f}\n" for i in range(30)))
put("text/utf16_bom.csv", (H + spectrum()).encode("utf-16"))
put("text/utf16_le_no_bom.csv", (H + spectrum()).encode("utf-16-le"))
put("text/latin1.csv", ("energy_eV,absorbance (\u00b0)\n" + spectrum()).encode("latin-1"))
put("text/latin1_after_bom.csv", b"\xef\xbb\xbf" + ("energy_eV,absorbance (\u00b5)\n" + spectrum()).encode("latin-1"))
put("text/binary.csv", bytes(range(256)) * 4)
put("text/huge_field.csv", H + "1.0," + "9" * 5000 + "\n1.1,2\n1.2,3\n")
# ---- JCAMP-DX 5.01 (AFFN XY pairs)
def jdx(points, extra="", end=True):
    s = ("##TITLE=invented test spectrum\n##JCAMP-DX=5.01\n##DATA TYPE=UV/VIS SPECTRUM\n"
         "##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\n##XFACTOR=1\n##YFACTOR=1\n"
         f"##FIRSTX={points[0][0]}\n##LASTX={points[-1][0]}\n##NPOINTS={len(points)}\n" + extra +
         "##XYPOINTS=(XY..XY)\n" + "".join(f"{x}, {y}\n" for x, y in points))
    return s + ("##END=\n" if end else "")
pts = [(400 + 2 * i, round(0.1 + math.exp(-((i - 25) / 6.0) ** 2), 5)) for i in range(50)]
put("jcamp/good.jdx", jdx(pts))
full = jdx(pts)
put("jcamp/truncated.jdx", full[: len(full) // 2])
put("jcamp/header_only.jdx", full[: full.index("##XYPOINTS")])
put("jcamp/empty.jdx", b"")
put("jcamp/corrupted.jdx", full.replace("440, ", "4@0, ").replace("##XUNITS", "##X\x00UNITS"))
put("jcamp/npoints_wrong.jdx", full.replace("##NPOINTS=50", "##NPOINTS=500"))
put("jcamp/bad_yfactor.jdx", full.replace("##YFACTOR=1", "##YFACTOR=lots"))
put("jcamp/no_end.jdx", jdx(pts, end=False))
put("jcamp/nan_value.jdx", full.replace("410, ", "410, NaN\n#", 1))
put("jcamp/not_jcamp.jdx", H + spectrum())
# ---- images
def chunk(kind, data):
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))
def png(w, h, rows, ihdr_w=None, ihdr_h=None):
    ihdr = struct.pack(">IIBBBBB", w if ihdr_w is None else ihdr_w, h if ihdr_h is None else ihdr_h, 8, 0, 0, 0, 0)
    raw = b"".join(b"\x00" + bytes(r) for r in rows)
    return b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + chunk(b"IDAT", zlib.compress(raw)) + chunk(b"IEND", b"")
grid = [[(x * 7 + y * 3) % 200 + (50 if (x - 16) ** 2 + (y - 16) ** 2 < 40 else 0) for x in range(32)] for y in range(32)]
good_png = png(32, 32, grid)
put("image/good.png", good_png)
put("image/truncated.png", good_png[: len(good_png) * 2 // 3])
put("image/bad_crc.png", good_png[:20] + bytes([good_png[20] ^ 0xFF]) + good_png[21:])
put("image/zero_width.png", png(0, 4, [[] for _ in range(4)]))
put("image/wide_100000x1.png", png(100000, 1, [[(i * 13) % 256 for i in range(100000)]]))
put("image/saturated.png", png(32, 32, [[255] * 32 for _ in range(32)]))
put("image/lies_about_size.png", png(32, 32, grid, ihdr_w=60000, ihdr_h=60000))
put("image/text_not_png.png", b"this is not an image\n")
# minimal little-endian greyscale TIFF, 8-bit, one strip
def tiff(w, h, pix):
    entries = [(256, 3, 1, w), (257, 3, 1, h), (258, 3, 1, 8), (259, 3, 1, 1), (262, 3, 1, 1),
               (273, 4, 1, 8), (277, 3, 1, 1), (278, 3, 1, h), (279, 4, 1, len(pix))]
    ifd_off = 8 + len(pix)
    ifd = struct.pack("<H", len(entries)) + b"".join(struct.pack("<HHII", *e) for e in entries) + b"\0\0\0\0"
    return b"II*\x00" + struct.pack("<I", ifd_off) + bytes(pix) + ifd
good_tif = tiff(32, 32, [v for r in grid for v in r])
put("image/good.tif", good_tif)
put("image/truncated.tif", good_tif[: len(good_tif) - 60])
put("image/zero_height.tif", tiff(8, 0, []))
# text matrices (height maps)
mat = "".join(" ".join(f"{(x * y) % 5 * 0.1:.2f}" for x in range(16)) + "\n" for y in range(16))
put("image/good_matrix.txt", mat)
m = mat.splitlines(True)
put("image/matrix_ragged.txt", "".join(m[:5]) + "0.1 0.2\n" + "".join(m[6:]))
put("image/matrix_nan.txt", "".join(m[:3]) + m[3].replace("0.00", "nan", 1) + "".join(m[4:]))
put("image/matrix_empty.txt", b"")
put("image/matrix_words.txt", "".join(m[:2]) + "height map follows\n" + "".join(m[2:]))
