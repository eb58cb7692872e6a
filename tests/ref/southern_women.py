#!/usr/bin/python3
"""Reference check: the Southern Women attendance data.

Source: Davis, Gardner & Gardner (1941), Deep South, attendance of 18 women at 14 social events,
as shipped by networkx (networkx.davis_southern_women_graph). Exported at test time as long
pairs: respondents are anonymous ids r01..r18 (no names leave networkx), events E1..E14 are items.

References:
- together  == networkx.algorithms.bipartite.weighted_projected_graph onto the events
               (edge weight = number of women at both events); no edge <=> pair not listed
- phi       == numpy.corrcoef of the 0/1 incidence columns, |d| <= 1e-12
- expected, support, confidence_ab/ba, lift, jaccard == numpy float64 formulas of DESIGN.md
- respondents of `pairmap items` == networkx degree of each event
- test, p, q: scipy / exact Fisher and statsmodels fdr_bh (shared code in common.py)
- row order must not matter (DESIGN.md: canonical order): shuffled rows, byte-identical output
"""

import random
import sys
from pathlib import Path

import networkx as nx
import numpy as np
from networkx.algorithms import bipartite

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402


def main():
    C.require_binary()
    chk = C.Checker("southern_women (Davis, Gardner & Gardner 1941 via networkx)")
    B = nx.davis_southern_women_graph()  # source: networkx, Davis et al. 1941
    women = list(B.graph["top"])
    events = list(B.graph["bottom"])
    ids = {w: f"r{i + 1:02d}" for i, w in enumerate(women)}
    M = np.array([[B.has_edge(w, e) for e in events] for w in women], dtype=bool)
    rows = [[ids[w], e] for w in women for e in events if B.has_edge(w, e)]
    P = bipartite.weighted_projected_graph(B, events)

    with C.tempdir() as td:
        f1 = Path(td) / "attendance.csv"
        C.write_long(f1, rows, header=("person", "event"))
        shuffled = rows[:]
        random.Random(1941).shuffle(shuffled)
        f2 = Path(td) / "attendance_shuffled.csv"
        C.write_long(f2, shuffled, header=("person", "event"))
        try:
            out = C.run(["pairs", f1, "--min-count", "0", "--max-q", "1", "--sign", "both"])
            out2 = C.run(["pairs", f2, "--min-count", "0", "--max-q", "1", "--sign", "both"])
            items_out = C.run(["items", f1])
            df = C.read_csv(out, C.PAIR_COLUMNS)
            it = C.read_csv(items_out, C.ITEM_COLUMNS)
        except C.RunError as e:
            chk.fail(str(e))
            return chk.finish()
        chk.equal("output with shuffled input rows byte-identical", out2 == out, True,
                  "pairs --sign both")

    # together vs networkx weighted projection (source: networkx bipartite projection)
    got = {(r.item_a, r.item_b): r for r in df.itertuples(index=False)}
    for u, v, d in P.edges(data=True):
        a, b = sorted((u, v), key=C.bkey)
        if (a, b) not in got:
            chk.fail(f"together: pair {a},{b} (weight {d['weight']} in networkx projection) "
                     f"not listed")
            continue
        chk.equal("together vs networkx weighted_projected_graph", int(got[(a, b)].together),
                  d["weight"], f"{a},{b}")
    for (a, b), r in got.items():
        if not P.has_edge(a, b) and float(r.together) != 0:
            chk.fail(f"together: pair {a},{b} listed with together={r.together} but no edge "
                     f"in the networkx projection")

    # phi vs numpy.corrcoef; other measures vs numpy formulas (DESIGN.md "Measures")
    corr = np.corrcoef(M.astype(float), rowvar=False)
    Mi = M.astype(np.int64)
    joint = Mi.T @ Mi
    n = Mi.sum(axis=0).astype(float)
    N = float(M.shape[0])
    idx = {e: j for j, e in enumerate(events)}
    for (a, b), r in got.items():
        ja, jb = idx[a], idx[b]
        nab, na, nb = float(joint[ja, jb]), n[ja], n[jb]
        where = f"{a},{b}"
        chk.close("phi vs numpy.corrcoef (abs)", float(r.phi), corr[ja, jb], atol=1e-12,
                  where=where, kind="abs")
        ref = {"expected": na * nb / N, "support": nab / N, "confidence_ab": nab / na,
               "confidence_ba": nab / nb, "lift": N * nab / (na * nb),
               "jaccard": nab / (na + nb - nab)}
        for col, val in ref.items():
            chk.close(f"{col} vs numpy formula", float(getattr(r, col)), val, rtol=1e-12,
                      where=where)

    # item totals vs networkx degree
    deg = dict(B.degree(events))
    got_items = {r.item: r for r in it.itertuples(index=False)}
    for e in events:
        if e not in got_items:
            chk.fail(f"items: event {e} missing")
            continue
        chk.equal("items respondents vs networkx degree", int(got_items[e].respondents),
                  deg[e], e)
        chk.close("items share vs degree/18", float(got_items[e].share), deg[e] / N,
                  rtol=1e-15, where=e)

    # everything else (listing rules, test choice, p, q) against the shared references
    ref = C.Reference(M, events, "both")
    C.check_pairs_output(chk, df, ref, "southern women --sign both")
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
