"""map.html in a real browser (Debian's chromium, headless): the page's numbers against the
CLI's own documented outputs, its escaping against hostile names, and its offline promise.

References, outside the page's code:
- `pairmap partners INPUT --family all --item X --csv --top 0` (the map's family of tests; with
  --min-phi / --max-q for the filters):
  the documented ranked partner list the side panel must repeat, row for row, number for
  number (the page's data-v attributes parse to the same doubles as the CSV's numbers);
- `pairmap pairs INPUT --min-phi F` and edges.csv: which edges a filter keeps;
- nodes.csv: cluster members and their order (cluster, share descending, name);
- the DOM Chromium builds (document.documentElement.outerHTML after a fresh load of each
  page#fragment, over the DevTools pipe of one headless browser: scripts/cdp_pipe.py),
  parsed by Python's html.parser;
- a screenshot checked with PIL (not blank: many colours, much non-white);
- with networking disabled (a new network namespace, unshare -n) the same DOM;
- segments.csv's index column: the shrunk index the segment selector tints by.
Run as `python3 html_page.py PAIRMAP REPO TMPDIR`.
"""
import csv
import io
import json
import os
import re
import shutil
import subprocess
import sys
import urllib.parse
from html.parser import HTMLParser

PAIRMAP, REPO, TMP = sys.argv[1], sys.argv[2], sys.argv[3]
DEMO = os.path.join(REPO, "demo", "cafe-orders.csv")
FAILS = []


def fail(msg):
    FAILS.append(msg)
    print("FAIL: " + msg, file=sys.stderr)


def check(cond, msg):
    if not cond:
        fail(msg)
    return cond


def run(args, **kw):
    return subprocess.run(args, check=True, capture_output=True, **kw)


def cli_csv(args):
    out = run([PAIRMAP] + args).stdout.decode("utf-8")
    return list(csv.DictReader(io.StringIO(out)))


sys.path.insert(0, os.path.join(REPO, "scripts"))
from cdp_pipe import Browser  # noqa: E402  (one headless chromium for every page load)

BROWSERS = {}


def browser(wrap=()):
    key = tuple(wrap)
    if key not in BROWSERS:
        BROWSERS[key] = Browser(os.path.join(TMP, "chromium-%d" % len(BROWSERS)), wrap)
        # the viewport of the screenshot: 1280x800 CSS pixels at scale 1
        BROWSERS[key].call("Emulation.setDeviceMetricsOverride", session=True, width=1280,
                           height=800, deviceScaleFactor=1, mobile=False)
    return BROWSERS[key]


def url_of(page, fragment=""):
    return "file://" + urllib.parse.quote(page) + ("#" + fragment if fragment else "")


def dump(page, fragment="", wrap=()):
    """The DOM after a fresh load of page#fragment and two drawn frames."""
    b = browser(wrap)
    b.load(url_of(page, fragment))
    b.js("new Promise(function (r) { requestAnimationFrame(function () {"
         " requestAnimationFrame(function () { r(1); }); }); })")
    return b.dom()


class Dom(HTMLParser):
    """Every element as (tag, attrs, text inside it), plus the text of the whole document."""

    def __init__(self, text):
        super().__init__(convert_charrefs=True)
        self.elems, self.stack = [], []
        self.feed(text)

    def handle_starttag(self, tag, attrs):
        e = {"tag": tag, "attrs": dict(attrs), "text": []}
        self.elems.append(e)
        if tag not in ("meta", "input", "br", "img", "link", "line", "circle", "path",
                       "rect", "stop", "use", "ellipse", "polygon", "polyline"):
            self.stack.append(e)

    def handle_startendtag(self, tag, attrs):
        self.elems.append({"tag": tag, "attrs": dict(attrs), "text": []})

    def handle_endtag(self, tag):
        for i in range(len(self.stack) - 1, -1, -1):
            if self.stack[i]["tag"] == tag:
                del self.stack[i:]
                break

    def handle_data(self, data):
        for e in self.stack:
            e["text"].append(data)

    def find(self, pred):
        return [e for e in self.elems if pred(e)]

    def by_id(self, id_):
        got = self.find(lambda e: e["attrs"].get("id") == id_)
        return got[0] if got else None


def classes(e):
    return (e["attrs"].get("class") or "").split()


def text(e):
    return "".join(e["text"])


def ready(dom, what):
    body = dom.find(lambda e: e["tag"] == "body")
    return check(body and body[0]["attrs"].get("data-ready") == "1",
                 "%s: the page's script did not finish (no data-ready on body)" % what)


def highlighted(dom):
    return {e["attrs"]["data-item"] for e in dom.find(
        lambda e: e["tag"] == "circle" and "node" in classes(e) and "pm-hl" in classes(e))}


def panel_rows(dom, table_id):
    """The rows of a panel table: the partner's name and each cell's data-* values."""
    rows = []
    in_table = False
    for e in dom.elems:
        if e["tag"] == "table":
            in_table = e["attrs"].get("id") == table_id
        elif in_table and e["tag"] == "tr" and "data-item" in e["attrs"]:
            rows.append({"name": e["attrs"]["data-item"], "cells": {}})
        elif in_table and e["tag"] == "td" and rows:
            rows[-1]["cells"][e["attrs"].get("data-col")] = e["attrs"]
    return rows


# columns of `partners --csv` and where the panel holds each
COLS = [("together", "together", "data-v"), ("expected", "expected", "data-v"),
        ("confidence", "confidence", "data-v"), ("confidence_low", "confidence", "data-low"),
        ("confidence_high", "confidence", "data-high"), ("lift", "lift", "data-v"),
        ("phi", "phi", "data-v"), ("q_value", "q_value", "data-v")]


def same_partners(dom, item, ref, what):
    """The panel's rows equal `partners --csv` rows: same names, order, numbers (as doubles:
    the CSV prints shortest round-trip numbers, the page JavaScript's Number)."""
    rows = panel_rows(dom, "pm-partners")
    check([r["name"] for r in rows] == [r["partner"] for r in ref],
          "%s: partner order %s, partners --csv %s" % (what, [r["name"] for r in rows],
                                                      [r["partner"] for r in ref]))
    for got, want in zip(rows, ref):
        for col, cell, attr in COLS:
            g = got["cells"].get(cell, {}).get(attr)
            if not check(g is not None and float(g) == float(want[col]),
                         "%s: %s / %s: page %s, partners --csv %s" % (what, want["partner"], col,
                                                                     g, want[col])):
                return
    return rows


def back_confidence(dom, item, rows, what):
    """The 'back' column: confidence of the partner towards the item, which is the
    confidence column of `partners --item PARTNER` on the item's row."""
    for r in rows[:3]:
        ref = cli_csv(["partners", DEMO, "--family", "all", "--item", r["name"], "--csv", "--top", "0", "-q"])
        want = [x for x in ref if x["partner"] == item]
        g = r["cells"].get("confidence_back", {}).get("data-v")
        check(want and g is not None and float(g) == float(want[0]["confidence"]),
              "%s: back confidence of %s: page %s, partners --item %s: %s" % (
                  what, r["name"], g, r["name"], want[0]["confidence"] if want else None))


def item_view(page, item, extra_frag="", cli_extra=(), what=None):
    what = what or "item %r %s" % (item, extra_frag)
    frag = "item=" + urllib.parse.quote(item, safe="") + extra_frag
    raw = dump(page, frag)
    dom = Dom(raw)
    dom.raw = raw
    if not ready(dom, what):
        return dom, []
    ref = cli_csv(["partners", DEMO, "--family", "all", "--item", item, "--csv", "--top", "0", "-q"] +
                  list(cli_extra))
    check(len(ref) > 0, "%s: the reference lists no partner (a test that cannot fail)" % what)
    h = dom.by_id("pm-item")
    check(h is not None and text(h) == item, "%s: panel heading %r" % (what, h and text(h)))
    rows = same_partners(dom, item, ref, what) or []
    want = {item} | {r["partner"] for r in ref}
    check(highlighted(dom) == want, "%s: highlighted %s, want the item and its partners %s" % (
        what, sorted(highlighted(dom)), sorted(want)))
    return dom, rows


def main():
    out = os.path.join(TMP, "cafe")
    run([PAIRMAP, "map", DEMO, "-o", out, "-q"])
    page = os.path.join(out, "map.html")
    raw = open(page, "rb").read()
    size = len(raw)
    print("cafe page: %d bytes" % size)
    check(size < 300 * 1024, "the cafe page weighs %d bytes (limit 300 KB)" % size)

    # no URL but XML namespace names: nothing to fetch
    urls = set(re.findall(rb"https?:[^\s\"'<>)]*", raw))
    allowed = {b"http://www.w3.org/2000/svg", b"http://www.w3.org/1999/xlink",
               b"http://www.w3.org/XML/1998/namespace"}
    check(urls <= allowed, "URLs in the page: %s" % sorted(urls - allowed))
    check(not re.search(rb"<(link|img|iframe|object|embed)\b|\bsrc=|@import|url\(", raw),
          "the page names an external resource")

    # 1. Espresso: the panel repeats `partners`, the back column `partners` of each partner
    dom, rows = item_view(page, "Espresso")
    back_confidence(dom, "Espresso", rows, "Espresso")
    plain_dom = dom.raw
    # the cluster list names the clusters as run.json does (the names of the SVG legend), and
    # the footer gives run.json's version and input size
    runj = json.load(open(os.path.join(out, "run.json"), encoding="utf-8"))
    listed = [text(e) for e in dom.find(lambda e: e["tag"] == "button" and
                                        e["attrs"].get("data-cluster", "alone") != "alone")]
    want = ["%s%d" % (c["name"], c["size"]) for c in runj["clusters"] if c["size"] > 1]
    check(listed == want, "cluster list %s, run.json %s" % (listed, want))
    foot = text(dom.by_id("pm-footer") or {"text": []})
    check(("pairmap %s" % runj["pairmap"]) in foot and
          "{:,} bytes".format(runj["input_file"]["bytes"]) in foot and
          "{:,} lines".format(runj["counts"]["lines"]) in foot,
          "footer %r lacks run.json's version or input size" % foot)

    # 2. a name with a comma, 3. one with an accent and a phi filter (= partners --min-phi)
    item_view(page, "Apple strudel, warm")
    # the threshold is the phi of its second partner, to the last digit: a pair at the
    # threshold stays (|phi| >= F, as --min-phi)
    thr = cli_csv(["partners", DEMO, "--family", "all", "--item", "Crème caramel", "--csv", "--top", "0",
                   "-q"])[1]["phi"]
    d3, _ = item_view(page, "Crème caramel", "&phi=" + thr, ["--min-phi", thr])
    # the filter hides exactly the edges that `pairs --min-phi F` leaves out
    kept = {(r["item_a"], r["item_b"]) for r in cli_csv(["pairs", DEMO, "--min-phi", thr,
                                                          "-q"])}
    shown = {(e["attrs"]["data-a"], e["attrs"]["data-b"]) for e in d3.find(
        lambda e: e["tag"] == "line" and "edge" in classes(e) and "pm-off" not in classes(e))}
    shown = {tuple(sorted(p, key=lambda s: s.encode())) for p in shown}
    check(shown == kept and len(kept) > 0,
          "phi=%s: %d edges shown, pairs --min-phi keeps %d" % (thr, len(shown), len(kept)))

    # 4. a cluster with a q filter: members as nodes.csv lists them, in its order
    nodes = list(csv.DictReader(open(os.path.join(out, "nodes.csv"), encoding="utf-8")))
    frag = "cluster=2&q=1e-20"
    d4 = Dom(dump(page, frag))
    if ready(d4, frag):
        want = [r["item"] for r in nodes if r["cluster"] == "2"]
        got = [r["name"] for r in panel_rows(d4, "pm-members")]
        check(got == want, "cluster 2: panel lists %s, nodes.csv %s" % (got, want))
        check(highlighted(d4) == set(want), "cluster 2: highlighted %s" % sorted(highlighted(d4)))
        edges = list(csv.DictReader(open(os.path.join(out, "edges.csv"), encoding="utf-8")))
        want_e = {(r["item_a"], r["item_b"]) for r in edges if float(r["q_value"]) <= 1e-20}
        got_e = {tuple(sorted((e["attrs"]["data-a"], e["attrs"]["data-b"]),
                              key=lambda s: s.encode())) for e in d4.find(
            lambda e: e["tag"] == "line" and "edge" in classes(e) and "pm-off" not in classes(e))}
        check(got_e == want_e and 0 < len(want_e) < len(edges),
              "q=1e-20: %d edges shown, edges.csv has %d with q <= 1e-20" % (len(got_e),
                                                                          len(want_e)))

    # 5. networking disabled: the same DOM
    if os.geteuid() == 0 or subprocess.run(["unshare", "-rn", "true"]).returncode == 0:
        wrap = ["unshare", "-n"] if os.geteuid() == 0 else ["unshare", "-rn"]
        offline = dump(page, "item=Espresso", wrap)
        check(offline == plain_dom and "pm-partners" in offline,
              "the DOM differs with networking disabled")
    else:
        fail("cannot disable networking here (unshare -n): the offline check did not run")

    # 6. a screenshot at 1280x800, not blank
    shot = os.path.join(TMP, "cafe.png")
    dump(page, "item=Espresso")
    browser().screenshot(shot)
    from PIL import Image
    im = Image.open(shot).convert("RGB")
    check(im.size == (1280, 800), "screenshot size %s" % (im.size,))
    px = list(im.getdata())
    nonwhite = sum(1 for p in px if min(p) < 235) / len(px)
    colours = len(set(px))
    print("screenshot: %.1f%% not white, %d colours" % (100 * nonwhite, colours))
    check(nonwhite > 0.05 and colours > 200, "the screenshot looks blank")

    interaction(page)
    segments_view(os.path.join(TMP, "segments"))
    weighted_both(os.path.join(TMP, "weighted"))
    hostile(os.path.join(TMP, "hostile"))


def key(b, k, code, vk, text=None):
    """A real key press, as the keyboard sends it (Input.dispatchKeyEvent)."""
    down = dict(type="keyDown", key=k, code=code, windowsVirtualKeyCode=vk)
    if text:
        down["text"] = text
    b.call("Input.dispatchKeyEvent", session=True, **down)
    b.call("Input.dispatchKeyEvent", session=True, type="keyUp", key=k, code=code,
           windowsVirtualKeyCode=vk)


FRAMES = ("new Promise(function (r) { requestAnimationFrame(function () {"
          " requestAnimationFrame(function () { r(1); }); }); })")
# the view box, the scale of user units to screen pixels (meet) and each label's size on the
# screen
VIEW_JS = """(function () {
  var v = document.getElementById('pm-view'), s = v.querySelector('svg');
  var b = s.getAttribute('viewBox').split(' ').map(Number);
  var k = Math.min(v.clientWidth / b[2], v.clientHeight / b[3]);
  var px = [].map.call(s.querySelectorAll('text.label'), function (t) {
    return parseFloat(t.getAttribute('font-size')) * k; });
  return {box: b, scale: k, min: Math.min.apply(null, px), max: Math.max.apply(null, px)};
})()"""


def interaction(page):
    """Keyboard and mouse, as a person uses the page: every control reached by Tab with a
    visible focus ring and a name in Chromium's accessibility tree; + and - zoom by 1.25, the
    arrows pan, the wheel zooms about the pointer; labels stay at least 11 px on the screen
    (README) and never grow past their drawn size once zoomed in."""
    b = browser()
    b.load(url_of(page, "item=Espresso"))
    b.js(FRAMES)
    # Tab order: what receives the focus, and whether the focus is drawn
    seen = {}
    for _ in range(45):
        key(b, "Tab", "Tab", 9)
        who, style, width = b.js(
            "(function () { var e = document.activeElement, c = getComputedStyle(e);"
            " return [e.id || (e.getAttribute('data-cluster') ? 'cluster' : '') ||"
            " (e.getAttribute('data-item') ? 'item' : e.tagName), c.outlineStyle,"
            " parseFloat(c.outlineWidth)]; })()")
        seen[who] = seen.get(who, True) and style != "none" and width >= 2
    for want in ("pm-search", "pm-phi", "pm-q", "pm-clear", "pm-view", "pm-zoom-in",
                 "pm-zoom-out", "pm-zoom-fit", "cluster", "item"):
        check(want in seen, "Tab never reaches %s (reached: %s)" % (want, sorted(seen)))
        check(seen.get(want), "%s has no visible focus ring" % want)
    b.call("Accessibility.enable", session=True)
    nodes = b.call("Accessibility.getFullAXTree", session=True)["nodes"]
    roles = ("button", "textbox", "combobox", "slider", "checkbox", "searchbox")
    unnamed = [n.get("role", {}).get("value") for n in nodes
               if n.get("role", {}).get("value") in roles and not n.get("ignored")
               and not (n.get("name") or {}).get("value")]
    named = [n for n in nodes if n.get("role", {}).get("value") in roles]
    check(len(named) >= 10 and not unnamed, "controls without an accessible name: %s" % unnamed)
    # zoom and pan by keyboard
    b.js("document.getElementById('pm-view').focus()")
    v0 = b.js(VIEW_JS)
    check(v0["min"] >= 11 - 0.01, "labels %.2f px on the screen at the whole view" % v0["min"])
    key(b, "+", "Equal", 187, "+")
    b.js(FRAMES)
    v1 = b.js(VIEW_JS)
    check(abs(v0["box"][2] / v1["box"][2] - 1.25) < 1e-9, "+ zoomed %r -> %r" % (v0["box"],
                                                                               v1["box"]))
    for _ in range(8):
        key(b, "+", "Equal", 187, "+")
    b.js(FRAMES)
    v2 = b.js(VIEW_JS)
    check(v2["min"] >= 11 - 0.01 and v2["max"] <= 13 + 0.01,  # font-size has 3 decimals
          "zoomed in: labels %.2f..%.2f px on the screen" % (v2["min"], v2["max"]))
    key(b, "ArrowRight", "ArrowRight", 39)
    b.js(FRAMES)
    v3 = b.js(VIEW_JS)
    check(v3["box"][0] > v2["box"][0] and v3["box"][1] == v2["box"][1],
          "ArrowRight did not pan right: %r -> %r" % (v2["box"], v3["box"]))
    key(b, "0", "Digit0", 48, "0")
    b.js(FRAMES)
    check(b.js(VIEW_JS)["box"] == v0["box"], "0 did not show the whole map again")
    # the wheel: zoom by 1.2 about the pointer (the map point under it stays under it)
    r = b.js("(function () { var e = document.getElementById('pm-view')"
             ".getBoundingClientRect(); return [e.left, e.top, e.width, e.height]; })()")
    x, y = r[0] + r[2] * 0.3, r[1] + r[3] * 0.4
    under = "(function () { var s = document.querySelector('#pm-view svg');" \
            " var p = s.createSVGPoint(); p.x = %f; p.y = %f;" \
            " p = p.matrixTransform(s.getScreenCTM().inverse()); return [p.x, p.y]; })()" % (x, y)
    p0 = b.js(under)
    b.call("Input.dispatchMouseEvent", session=True, type="mouseWheel", x=x, y=y, deltaX=0,
           deltaY=-120)
    b.js(FRAMES)
    v4, p1 = b.js(VIEW_JS), b.js(under)
    check(abs(v0["box"][2] / v4["box"][2] - 1.2) < 1e-9, "the wheel zoomed %r -> %r" % (
        v0["box"], v4["box"]))
    check(abs(p0[0] - p1[0]) < 0.5 and abs(p0[1] - p1[1]) < 0.5,
          "the point under the pointer moved: %r -> %r" % (p0, p1))
    # typing and Enter choose an item, and the address keeps it
    b.load(url_of(page))
    b.js("document.getElementById('pm-search').focus()")
    for ch in "espr":
        b.call("Input.insertText", session=True, text=ch)
    shown = b.js("[].map.call(document.querySelectorAll('#pm-suggest li'),"
                 " function (e) { return e.getAttribute('data-item'); })")
    check(shown and shown[0] == "Espresso", "suggestions for 'espr': %r" % shown)
    key(b, "Enter", "Enter", 13, "\r")
    check(b.js("location.hash") == "#item=Espresso", "after Enter the address is %r" %
          b.js("location.hash"))
    # the phi slider by keyboard: one step, into the address
    b.js("document.getElementById('pm-phi').focus()")
    key(b, "ArrowRight", "ArrowRight", 39)
    check(b.js("location.hash") == "#item=Espresso&phi=0.01",
          "after a phi step the address is %r" % b.js("location.hash"))
    # the pointer over a cluster's button lights that cluster (run.json's members); off it,
    # the chosen item again
    runj = json.load(open(os.path.join(os.path.dirname(page), "run.json"), encoding="utf-8"))
    r = b.js("(function () { var e = document.querySelector('#pm-cluster-list button');"
             " var r = e.getBoundingClientRect(); return [r.left + r.width / 2,"
             " r.top + r.height / 2]; })()")
    lit = "[].map.call(document.querySelectorAll('circle.node.pm-hl'), function (e) {" \
          " return e.getAttribute('data-item'); }).sort()"
    before = b.js(lit)
    b.call("Input.dispatchMouseEvent", session=True, type="mouseMoved", x=r[0], y=r[1])
    check(sorted(b.js(lit)) == sorted(runj["clusters"][0]["members"]),
          "hover on cluster 1 lit %r" % b.js(lit))
    b.call("Input.dispatchMouseEvent", session=True, type="mouseMoved", x=5, y=5)
    check(b.js(lit) == before, "after the hover the lit items are %r" % b.js(lit))


def segments_view(out):
    """map --segment-col: the selector offers every segment of every column, and with one
    chosen (column=COL&segment=LEVEL in the fragment) every drawn item carries and is tinted
    by its shrunk index there, which is segments.csv's index column (the numbers to the last
    digit); the item panel gives the chosen item's."""
    run([PAIRMAP, "map", DEMO, "-o", out, "-q", "--segment-col", "location", "--segment-col",
         "time_band"])
    page = os.path.join(out, "map.html")
    seg = list(csv.DictReader(open(os.path.join(out, "segments.csv"), encoding="utf-8")))
    level = [r["segment"] for r in seg if r["attribute"] == "location"][-1]  # not the first
    index = {r["item"]: r["index"] for r in seg
             if r["attribute"] == "location" and r["segment"] == level}
    what = "segments, location = %s" % level
    dom = Dom(dump(page, "item=Espresso&column=location&segment=" +
                   urllib.parse.quote(level, safe="")))
    if not ready(dom, what):
        return
    options = [text(e) for e in dom.find(lambda e: e["tag"] == "option")]
    want = sorted({(r["attribute"], r["segment"]) for r in seg})
    check(len(options) == 1 + len(want) and
          sorted(tuple(o.split(" \u00b7 ", 1)) for o in options[1:]) == want,
          "%s: the selector offers %s, segments.csv has %s" % (what, options, want))
    nodes = dom.find(lambda e: e["tag"] == "circle" and "node" in classes(e))
    check(len(nodes) > 0, "%s: no node drawn" % what)
    fills = set()
    for e in nodes:
        name, got = e["attrs"].get("data-item"), e["attrs"].get("data-index")
        fills.add(e["attrs"].get("fill"))
        if not check(got is not None and float(got) == float(index[name]),
                     "%s: %s index %s, segments.csv %s" % (what, name, got, index.get(name))):
            break
    check(len(fills) > 3, "%s: the items are not tinted (%s)" % (what, fills))
    p = dom.by_id("pm-seg-index")
    check(p is not None and float(p["attrs"]["data-v"]) == float(index["Espresso"]),
          "%s: the panel's index %s, segments.csv %s" % (what, p and p["attrs"], index["Espresso"]))


def weighted_both(out):
    """Weighted input under --sign both: the panel ranks by |phi| and shows the weighted
    numbers as `partners` does; neg=0 hides the negative partners (the positive rows of the
    same list remain, in the same order). Weights invented: 1 + (order number mod 5) / 4."""
    src = os.path.join(TMP, "weighted.csv")
    with open(DEMO, encoding="utf-8", newline="") as f, \
            open(src, "w", encoding="utf-8", newline="") as g:
        r, w = csv.reader(f), csv.writer(g)
        w.writerow(next(r) + ["weight"])
        for row in r:
            w.writerow(row + [str(1 + (int(row[0][1:]) % 5) / 4)])
    opts = ["--weight-col", "weight", "--sign", "both", "--min-count", "3"]
    run([PAIRMAP, "map", src, "-o", out, "-q"] + opts)
    page = os.path.join(out, "map.html")
    ref = cli_csv(["partners", src, "--family", "all", "--item", "Espresso", "--csv", "--top", "0", "-q"] + opts)
    check(any(float(r["phi"]) < 0 for r in ref) and any(float(r["phi"]) > 0 for r in ref),
          "weighted --sign both: the reference needs partners of both signs")
    for frag, want in (("", ref), ("&neg=0", [r for r in ref if float(r["phi"]) > 0])):
        what = "weighted, --sign both, Espresso" + frag
        dom = Dom(dump(page, "item=Espresso" + frag))
        if not ready(dom, what):
            continue
        same_partners(dom, "Espresso", want, what)
        check(highlighted(dom) == {"Espresso"} | {r["partner"] for r in want},
              "%s: highlighted %s" % (what, sorted(highlighted(dom))))


HOSTILE = [
    "<script>document.body.setAttribute('data-pwned','1')</script>",
    "</script><script>document.body.setAttribute('data-pwned','2')</script>",
    "<img src=x onerror=\"document.body.setAttribute('data-pwned','3')\">",
    "\"quoted\" and 'single' & <b>bold</b>",
    "left \u202eright\u202c \u2066isolate\u2069 \u2028line",
    "<!-- comment",
]


def hostile(out):
    """Names that try to end the script element, run a script or reorder text."""
    src = os.path.join(TMP, "hostile.csv")
    with open(src, "w", encoding="utf-8", newline="") as f:
        w = csv.writer(f)
        w.writerow(["order", "item"])
        for r in range(300):  # every hostile name with its neighbour, plus a filler item
            w.writerow(["o%d" % r, HOSTILE[r % len(HOSTILE)]])
            w.writerow(["o%d" % r, HOSTILE[(r + 1) % len(HOSTILE)]])
            if r % 3 == 0:
                w.writerow(["o%d" % r, "Filler"])
        for r in range(300, 600):
            w.writerow(["o%d" % r, "Filler"])
            w.writerow(["o%d" % r, "Other"])
    run([PAIRMAP, "map", src, "-o", out, "-q", "--title", "<script>x</script> title"])
    page = os.path.join(out, "map.html")
    raw = open(page, encoding="utf-8").read()
    check(raw.count("</script>") == 3, "a name ended a script element early")  # data, run, code
    for name in (HOSTILE[1], HOSTILE[4]):
        dom = Dom(dump(page, "item=" + urllib.parse.quote(name, safe="")))
        what = "hostile name %r" % name
        if not ready(dom, what):
            continue
        body = dom.find(lambda e: e["tag"] == "body")[0]
        check("data-pwned" not in body["attrs"], "%s: an injected script ran" % what)
        check(not dom.find(lambda e: e["tag"] in ("img", "b")),
              "%s: a name became markup" % what)
        h = dom.by_id("pm-item")
        check(h is not None and text(h) == name, "%s: heading shows %r" % (what, h and text(h)))
        check(len(panel_rows(dom, "pm-partners")) > 0, "%s: no partner row" % what)
        title = dom.find(lambda e: e["tag"] == "title")
        check(title and text(title[0]) == "<script>x</script> title",
              "the title is not shown as text: %r" % (title and text(title[0])))
        # the panel's partners are those of `partners --csv` (names as text, in order), and
        # the item and each of them is lit in the picture
        ref = cli_csv(["partners", src, "--family", "all", "--item", name, "--csv", "--csv-raw", "--top", "0",
                       "-q"])
        got = [r["name"] for r in panel_rows(dom, "pm-partners")]
        check(got == [r["partner"] for r in ref] and got,
              "%s: panel partners %r, partners --csv %r" % (what, got,
                                                          [r["partner"] for r in ref]))
        check(len(highlighted(dom)) == 1 + len(ref),
              "%s: %d nodes lit for %d partners" % (what, len(highlighted(dom)), len(ref)))
        # names without controls are drawn as they are (the SVG's data-item attributes)
        drawn = {e["attrs"].get("data-item") for e in dom.find(
            lambda e: e["tag"] == "circle" and "node" in classes(e))}
        for other in HOSTILE[:4] + HOSTILE[5:]:
            check(other in drawn, "%s: %r is not drawn as text" % (what, other))


try:
    main()
finally:
    for b in BROWSERS.values():
        b.close()
if FAILS:
    print("%d check(s) failed" % len(FAILS), file=sys.stderr)
    sys.exit(1)
print("html page: all checks passed")
