#!/usr/bin/python3
"""baseline.py: the job of `pairmap map` done the way an analyst would script it with
general-purpose Python libraries. It is the yardstick of scripts/bench, so it is written
to be fair: the usual idioms, vectorised where the libraries allow it, no deliberate
slowness, and no work that pairmap does not also do.

Pipeline (long-format CSV, first column respondent, second column item):
  read      pandas.read_csv, pandas.factorize (items sorted by name)
  count     scipy.sparse 0/1 incidence X (respondents x items), joint counts X.T @ X
  measures  over the pairs seen together: expected, support, confidence both ways, lift,
            phi, Jaccard (numpy); one-sided test of positive association: the
            chi-square test with 1 df (signed root, scipy.stats.norm.sf) for every pair,
            or with --fisher, as pairmap does, Fisher's exact test
            (scipy.stats.hypergeom.sf) where the smallest expected cell is below 5;
            Benjamini-Hochberg q-values with every pair of eligible items counted as a
            hypothesis (a pair never seen together has p = 1); selection with pairmap's
            defaults: together >= 5, phi > 0, q <= 0.05 (optionally top K by phi)
  graph     networkx.Graph of all eligible items (0 < respondents < N) and kept pairs,
            weight = phi; networkx.community.louvain_communities (seed 1, one run),
            networkx.community.modularity, networkx.spring_layout (seed 1, 50 iterations)
  write     networkx.write_graphml (map.graphml), pandas to_csv (edges.csv, nodes.csv),
            run.json with the stage timings in seconds

Differences from pairmap, all in the baseline's favour: chi-square where pairmap uses
Fisher's test on small expected cells (unless --fisher), one Louvain run (pairmap's default
runs 10 and compares them), no SVG drawing, no item-share intervals, no input checks
beyond what pandas does. Costs worth knowing: spring_layout is O(items^2) per iteration
(networkx's sparse variant loops over the nodes in Python), a few seconds at 5,000 items;
the joint-count matrix holds every pair seen together twice (symmetric), so memory grows
with the number of distinct pairs seen, up to items^2.
"""

import argparse
import json
import os
import sys
import time

import numpy as np
import pandas as pd
import scipy
import scipy.sparse as sp
import scipy.stats as st
import networkx as nx


def parse_args(argv):
    p = argparse.ArgumentParser(
        prog="baseline.py",
        description=__doc__.split("\n\n", 1)[1],
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="example: scripts/baseline.py build/bench-data/small.csv -o build/bench-out/x")
    p.add_argument("input", metavar="INPUT", help="long-format CSV with a header row")
    p.add_argument("-o", "--output", required=True, metavar="DIR", help="output directory")
    p.add_argument("--min-count", type=int, default=5, metavar="N",
                   help="minimum joint count of a kept pair (default 5)")
    p.add_argument("--max-q", type=float, default=0.05, metavar="F",
                   help="maximum Benjamini-Hochberg q-value (default 0.05)")
    p.add_argument("--top-edges", type=int, default=0, metavar="K",
                   help="keep only the K pairs of highest phi (default 0 = all)")
    p.add_argument("--fisher", action="store_true",
                   help="Fisher's exact test (scipy.stats.hypergeom.sf) where the smallest "
                   "expected cell is below 5, as pairmap does; slow: scipy evaluates each "
                   "pair on its own, about 10 us a pair at a million respondents and about "
                   "10 ms a pair at 100,000 or fewer (an exact method for small totals)")
    p.add_argument("--seed", type=int, default=1, metavar="N",
                   help="seed of Louvain and of the layout (default 1)")
    p.add_argument("--quiet", action="store_true", help="no stage timings on stderr")
    return p.parse_args(argv)


class Clock:
    """Wall and CPU seconds by stage (and by step within a stage)."""

    def __init__(self, quiet):
        self.quiet = quiet
        self.stage, self.stage_cpu, self.detail = {}, {}, {}
        self.t = time.perf_counter()
        self.t_stage = self.t
        self.c_stage = time.process_time()

    def lap(self, name):
        now = time.perf_counter()
        self.detail[name] = now - self.t
        self.t = now

    def end_stage(self, name):
        now, cpu = time.perf_counter(), time.process_time()
        self.stage[name] = now - self.t_stage
        self.stage_cpu[name] = cpu - self.c_stage
        self.t_stage = self.t = now
        self.c_stage = cpu
        if not self.quiet:
            print(f"baseline: {name:9s} {self.stage[name]:8.2f} s wall "
                  f"{self.stage_cpu[name]:8.2f} s cpu", file=sys.stderr)


def main(argv):
    a = parse_args(argv)
    clk = Clock(a.quiet)
    t_start = time.perf_counter()

    # --- read -----------------------------------------------------------------------
    df = pd.read_csv(a.input, usecols=[0, 1])
    clk.lap("read_csv")
    resp_codes, resp_names = pd.factorize(df.iloc[:, 0])
    item_col = df.iloc[:, 1]
    chose = item_col.notna().to_numpy()  # an empty item cell: a respondent who chose nothing
    item_codes, item_names = pd.factorize(item_col[chose], sort=True)
    rows_read = len(df)
    del df, item_col
    clk.lap("factorize")
    clk.end_stage("read")

    # --- count ----------------------------------------------------------------------
    n_resp = len(resp_names)
    n_items = len(item_names)
    X = sp.csr_matrix(
        (np.ones(item_codes.shape[0], dtype=np.int32), (resp_codes[chose], item_codes)),
        shape=(n_resp, n_items))
    X.data[:] = 1  # duplicate rows were summed: make it 0/1
    del resp_codes, item_codes
    clk.lap("incidence")
    C = (X.T @ X).tocsr()
    clk.lap("product")
    n_item = C.diagonal().astype(np.int64)
    U = sp.triu(C, k=1).tocoo()
    del C, X
    ia = U.row.astype(np.int64)
    ib = U.col.astype(np.int64)
    nab = U.data.astype(np.int64)
    del U
    clk.lap("pairs")
    clk.end_stage("count")

    # --- measures, tests, q-values, selection ----------------------------------------
    N = n_resp
    eligible = (n_item > 0) & (n_item < N)
    n_eligible = int(eligible.sum())
    m = eligible[ia] & eligible[ib]
    ia, ib, nab = ia[m], ib[m], nab[m]
    na = n_item[ia]
    nb = n_item[ib]
    fa = na.astype(np.float64)
    fb = nb.astype(np.float64)
    fab = nab.astype(np.float64)
    expected = fa * fb / N
    support = fab / N
    conf_ab = fab / fa
    conf_ba = fab / fb
    lift = N * fab / (fa * fb)
    num = (N * nab - na * nb).astype(np.float64)  # exact in int64 before the cast
    phi = num / np.sqrt(fa * fb * (N - fa) * (N - fb))
    jaccard = fab / (fa + fb - fab)
    clk.lap("measures")
    if a.fisher:
        min_cell = np.minimum(fa, N - fa) * np.minimum(fb, N - fb) / N
        fisher = min_cell < 5.0
    else:
        fisher = np.zeros(phi.shape[0], dtype=bool)
    p = np.empty(phi.shape[0])
    p[~fisher] = st.norm.sf(np.sqrt(N) * phi[~fisher])  # one-sided chi-square, 1 df
    if fisher.any():
        p[fisher] = st.hypergeom.sf(nab[fisher] - 1, N, na[fisher], nb[fisher])
    np.clip(p, 0.0, 1.0, out=p)
    clk.lap("tests")
    hypotheses = n_eligible * (n_eligible - 1) // 2
    order = np.argsort(p, kind="stable")
    ranked = p[order] * hypotheses / np.arange(1, p.shape[0] + 1)
    q = np.empty_like(p)
    q[order] = np.minimum(1.0, np.minimum.accumulate(ranked[::-1])[::-1])
    clk.lap("bh")
    keep = (nab >= a.min_count) & (phi > 0) & (q <= a.max_q)
    kept = np.flatnonzero(keep)
    if a.top_edges > 0 and kept.shape[0] > a.top_edges:
        kept = kept[np.argsort(-phi[kept], kind="stable")[:a.top_edges]]
    kept = kept[np.lexsort((ib[kept], ia[kept]))]  # by item_a, item_b (names sorted)
    pairs_seen = int(phi.shape[0])
    clk.lap("select")
    clk.end_stage("measures")

    # --- graph: Louvain and layout ---------------------------------------------------
    names = np.asarray(item_names, dtype=object)
    G = nx.Graph()
    elig_idx = np.flatnonzero(eligible)
    G.add_nodes_from(
        (nm, {"respondents": r, "share": r / N})
        for nm, r in zip(names[elig_idx].tolist(), n_item[elig_idx].tolist()))
    ka, kb = names[ia[kept]].tolist(), names[ib[kept]].tolist()
    G.add_edges_from(
        (u, v, {"together": t, "phi": f, "lift": li, "jaccard": j, "q_value": qq, "weight": f})
        for u, v, t, f, li, j, qq in zip(ka, kb, nab[kept].tolist(), phi[kept].tolist(),
                                          lift[kept].tolist(), jaccard[kept].tolist(),
                                          q[kept].tolist()))
    clk.lap("build")
    if G.number_of_edges():
        comms = nx.community.louvain_communities(G, weight="weight", resolution=1,
                                                 seed=a.seed)
    else:  # networkx 2.8 divides by zero on a graph without edges
        comms = [{v} for v in G]
    comms = sorted(comms, key=lambda c: (-len(c), min(c)))  # cluster 1 = largest
    cluster = {}
    for k, c in enumerate(comms, start=1):
        for v in c:
            cluster[v] = k
    clk.lap("louvain")
    modularity = (nx.community.modularity(G, comms, weight="weight")
                  if G.number_of_edges() else None)  # undefined without edges
    clk.lap("modularity")
    pos = nx.spring_layout(G, weight="weight", seed=a.seed)
    clk.lap("layout")
    for v, d in G.nodes(data=True):
        d["cluster"] = cluster[v]
        d["x"] = float(pos[v][0])
        d["y"] = float(pos[v][1])
    clk.end_stage("graph")

    # --- write -----------------------------------------------------------------------
    os.makedirs(a.output, exist_ok=True)
    nx.write_graphml(G, os.path.join(a.output, "map.graphml"))
    clk.lap("graphml")
    edges = pd.DataFrame({
        "item_a": ka, "item_b": kb, "together": nab[kept], "expected": expected[kept],
        "support": support[kept], "confidence_ab": conf_ab[kept],
        "confidence_ba": conf_ba[kept], "lift": lift[kept], "phi": phi[kept],
        "jaccard": jaccard[kept], "test": np.where(fisher[kept], "fisher", "chi2"),
        "p_value": p[kept], "q_value": q[kept]})
    edges.to_csv(os.path.join(a.output, "edges.csv"), index=False)
    nodes = pd.DataFrame(
        [(v, d["respondents"], d["share"], d["cluster"], G.degree(v), d["x"], d["y"])
         for v, d in G.nodes(data=True)],
        columns=["item", "respondents", "share", "cluster", "degree", "x", "y"])
    nodes = nodes.sort_values(["cluster", "share", "item"], ascending=[True, False, True])
    nodes.to_csv(os.path.join(a.output, "nodes.csv"), index=False)
    clk.lap("csv")
    clk.end_stage("write")

    run = {
        "tool": "baseline.py",
        "versions": {"python": sys.version.split()[0], "numpy": np.__version__,
                     "scipy": scipy.__version__, "pandas": pd.__version__,
                     "networkx": nx.__version__},
        "input": a.input, "rows": rows_read, "respondents": N, "items": n_items,
        "eligible_items": n_eligible, "pairs_seen": pairs_seen, "hypotheses": hypotheses,
        "pairs_fisher": int(fisher.sum()), "pairs_kept": int(kept.shape[0]), "clusters": len(comms), "modularity": modularity,
        "timings": clk.stage, "timings_cpu": clk.stage_cpu, "timings_detail": clk.detail,
        "total_seconds": time.perf_counter() - t_start,
    }
    with open(os.path.join(a.output, "run.json"), "w") as f:
        json.dump(run, f, indent=2)
        f.write("\n")
    if not a.quiet:
        print(f"baseline: {N} respondents, {n_items} items, {pairs_seen} pairs seen, "
              f"{run['pairs_kept']} kept, {len(comms)} clusters, modularity "
              f"{modularity if modularity is None else round(modularity, 4)}, "
              f"{run['total_seconds']:.2f} s in the script",
              file=sys.stderr)
        print("baseline: detail " + ", ".join(f"{k} {v:.2f}" for k, v in clk.detail.items()),
              file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
