#!/usr/bin/python3
"""Reference check: `pairmap map` writes a GraphML file that an outside reader sees exactly as
the CSV files say, and names with XML special characters and non-ASCII letters round-trip.

References:
- networkx.read_graphml (networkx 2.8) reads DIR/map.graphml: its vertices, edges and every
  attribute value equal the rows of nodes.csv and edges.csv (numbers: float of the CSV text ==
  the value networkx parsed; strings: equal)
- xml.etree.ElementTree (Python standard library): key ids are distinct, typed, and the
  <data> texts equal the CSV cells character for character
- `pairmap items` (the project's own, itself checked against scipy in jeffreys.py) for the share
  columns of nodes.csv; `pairmap pairs` for edges.csv (same options: byte-identical)
Data: the demo café orders (demo/cafe-orders.csv, invented for demos), once as shipped and once
with items renamed by --merge-file to names holding & < > " ' accents, an emoji and a comma.
"""

import csv
import io
import json
import math
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import networkx as nx

sys.dont_write_bytecode = True
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

DEMO = C.REPO / "demo" / "cafe-orders.csv"
NS = "{http://graphml.graphdrawing.org/xmlns}"
NODE_COLS = ["item", "category", "respondents", "share", "share_low", "share_high", "cluster",
             "degree", "x", "y", "cluster_name", "subcluster"]

# renamed items (left: demo names); the right-hand names are the test's subject
RENAME = {
    "Espresso": 'A&B <x> "q" \'s',
    "Cappuccino": "Crème brûlée café",
    "Walnut cake": "\U0001F370 cake & more",
    "Almond biscuit": "Ünïcödé, with comma",
    "Lentil soup": "semi;colon | pipe",
    "Rye bread roll": "<tag>&amp;</tag>",
}


def read_rows(path):
    with open(path, newline="", encoding="utf-8") as f:
        r = list(csv.reader(f))
    return r[0], r[1:]


def check_dir(chk, d, label, expect_names=None, title=None):
    hdr, nodes = read_rows(d / "nodes.csv")
    chk.equal(f"{label}: nodes.csv header", hdr, NODE_COLS)
    ehdr, edges = read_rows(d / "edges.csv")
    chk.equal(f"{label}: edges.csv header", ehdr, C.PAIR_COLUMNS)
    G = nx.read_graphml(d / "map.graphml")  # reference reader: networkx
    chk.equal(f"{label}: networkx sees an undirected simple graph",
              (G.is_directed(), G.is_multigraph()), (False, False))
    chk.equal(f"{label}: vertex count == nodes.csv rows", G.number_of_nodes(), len(nodes))
    chk.equal(f"{label}: edge count == edges.csv rows", G.number_of_edges(), len(edges))
    byname = {}
    for nid, a in G.nodes(data=True):
        if a.get("name") in byname:
            chk.fail(f"{label}: two vertices named {a.get('name')!r}")
        byname[a.get("name")] = (nid, a)
    if expect_names is not None:
        missing = [n for n in expect_names if n not in byname]
        chk.equal(f"{label}: special names present in the GraphML", missing, [])
    for row in nodes:
        r = dict(zip(NODE_COLS, row))
        if r["item"] not in byname:
            chk.fail(f"{label}: nodes.csv item {r['item']!r} not in the GraphML")
            continue
        _, a = byname[r["item"]]
        chk.equal(f"{label}: category", a.get("category", ""), r["category"], r["item"])
        chk.equal(f"{label}: respondents", a.get("respondents"), int(r["respondents"]), r["item"])
        chk.equal(f"{label}: cluster", a.get("cluster"), int(r["cluster"]), r["item"])
        for k in ("share", "x", "y"):
            chk.equal(f"{label}: {k} (float of CSV text == networkx value)", a.get(k),
                      float(r[k]), r["item"])
    for row in edges:
        r = dict(zip(C.PAIR_COLUMNS, row))
        na, nb = byname.get(r["item_a"]), byname.get(r["item_b"])
        if not na or not nb or not G.has_edge(na[0], nb[0]):
            chk.fail(f"{label}: edge {r['item_a']!r}-{r['item_b']!r} not in the GraphML")
            continue
        a = G.edges[na[0], nb[0]]
        for k in ("together", "phi", "lift", "jaccard", "q_value"):
            chk.equal(f"{label}: edge {k}", a.get(k), float(r[k]), f"{r['item_a']}-{r['item_b']}")
        chk.equal(f"{label}: edge weight == phi (default --measure)", a.get("weight"),
                  float(r["phi"]), f"{r['item_a']}-{r['item_b']}")
    chk.equal(f"{label}: graph data 'measure'", G.graph.get("measure"), "phi")
    if title is not None:
        chk.equal(f"{label}: graph data 'title'", G.graph.get("title"), title)

    # raw XML: distinct typed keys, data texts equal to the CSV cells
    root = ET.parse(d / "map.graphml").getroot()
    keys = root.findall(NS + "key")
    ids = [k.get("id") for k in keys]
    chk.equal(f"{label}: key ids distinct", len(ids), len(set(ids)))
    want_keys = {("node", "name"), ("node", "category"), ("node", "respondents"),
                 ("node", "share"), ("node", "cluster"), ("node", "x"), ("node", "y"),
                 ("edge", "together"), ("edge", "phi"), ("edge", "lift"), ("edge", "jaccard"),
                 ("edge", "q_value"), ("edge", "weight")}
    have = {(k.get("for"), k.get("attr.name")) for k in keys}
    chk.equal(f"{label}: keys of DESIGN.md present", sorted(want_keys - have), [])
    chk.equal(f"{label}: every key typed",
              [k.get("id") for k in keys if k.get("attr.type") not in
               ("string", "int", "long", "double", "float", "boolean")], [])
    # README.md: the key ids are pairmap's own, scope.attribute (map, item, pair)
    scope = {"graph": "map", "node": "item", "edge": "pair"}
    chk.equal(f"{label}: key ids are scope.attr.name (README.md)",
              [k.get("id") for k in keys
               if k.get("id") != f"{scope.get(k.get('for'))}.{k.get('attr.name')}"], [])
    kid = {(k.get("for"), k.get("attr.name")): k.get("id") for k in keys}
    text_of = {}
    for n in root.iter(NS + "node"):
        dd = {x.get("key"): x.text or "" for x in n.findall(NS + "data")}
        text_of[dd.get(kid[("node", "name")])] = dd
    for row in nodes:
        r = dict(zip(NODE_COLS, row))
        dd = text_of.get(r["item"], {})
        for k in ("share", "x", "y", "respondents", "cluster"):
            chk.equal(f"{label}: GraphML text of {k} == CSV text", dd.get(kid[("node", k)]),
                      r[k], r["item"])
    return nodes, edges


def main():
    C.require_binary()
    chk = C.Checker("network_graphml (networkx.read_graphml, xml.etree)")
    with C.tempdir() as td:
        td = Path(td)
        out = td / "plain"
        title = 'Café <test> & "quotes"'
        text = C.run(["map", DEMO, "-o", out, "--category-col", "category", "-q",
                      "--title", title])
        nodes, edges = check_dir(chk, out, "demo", title=title)
        # edges.csv == `pairmap pairs` with the same selection options
        pairs = C.run(["pairs", DEMO, "--category-col", "category", "-q"])
        chk.equal("demo: edges.csv == pairmap pairs output",
                  (out / "edges.csv").read_text(encoding="utf-8"), pairs)
        # nodes.csv: one row per eligible item, shares as `pairmap items` prints them
        items = C.read_csv(C.run(["items", DEMO, "--category-col", "category", "-q"]),
                           C.ITEM_COLUMNS)
        irow = {r.item: r for r in items.itertuples(index=False)}
        chk.equal("demo: nodes.csv items == items with 0 < n < N",
                  sorted(r[0] for r in nodes),
                  sorted(k for k, r in irow.items() if 0 < int(r.respondents) < 4000))
        for row in nodes:
            r = dict(zip(NODE_COLS, row))
            ir = irow[r["item"]]
            chk.equal("demo: nodes.csv share columns == pairmap items",
                      (r["respondents"], r["share"], r["share_low"], r["share_high"]),
                      (ir.respondents, ir.share, ir.share_low, ir.share_high), r["item"])
        # ordering: cluster, then share descending, then name (bytes)
        keyed = [(int(r[6]), -float(r[3]), C.bkey(r[0])) for r in nodes]
        chk.equal("demo: nodes.csv ordered by cluster, share desc, name", keyed, sorted(keyed))
        # degree == edges.csv rows at the item; cluster 1 is the largest
        deg = {}
        for e in edges:
            deg[e[0]] = deg.get(e[0], 0) + 1
            deg[e[1]] = deg.get(e[1], 0) + 1
        for r in nodes:
            chk.equal("demo: degree == edges.csv rows at the item", int(r[7]),
                      deg.get(r[0], 0), r[0])
        sizes = {}
        for r in nodes:
            sizes[int(r[6])] = sizes.get(int(r[6]), 0) + 1
        ids = sorted(sizes)
        chk.equal("demo: clusters numbered 1..k", ids, list(range(1, len(ids) + 1)))
        chk.equal("demo: cluster sizes non-increasing", [sizes[i] for i in ids],
                  sorted(sizes.values(), reverse=True))
        # layout: items with edges in the unit box, the others on the ring of radius 0.8
        for r in nodes:
            x, y = float(r[8]), float(r[9])
            if int(r[7]) > 0:
                if not (0 <= x <= 1 and 0 <= y <= 1):
                    chk.fail(f"demo: {r[0]!r} has edges but lies outside the unit box")
            else:
                chk.close("demo: isolated item on the ring (radius 0.8)",
                          math.hypot(x - 0.5, y - 0.5), 0.8, rtol=1e-12, where=r[0])
        # the summary and run.json agree with the files
        run = json.loads((out / "run.json").read_text(encoding="utf-8"))
        chk.equal("demo: run.json kept == edges.csv rows", run["pairs"]["kept"], len(edges))
        chk.equal("demo: run.json clusters == distinct clusters", run["network"]["clusters"],
                  len(ids))
        chk.equal("demo: run.json cluster sizes", [c["size"] for c in run["clusters"]],
                  [sizes[i] for i in ids])
        if f"pairs kept    {len(edges)}" not in text:
            chk.fail("demo: the summary does not give the kept pairs")

        # renamed items: XML specials, accents, emoji, comma
        merge = td / "merge.csv"
        with open(merge, "w", newline="", encoding="utf-8") as f:
            w = csv.writer(f, lineterminator="\n")
            w.writerow(["item", "group"])
            for k, v in RENAME.items():
                w.writerow([k, v])
        out2 = td / "special"
        C.run(["map", DEMO, "-o", out2, "--category-col", "category", "-q",
               "--merge-file", merge])
        nodes2, _ = check_dir(chk, out2, "special names", expect_names=list(RENAME.values()))
        chk.equal("special names: nodes.csv names (csv module) include every new name",
                  sorted(set(RENAME.values()) - {r[0] for r in nodes2}), [])
        # the GraphML is well-formed XML by the standard library's parser too
        try:
            ET.parse(out2 / "map.graphml")
        except ET.ParseError as e:
            chk.fail(f"special names: map.graphml is not well-formed: {e}")
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
