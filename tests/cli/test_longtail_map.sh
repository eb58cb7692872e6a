#!/usr/bin/env bash
# The picture of a long-tailed assortment (issue 15 points 1 and 2; generated scale data from
# scripts/gen-longtail: 20,000 invented items, 40,000 orders, planted dense groups and pairs).
# The default map draws the most chosen items and every planted group with its hub; no label
# is cut below 12 characters (whole, or at least 12 characters and an ellipsis, or left out);
# the summary's counts are those of the SVG and of nodes.csv (counted here with Python's
# xml.etree and pandas). A small canvas forces shortened labels, checked the same way.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
PY=/usr/bin/python3
GEN="$HERE/../../scripts/gen-longtail"
$PY "$GEN" "$TMP/lt.csv" --truth "$TMP/truth.csv" || fail "gen-longtail"
"$PAIRMAP" map "$TMP/lt.csv" -o "$TMP/m" >"$TMP/m.summary" 2>/dev/null
check "default map of the long tail" test -s "$TMP/m/map.svg"
"$PAIRMAP" map "$TMP/lt.csv" -o "$TMP/s" --width 700 --height 500 --draw 60 >"$TMP/s.summary" 2>/dev/null
check "small map of the long tail" test -s "$TMP/s/map.svg"

cat >"$TMP/check.py" <<'PY'
import re, sys, pandas as pd, xml.etree.ElementTree as ET
d, summary, truth, full = sys.argv[1], sys.argv[2], sys.argv[3], sys.argv[4] == "full"
S = "{http://www.w3.org/2000/svg}"
ELL = "\u2026"
svg = ET.parse(d + "/map.svg").getroot()
nodes = pd.read_csv(d + "/nodes.csv", keep_default_na=False)
text = open(summary, encoding="utf-8").read()
bad = []
drawn = {c.get("data-item") for c in svg.iter(S + "circle") if c.get("class") == "node"}
edges = [l for l in svg.iter(S + "line") if (l.get("class") or "").startswith("edge")]
labels = [(t.get("data-item"), "".join(t.itertext())) for t in svg.iter(S + "text") if t.get("class") == "label"]
# labels: whole, or >= 12 characters and an ellipsis (a prefix of the name), or left out;
# a cluster's label may also keep whole members of its name ("3: Walnut cake · …")
short = 0
for item, lab in labels:
    if lab == item:
        continue
    head = lab[:-1].rstrip(" \u00b7") if lab.endswith(ELL) else None
    if head is None or len(head) < 12 or not item.startswith(head):
        bad.append("label %r for %r" % (lab, item))
    short += 1
left_out = len(drawn) - len(labels)
cname = dict(zip(nodes["cluster"], nodes["cluster_name"]))
for t in svg.iter(S + "text"):
    if t.get("class") != "cluster-label":
        continue
    c, lab = int(t.get("data-cluster")), "".join(t.itertext())
    whole = "%d: %s" % (c, cname[c])
    if lab == whole or lab == str(c):
        continue
    head = lab[:-1].rstrip(" \u00b7") if lab.endswith(ELL) else ""
    whole_parts = whole.startswith(head + " \u00b7 ")  # whole members kept: not a cut name
    if (len(head) - len("%d: " % c) < 12 and not whole_parts) or not whole.startswith(head):
        bad.append("cluster label %r" % lab)
# the summary's counts
m = re.search(r"picture +(\d+) of (\d+) items drawn, (\d+) edges", text)
if not m or int(m.group(1)) != len(drawn) or int(m.group(2)) != len(nodes) or int(m.group(3)) != len(edges):
    bad.append("picture line %r: drawn %d of %d, %d edges" % (m and m.group(0), len(drawn), len(nodes), len(edges)))
m = re.search(r"labels: (\d+) shortened .*?, (\d+) left out", text)
if not m or (int(m.group(1)), int(m.group(2))) != (short, left_out):
    bad.append("labels line %r: %d shortened, %d left out" % (m and m.group(0), short, left_out))
size = nodes.groupby("cluster").size()
drawn_cl = set(nodes[nodes["item"].isin(drawn)]["cluster"])
big = [c for c in size.index if size[c] >= 3]
m = re.search(r"the hubs of (\d+) of (\d+) clusters of 3 or more", text)
if not m or (int(m.group(1)), int(m.group(2))) != (len([c for c in big if c in drawn_cl]), len(big)):
    bad.append("clusters line %r" % (m and m.group(0)))
pairs_out = len([c for c in size.index if size[c] == 2 and c not in drawn_cl])
m = re.search(r"(\d+) clusters of 2 summarised", text)
if pairs_out and (not m or int(m.group(1)) != pairs_out):
    bad.append("%d clusters of 2 not drawn, summary: %r" % (pairs_out, m and m.group(0)))
if full:
    # the most chosen items (by respondents in nodes.csv, ties by name) are drawn
    top = nodes.sort_values(["respondents", "item"], ascending=[False, True])["item"][:6]
    missing = [i for i in top if i not in drawn]
    if missing:
        bad.append("most chosen items not drawn: %r" % missing)
    # every planted group: its hub and at least three of its members
    tr = pd.read_csv(truth, keep_default_na=False)
    for g, rows in tr[tr["kind"] != "staple"].groupby("group"):
        hub = rows[rows["kind"] == "hub"]["item"].iloc[0]
        got = [i for i in rows["item"] if i in drawn]
        if hub not in drawn or len(got) < 3:
            bad.append("planted group %s: hub drawn %s, %d members drawn" % (g, hub in drawn, len(got)))
if not full and not any(t.get("class") in ("label", "cluster-label") and "".join(t.itertext()).endswith(ELL)
                        for t in svg.iter(S + "text")):
    bad.append("the small map shortens no label (the check would be empty)")
for b in bad[:8]:
    print(b)
sys.exit(1 if bad else 0)
PY
check "default map: staples, planted groups, labels, summary" $PY "$TMP/check.py" "$TMP/m" "$TMP/m.summary" "$TMP/truth.csv" full
check "small map: labels and summary" $PY "$TMP/check.py" "$TMP/s" "$TMP/s.summary" "$TMP/truth.csv" small
finish
