#!/usr/bin/env bash
# Cluster names (issue 15 point 1, issue 16 point 5): one naming rule everywhere. nodes.csv's
# cluster_name (appended after the existing columns) is the cluster's three most central
# members, by weighted degree inside the cluster (the sum of the phi of its kept positive
# edges to other members, from edges.csv), ties by share, then by name, joined by " · ",
# computed here independently with pandas; the summary lists the same names, and the SVG's
# legend names each cluster it lists the same way (whole, or shortened with an ellipsis).
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
PY=/usr/bin/python3
for data in "$DEMO/cafe-orders.csv" "$DEMO/festival-survey.csv"; do
    args=()
    case "$data" in
    *festival*) args=(--format wide --columns drinks_ --columns "hot dishes" --columns sweets_
                      --skip-col drinks_other --drop-value -) ;;
    esac
    out="$TMP/$(basename "$data" .csv)"
    "$PAIRMAP" map "$data" "${args[@]}" -o "$out" >"$out.summary" 2>/dev/null
    check "map runs on $(basename "$data")" test -s "$out/nodes.csv"
    check "cluster_name follows the rule on $(basename "$data")" $PY - "$out" <<'PY'
import sys, pandas as pd, xml.etree.ElementTree as ET
d = sys.argv[1]
nodes = pd.read_csv(d + "/nodes.csv", keep_default_na=False)
edges = pd.read_csv(d + "/edges.csv", keep_default_na=False)
cols = list(nodes.columns)
assert cols[10] == "cluster_name" and cols[:10] == ["item", "category", "respondents", "share",
    "share_low", "share_high", "cluster", "degree", "x", "y"], cols
cl = dict(zip(nodes["item"], nodes["cluster"]))
share = dict(zip(nodes["item"], nodes["share"]))
inner = {i: 0.0 for i in nodes["item"]}
for a, b, phi in zip(edges["item_a"], edges["item_b"], edges["phi"]):
    if phi > 0 and cl[a] == cl[b]:
        inner[a] += phi
        inner[b] += phi
bad = 0
want = {}
for c, g in nodes.groupby("cluster"):
    members = sorted(g["item"], key=lambda i: (-inner[i], -share[i], i.encode()))
    want[c] = " \u00b7 ".join(members[:3])
    got = set(g["cluster_name"])
    if got != {want[c]}:
        print("cluster", c, "named", got, "expected", want[c]); bad += 1
# the summary's list: "  N  K items  NAME"
for line in open(d + ".summary", encoding="utf-8"):
    parts = line.split(None, 3)
    if len(parts) == 4 and parts[0].isdigit() and parts[2] == "items":
        if parts[3].rstrip("\n") != want[int(parts[0])]:
            print("summary", line.strip()); bad += 1
# the legend: each listed cluster's heading starts with its name or a shortened form of it
S = "{http://www.w3.org/2000/svg}"
svg = ET.parse(d + "/map.svg").getroot()
for g in svg.iter(S + "g"):
    if g.get("class") != "legend-cluster":
        continue
    c = int(g.get("data-cluster"))
    # the heading: its bold lines (wrapped at spaces), after the cluster's number
    head = " ".join("".join(t.itertext()) for t in g.iter(S + "text") if t.get("font-weight") == "bold")
    if not head.startswith("%d: " % c):
        print("legend of cluster", c, "does not start with its number:", repr(head)); bad += 1
    head = head[len("%d: " % c):].rsplit("\u00a0(", 1)[0]  # the size follows a no-break space
    name = want[c]
    ok = head.startswith(name) or (head.endswith("\u2026") and name.startswith(head.rstrip("\u2026 \u00b7")))
    if not ok:
        print("legend of cluster", c, repr(head), "for", repr(name)); bad += 1
sys.exit(1 if bad else 0)
PY
done
finish
