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
- exact branch, finer: every reported root (estimate: the mean equals x; low: P(X >= x) = 2.5%;
  high: P(X <= x) = 2.5%) is bracketed to 2^-46 (1.4e-14) relative by the definition of Fisher's
  noncentral hypergeometric distribution, P(X = k) proportional to C(na, k) C(N - na, nb - k) w^k,
  summed in exact integer arithmetic (Python's math.comb and integers, no rounding anywhere): the
  equation must change sign between r (1 - 2^-46) and r (1 + 2^-46). This sees errors a hundred
  times below what the comparison with scipy can; besides the random tables, two tables with
  margins like the medium bench file's (1,000,000 respondents, generated) through --respondents.
"""

import math
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
from scipy.stats.contingency import odds_ratio
from statsmodels.stats.contingency_tables import Table2x2

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

ALL = ["--min-count", "0", "--max-q", "1", "--sign", "both"]
RTOL = 1e-7
DELTA = Fraction(1, 2 ** 46)  # the exact bracket of each root, relative


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


def nchg_exact(N, K, n, x, w):
    """Exact integers proportional to the total, P(X < x), P(X <= x) and the first moment of
    Fisher's noncentral hypergeometric distribution C(K, k) C(N - K, n - k) w^k, for w = p / 2^e
    (a double, or a double times 1 +- 2^-46): Horner's rule homogeneous in p and 2^e, so that each
    step is a shift, an addition or a product by p."""
    lo, hi = max(0, n - (N - K)), min(K, n)
    p, q = w.numerator, w.denominator
    e = q.bit_length() - 1
    assert q == 1 << e, w
    c = [math.comb(K, lo) * math.comb(N - K, n - lo)]  # C(K, k) C(N - K, n - k), k = lo..hi
    for k in range(lo, hi):
        c.append(c[-1] * (K - k) * (n - k) // ((k + 1) * (N - K - n + k + 1)))  # exact
    tot = below = upto = mom = 0
    for j in range(hi - lo, -1, -1):
        k, a = lo + j, c[j] << (e * (hi - lo - j))
        tot = tot * p + a
        below = below * p + (a if k < x else 0)
        upto = upto * p + (a if k <= x else 0)
        mom = mom * p + k * a
    return tot, below, upto, mom


def exact_roots(chk, N, na, nb, nab, got, where):
    """Each finite, nonzero root of got = (estimate, low, high) bracketed to DELTA, exactly."""
    for name, r in zip(("estimate", "low", "high"), got):
        if r == 0 or math.isinf(r) or math.isnan(r):
            continue  # the support's edges: compared with scipy exactly
        signs = []
        for w in (Fraction(r) * (1 - DELTA), Fraction(r) * (1 + DELTA)):
            tot, below, upto, mom = nchg_exact(N, na, nb, nab, w)
            # each equation increasing in w: mean - x, P(X >= x) - 1/40, 1/40 - P(X <= x)
            v = {"estimate": mom - nab * tot, "low": 40 * (tot - below) - tot,
                 "high": tot - 40 * upto}[name]
            signs.append(v)
        chk.equal(f"odds ratio {name} within 2^-46 of the root (exact integer arithmetic)",
                  signs[0] < 0 < signs[1], True, f"{where} {name}={r!r}")


def check_rows(chk, df, N, counts, label, seen=None):
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
            if seen is not None and (na, nb, nab) not in seen:  # each table once
                seen.add((na, nb, nab))
                exact_roots(chk, N, na, nb, nab, got, where)
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


def bench_like(chk, td):
    """Fisher-branch tables with margins like the medium bench file's (N = 1,000,000, items of
    several hundred respondents, a few dozen together; generated): only the respondents who chose
    something are written, --respondents gives N. Roots bracketed exactly to 2^-46."""
    cases = [(1_000_000, 470, 1208, 27), (1_000_000, 862, 635, 30)]
    for i, (N, na, nb, nab) in enumerate(cases):
        rows = [[f"o{j:06d}", "cocoa"] for j in range(na)]
        rows += [[f"o{j:06d}", "strudel"] for j in range(na - nab, na - nab + nb)]
        f = td / f"bench{i}.csv"
        C.write_long(f, rows)
        where = f"N={N} table={C.table2x2(N, na, nb, nab)}"
        try:
            df = C.read_csv(C.run(["pairs", f, "--respondents", N] + ALL), C.PAIR_COLUMNS)
        except C.RunError as e:
            chk.fail(f"{where}: {e}")
            continue
        r = next(df.itertuples(index=False))
        chk.equal("bench-like table: the pair's count and test", (int(r.together), r.test),
                  (nab, "fisher"), where)
        got = (float(r.odds_ratio), float(r.odds_ratio_low), float(r.odds_ratio_high))
        exact_roots(chk, N, na, nb, nab, got, where)


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
    seen = set()
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
                ne, nw = check_rows(chk, df, N, counts, f"{label} {opts[-1]}", seen)
                totals[0] += ne
                totals[1] += nw
        bench_like(chk, td)
        weighted_case(chk, td)
    chk.note(f"{totals[0]} tables on the exact branch, {totals[1]} on Woolf's")
    if totals[0] < 50 or totals[1] < 50:
        chk.fail(f"too few tables on a branch to mean anything: {totals}")
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
