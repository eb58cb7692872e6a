#!/usr/bin/env bash
# map --segment-col (issue 14 point 4): DIR/segments.csv is `pairmap segments` byte for byte;
# DIR/segments.svg is valid XML (xmllint), has one column per segment headed by its base and
# one row per item (at most --draw), rows grouped by the map's clusters in nodes.csv's cluster
# order, every cell's shrunk share, index and mark equal to the segments table; run.json
# records the columns, levels, bases, m, log-likelihood and what was left out; map.graphml
# holds each vertex's segment with the highest shrunk index (checked with networkx's GraphML
# reader against a pandas group-by maximum over segments.csv). Data: the invented café demo.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
D="$DEMO/cafe-orders.csv"
SEG=(--segment-col location --segment-col time_band)
CASES=$((CASES + 1))
"$PAIRMAP" map "$D" "${SEG[@]}" -o "$TMP/m" >"$TMP/m.out" 2>"$TMP/m.err" || fail "map --segment-col: exit $?: $(cat "$TMP/m.err")"
"$PAIRMAP" segments "$D" "${SEG[@]}" >"$TMP/seg.csv" 2>"$TMP/seg.err" || fail "segments: exit $?"
check "segments.csv is the output of pairmap segments" cmp -s "$TMP/m/segments.csv" "$TMP/seg.csv"
check "segments.svg is valid XML" xmllint --noout "$TMP/m/segments.svg"
check "the summary names the new files" grep -q "segments.csv, segments.svg" "$TMP/m.out"
"$PAIRMAP" map "$D" "${SEG[@]}" --draw 12 --max-q 0.01 -o "$TMP/d12" >/dev/null 2>&1 || fail "map --draw 12: exit $?"
"$PAIRMAP" map "$D" -o "$TMP/plain" >/dev/null 2>&1 || fail "map without segments: exit $?"
# the Mantel-Haenszel columns are computed on several threads: the same bytes on any number
# (--max-q 1 --sign both keeps some 900 pairs, enough for the threads to share them)
for t in 1 2 3; do
    "$PAIRMAP" pairs "$D" --segment-col location --sign both --max-q 1 --min-count 1 \
        --threads "$t" -q >"$TMP/strat$t.csv" 2>/dev/null || fail "pairs --threads $t: exit $?"
done
check "over 128 pairs with the stratified columns" test "$(wc -l <"$TMP/strat1.csv")" -gt 129
check "stratified columns: --threads 2 as 1" cmp -s "$TMP/strat1.csv" "$TMP/strat2.csv"
check "stratified columns: --threads 3 as 1" cmp -s "$TMP/strat1.csv" "$TMP/strat3.csv"
# the two ways of counting the edges per segment (one pass over the rows; item by item, taken
# where the rows' bit matrix would not fit) give the same bytes
for t in 1 2; do
    PM_TEST_STRAT_BY_ITEM=1 "$PAIRMAP" pairs "$D" --segment-col location --sign both --max-q 1 \
        --min-count 1 --threads "$t" -q >"$TMP/stratitem$t.csv" 2>/dev/null || fail "by item: exit $?"
    check "stratified columns item by item (--threads $t) as in one pass" \
        cmp -s "$TMP/strat1.csv" "$TMP/stratitem$t.csv"
done
PM_TEST_STRAT_BY_ITEM=1 "$PAIRMAP" partners "$D" --item "Raclette plate" --segment-col location \
    --csv --top 0 --max-q 1 --min-count 1 --sign both -q >"$TMP/pitem.csv" 2>/dev/null
"$PAIRMAP" partners "$D" --item "Raclette plate" --segment-col location --csv --top 0 \
    --max-q 1 --min-count 1 --sign both -q >"$TMP/prows.csv" 2>/dev/null
check "partners' stratified columns: the same both ways" cmp -s "$TMP/pitem.csv" "$TMP/prows.csv"
# the segments table bounded before it is allocated: 60,000 segments x 300 items (exit 4, no DIR)
awk 'BEGIN { srand(3); print "r,i,seg"; for (r = 0; r < 60000; r++) for (j = 0; j < 3; j++)
    printf "r%d,i%d,s%d\n", r, int(rand() * 300), r }' >"$TMP/manyseg.csv"
expect_fail 4 "$TMP/manyseg.csv: " "the segment tables need about" -- \
    map "$TMP/manyseg.csv" --segment-col seg --max-memory 100M -o "$TMP/w"
check "no output directory after the refusal" test ! -e "$TMP/w"
expect_fail 4 "$TMP/manyseg.csv: " "the segment tables need about" -- \
    segments "$TMP/manyseg.csv" --segment-col seg --max-memory 100M
check "no segment files without --segment-col" test ! -e "$TMP/plain/segments.csv" -a ! -e "$TMP/plain/segments.svg"
/usr/bin/python3 - "$TMP" "$TMP/seg.err" <<'EOF' || fail "segments.svg, run.json, map.graphml: see above"
import json, math, re, sys
import xml.etree.ElementTree as ET
import networkx as nx
import pandas as pd

tmp, notes = sys.argv[1], open(sys.argv[2], encoding="utf-8").read()
bad = []
def check(cond, what):
    if not cond:
        bad.append(what)
        print("FAIL:", what, file=sys.stderr)

seg = pd.read_csv(f"{tmp}/seg.csv", dtype=str, keep_default_na=False)
num = lambda s: float(s) if s != "" else math.nan
NS = "{http://www.w3.org/2000/svg}"

def svg_parts(d):
    root = ET.parse(f"{d}/segments.svg").getroot()
    cells = [e for e in root.iter(NS + "rect") if e.get("class") == "cell"]
    heads = [e for e in root.iter(NS + "g") if e.get("class") == "segment-head"]
    rows = [e for e in root.iter(NS + "text") if e.get("class") == "row-label"]
    trends = [e for e in root.iter(NS + "g") if e.get("class") == "trend"]
    return root, cells, heads, rows, trends

nodes = pd.read_csv(f"{tmp}/m/nodes.csv", dtype=str, keep_default_na=False)
levels = list(dict.fromkeys(zip(seg["attribute"], seg["segment"])))
for d, draw, max_q in ((f"{tmp}/m", None, 0.05), (f"{tmp}/d12", 12, 0.01)):
    root, cells, heads, rows, trends = svg_parts(d)
    want_rows = len(nodes) if draw is None else min(draw, len(nodes))
    check(len(rows) == want_rows, f"{d}: {len(rows)} rows, want {want_rows}")
    check([(h.get("data-attribute"), h.get("data-segment")) for h in heads] == levels,
          f"{d}: segment columns in order")
    base = {(a, s): b for a, s, b in zip(seg["attribute"], seg["segment"], seg["base"])}
    check(all(h.get("data-base") == base[(h.get("data-attribute"), h.get("data-segment"))]
              for h in heads), f"{d}: column heads carry the bases")
    check(len(cells) == len(rows) * len(levels), f"{d}: one cell per row and segment")
    table = {(r.attribute, r.segment, r.item): r for r in seg.itertuples(index=False)}
    for c in cells:
        r = table[(c.get("data-attribute"), c.get("data-segment"), c.get("data-item"))]
        check(num(c.get("data-shrunk")) == num(r.shrunk), f"{d}: shrunk of {c.get('data-item')}")
        ix = num(c.get("data-index"))
        check((math.isnan(ix) and r.index == "") or ix == num(r.index),
              f"{d}: index of {c.get('data-item')}")
        q = num(r.q_value)
        check(c.get("data-marked") == ("1" if q <= max_q else "0"),
              f"{d}: mark of {c.get('data-item')} at {c.get('data-segment')} (q {q})")
    # rows grouped by cluster: clusters of two or more in nodes.csv's order, then the rest
    size = nodes["cluster"].value_counts()
    order = list(dict.fromkeys(nodes["cluster"]))
    block = {c: (order.index(c) if size[c] >= 2 else len(order)) for c in order}
    got = [block[r.get("data-cluster")] for r in rows]
    check(got == sorted(got), f"{d}: rows grouped in the map's cluster order")
    # one trend mark per row of the ordered column (time_band), none for location
    check(sorted({t.get("data-attribute") for t in trends}) == ["time_band"],
          f"{d}: trend marks only for the ordered column")
    check(len(trends) == len(rows), f"{d}: a trend mark per row")
    if draw is not None:
        # the rows kept: the items whose segments differ most (largest |log index|)
        # (the score to 3 decimals, as segsvg.h says; ties by share, then name by bytes)
        sc = seg[seg["index"] != ""].copy()
        sc["s"] = sc["index"].map(lambda v: abs(math.log(float(v))))
        top = sc.groupby("item")["s"].max().reindex(nodes["item"]).fillna(0)
        share = dict(zip(nodes["item"], nodes["share"].astype(float)))
        rank = sorted(nodes["item"], key=lambda it: (-math.floor(top[it] * 1000 + 0.5) / 1000,
                                                      -share[it], it.encode()))
        kept = {r.get("data-item") for r in rows}
        check(kept == set(rank[:draw]), f"{d}: rows kept by |log index|, then share")
        check(f"{draw} of {len(nodes)} items" in ET.tostring(root, encoding="unicode"),
              f"{d}: the subtitle says how many rows are drawn")

run = json.load(open(f"{tmp}/m/run.json", encoding="utf-8"))
check("segments.csv" in run["files"] and "segments.svg" in run["files"], "run.json files")
for col in run["segments"]:
    name = col["column"]
    lv = [(l["segment"], str(l["base"])) for l in col["levels"]]
    want = list(dict.fromkeys(zip(seg.loc[seg["attribute"] == name, "segment"],
                                  seg.loc[seg["attribute"] == name, "base"])))
    check(lv == want, f"run.json levels and bases of {name}")
    m = float(re.search(r"'%s': prior strength m = ([0-9.e+-]+)" % re.escape(name), notes).group(1))
    ll = float(re.search(r"'%s': prior .* log-likelihood ([0-9.e+-]+)" % re.escape(name), notes).group(1))
    check(col["m"] == m and col["log_likelihood"] == ll, f"run.json m and log-likelihood of {name}")
    check(col["left_out"]["respondents_without_segment"] == 0, f"run.json left out of {name}")
check(run["segments_svg"]["rows_drawn"] == len(nodes), "run.json rows drawn")

# map.graphml: the top segment of every vertex, read with networkx
g = nx.read_graphml(f"{tmp}/m/map.graphml")
sc = seg[seg["index"] != ""].copy()
sc["ix"] = sc["index"].astype(float)
for j, name in enumerate(["location", "time_band"], 1):
    part = sc[sc["attribute"] == name]
    # the first segment (in the table's order) with the largest index
    best = part.loc[part.groupby("item")["ix"].idxmax()].set_index("item")
    for _, a in g.nodes(data=True):
        it = a["name"]
        check(a.get(f"top_segment ({name})") == best.loc[it, "segment"],
              f"graphml top segment of {it} for {name}")
        check(a.get(f"top_index ({name})") == best.loc[it, "ix"], f"graphml top index of {it}")
sys.exit(1 if bad else 0)
EOF
finish
