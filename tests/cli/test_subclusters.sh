#!/usr/bin/env bash
# Clusters at more than one scale (issue 15 point 4). When the largest cluster holds more than a
# quarter of the clustered items (those with a positive kept edge), map keeps the next level
# inside it (Louvain again on the cluster's own edges), writes it to nodes.csv's subcluster
# column ("K.S"), lists it in the summary, the legend and run.json, and tries a few resolutions
# on the same graph. Checked against networkx (networkx.algorithms.community.modularity, the
# reference implementation of Newman's modularity with a resolution, on the graph rebuilt from
# edges.csv with the weights the map uses: the --measure column of the pairs with phi > 0):
#   - every resolution tried: the modularity at its own resolution and at resolution 1 of the
#     partition run.json records, the largest cluster's share, and the summary's rounded values;
#   - the suggested resolution follows the stated rule, recomputed from networkx's values;
#   - every sub-cluster lies inside its cluster, every member of a big cluster has one, no
#     other item has one; the sub-clusters' modularity within the cluster's own graph equals
#     networkx's and is above 0;
#   - the legend lists the big clusters' sub-clusters; --threads 1 and 3 give the same files;
#   - a map where no cluster is big (the cafe demo's default) has empty subcluster cells, no
#     note, and nothing tried.
#   - on the long tail, the sub-clusters are the planted groups of the generator's answer key.
# Data: the cafe demo with thresholds that keep its planted weak links between groups (lift
# weights, resolution 0.3: two groups joined through the links), and an invented long-tailed
# assortment (scripts/gen-longtail with --links, which ties the planted groups together).
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
PY=/usr/bin/python3
GEN="$HERE/../../scripts/gen-longtail"
$PY "$GEN" "$TMP/lt.csv" --links 0.3 --pairs 30 --truth "$TMP/truth.csv" || fail "gen-longtail"

cat >"$TMP/check.py" <<'PY'
import json, re, sys
import networkx as nx
import pandas as pd
from networkx.algorithms.community import modularity

d, summary, errfile, measure = sys.argv[1:5]
nodes = pd.read_csv(d + "/nodes.csv", keep_default_na=False, dtype={"subcluster": str})
edges = pd.read_csv(d + "/edges.csv", keep_default_na=False)
run = json.load(open(d + "/run.json", encoding="utf-8"))
text = open(summary, encoding="utf-8").read()
err = open(errfile, encoding="utf-8").read()
bad = []
TOL = 1e-9

assert list(nodes.columns)[-2:] == ["cluster_name", "subcluster"], list(nodes.columns)
G = nx.Graph()
G.add_nodes_from(nodes["item"])
for a, b, phi, w in zip(edges["item_a"], edges["item_b"], edges["phi"], edges[measure]):
    if phi > 0:
        G.add_edge(a, b, weight=float(w))
clustered = sum(1 for v in G if G.degree(v) > 0)
ms = run["multiscale"]
if ms["clustered_items"] != clustered:
    bad.append("clustered items %d, networkx %d" % (ms["clustered_items"], clustered))
cl = dict(zip(nodes["item"], nodes["cluster"]))
size = nodes.groupby("cluster").size()
big = [int(c) for c in size.index if size[c] > 0.25 * clustered and size[c] > 1]
if [b["cluster"] for b in ms["big_clusters"]] != big:
    bad.append("big clusters %s, expected %s" % ([b["cluster"] for b in ms["big_clusters"]], big))

def partition(groups):
    seen = set(x for g in groups for x in g)
    return [set(g) for g in groups] + [{v} for v in G if v not in seen]

# the resolutions tried: their modularity (own resolution and 1), largest share, summary rows
rows = re.findall(r"^ +([0-9.]+)  modularity ([0-9.]+)  largest cluster +(\d+)% \((\d+) items\)",
                  text, re.M)
tried = ms["resolutions_tried"]
if big and len(rows) != len(tried):
    bad.append("summary lists %d resolutions, run.json %d" % (len(rows), len(tried)))
best = None
for t, row in zip(tried, rows if big else [None] * len(tried)):
    P = partition(t["partition"])
    q = modularity(G, P, weight="weight", resolution=t["resolution"])
    q1 = modularity(G, P, weight="weight", resolution=1)
    largest = max(len(p) for p in P)
    if abs(q - t["modularity"]) > TOL or abs(q1 - t["modularity_at_1"]) > TOL:
        bad.append("resolution %g: modularity %r/%r, networkx %r/%r"
                   % (t["resolution"], t["modularity"], t["modularity_at_1"], q, q1))
    if largest != t["largest"] or abs(largest / clustered - t["largest_share"]) > TOL:
        bad.append("resolution %g: largest %d, expected %d" % (t["resolution"], t["largest"], largest))
    if row and (float(row[0]) != t["resolution"] or abs(float(row[1]) - q1) > 5e-5
                or int(row[3]) != largest):
        bad.append("summary row %s for resolution %g (networkx %.4f, %d)" % (row, t["resolution"], q1, largest))
    if t["this_map"]:
        if abs(t["modularity"] - run["network"]["modularity"]) > TOL:
            bad.append("this map's row is not the kept partition")
    if largest <= 0.25 * clustered and (best is None or q1 > best[1]):
        best = (t["resolution"], q1)
want = best[0] if best else None
if ms["suggested_resolution"] != want:
    bad.append("suggested %r, expected %r" % (ms["suggested_resolution"], want))
if want is not None and "suggested: --resolution %g " % want not in text:
    bad.append("summary does not suggest --resolution %g" % want)
if want is not None and ("--resolution %g brings the largest cluster" % want) not in err:
    bad.append("the note does not suggest --resolution %g: %r" % (want, err))

# sub-clusters: nested, complete, and a real split of the cluster's own graph
for item, c, s in zip(nodes["item"], nodes["cluster"], nodes["subcluster"]):
    if c in big and not s:
        bad.append("%s in big cluster %d has no subcluster" % (item, c))
    if s and (c not in big or s.split(".")[0] != str(c)):
        bad.append("%s: subcluster %r in cluster %d" % (item, s, c))
for b in ms["big_clusters"]:
    c = b["cluster"]
    members = [v for v in G if cl[v] == c]
    subs = {}
    for item, s in zip(nodes["item"], nodes["subcluster"]):
        if cl[item] == c:
            subs.setdefault(s, set()).add(item)
    listed = {x["subcluster"]: set(x["members"]) for x in b["subclusters"]}
    if listed != subs:
        bad.append("cluster %d: run.json's sub-clusters differ from nodes.csv's" % c)
    H = G.subgraph(members)
    q = modularity(H, list(subs.values()), weight="weight", resolution=ms["subcluster_resolution"])
    if abs(q - b["modularity_within"]) > TOL or not q > 0 or len(subs) < 2:
        bad.append("cluster %d: modularity within %r, networkx %r (%d sub-clusters)"
                   % (c, b["modularity_within"], q, len(subs)))
    for s, mem in subs.items():
        if ("  %6s %5d items" % (s, len(mem))) not in text:
            bad.append("summary does not list sub-cluster %s of %d items" % (s, len(mem)))
if big and not re.search(r"^pairmap: note: clusters? 1 .*more than a quarter", err, re.M):
    bad.append("no note on the big cluster: %r" % err)
if not big:
    if any(nodes["subcluster"]) or tried or ms["big_clusters"] or "quarter" in err + text:
        bad.append("no big cluster, yet sub-clusters, tries or a note")

# the legend: each big cluster's entry lists its sub-clusters, one a line
import xml.etree.ElementTree as ET
S = "{http://www.w3.org/2000/svg}"
for g in ET.parse(d + "/map.svg").getroot().iter(S + "g"):
    if g.get("class") != "legend-cluster":
        continue
    c = int(g.get("data-cluster"))
    bc = {x["cluster"]: x for x in ms["big_clusters"]}
    n = len(bc[c]["subclusters"]) if c in bc else 0
    if int(g.get("data-subclusters", "0")) != n:
        bad.append("legend of cluster %d: %s sub-clusters, expected %d" % (c, g.get("data-subclusters"), n))
    lines = ["".join(t.itertext()) for t in g.iter(S + "text") if t.get("font-weight") != "bold"]
    if n and not any(l.startswith("%d.1: " % c) or l.startswith("%d.1\u00a0(" % c) for l in lines):
        bad.append("legend of cluster %d does not list %d.1: %r" % (c, c, lines))
for b in bad:
    print(b)
print("%s: %d big, %d tried, suggested %r" % (d, len(big), len(tried), ms.get("suggested_resolution")))
sys.exit(1 if bad else 0)
PY

run_case() { # NAME MEASURE INPUT ARGS...
    local name="$1" measure="$2" input="$3"
    shift 3
    "$PAIRMAP" map "$input" -o "$TMP/$name" "$@" >"$TMP/$name.summary" 2>"$TMP/$name.err"
    check "$name: map runs" test -s "$TMP/$name/nodes.csv"
    check "$name: against networkx" $PY "$TMP/check.py" "$TMP/$name" "$TMP/$name.summary" \
        "$TMP/$name.err" "$measure"
}
run_case cafe lift "$DEMO/cafe-orders.csv" --max-q 0.5 --min-count 1 --measure lift --resolution 0.3
run_case longtail phi "$TMP/lt.csv" --resolution 0.3
run_case plain phi "$DEMO/cafe-orders.csv"
# there must be big clusters in the first two cases (or the checks above say little)
check "cafe: a big cluster" grep -q '^big cluster   1 holds' "$TMP/cafe.summary"
check "longtail: a big cluster" grep -q '^big cluster   1 holds' "$TMP/longtail.summary"
check "plain: no big cluster" test "$(grep -c 'big cluster' "$TMP/plain.summary")" = 0

# the long tail's sub-clusters are its planted groups (gen-longtail's answer key): each planted
# group (hub and members) lies in one sub-cluster, and no sub-cluster holds two groups
check "longtail: sub-clusters = planted groups" $PY - "$TMP/longtail/nodes.csv" "$TMP/truth.csv" <<'PY'
import sys, pandas as pd
nodes = pd.read_csv(sys.argv[1], keep_default_na=False, dtype={"subcluster": str})
truth = pd.read_csv(sys.argv[2], keep_default_na=False)
m = nodes.merge(truth[truth["kind"] != "staple"], on="item")
pairs = m.groupby(["group", "subcluster"]).size()
print(pairs.to_string())
ok = (m["subcluster"] != "").all() and m.groupby("group")["subcluster"].nunique().eq(1).all() \
    and m.groupby("subcluster")["group"].nunique().eq(1).all() and m["group"].nunique() >= 4
sys.exit(0 if ok else 1)
PY

# the same files for any --threads (the sub-clusters' restarts share the workers)
for t in 1 3; do
    "$PAIRMAP" map "$TMP/lt.csv" -o "$TMP/t$t" --resolution 0.3 --threads "$t" >/dev/null 2>&1
done
check "--threads 1 and 3: same nodes.csv" cmp -s "$TMP/t1/nodes.csv" "$TMP/t3/nodes.csv"
check "--threads 1 and 3: same map.svg" cmp -s "$TMP/t1/map.svg" "$TMP/t3/map.svg"
check "--threads 1 and 3: same multiscale in run.json" $PY - "$TMP/t1/run.json" "$TMP/t3/run.json" <<'PY'
import json, sys
a, b = (json.load(open(f))["multiscale"] for f in sys.argv[1:])
sys.exit(0 if a == b and a["big_clusters"] else 1)
PY
finish
