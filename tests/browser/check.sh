#!/usr/bin/env bash
# Renders a report.html in headless Chromium to a PNG and fails when the page is
# blank or the browser console reports errors (uncaught exceptions, refused loads,
# Content-Security-Policy violations).
#
# Usage: tests/browser/check.sh REPORT.html [SHOT.png]
# Without a report argument it renders the test fixture's report first:
#   RETORT_REPORT_KEEP=DIR cargo test -p tests --test report_html
# Installs Debian's chromium when it is missing (needs root and the package index).
set -euo pipefail

here="$(cd "$(dirname "$0")" && pwd)"
report="${1:-}"
if [[ -z "$report" ]]; then
    keep="$(mktemp -d)"
    (cd "$here/../.." && RETORT_REPORT_KEEP="$keep" cargo test -q -p tests --test report_html rendering_is_deterministic >/dev/null)
    report="$keep/report.html"
fi
shot="${2:-$(dirname "$report")/report.png}"
[[ -f "$report" ]] || { echo "browser check: no such report: $report" >&2; exit 2; }
report="$(cd "$(dirname "$report")" && pwd)/$(basename "$report")"

browser=""
for b in chromium chromium-browser; do
    if command -v "$b" >/dev/null 2>&1; then browser="$b"; break; fi
done
if [[ -z "$browser" ]]; then
    echo "browser check: installing chromium" >&2
    export DEBIAN_FRONTEND=noninteractive
    apt-get update -qq >/dev/null
    apt-get install -y -qq chromium >/dev/null
    browser=chromium
fi

profile="$(mktemp -d)"
log="$(mktemp)"
trap 'rm -rf "$profile" "$log"' EXIT
"$browser" --headless --no-sandbox --disable-gpu --disable-quic \
    --disable-background-networking --disable-component-update --disable-sync \
    --no-first-run --user-data-dir="$profile" \
    --enable-logging=stderr --v=0 \
    --hide-scrollbars --window-size=1200,1600 \
    --screenshot="$shot" "file://$report" 2>"$log" >/dev/null || {
    echo "browser check: chromium failed" >&2
    cat "$log" >&2
    exit 1
}

if grep -E "Uncaught|Refused to|Content.Security.Policy|CONSOLE.*(error|Error)" "$log" >&2; then
    echo "browser check: the console reports errors (above)" >&2
    exit 1
fi

# Blank page check: decode the PNG (zlib + PNG row filters, standard library only)
# and require several colours and some ink.
python3 - "$shot" <<'PY'
import struct, sys, zlib

path = sys.argv[1]
data = open(path, "rb").read()
if data[:8] != b"\x89PNG\r\n\x1a\n":
    sys.exit("browser check: the screenshot is not a PNG")
pos, idat, ihdr = 8, b"", None
while pos < len(data):
    (length,) = struct.unpack(">I", data[pos:pos + 4])
    kind = data[pos + 4:pos + 8]
    body = data[pos + 8:pos + 8 + length]
    if kind == b"IHDR":
        ihdr = struct.unpack(">IIBBBBB", body)
    elif kind == b"IDAT":
        idat += body
    pos += 12 + length
width, height, depth, colour = ihdr[:4]
if depth != 8 or colour not in (2, 6):
    sys.exit(f"browser check: unexpected PNG format depth={depth} colour={colour}")
bpp = 3 if colour == 2 else 4
raw = zlib.decompress(idat)
stride = width * bpp
prev = bytearray(stride)
colours, ink = set(), 0
for y in range(height):
    f = raw[y * (stride + 1)]
    line = bytearray(raw[y * (stride + 1) + 1:(y + 1) * (stride + 1)])
    for i in range(stride):
        a = line[i - bpp] if i >= bpp else 0
        b = prev[i]
        c = prev[i - bpp] if i >= bpp else 0
        if f == 1:
            line[i] = (line[i] + a) & 255
        elif f == 2:
            line[i] = (line[i] + b) & 255
        elif f == 3:
            line[i] = (line[i] + (a + b) // 2) & 255
        elif f == 4:
            p = a + b - c
            pa, pb, pc = abs(p - a), abs(p - b), abs(p - c)
            pred = a if pa <= pb and pa <= pc else (b if pb <= pc else c)
            line[i] = (line[i] + pred) & 255
    if y % 4 == 0:
        for x in range(0, width, 4):
            px = bytes(line[x * bpp:x * bpp + 3])
            colours.add(px)
            if sum(px) < 600:
                ink += 1
    prev = line
sampled = (height // 4 + 1) * (width // 4 + 1)
print(f"browser check: {width}x{height}, {len(colours)} colours, {100 * ink / sampled:.1f} % ink")
if len(colours) < 8 or ink < sampled * 0.005:
    sys.exit("browser check: the page looks blank")
PY
echo "browser check: ok ($shot)"
