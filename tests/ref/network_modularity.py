#!/usr/bin/python3
"""Reference check: the modularity and stability `pairmap map` reports.

References:
- networkx.community.modularity (networkx 2.8; Newman 2004 with resolution) of the partition
  written to nodes.csv, on the graph of edges.csv with the chosen measure as weight and only
  the edges with phi > 0 (DESIGN.md: negative edges take no part), equals run.json's
  "modularity" and the figure in the summary, to 1e-9
- networkx.community.louvain_communities (an independent Louvain implementation): the best
  modularity it finds over 10 seeds is not clearly above ours (tolerance 0.005; Louvain is a
  heuristic, so neither need find the optimum)
- stability: the mean adjusted Rand index over all pairs of runs, recomputed here from the
  partitions of single runs made with the documented restart seeds seed + r * 0x9E3779B97F4A7C15
  (mod 2^64); ARI from the contingency table with scipy.special.comb (Hubert & Arabie 1985),
  over the items that have an edge
Data: the demo café orders (invented for demos), under several option sets.
"""

import csv
import itertools
import json
import re
import sys
from pathlib import Path

import networkx as nx
import numpy as np
from scipy.special import comb

sys.dont_write_bytecode = True
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

DEMO = C.REPO / "demo" / "cafe-orders.csv"
STEP = 0x9E3779B97F4A7C15
MEASURE_COL = {"phi": "phi", "lift": "lift", "jaccard": "jaccard"}


def ari(x, y):
    """Adjusted Rand index from the contingency table (Hubert & Arabie 1985)."""
    xs, xi = np.unique(np.asarray(x), return_inverse=True)
    ys, yi = np.unique(np.asarray(y), return_inverse=True)
    t = np.zeros((len(xs), len(ys)), dtype=np.int64)
    np.add.at(t, (xi, yi), 1)
    sij = comb(t, 2).sum()
    a = comb(t.sum(axis=1), 2).sum()
    b = comb(t.sum(axis=0), 2).sum()
    n2 = comb(len(x), 2)
    expected = a * b / n2
    top = (a + b) / 2
    return 1.0 if top == expected else (sij - expected) / (top - expected)


def load(d, measure):
    with open(d / "nodes.csv", newline="", encoding="utf-8") as f:
        nodes = list(csv.DictReader(f))
    with open(d / "edges.csv", newline="", encoding="utf-8") as f:
        edges = list(csv.DictReader(f))
    G = nx.Graph()
    G.add_nodes_from(r["item"] for r in nodes)
    for e in edges:
        if float(e["phi"]) > 0:
            G.add_edge(e["item_a"], e["item_b"], weight=float(e[MEASURE_COL[measure]]))
    comms = {}
    for r in nodes:
        comms.setdefault(int(r["cluster"]), set()).add(r["item"])
    return G, list(comms.values()), nodes


def main():
    C.require_binary()
    chk = C.Checker("network_modularity (networkx.community, scipy.special.comb)")
    cases = [
        ("default", []),
        ("lift weights", ["--measure", "lift"]),
        ("jaccard, resolution 1.5", ["--measure", "jaccard", "--resolution", "1.5"]),
        ("sign both (negative edges left out)", ["--sign", "both", "--max-q", "0.2"]),
        ("dense noisy graph", ["--min-count", "1", "--max-q", "1", "--seed", "5"]),
        ("noisy graph, lift weights", ["--min-count", "1", "--max-q", "1", "--measure", "lift"]),
        ("one run, resolution 0.5", ["--restarts", "1", "--resolution", "0.5"]),
    ]
    with C.tempdir() as td:
        td = Path(td)
        for i, (label, opts) in enumerate(cases):
            out = td / f"case{i}"
            text = C.run(["map", DEMO, "-o", out, "-q"] + opts)
            run = json.loads((out / "run.json").read_text(encoding="utf-8"))
            measure = run["settings"]["measure"]
            res = run["settings"]["resolution"]
            G, comms, _ = load(out, measure)
            ref = nx.community.modularity(G, comms, weight="weight", resolution=res)
            chk.close("run.json modularity == networkx.community.modularity",
                      run["network"]["modularity"], ref, atol=1e-9, kind="abs", where=label)
            m = re.search(r"^modularity\s+([0-9.eE+-]+)", text, re.M)
            if not m:
                chk.fail(f"{label}: no modularity in the summary")
            else:
                chk.close("printed modularity == networkx.community.modularity",
                          float(m.group(1)), ref, atol=1e-9, kind="abs", where=label)
            best_nx = max(nx.community.modularity(
                G, nx.community.louvain_communities(G, weight="weight", resolution=res, seed=s),
                weight="weight", resolution=res) for s in range(10))
            if run["network"]["modularity"] < best_nx - 0.005:
                chk.fail(f"{label}: modularity {run['network']['modularity']:.6f} is below "
                         f"networkx Louvain's best of 10 seeds ({best_nx:.6f}) by more than 0.005")
            chk.note(f"{label}: modularity {run['network']['modularity']:.6f}, networkx Louvain "
                     f"best of 10 seeds {best_nx:.6f}, stability {run['network']['stability']}")
            if "sign both" in label:
                neg = sum(1 for _ in open(out / "edges.csv", encoding="utf-8")) - 1 - \
                    G.number_of_edges()
                chk.equal("negative edges reported as not clustered",
                          run["pairs"]["negative_not_clustered"], neg, label)
                if neg == 0:
                    chk.fail(f"{label}: the case has no negative edge to leave out")

        # stability from single runs with the documented restart seeds
        # (the noisy lift and jaccard graphs are cases where the runs disagree: stability < 1)
        noisy = ["--min-count", "1", "--max-q", "1"]
        for label, opts, seed, R in [("noisy graph, lift", noisy + ["--measure", "lift"], 1, 6),
                                     ("noisy graph, jaccard", noisy + ["--measure", "jaccard"],
                                      9, 5),
                                     ("default", [], 1, 4)]:
            out = td / "multi"
            C.run(["map", DEMO, "-o", out, "-q", "--seed", str(seed), "--restarts", str(R)]
                  + opts)
            run = json.loads((out / "run.json").read_text(encoding="utf-8"))
            parts, qs = [], []
            for r in range(R):
                o1 = td / f"single{r}"
                C.run(["map", DEMO, "-o", o1, "-q", "--seed", str((seed + r * STEP) % 2**64),
                       "--restarts", "1"] + opts)
                G, comms, nodes = load(o1, run["settings"]["measure"])
                with_edges = sorted(n for n in G.nodes if G.degree(n) > 0)
                lab = {n: k for k, c in enumerate(comms) for n in c}
                parts.append([lab[n] for n in with_edges])
                qs.append(json.loads((o1 / "run.json").read_text())["network"]["modularity"])
            chk.equal("restart_modularity == single runs with the documented seeds",
                      run["network"]["restart_modularity"], qs, label)
            best = max(range(R), key=lambda r: (qs[r], -r))
            chk.equal("best_restart == first run of highest modularity",
                      run["network"]["best_restart"], best, label)
            mean = float(np.mean([ari(a, b) for a, b in itertools.combinations(parts, 2)]))
            chk.close("stability == mean pairwise ARI of the runs (scipy.special.comb)",
                      run["network"]["stability"], mean, atol=1e-12, kind="abs", where=label)
            chk.note(f"stability {label}: {run['network']['stability']:.6f} over {R} runs")
            if label.startswith("noisy") and not run["network"]["stability"] < 1:
                chk.fail(f"{label}: expected runs that disagree (stability < 1) to test the "
                         f"average; got {run['network']['stability']}")
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
