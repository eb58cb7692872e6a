#!/usr/bin/python3
"""Reference check: the odds_ratio, odds_ratio_low, odds_ratio_high columns of `pairmap pairs`
(DESIGN.md, issue 15 point 6) on random incidence matrices (generated coverage tests: invented
data, N from 25 to 4000, rare and common items, items nested in others so that tables with a
zero cell occur).

Branch (DESIGN.md): the pair's test column decides; chi2 with no zero cell -> Woolf, fisher or
any zero cell -> conditional maximum likelihood with the exact interval.
References:
- exact branch: scipy.stats.contingency.odds_ratio(table, kind="conditional").statistic and
  .confidence_interval(0.95) (scipy 1.10: 0 / inf at the edges of the support)
- Woolf branch: statsmodels.stats.contingency_tables.Table2x2(table).oddsratio and
  .oddsratio_confint(0.05, method="normal") (Woolf's log interval)
- weighted input: Woolf on the weighted cells, variance scaled by Kish's effective size, i.e.
  statsmodels Table2x2 on the cells times n_eff / W (DESIGN: the scaling is ours, the interval
  statsmodels')
Tolerance: relative 1e-7 (scipy's own root finder stops at xtol 2e-12 absolute on the odds
ratio, which is relative 1e-8 on an odds ratio of 1e-4).
"""

import math
import sys
from pathlib import Path

import numpy as np
from scipy.stats.contingency import odds_ratio
from statsmodels.stats.contingency_tables import Table2x2

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

ALL = ["--min-count", "0", "--max-q", "1", "--sign", "both"]
RTOL = 1e-7


def make_case(seed, N, k):
    """Invented incidence: random densities, a few rare items, and nested items (chosen only by
    respondents of another item: zero 'b only' cells) and disjoint ones (zero 'both' cells)."""
    rng = np.random.default_rng(seed)
    cols = []
    for j in range(k):
        kind = j % 5
        if kind == 3 and cols:
            base = cols[rng.integers(len(cols))]
            cols.append(base & (rng.random(N) < 0.5))          # nested in base
        elif kind == 4 and cols:
            base = cols[rng.integers(len(cols))]
            cols.append(~base & (rng.random(N) < 0.2))         # disjoint from base
        else:
            d = rng.choice([0.01, 0.05, 0.2, 0.5, 0.8])
            cols.append(rng.random(N) < d)
    M = np.column_stack(cols)
    names = [f"dish{j:02d}" for j in range(k)]
    return M, names


def items_counts(f, extra):
    df = C.read_csv(C.run(["items", f] + extra), C.ITEM_COLUMNS)
    return {r.item: int(r.respondents) for r in df.itertuples(index=False)}


def check_rows(chk, df, N, counts, label):
    nexact = nwoolf = 0
    for r in df.itertuples(index=False):
        na, nb, nab = counts[r.item_a], counts[r.item_b], int(float(r.together))
        t = C.table2x2(N, na, nb, nab)
        where = f"{label} {r.item_a},{r.item_b} table={t}"
        got = (float(r.odds_ratio), float(r.odds_ratio_low), float(r.odds_ratio_high))
        if r.test == "fisher" or min(min(t[0]), min(t[1])) == 0:
            res = odds_ratio(t, kind="conditional")
            ci = res.confidence_interval(0.95)
            want = (float(res.statistic), float(ci.low), float(ci.high))
            src = "scipy odds_ratio(kind=conditional)"
            nexact += 1
        else:
            tb = Table2x2(np.array(t, dtype=float))
            lo, hi = tb.oddsratio_confint(0.05, method="normal")
            want = (float(tb.oddsratio), float(lo), float(hi))
            src = "statsmodels Table2x2 (Woolf)"
            nwoolf += 1
        for name, g, w in zip(("estimate", "low", "high"), got, want):
            if math.isinf(w) or w == 0:
                chk.equal(f"odds ratio {name} at the support's edge vs {src}", g, w, where)
            else:
                chk.close(f"odds ratio {name} vs {src}", g, w, rtol=RTOL, where=where)
    return nexact, nwoolf


def weighted_case(chk, td):
    rng = np.random.default_rng(77)
    M, names = make_case(77, 600, 10)
    w = rng.uniform(0.3, 3.0, M.shape[0]).round(3)
    f = td / "weighted.csv"
    C.write_long(f, C.incidence_rows(M, names, weights=w), header=("id", "item", "weight"))
    try:
        df = C.read_csv(C.run(["pairs", f, "--weight-col", "weight"] + ALL), C.PAIR_COLUMNS)
    except C.RunError as e:
        chk.fail(f"weighted: {e}")
        return
    W, neff = w.sum(), w.sum() ** 2 / (w ** 2).sum()
    col = {n: M[:, j] for j, n in enumerate(names)}
    for r in df.itertuples(index=False):
        a, b = col[r.item_a], col[r.item_b]
        cells = np.array([[w[a & b].sum(), w[a & ~b].sum()],
                          [w[~a & b].sum(), w[~a & ~b].sum()]])
        where = f"weighted {r.item_a},{r.item_b}"
        if (cells == 0).any():
            chk.equal("weighted zero cell: no interval", (r.odds_ratio_low, r.odds_ratio_high),
                      ("nan", "nan"), where)
            continue
        tb = Table2x2(cells * neff / W)
        lo, hi = tb.oddsratio_confint(0.05, method="normal")
        for name, g, wv in zip(("estimate", "low", "high"),
                               (r.odds_ratio, r.odds_ratio_low, r.odds_ratio_high),
                               (tb.oddsratio, lo, hi)):
            chk.close(f"weighted odds ratio {name} vs statsmodels Table2x2 on cells x n_eff/W",
                      float(g), float(wv), rtol=1e-9, where=where)


def main():
    C.require_binary()
    chk = C.Checker("odds_ratio (scipy conditional MLE + exact interval, statsmodels Woolf)")
    totals = [0, 0]
    with C.tempdir() as tds:
        td = Path(tds)
        for seed, N, k in [(1, 25, 10), (2, 60, 14), (3, 300, 16), (4, 1500, 14), (5, 4000, 12)]:
            M, names = make_case(seed, N, k)
            f = td / f"case{seed}.csv"
            C.write_long(f, C.incidence_rows(M, names))
            label = f"seed={seed} N={N}"
            # --sign negative with --min-count 0 lists the pairs never seen together too
            # (a zero 'both' cell: estimate and lower bound 0)
            for opts in (ALL, ["--min-count", "0", "--max-q", "1", "--sign", "negative"]):
                try:
                    df = C.read_csv(C.run(["pairs", f] + opts), C.PAIR_COLUMNS)
                    counts = items_counts(f, [])
                except C.RunError as e:
                    chk.fail(f"{label}: {e}")
                    continue
                ne, nw = check_rows(chk, df, N, counts, f"{label} {opts[-1]}")
                totals[0] += ne
                totals[1] += nw
        weighted_case(chk, td)
    chk.note(f"{totals[0]} tables on the exact branch, {totals[1]} on Woolf's")
    if totals[0] < 50 or totals[1] < 50:
        chk.fail(f"too few tables on a branch to mean anything: {totals}")
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
