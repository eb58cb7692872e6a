#!/usr/bin/python3
"""Geometry check of pairmap's SVG map (src/svgmap.c), from the outside.

The SVG is parsed with xml.etree (which also rejects ill-formed UTF-8 and XML); the data it was
drawn from comes from CSV files beside it (items with cluster and share; kept edges). Checks:
  - standalone SVG 1.1: svg namespace, version, width/height equal to the viewBox, a font stack
    starting with DejaVu Sans;
  - no text box overlaps another text box or any node circle (a label is beside its node,
    never on it), and every box and circle lies inside the viewBox;
  - every drawn node has one label, beside it (within 3 font sizes of its circle), showing its
    name or a prefix of it ending in an ellipsis;
  - every kept edge between two drawn items is drawn, from centre to centre, and nothing else;
  - node radii are monotone in share and areas proportional to it (above the smallest radius);
  - every cluster of 3 or more members has a drawn member; the subtitle's "D of N items
    drawn" and the legend's cluster sizes agree with the data;
  - each region encloses its cluster's drawn members, no other cluster's node touches it, and
    it carries its cluster's name.
Text boxes are measured independently of the code: with Pillow's ImageFont (FreeType) on the
font the SVG names, DejaVu Sans from Debian's fonts-dejavu-core (DejaVuSans.ttf, and
DejaVuSans-Bold.ttf for bold text): the advance width of the text at its font size, from the
font's ascent above the baseline to its descent below. The rendered picture confirms them:
each SVG is drawn to PNG by rsvg-convert (librsvg) twice, as written and with every text
removed; the pixels that differ are the texts' ink (and their halos), and each text must put
ink inside its box (grown by the halo's half width) and no text ink may fall outside all boxes.

Usage: svg_geometry.py [SVG NODES_CSV EDGES_CSV]
Without arguments it draws the pictures of the unit-test driver (build/test_svgmap --write
DIR: the demo run through the library, at two canvas sizes and by category, plus invented
scale data on a crowded canvas) and checks each; it also checks the
map.svg it writes for the demo against the nodes.csv and edges.csv beside it, and the edges
against `pairmap pairs` (the same default selection).
Exit status: 0 all passed, 1 a check failed, 2 could not run.
"""

import csv
import math
import os
import subprocess
import sys
import tempfile
import xml.etree.ElementTree as ET
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
NS = "{http://www.w3.org/2000/svg}"
ELLIPSIS = "\u2026"
EPS = 0.011  # coordinates are written with two decimals
FONT_DIR = Path("/usr/share/fonts/truetype/dejavu")
FONT_FILES = {False: FONT_DIR / "DejaVuSans.ttf", True: FONT_DIR / "DejaVuSans-Bold.ttf"}
REF_SIZE = 1000  # the font is loaded once at this size and scaled: widths to 1/1000 px
_fonts = {}


def font(bold):
    if bold not in _fonts:
        from PIL import ImageFont
        _fonts[bold] = ImageFont.truetype(str(FONT_FILES[bold]), REF_SIZE)
    return _fonts[bold]


def text_box(el):
    """The box of a <text> as FreeType lays it out: advance width, the font's ascent and
    descent, placed by the text-anchor."""
    fs = float(el.get("font-size"))
    x, y = float(el.get("x")), float(el.get("y"))
    text = "".join(el.itertext())
    f = font(el.get("font-weight") == "bold")
    ascent, descent = f.getmetrics()
    w = f.getlength(text) * fs / REF_SIZE
    anchor = el.get("text-anchor", "start")
    x0 = {"start": x, "middle": x - w / 2, "end": x - w}[anchor]
    return (x0, y - ascent * fs / REF_SIZE, x0 + w, y + descent * fs / REF_SIZE), fs, text


def boxes_overlap(a, b):
    return a[0] < b[2] - EPS and b[0] < a[2] - EPS and a[1] < b[3] - EPS and b[1] < a[3] - EPS


def circle_box_dist(cx, cy, b):
    nx, ny = min(max(cx, b[0]), b[2]), min(max(cy, b[1]), b[3])
    return math.hypot(cx - nx, cy - ny)


def read_nodes(path):
    with open(path, newline="", encoding="utf-8") as f:
        return {r["item"]: (int(r["cluster"]), float(r["share"])) for r in csv.DictReader(f)}


def read_edges(path):
    with open(path, newline="", encoding="utf-8") as f:
        return {frozenset((r["item_a"], r["item_b"])) for r in csv.DictReader(f)}


def hull(points):
    pts = sorted(set(points))
    if len(pts) < 3:
        return pts

    def cross(o, a, b):
        return (a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0])
    lower, upper = [], []
    for p in pts:
        while len(lower) >= 2 and cross(lower[-2], lower[-1], p) <= 0:
            lower.pop()
        lower.append(p)
    for p in reversed(pts):
        while len(upper) >= 2 and cross(upper[-2], upper[-1], p) <= 0:
            upper.pop()
        upper.append(p)
    return lower[:-1] + upper[:-1]


def inside(poly, x, y):
    n = len(poly)
    if n < 3:
        return False
    for i in range(n):
        (ax, ay), (bx, by) = poly[i], poly[(i + 1) % n]
        if (bx - ax) * (y - ay) - (by - ay) * (x - ax) < -1e-6:
            return False
    return True


def poly_dist(poly, x, y):
    """Distance from (x, y) to the boundary of the polygon."""
    best = math.inf
    for i in range(len(poly)):
        (ax, ay), (bx, by) = poly[i], poly[(i + 1) % len(poly)]
        ll = (bx - ax) ** 2 + (by - ay) ** 2
        t = 0 if ll == 0 else max(0, min(1, ((x - ax) * (bx - ax) + (y - ay) * (by - ay)) / ll))
        best = min(best, math.hypot(x - ax - t * (bx - ax), y - ay - t * (by - ay)))
    return best


def check_svg(svg_path, nodes_csv, edges_csv):
    """Returns a list of failure messages (empty: passed)."""
    fails = []

    def fail(msg):
        if len(fails) < 25:
            fails.append(msg)

    try:
        root = ET.parse(svg_path).getroot()
    except ET.ParseError as e:
        return [f"not well-formed XML/UTF-8: {e}"]
    data = read_nodes(nodes_csv)
    kept = read_edges(edges_csv)
    # -- the document
    if root.tag != NS + "svg" or root.get("version") != "1.1":
        fail("root is not an SVG 1.1 <svg> in the SVG namespace")
    vb = [float(v) for v in root.get("viewBox", "").split()]
    W, H = float(root.get("width", "nan")), float(root.get("height", "nan"))
    if len(vb) != 4 or vb[0] != 0 or vb[1] != 0 or vb[2] != W or vb[3] != H:
        fail(f"viewBox {vb} does not match width {W} and height {H}")
    if not root.get("font-family", "").startswith("'DejaVu Sans'"):
        fail(f"font stack does not start with DejaVu Sans: {root.get('font-family')!r}")
    # -- nodes
    nodes = {}
    for el in root.iter(NS + "circle"):
        if el.get("class") != "node":
            continue
        item = el.get("data-item")
        cx, cy, r = (float(el.get(k)) for k in ("cx", "cy", "r"))
        if item in nodes:
            fail(f"node {item!r} drawn twice")
        nodes[item] = (cx, cy, r, int(el.get("data-cluster")), float(el.get("data-share")))
        if cx - r < -EPS or cy - r < -EPS or cx + r > W + EPS or cy + r > H + EPS:
            fail(f"node {item!r} leaves the viewBox")
        if item not in data:
            fail(f"node {item!r} is not an item of the data")
        elif data[item][0] != nodes[item][3] or abs(data[item][1] - nodes[item][4]) > 1e-12:
            fail(f"node {item!r}: cluster/share {nodes[item][3:]} differ from the data "
                 f"{data[item]}")
    if not nodes and data:
        fail("no node drawn")
    # -- texts
    texts = []
    labels = {}
    for el in root.iter(NS + "text"):
        cls = el.get("class")
        if cls == "halo":
            continue
        box, fs, text = text_box(el)
        texts.append((box, cls, text))
        if fs < 11 - 1e-9:
            fail(f"text {text!r} is {fs} px, below 11 px")
        if box[0] < -EPS or box[1] < -EPS or box[2] > W + EPS or box[3] > H + EPS:
            fail(f"{cls} {text!r} box {box} leaves the viewBox")
        if cls == "label":
            item = el.get("data-item")
            if item in labels:
                fail(f"node {item!r} labelled twice")
            labels[item] = (box, fs, text)
    for i in range(len(texts)):
        for j in range(i + 1, len(texts)):
            if boxes_overlap(texts[i][0], texts[j][0]):
                fail(f"{texts[i][1]} {texts[i][2]!r} overlaps {texts[j][1]} {texts[j][2]!r}")
    for box, cls, text in texts:
        for item, (cx, cy, r, _, _) in nodes.items():
            if circle_box_dist(cx, cy, box) < r - EPS:
                fail(f"{cls} {text!r} overlaps the node of {item!r}")
    for item, (cx, cy, r, _, _) in nodes.items():
        if item not in labels:
            fail(f"node {item!r} has no label")
            continue
        box, fs, text = labels[item]
        if not (text == item or (text.endswith(ELLIPSIS) and len(text) > 1
                                 and item.startswith(text[:-1].rstrip(" ,-:\u00b7")))):
            fail(f"label {text!r} does not show the name {item!r}")
        d = circle_box_dist(cx, cy, box) - r
        if d > 3 * fs:
            fail(f"label of {item!r} is {d:.1f} px from its node: not beside it")
    for item in labels:
        if item not in nodes:
            fail(f"label {item!r} has no node")
    # -- edges
    drawn = set()
    for el in root.iter(NS + "line"):
        if not (el.get("class") or "").startswith("edge"):
            continue
        a, b = el.get("data-a"), el.get("data-b")
        pair = frozenset((a, b))
        if pair in drawn:
            fail(f"edge {a!r}-{b!r} drawn twice")
        drawn.add(pair)
        if pair not in kept:
            fail(f"edge {a!r}-{b!r} is not a kept pair")
        if a in nodes and b in nodes:
            x1, y1, x2, y2 = (float(el.get(k)) for k in ("x1", "y1", "x2", "y2"))
            ends = {(round(x1, 2), round(y1, 2)), (round(x2, 2), round(y2, 2))}
            want = {(round(nodes[a][0], 2), round(nodes[a][1], 2)),
                    (round(nodes[b][0], 2), round(nodes[b][1], 2))}
            if ends != want:
                fail(f"edge {a!r}-{b!r} does not join the centres of its nodes")
        else:
            fail(f"edge {a!r}-{b!r} has an end that is not drawn")
    for pair in kept:
        if all(x in nodes for x in pair) and pair not in drawn:
            fail(f"kept edge {sorted(pair)} between drawn nodes is not drawn")
    # -- sizes: monotone in share, area proportional to share
    by_share = sorted(nodes.values(), key=lambda v: (v[4], v[2]))
    for u, v in zip(by_share, by_share[1:]):
        if v[2] < u[2] - EPS:
            fail(f"radius {v[2]} at share {v[4]} is below radius {u[2]} at share {u[4]}")
    rmin = min((v[2] for v in nodes.values()), default=0)
    ratios = [v[2] ** 2 / v[4] for v in nodes.values() if v[2] > rmin + 0.05 and v[4] > 0]
    if ratios and max(ratios) > min(ratios) * 1.03 + 1e-9:
        fail(f"circle areas are not proportional to share (r^2/share from {min(ratios):.1f} "
             f"to {max(ratios):.1f})")
    # -- clusters
    size = {}
    for c, _ in data.values():
        size[c] = size.get(c, 0) + 1
    shown = {v[3] for v in nodes.values()}
    for c, k in sorted(size.items()):
        if k >= 3 and c not in shown:
            fail(f"cluster {c} of {k} members has no drawn member")
    for el in root.iter(NS + "g"):
        if el.get("class") == "legend-cluster":
            c, k = int(el.get("data-cluster")), int(el.get("data-size"))
            dr = int(el.get("data-drawn"))
            if size.get(c) != k:
                fail(f"legend gives cluster {c} {k} members, the data {size.get(c)}")
            if dr != sum(1 for v in nodes.values() if v[3] == c):
                fail(f"legend gives cluster {c} {dr} drawn members")
    sub = [t for _, cls, t in texts if cls == "subtitle"]
    want = f"{len(nodes)} of {len(data)} items drawn"
    if len(sub) != 1 or want not in sub[0]:
        fail(f"subtitle {sub} does not say {want!r}")
    # -- regions enclose their members, and each is labelled with its cluster's name
    named = {int(el.get("data-cluster")) for el in root.iter(NS + "text")
             if el.get("class") == "cluster-label"}
    for el in root.iter(NS + "path"):
        if el.get("class") == "region" and int(el.get("data-cluster")) not in named:
            fail(f"the region of cluster {el.get('data-cluster')} has no name on the map")
    for el in root.iter(NS + "path"):
        if el.get("class") != "region":
            continue
        c = int(el.get("data-cluster"))
        nums = [float(t) for t in el.get("d").replace("M", " ").replace("Q", " ")
                .replace("Z", " ").split()]
        poly = hull(list(zip(nums[0::2], nums[1::2])))
        for item, (cx, cy, r, cl, _) in nodes.items():
            if cl == c and not inside(poly, cx, cy):
                fail(f"node {item!r} lies outside the region of its cluster {c}")
            if cl != c and (inside(poly, cx, cy) or poly_dist(poly, cx, cy) < r - EPS):
                fail(f"node {item!r} of cluster {cl} touches the region of cluster {c}")
    # -- the rendered picture: the texts' ink where their boxes say
    for f in check_ink(svg_path, texts):
        fail(f)
    return fails


HALO = 3.5 / 2  # half the halos' stroke width (the SVG's <g id="halos">): ink may reach it
INK = 40  # a pixel is text ink where the two renderings differ by more than this (of 255)


def check_ink(svg_path, texts):
    """Renders the SVG with and without its texts (rsvg-convert) and checks that each text
    puts ink inside its box and that no text ink falls outside every box. Returns failures."""
    import numpy as np
    from PIL import Image
    fails = []
    with tempfile.TemporaryDirectory() as tmp:
        tree = ET.parse(svg_path)
        for parent in tree.getroot().iter():
            for ch in list(parent):
                if ch.tag == NS + "text":
                    parent.remove(ch)
        ET.register_namespace("", NS[1:-1])
        bare_svg = os.path.join(tmp, "bare.svg")
        tree.write(bare_svg, encoding="utf-8", xml_declaration=True)
        pngs = []
        for src in (svg_path, bare_svg):
            dst = os.path.join(tmp, f"{len(pngs)}.png")
            p = subprocess.run(["rsvg-convert", "-o", dst, src], stdout=subprocess.PIPE,
                               stderr=subprocess.PIPE, text=True)
            if p.returncode != 0:
                return [f"rsvg-convert failed: {p.stderr.strip()}"]
            pngs.append(np.asarray(Image.open(dst).convert("RGB"), dtype=np.int16))
    a, b = pngs
    if a.shape != b.shape:
        return ["the two renderings differ in size"]
    ink = np.abs(a - b).max(axis=2) > INK
    h, w = ink.shape
    covered = np.zeros_like(ink)
    grow = HALO + 1  # and a pixel of antialiasing
    for box, cls, text in texts:
        x0, y0 = max(0, int(math.floor(box[0] - grow))), max(0, int(math.floor(box[1] - grow)))
        x1, y1 = min(w, int(math.ceil(box[2] + grow))), min(h, int(math.ceil(box[3] + grow)))
        if x1 <= x0 or y1 <= y0:
            fails.append(f"{cls} {text!r}: its box {box} is outside the picture")
            continue
        covered[y0:y1, x0:x1] = True
        visible = sum(1 for ch in text if not ch.isspace())
        got = int(ink[y0:y1, x0:x1].sum())
        if visible and got < max(3, visible):
            fails.append(f"{cls} {text!r}: {got} pixels of ink in its box {box}")
    stray = ink & ~covered
    total = int(ink.sum())
    if total == 0 and texts:
        fails.append("the rendered picture shows no text at all")
    elif int(stray.sum()) > 0.002 * total:
        ys, xs = np.nonzero(stray)
        fails.append(f"{int(stray.sum())} of {total} pixels of text ink lie outside every text "
                     f"box (first near x={xs[0]}, y={ys[0]})")
    return fails


def driver_binary():
    cand = [os.environ.get("PM_TEST_SVGMAP")]
    if os.environ.get("PAIRMAP"):
        cand.append(str(Path(os.environ["PAIRMAP"]).resolve().parent / "test_svgmap"))
    cand.append(str(REPO / "build" / "test_svgmap"))
    for c in cand:
        if c and os.access(c, os.X_OK):
            return c
    return None


def pairs_of_cli(pairmap, csv_path, extra):
    p = subprocess.run([pairmap, "pairs", str(csv_path), "--quiet"] + extra,
                       stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    if p.returncode != 0:
        return None
    return {frozenset((r["item_a"], r["item_b"])) for r in csv.DictReader(p.stdout.splitlines())}


def main(argv):
    if len(argv) == 4:
        fails = check_svg(argv[1], argv[2], argv[3])
        for f in fails:
            print(f"FAIL {argv[1]}: {f}")
        print(f"{'PASS' if not fails else 'FAIL'} {argv[1]}")
        return 1 if fails else 0
    if len(argv) != 1:
        print(__doc__, file=sys.stderr)
        return 2
    drv = driver_binary()
    if not drv:
        print("svg_geometry: NOT RUN: build/test_svgmap not found (build first)")
        return 2
    pairmap = os.environ.get("PAIRMAP", str(REPO / "build" / "pairmap"))
    bad = 0
    with tempfile.TemporaryDirectory() as tmp:
        p = subprocess.run([drv, "--write", tmp], stdout=subprocess.PIPE,
                           stderr=subprocess.STDOUT, text=True)
        if p.returncode != 0:
            print(p.stdout)
            print("FAIL: test_svgmap --write failed")
            return 1
        names = sorted(f[:-4] for f in os.listdir(tmp) if f.endswith(".svg"))
        if len(names) < 4:
            print(f"FAIL: the driver wrote only {names}")
            return 1
        for n in names:
            base = os.path.join(tmp, n)
            fails = check_svg(base + ".svg", base + ".nodes.csv", base + ".edges.csv")
            for f in fails:
                print(f"FAIL {n}.svg: {f}")
            print(f"{'PASS' if not fails else 'FAIL'} {n}.svg "
                  f"({sum(1 for _ in open(base + '.nodes.csv')) - 1} items)")
            bad += bool(fails)
        # the driver's kept edges are the CLI's default selection (pairmap pairs)
        demo = REPO / "demo" / "cafe-orders.csv"
        cli = pairs_of_cli(pairmap, demo, [])
        mine = read_edges(os.path.join(tmp, "demo.edges.csv"))
        if cli is None:
            print("FAIL: pairmap pairs did not run")
            bad += 1
        elif cli != mine:
            print(f"FAIL: driver edges differ from `pairmap pairs` ({len(mine)} vs {len(cli)})")
            bad += 1
        else:
            print(f"PASS demo edges = `pairmap pairs` ({len(cli)} pairs)")
        # the real command
        out = os.path.join(tmp, "map")
        p = subprocess.run([pairmap, "map", str(demo), "-o", out, "--category-col",
                            "category", "--quiet"],
                           stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        svg = os.path.join(out, "map.svg")
        if p.returncode == 0 and os.path.exists(svg):
            fails = check_svg(svg, os.path.join(out, "nodes.csv"), os.path.join(out, "edges.csv"))
            for f in fails:
                print(f"FAIL map.svg: {f}")
            print(f"{'PASS' if not fails else 'FAIL'} pairmap map: map.svg")
            bad += bool(fails)
        else:
            print(f"FAIL: pairmap map exited {p.returncode}: {p.stderr.strip()}")
            bad += 1
    print(f"svg_geometry: {'all passed' if not bad else f'{bad} failed'}")
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
