#!/usr/bin/python3
"""Reference check: clusters.csv of `pairmap map` (issue 15 point 5).

- stability: Hennig's cluster-wise Jaccard stability (Hennig 2007, Computational Statistics &
  Data Analysis 52:258-271) with the Louvain restarts as the other clusterings: for each cluster
  C of the kept run, the mean over the other runs of max over their communities D of
  |C & D| / |C | D|, computed here in plain Python from every run's memberships (written by the
  binary under PM_DEBUG_RUNS=FILE: item, one label per run) and nodes.csv's clusters.
- size, share_of_items, members, name: counted here from nodes.csv (its cluster and
  cluster_name columns).
- internal_weight: the sum of the phi of the kept positive pairs of edges.csv inside the
  cluster (the edge weight of --measure phi).
- modularity_share: the cluster's term e_c - a_c^2 of Newman's modularity over the modularity,
  with the graph built here by networkx from edges.csv; the modularity itself from
  networkx.algorithms.community.modularity on nodes.csv's partition (and run.json's).
Data: the demo café orders (invented) and a generated long-tailed basket file
(scripts/gen-baskets, invented), each with --restarts 10 and 7.
"""

import csv
import json
import os
import subprocess
import sys
from collections import defaultdict
from pathlib import Path

import networkx as nx
import pandas as pd

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

CL_COLUMNS = ["cluster", "name", "size", "share_of_items", "internal_weight",
              "modularity_share", "stability", "members"]


def run_map(f, out, runs, opts):
    env = dict(os.environ, PM_DEBUG_RUNS=str(runs))
    p = subprocess.run([str(C.binary()), "map", str(f), "-o", str(out), "-q"] + opts, env=env,
                       capture_output=True, timeout=900)
    if p.returncode:
        raise C.RunError(p.stderr.decode()[:500])


def hennig(kept, runs_by_item, kept_run):
    """kept: item -> cluster; runs_by_item: item -> [label per run]."""
    items = list(kept)
    R = len(next(iter(runs_by_item.values())))
    clusters = defaultdict(set)
    for i in items:
        clusters[kept[i]].add(i)
    out = {}
    for c, members in clusters.items():
        tot = 0.0
        for r in range(R):
            if r == kept_run:
                continue
            comm = defaultdict(set)
            for i in items:
                comm[runs_by_item[i][r]].add(i)
            tot += max(len(members & d) / len(members | d) for d in comm.values())
        out[c] = tot / (R - 1)
    return out


def check_case(chk, f, label, td, restarts, opts):
    out, runs = td / f"out-{label}-{restarts}", td / f"runs-{label}-{restarts}.csv"
    run_map(f, out, runs, ["--restarts", str(restarts)] + opts)
    cl = C.read_csv((out / "clusters.csv").read_text(encoding="utf-8"), CL_COLUMNS)
    nodes = pd.read_csv(out / "nodes.csv", dtype=str, keep_default_na=False)
    edges = C.read_csv((out / "edges.csv").read_text(encoding="utf-8"), C.PAIR_COLUMNS)
    run = json.loads((out / "run.json").read_text(encoding="utf-8"))
    with open(runs, newline="", encoding="utf-8") as fh:
        rd = csv.reader(fh)
        kept_run = int(next(rd)[1])
        runs_by_item = {row[0]: [int(x) for x in row[1:]] for row in rd}
    kept = {r["item"]: int(r["cluster"]) for r in nodes.to_dict("records")}
    names = {int(r["cluster"]): r["cluster_name"] for r in nodes.to_dict("records")}
    ref = hennig(kept, runs_by_item, kept_run)
    chk.equal("one row per cluster of nodes.csv", sorted(int(x) for x in cl.cluster),
              sorted(set(kept.values())), label)
    G = nx.Graph()
    G.add_nodes_from(kept)
    for r in edges.itertuples(index=False):
        if float(r.phi) > 0:
            G.add_edge(r.item_a, r.item_b, weight=float(r.phi))
    comms = defaultdict(set)
    for i, c in kept.items():
        comms[c].add(i)
    Q = nx.algorithms.community.modularity(G, list(comms.values()), weight="weight")
    chk.close("run.json network.modularity vs networkx modularity", run["network"]["modularity"],
              Q, rtol=1e-9, where=label)
    W = G.size(weight="weight")
    deg = dict(G.degree(weight="weight"))
    n = len(kept)
    for r in cl.itertuples(index=False):
        c = int(r.cluster)
        w = f"{label} R={restarts} cluster {c}"
        mem = comms[c]
        chk.close("stability vs Hennig's Jaccard computed here from the runs' memberships",
                  float(r.stability), ref[c], rtol=1e-12, where=w)
        chk.equal("size == nodes.csv count", int(r.size), len(mem), w)
        chk.close("share_of_items == size / items", float(r.share_of_items), len(mem) / n,
                  rtol=1e-15, where=w)
        chk.equal("members == nodes.csv items of the cluster", set(r.members.split("; ")),
                  mem, w)
        chk.equal("name == nodes.csv cluster_name", r.name, names[c], w)
        inner = sum(d["weight"] for a, b, d in G.subgraph(mem).edges(data=True))
        chk.close("internal_weight == sum of phi inside (edges.csv)", float(r.internal_weight),
                  inner, rtol=1e-9, atol=1e-12, where=w)
        term = inner / W - (sum(deg[i] for i in mem) / (2 * W)) ** 2
        chk.close("modularity_share == the cluster's term / networkx modularity",
                  float(r.modularity_share), term / Q, rtol=1e-7, atol=1e-12, where=w)
    chk.note(f"{label} R={restarts}: {len(cl)} clusters, lowest stabilities "
             f"{sorted(round(v, 3) for v in ref.values())[:4]}")


def main():
    C.require_binary()
    chk = C.Checker("cluster_stability (Hennig 2007 from the runs' memberships; networkx)")
    with C.tempdir() as tds:
        td = Path(tds)
        tail = td / "tail.csv"
        subprocess.run(["/usr/bin/python3", str(C.REPO / "scripts" / "gen-baskets"),
                        "--respondents", "4000", "--items", "400", "--exponent", "1.1",
                        "--groups", "8", "--affinity", "0.6", "--mean-k", "5", "--seed", "9",
                        "--quiet", "-o", str(tail)], check=True)
        # weak structure: nearly random baskets, every positive pair kept (--max-q 1), so that
        # the Louvain runs disagree and the stabilities fall well below 1
        weak = td / "weak.csv"
        subprocess.run(["/usr/bin/python3", str(C.REPO / "scripts" / "gen-baskets"),
                        "--respondents", "2000", "--items", "60", "--exponent", "0.5",
                        "--groups", "4", "--affinity", "0.1", "--mean-k", "8", "--seed", "9",
                        "--quiet", "-o", str(weak)], check=True)
        for f, label, opts in ((C.REPO / "demo" / "cafe-orders.csv", "cafe", []),
                               (tail, "long tail", []),
                               (weak, "weak", ["--max-q", "1", "--min-count", "1"])):
            for restarts in (10, 7):
                try:
                    check_case(chk, f, label, td, restarts, opts)
                except (C.RunError, OSError, subprocess.SubprocessError) as e:
                    chk.fail(f"{label}: {e}")
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
