#!/usr/bin/env bash
# Negative pairs in the map (issue 16 point 4): at most 2 dashed lines at an item, the
# strongest (largest |phi|) first while both items have room, recomputed here from edges.csv
# with pandas; the summary says how many negative pairs between drawn items were left out of
# the picture (edges.csv keeps them all); the key says |phi| and words the dashed line as the
# hint it is.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
PY=/usr/bin/python3
"$PAIRMAP" map "$DEMO/cafe-orders.csv" --sign both -o "$TMP/m" >"$TMP/summary" 2>/dev/null
check "map --sign both runs" test -s "$TMP/m/map.svg"
check "negative pairs in the picture follow the stated rule" $PY - "$TMP/m" "$TMP/summary" <<'PY'
import re, sys, pandas as pd, xml.etree.ElementTree as ET
d, summary = sys.argv[1], open(sys.argv[2], encoding="utf-8").read()
S = "{http://www.w3.org/2000/svg}"
svg = ET.parse(d + "/map.svg").getroot()
drawn = {c.get("data-item") for c in svg.iter(S + "circle") if c.get("class") == "node"}
neg = {frozenset((l.get("data-a"), l.get("data-b"))) for l in svg.iter(S + "line")
       if l.get("class") == "edge negative"}
edges = pd.read_csv(d + "/edges.csv", keep_default_na=False)
cand = edges[(edges["phi"] < 0) & edges["item_a"].isin(drawn) & edges["item_b"].isin(drawn)]
cand = cand.assign(row=range(len(cand)), w=cand["phi"].abs()).sort_values(["w", "row"], ascending=[False, True])
cnt, want = {}, set()
for a, b in zip(cand["item_a"], cand["item_b"]):
    if cnt.get(a, 0) < 2 and cnt.get(b, 0) < 2:
        want.add(frozenset((a, b)))
        cnt[a] = cnt.get(a, 0) + 1
        cnt[b] = cnt.get(b, 0) + 1
bad = []
if neg != want:
    bad.append("dashed lines: %d drawn, %d by the rule, %d differ" % (len(neg), len(want), len(neg ^ want)))
m = re.search(r"(\d+) negative pairs left out of the picture", summary)
if not m or int(m.group(1)) != len(cand) - len(want):
    bad.append("summary says %r, %d left out" % (m and m.group(0), len(cand) - len(want)))
texts = ["".join(t.itertext()) for t in svg.iter(S + "text")]
if "Line width: |phi|" not in texts:
    bad.append("no 'Line width: |phi|' in the key")
if "dashed: chosen together less than expected" not in " ".join(texts):  # wrapped lines
    bad.append("the dashed key is not worded as a hint")
if len(cand) <= len(want):
    bad.append("the check is empty: no negative pair left out")
print("; ".join(bad)) if bad else None
sys.exit(1 if bad else 0)
PY
finish
