"""Label-edge crossings of a pairmap map.svg (helper of test_label_edges.sh, not a test itself).

Usage: /usr/bin/python3 svg_label_edges.py MAP.svg
Prints one line: "CROSSINGS LABELS FARTHEST", where CROSSINGS counts (label, edge) pairs whose
segment runs through the label's ink box, LABELS the item and cluster labels drawn and
FARTHEST the largest gap, in font sizes, between an item's circle and the nearest point of
its label's box.

The boxes are measured independently of pairmap's own width table: with PIL's FreeType
rendering of the font the SVG names first (DejaVu Sans, bold for cluster names), each text's
ink bounding box at its font size, anchored at the baseline as SVG's text-anchor says. The
edges are the <line class="edge..."> segments; a segment meets a box when the Liang-Barsky
clip of the segment to the box is not empty (common practice for segment-rectangle tests).
"""
import sys
import xml.etree.ElementTree as ET

from PIL import ImageFont

S = "{http://www.w3.org/2000/svg}"
FONTS = "/usr/share/fonts/truetype/dejavu/"
_cache = {}


def font(size, bold):
    key = (size, bold)
    if key not in _cache:
        name = "DejaVuSans-Bold.ttf" if bold else "DejaVuSans.ttf"
        _cache[key] = ImageFont.truetype(FONTS + name, size=size)
    return _cache[key]


def ink_box(t):
    x, y = float(t.get("x")), float(t.get("y"))
    fs = float(t.get("font-size"))
    bold = t.get("font-weight") == "bold"
    anchor = {"start": "ls", "middle": "ms", "end": "rs"}[t.get("text-anchor") or "start"]
    # FreeType sizes are integers of pixels: measure at 10x and scale, for fractional sizes
    big = font(int(round(fs * 10)), bold)
    x0, y0, x1, y1 = big.getbbox("".join(t.itertext()), anchor=anchor)
    return (x + x0 / 10, y + y0 / 10, x + x1 / 10, y + y1 / 10), fs


def meets(seg, box):
    (ax, ay, bx, by), (x0, y0, x1, y1) = seg, box
    dx, dy = bx - ax, by - ay
    lo, hi = 0.0, 1.0
    for p, q in ((-dx, ax - x0), (dx, x1 - ax), (-dy, ay - y0), (dy, y1 - ay)):
        if p == 0:
            if q < 0:
                return False
            continue
        r = q / p
        if p < 0:
            lo = max(lo, r)
        else:
            hi = min(hi, r)
        if lo > hi:
            return False
    return True


def main(path):
    svg = ET.parse(path).getroot()
    nodes = {}
    for c in svg.iter(S + "circle"):
        if c.get("class") == "node":
            nodes[c.get("data-item")] = (float(c.get("cx")), float(c.get("cy")), float(c.get("r")))
    segs = []
    for ln in svg.iter(S + "line"):
        if (ln.get("class") or "").startswith("edge"):
            segs.append(tuple(float(ln.get(k)) for k in ("x1", "y1", "x2", "y2")))
    crossings = labels = 0
    farthest = 0.0
    for t in svg.iter(S + "text"):
        cls = t.get("class")
        if cls not in ("label", "cluster-label"):
            continue
        labels += 1
        box, fs = ink_box(t)
        crossings += sum(meets(s, box) for s in segs)
        if cls == "label" and t.get("data-item") in nodes:
            cx, cy, r = nodes[t.get("data-item")]
            nx, ny = min(max(cx, box[0]), box[2]), min(max(cy, box[1]), box[3])
            gap = ((nx - cx) ** 2 + (ny - cy) ** 2) ** 0.5 - r
            farthest = max(farthest, gap / fs)
    print(crossings, labels, "%.2f" % farthest)


if __name__ == "__main__":
    main(sys.argv[1])
