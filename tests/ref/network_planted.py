#!/usr/bin/python3
"""Reference check: the clusters of `pairmap map` on the demo data recover the groups planted
in it (demo/cafe-groups.csv, the answer key written by scripts/make-demo; the demo is invented).

Agreement is the adjusted Rand index (Hubert & Arabie 1985), computed here from the
contingency table with scipy.special.comb, independently of pairmap's own ARI code.
Two readings of the background items (group 'none', which belong to no planted group):
- primary: they are left out, and the ARI is taken over the items of the seven planted groups
  only (bound: ARI >= 0.9, i.e. the groups are recovered with at most a stray item or two);
- also reported: every 'none' item counted as a group of its own (a singleton), over all items.
Also checked: the planted groups are each found whole in one cluster (purity), for the default
seed and for seeds 2..5.
"""

import csv
import json
import sys
from pathlib import Path

import numpy as np
from scipy.special import comb

sys.dont_write_bytecode = True
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

DEMO = C.REPO / "demo" / "cafe-orders.csv"
GROUPS = C.REPO / "demo" / "cafe-groups.csv"


def ari(x, y):
    """Adjusted Rand index from the contingency table (Hubert & Arabie 1985)."""
    xs, xi = np.unique(np.asarray(x), return_inverse=True)
    ys, yi = np.unique(np.asarray(y), return_inverse=True)
    t = np.zeros((len(xs), len(ys)), dtype=np.int64)
    np.add.at(t, (xi, yi), 1)
    sij = comb(t, 2).sum()
    a = comb(t.sum(axis=1), 2).sum()
    b = comb(t.sum(axis=0), 2).sum()
    expected = a * b / comb(len(x), 2)
    top = (a + b) / 2
    return 1.0 if top == expected else (sij - expected) / (top - expected)


def main():
    C.require_binary()
    chk = C.Checker("network_planted (demo answer key, ARI via scipy.special.comb)")
    # sanity of the reference ARI on a case worked by hand: 4/7 (contingency table)
    chk.close("reference ARI on a hand-worked case", ari([0, 0, 1, 1], [0, 0, 1, 2]), 4 / 7,
              rtol=1e-15)
    with open(GROUPS, newline="", encoding="utf-8") as f:
        planted = {r["item"]: r["group"] for r in csv.DictReader(f)}
    with C.tempdir() as td:
        for seed in (1, 2, 3, 4, 5):
            out = Path(td) / f"s{seed}"
            C.run(["map", DEMO, "-o", out, "-q", "--seed", str(seed)])
            with open(out / "nodes.csv", newline="", encoding="utf-8") as f:
                cl = {r["item"]: int(r["cluster"]) for r in csv.DictReader(f)}
            chk.equal("every planted item is a vertex", sorted(set(planted) - set(cl)), [],
                      f"seed {seed}")
            items = sorted(i for i in planted if planted[i] != "none")
            a1 = ari([planted[i] for i in items], [cl[i] for i in items])
            allit = sorted(planted)
            a2 = ari([planted[i] if planted[i] != "none" else "none:" + i for i in allit],
                     [cl[i] for i in allit])
            if a1 < 0.9:
                chk.fail(f"seed {seed}: ARI over planted items {a1:.4f} < 0.9")
            else:
                chk.nchecks += 1
            for g in sorted(set(planted.values()) - {"none"}):
                got = {cl[i] for i in planted if planted[i] == g}
                chk.equal("planted group found whole in one cluster", len(got), 1,
                          f"seed {seed}, group {g}")
            run = json.loads((out / "run.json").read_text(encoding="utf-8"))
            chk.note(f"seed {seed}: ARI planted items only {a1:.4f}; with 'none' as singletons "
                     f"{a2:.4f}; modularity {run['network']['modularity']:.4f}, stability "
                     f"{run['network']['stability']:.4f}, clusters {run['network']['clusters']} "
                     f"({run['network']['singletons']} singletons)")
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
