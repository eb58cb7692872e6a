#!/usr/bin/python3
"""Reference check of `pairmap segments` (issue 14) against scipy, statsmodels, numpy and pandas.

- base, chose, share: a pandas group-by of the input (generated data; and the festival demo,
  whose items come from `pairmap unfold` and whose segment columns pandas reads itself);
- share_low/high: scipy.stats.beta.ppf of the Jeffreys prior (Brown, Cai & DasGupta 2001);
- test/p_value: scipy.stats.fisher_exact (two-sided) where an expected cell is below 5
  (Cochran's rule, common practice), else scipy.stats.chi2_contingency(correction=False);
- q_value: statsmodels multipletests(method="fdr_bh") over the cells of the column;
- trend_z/p: the Cochran-Armitage formula (Agresti, Categorical Data Analysis, 2nd ed.,
  section 5.3.5; scores 1..k, no N/(N-1) factor) computed in numpy, p from scipy.stats.norm;
- m and the log-likelihood: scipy.stats.betabinom.logpmf summed over the cells, maximised with
  scipy.optimize.minimize_scalar(method="bounded") on log m over [log 1e-3, log 1e8]; pairmap's
  log-likelihood must reach the reference optimum minus 1e-6, and equal the reference sum at
  pairmap's own m; shrunk and its interval from scipy.stats.beta at that m;
- the order of levels: labels with numbers by their first number (written out by hand here).
"""

import re
import sys

import numpy as np
import pandas as pd
from scipy import optimize, stats
from statsmodels.stats.multitest import multipletests

from common import REPO, require_binary, run_raw


def run_pairmap(args):
    p = run_raw(args)
    if p.returncode != 0:
        raise SystemExit(f"pairmap {' '.join(map(str, args))} exited {p.returncode}: "
                         f"{p.stderr.decode('utf-8', 'replace')[:500]}")
    return p.stdout.decode("utf-8"), p.stderr.decode("utf-8")

FAILS = []
WORST = {}


def check(cond, what):
    if not cond:
        FAILS.append(what)


def close(name, got, want, rel=1e-9, abs_=1e-12):
    err = abs(got - want)
    WORST[name] = max(WORST.get(name, 0.0), err / max(abs(want), 1e-300) if want else err)
    check(err <= abs_ + rel * abs(want), f"{name}: {got!r} != {want!r}")


def read_out(args):
    out, err = run_pairmap(["segments"] + args)
    from io import StringIO
    return pd.read_csv(StringIO(out), keep_default_na=False, dtype=str), err


def fnum(s):
    return float(s) if s != "" else float("nan")


def reference_fit(x, n, mu):
    """Maximum-likelihood m of the beta-binomial model: scipy.stats.betabinom.logpmf summed over
    the cells with 0 < mu < 1, maximised by minimize_scalar(method="bounded") on log m and a
    grid. scipy's betaln loses about 1e-7 per cell near m = 1e8 (log-gammas of 1e9 cancel), so
    the candidates are then scored with the same log-likelihood summed exactly (log(a + j)
    added term by term with math.fsum, binomial terms from math.lgamma). Returns the exact
    optimum and the exact log-likelihood function."""
    import math
    keep = (mu > 0) & (mu < 1) & (n > 0)
    x, n, mu = x[keep], n[keep], mu[keep]

    def ll(lm):
        m = np.exp(lm)
        return stats.betabinom.logpmf(x, n, m * mu, m * (1 - mu)).sum()

    def lp(a, k):
        return math.fsum(np.log1p(np.arange(1, int(k)) / a)) + k * math.log(a) if k else 0.0

    def exact(lm):
        m = math.exp(lm)
        terms = []
        for xx, nn, u in zip(x, n, mu):
            a, b = m * u, m * (1 - u)
            terms += [math.lgamma(nn + 1) - math.lgamma(xx + 1) - math.lgamma(nn - xx + 1),
                      lp(a, xx), lp(b, nn - xx), -lp(a + b, nn)]
        return math.fsum(terms)

    res = optimize.minimize_scalar(lambda lm: -ll(lm), bounds=(np.log(1e-3), np.log(1e8)),
                                   method="bounded", options={"xatol": 1e-10})
    grid = np.linspace(np.log(1e-3), np.log(1e8), 200)
    vals = [ll(g) for g in grid]
    cands = [res.x, grid[int(np.argmax(vals))], np.log(1e8)]
    return max(exact(c) for c in cands), exact


def check_column(df, col, seg, items, ordered, note):
    """df: pairmap's rows of one column; seg: respondent -> label; items: respondent -> set."""
    levels = list(dict.fromkeys(df["segment"]))
    resp = [r for r in seg if seg[r] != ""]
    B = len(resp)
    all_items = sorted(set(df["item"]))
    base = {lv: sum(1 for r in resp if seg[r] == lv) for lv in levels}
    chose = {(lv, it): 0 for lv in levels for it in all_items}
    for r in resp:
        for it in items.get(r, ()):
            chose[(seg[r], it)] += 1
    tot = {it: sum(chose[(lv, it)] for lv in levels) for it in all_items}
    mu = {it: tot[it] / B for it in all_items}
    m_got = float(re.search(r"'%s': prior strength m = ([0-9.e+-]+)" % re.escape(col), note).group(1))
    ll_got = float(re.search(r"'%s': prior strength .* log-likelihood ([0-9.e+-]+)" % re.escape(col), note).group(1))
    x = np.array([chose[(lv, it)] for lv in levels for it in all_items], float)
    n = np.array([base[lv] for lv in levels for it in all_items], float)
    muv = np.array([mu[it] for lv in levels for it in all_items], float)
    best, ll = reference_fit(x, n, muv)
    check(ll_got >= best - 1e-6,
          f"{col}: log-likelihood {ll_got} below the reference optimum {best}")
    close(f"loglik at pairmap's m ({col})", ll_got, ll(np.log(m_got)), rel=1e-6, abs_=1e-6)
    WORST[f"loglik below optimum ({col})"] = best - ll_got
    pv, rows = [], []
    for _, row in df.iterrows():
        lv, it = row["segment"], row["item"]
        xx, nn = chose[(lv, it)], base[lv]
        check(int(row["base"]) == nn and int(row["chose"]) == xx, f"{col}/{lv}/{it}: counts")
        lo = 0.0 if xx == 0 else stats.beta.ppf(0.025, xx + 0.5, nn - xx + 0.5)
        hi = 1.0 if xx == nn else stats.beta.ppf(0.975, xx + 0.5, nn - xx + 0.5)
        close("share_low", fnum(row["share_low"]), lo, rel=1e-9)
        close("share_high", fnum(row["share_high"]), hi, rel=1e-9)
        a, b = xx + m_got * mu[it], nn - xx + m_got * (1 - mu[it])
        close("shrunk", fnum(row["shrunk"]), a / (a + b))
        if mu[it] > 0 and mu[it] < 1:
            close("shrunk_low", fnum(row["shrunk_low"]), stats.beta.ppf(0.025, a, b), rel=1e-8)
            close("shrunk_high", fnum(row["shrunk_high"]), stats.beta.ppf(0.975, a, b), rel=1e-8)
            close("index", fnum(row["index"]), (a / (a + b)) / mu[it])
        if 0 < nn < B and 0 < tot[it] < B:
            t = np.array([[xx, nn - xx], [tot[it] - xx, B - nn - tot[it] + xx]])
            exp_min = min(nn, B - nn) * min(tot[it], B - tot[it]) / B
            if exp_min < 5:
                want_test, p = "fisher", stats.fisher_exact(t)[1]
            else:
                want_test, p = "chi2", stats.chi2_contingency(t, correction=False)[1]
            check(row["test"] == want_test, f"{col}/{lv}/{it}: test {row['test']} != {want_test}")
            close("p_value", fnum(row["p_value"]), p, rel=1e-7, abs_=1e-14)
            pv.append(p)
            rows.append(fnum(row["q_value"]))
        else:
            check(row["p_value"] == "", f"{col}/{lv}/{it}: a p-value where none is defined")
        if ordered and 0 < tot[it] < B:
            tt = np.arange(1, len(levels) + 1, dtype=float)
            nv = np.array([base[l] for l in levels], float)
            xv = np.array([chose[(l, it)] for l in levels], float)
            pbar = tot[it] / B
            tbar = (nv * tt).sum() / B
            z = (tt * (xv - nv * pbar)).sum() / np.sqrt(pbar * (1 - pbar) * (nv * (tt - tbar) ** 2).sum())
            close("trend_z", fnum(row["trend_z"]), z, rel=1e-9, abs_=1e-12)
            close("trend_p", fnum(row["trend_p"]), 2 * stats.norm.sf(abs(z)), rel=1e-7, abs_=1e-15)
        elif not ordered:
            check(row["trend_z"] == "", f"{col}: a trend for an unordered column")
    if pv:
        q = multipletests(pv, method="fdr_bh")[1]
        for g, w in zip(rows, q):
            close("q_value", g, w, rel=1e-9, abs_=1e-15)
    return m_got


def generated(tmp, name, spread, seed):
    """Long data with a segment column; spread 0: the same shares in every segment."""
    rng = np.random.default_rng(seed)
    labels = ["10 to 19 km", "5 to 9 km", "€1,000-1,999", "€500-999", "far away"]
    base_p = rng.uniform(0.02, 0.4, 25)
    lines = ["id,item,band"]
    seg, items = {}, {}
    for r in range(2400):
        lv = labels[rng.integers(len(labels))] if r % 97 else ""
        k = labels.index(lv) if lv else 0
        p = np.clip(base_p * np.exp(spread * rng.normal(0, 1, 25) if spread else 0) *
                    (1 + spread * (k - 2) * 0.2), 0.001, 0.95)
        chosen = [f"item{i:02d}" for i in range(25) if rng.random() < p[i]] or ["item00"]
        rid = f"r{r:05d}"
        seg[rid] = lv
        items[rid] = set(chosen)
        for it in chosen:
            lines.append(f"{rid},{it},\"{lv}\"")
    path = tmp / f"{name}.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path, seg, items


def main():
    require_binary()
    import tempfile
    from pathlib import Path
    tmp = Path(tempfile.mkdtemp(prefix="pm-seg-"))
    ms = {}
    for name, spread, seed in [("strong", 0.8, 1), ("none", 0.0, 2), ("mild", 0.15, 3)]:
        path, seg, items = generated(tmp, name, spread, seed)
        df, note = read_out([str(path), "--segment-col", "band"])
        # order by first number: 5, 10, 500, 1,000 (thousands separator), then no number
        want = ["5 to 9 km", "10 to 19 km", "€500-999", "€1,000-1,999", "far away"]
        check(list(dict.fromkeys(df["segment"])) == want,
              f"level order {list(dict.fromkeys(df['segment']))}")
        ms[name] = check_column(df, "band", seg, items, False, note)
        # --segment-levels: the order given, and the column becomes ordered (trend test)
        given = ["far away", "5 to 9 km", "10 to 19 km", "€500-999", "€1,000-1,999"]
        df2, note2 = read_out([str(path), "--segment-col", "band",
                               "--segment-levels", "band=" + ",".join(given)])
        check(list(dict.fromkeys(df2["segment"])) == given, "--segment-levels order")
        check_column(df2, "band", seg, items, True, note2)
    # no spread in the generating model: m large (each segment's own share weighs < 1%)
    check(ms["none"] >= 1e5, f"no true spread: m {ms['none']} should be large")
    # identical shares in every segment (less spread than binomial noise): m at its bound
    lines, seg, items = ["id,item,band"], {}, {}
    for lv in ["A", "B", "C", "D"]:
        for r in range(400):
            rid = f"{lv}{r:04d}"
            chosen = [f"i{i}" for i in range(6) if r % (i + 2) == 0] or ["i9"]
            seg[rid], items[rid] = lv, set(chosen)
            lines += [f"{rid},{it},{lv}" for it in chosen]
    flat = tmp / "flat.csv"
    flat.write_text("\n".join(lines) + "\n", encoding="utf-8")
    df, note = read_out([str(flat), "--segment-col", "band"])
    m_flat = check_column(df, "band", seg, items, False, note)
    check(m_flat == 1e8 and "no spread beyond chance" in note,
          f"identical shares: m {m_flat} should sit at its bound 1e8, with a note")
    check(ms["strong"] < 1e3, f"strong spread: m {ms['strong']} should be small")

    # the festival demo: items from `pairmap unfold`, segments read by pandas
    wide = ["--format", "wide", "--columns", "drinks_", "--columns", "hot dishes", "--columns",
            "sweets_", "--skip-col", "drinks_other", "--drop-value", "-"]
    demo = str(REPO / "demo" / "festival-survey.csv")
    out, _ = run_pairmap(["unfold", demo] + wide)
    from io import StringIO
    long = pd.read_csv(StringIO(out), keep_default_na=False, dtype=str)
    raw = pd.read_csv(demo, keep_default_na=False, dtype=str)
    items = long[long["item"] != ""].groupby("respondent")["item"].apply(set).to_dict()
    kept = set(long["respondent"])
    df, _ = read_out([demo, "--segment-col", "age_band"] + wide)
    order = list(dict.fromkeys(df["segment"]))
    check(order == ["under 25", "25-39", "40-59", "60 and over"], f"age bands in order: {order}")
    for col, ordered in [("age_band", True), ("region", False)]:
        seg = {r: v for r, v in zip(raw["respondent"], raw[col]) if r in kept}
        df, note = read_out([demo, "--segment-col", col] + wide)
        check(len(df) == len(set(df["segment"])) * len(set(df["item"])), f"{col}: rows")
        check_column(df, col, seg, items, ordered, note)
    for k in sorted(WORST):
        print(f"  largest deviation {k}: {WORST[k]:.3g}")
    if FAILS:
        for f in FAILS[:20]:
            print("FAIL:", f)
        print(f"segments: {len(FAILS)} checks failed")
        return 1
    print("segments: all checks passed")
    return 0


if __name__ == "__main__":
    sys.exit(main())
