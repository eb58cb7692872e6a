#!/usr/bin/python3
"""Reference check of the pair columns within segments (issue 14 point 3):
mh_odds_ratio,mh_low,mh_high,cmh_p,heterogeneity_p,reversed of `pairmap pairs --segment-col`.

References:
- statsmodels.stats.contingency_tables.StratifiedTable: oddsratio_pooled,
  oddsratio_pooled_confint (Robins, Breslow & Greenland 1986), test_null_odds(correction=False)
  (its statistic: two-sided p from scipy.stats.chi2.sf, one-sided from the signed root with
  scipy.stats.norm, since its own p is 1 - cdf and loses the digits of small p), and
  test_equal_odds(adjust=True) (statistic, p from chi2.sf) (Breslow-Day with Tarone's correction) given the informative
  strata (both items chosen by some but not all of the stratum: statsmodels' formula divides
  by zero on the others, which carry no information on their own odds ratio);
- the crude odds ratio and Woolf's interval behind `reversed`: statsmodels Table2x2 of the
  summed table; the rule (opposite sides of 1, both intervals excluding 1) applied here;
- the per-stratum tables: a pandas group-by of the generated input;
- the admissions table of Bickel, Hammel & O'Connell (1975, Science 187:398-404), six
  departments, counts from memory: pooled, men are admitted more often (crude odds ratio
  1.84, interval excluding 1); within the departments the Mantel-Haenszel odds ratio is
  below 1 (0.90) but its interval holds 1, so by the documented rule reversed = 0, and the
  departments' odds ratios differ (Breslow-Day-Tarone p about 0.002).
Random data: several sizes and strata counts, small strata with zero cells included.
"""

import io
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats
from statsmodels.stats.contingency_tables import StratifiedTable, Table2x2

from common import require_binary, run_raw, tempdir

FAILS = []
WORST = {}
COLS = ["mh_odds_ratio", "mh_low", "mh_high", "cmh_p", "heterogeneity_p", "reversed"]


def check(cond, what):
    if not cond:
        FAILS.append(what)


def close(name, got, want, rel=1e-9, abs_=1e-300):
    if np.isnan(want) or np.isinf(want):
        check(str(got) == str(want) or (np.isnan(want) and np.isnan(got)),
              f"{name}: {got!r} != {want!r}")
        return
    err = abs(got - want) / max(abs(want), 1e-300)
    WORST[name] = max(WORST.get(name, 0.0), err)
    check(abs(got - want) <= abs_ + rel * abs(want), f"{name}: {got!r} != {want!r}")


def pm(args):
    p = run_raw(args)
    if p.returncode != 0:
        raise SystemExit(f"pairmap {' '.join(map(str, args))} exited {p.returncode}: "
                         f"{p.stderr.decode('utf-8', 'replace')[:600]}")
    return pd.read_csv(io.StringIO(p.stdout.decode()), dtype=str, keep_default_na=False)


def f(s):
    return float(s) if s != "" else float("nan")


def tables_of(M, strata, levels, a, b):
    out = []
    for s in levels:
        m = strata == s
        x, y = M[m, a], M[m, b]
        out.append(np.array([[np.sum(x & y), np.sum(x & ~y)], [np.sum(~x & y), np.sum(~x & ~y)]],
                            dtype=float))
    return out


def reference(T, sign):
    st = StratifiedTable(T)
    with np.errstate(divide="ignore", invalid="ignore"):
        mh = st.oddsratio_pooled
        lo, hi = st.oddsratio_pooled_confint() if 0 < mh < np.inf else (np.nan, np.nan)
        t = st.test_null_odds(correction=False)
        sa = sum(x[0, 0] for x in T)
        se = sum(x[0].sum() * x[:, 0].sum() / x.sum() for x in T)
        z = np.sign(sa - se) * np.sqrt(t.statistic)
        # statsmodels' p is 1 - cdf, which loses every digit below about 1e-16: its statistic
        # with scipy's survival function instead
        p = {"both": stats.chi2.sf(t.statistic, 1), "positive": stats.norm.sf(z),
             "negative": stats.norm.cdf(z)}[sign]
        inf = [x for x in T if 0 < x[0].sum() < x.sum() and 0 < x[:, 0].sum() < x.sum()]
        het = (stats.chi2.sf(max(StratifiedTable(inf).test_equal_odds(adjust=True).statistic, 0),
                             len(inf) - 1) if len(inf) >= 2 and 0 < mh < np.inf else np.nan)
    tot = sum(T)
    rev = np.nan if np.isnan(mh) else 0
    if (tot > 0).all() and not np.isnan(lo):
        clo, chi = Table2x2(tot).oddsratio_confint()
        rev = int((clo > 1 and hi < 1) or (chi < 1 and lo > 1))
    return [mh, lo, hi, p, het, rev]


def write_input(path, M, strata, names):
    rows = []
    for r in range(M.shape[0]):
        chosen = np.flatnonzero(M[r])
        for j in chosen if len(chosen) else [None]:
            rows.append((f"r{r:05d}", "" if j is None else names[j], strata[r]))
    pd.DataFrame(rows, columns=["who", "item", "stratum"]).to_csv(path, index=False)


def random_case(d, rng, n, k, sign):
    sizes = rng.multinomial(n - 3 * k, np.ones(k) / k) + 3  # every stratum >= 3: small ones too
    strata = np.repeat([f"s{j:02d}" for j in range(k)], sizes)
    base = rng.uniform(0.05, 0.6, size=(k, 5))
    base[0, 3] = 0  # item 3 never chosen in stratum 0: AD = BC = 0 there
    M = rng.random((n, 5)) < base[np.repeat(np.arange(k), sizes)]
    M[:, 4] |= M[:, 0] & (rng.random(n) < 0.4)  # items 0 and 4 paired within strata
    names = ["fig", "kale", "leek", "okra", "plum"]
    write_input(d / "in.csv", M, strata, names)
    out = pm(["pairs", d / "in.csv", "--segment-col", "stratum", "--min-count", "0",
              "--max-q", "1", "--sign", sign, "--quiet"])
    check(list(out.columns[-6:]) == COLS, f"columns {list(out.columns)}")
    levels = sorted(set(strata))
    for _, row in out.iterrows():
        a, b = names.index(row["item_a"]), names.index(row["item_b"])
        want = reference(tables_of(M, strata, levels, a, b), sign)
        for c, w in zip(COLS, want):
            if c == "reversed":
                check(row[c] == ("" if np.isnan(w) else str(int(w))), f"reversed {row[c]} {w}")
            else:
                close(c, f(row[c]), w)
    if k == 10:  # the same columns in partners --csv and map's edges.csv, against the reference
        po = pm(["partners", d / "in.csv", "--segment-col", "stratum", "--item", "fig", "--csv",
                 "--min-count", "0", "--max-q", "1", "--sign", sign, "--top", "0", "--quiet"])
        mp = run_raw(["map", d / "in.csv", "--segment-col", "stratum", "--min-count", "0",
                      "--max-q", "1", "--sign", sign, "-o", d / "map", "--quiet"])
        check(mp.returncode == 0, f"map exited {mp.returncode}")
        eo = pd.read_csv(d / "map" / "edges.csv", dtype=str, keep_default_na=False)
        check(list(po.columns[-6:]) == COLS and list(eo.columns[-6:]) == COLS,
              f"partners/edges.csv columns {list(po.columns)} {list(eo.columns)}")
        rows = [("fig", r["partner"], r) for _, r in po.iterrows()]
        rows += [(r["item_a"], r["item_b"], r) for _, r in eo.iterrows()]
        check(len(po) == 4 and len(eo) == len(out), f"rows {len(po)} {len(eo)}")
        for x, y, row in rows:
            want = reference(tables_of(M, strata, levels, names.index(x), names.index(y)), sign)
            for c, w in zip(COLS[:5], want):
                close("partners/edges.csv " + c, f(row[c]), w)
        # a set of items (fig and kale) as one item: its respondents chose both
        ps = pm(["partners", d / "in.csv", "--segment-col", "stratum", "--item", "fig", "--item",
                 "kale", "--csv", "--min-count", "0", "--max-q", "1", "--sign", sign, "--top", "0",
                 "--quiet"])
        check(list(ps.columns[-6:]) == COLS and len(ps) == 3, f"set partners {list(ps.columns)}")
        anchor = M[:, 0] & M[:, 1]
        for _, row in ps.iterrows():
            y = M[:, names.index(row["partner"])]
            T = []
            for s in levels:
                m = strata == s
                x, z = anchor[m], y[m]
                T.append(np.array([[np.sum(x & z), np.sum(x & ~z)], [np.sum(~x & z),
                                   np.sum(~x & ~z)]], dtype=float))
            want = reference(T, sign)
            for c, w in zip(COLS, want):
                if c == "reversed":
                    check(row[c] == ("" if np.isnan(w) else str(int(w))), f"set reversed {row[c]}")
                else:
                    close("set partners " + c, f(row[c]), w)
    return len(out)


def berkeley(d):
    # Bickel, Hammel & O'Connell (1975), Science 187:398-404, table of the six largest
    # departments; counts from memory: (men applied, men admitted, women applied, women admitted)
    depts = {"A": (825, 512, 108, 89), "B": (560, 353, 25, 17), "C": (325, 120, 593, 202),
             "D": (417, 138, 375, 131), "E": (191, 53, 393, 94), "F": (373, 22, 341, 24)}
    rows, T, r = [], [], 0
    for dep, (m, ma, w, wa) in depts.items():
        for sex, napp, nadm in (("man", m, ma), ("woman", w, wa)):
            for i in range(napp):
                r += 1
                rows.append((f"a{r}", sex, dep))
                if i < nadm:
                    rows.append((f"a{r}", "admitted", dep))
        T.append(np.array([[ma, m - ma], [wa, w - wa]], dtype=float))
    pd.DataFrame(rows, columns=["applicant", "item", "department"]).to_csv(d / "adm.csv",
                                                                           index=False)
    out = pm(["pairs", d / "adm.csv", "--segment-col", "department", "--min-count", "0",
              "--max-q", "1", "--sign", "both", "--quiet"])
    row = out[(out.item_a == "admitted") & (out.item_b == "man")].iloc[0]
    want = reference(T, "both")
    for c, w in zip(COLS[:5], want):
        close("berkeley " + c, f(row[c]), w)
    crude = Table2x2(sum(T))
    check(crude.oddsratio_confint()[0] > 1, "Berkeley: pooled, men admitted more often")
    check(f(row["mh_odds_ratio"]) < 1 < f(row["mh_high"]), "Berkeley: within, below 1, CI holds 1")
    check(float(row["odds_ratio"]) > 1, "Berkeley: the pooled odds_ratio column above 1")
    check(row["reversed"] == "0", f"Berkeley reversed {row['reversed']} (rule: both CIs exclude 1)")
    check(f(row["heterogeneity_p"]) < 0.01, "Berkeley: departments differ")


def reversal(d, rng):
    """Generated confounding strong enough for the rule: in each stratum the items are
    negatively associated, the strata's shares differ: pooled positive."""
    M, strata = [], []
    for s, (p, n) in enumerate([(0.1, 3000), (0.85, 3000)]):
        x = rng.random(n) < p
        y = np.where(x, rng.random(n) < p * 0.7, rng.random(n) < min(1, p * 1.3))
        M.append(np.c_[x, y, rng.random(n) < 0.3])
        strata += [f"t{s}"] * n
    M, strata = np.vstack(M), np.array(strata)
    write_input(d / "rev.csv", M, strata, ["cider", "scone", "toast"])
    out = pm(["pairs", d / "rev.csv", "--segment-col", "stratum", "--min-count", "0",
              "--max-q", "1", "--sign", "both", "--quiet"])
    row = out[(out.item_a == "cider") & (out.item_b == "scone")].iloc[0]
    want = reference(tables_of(M, strata, ["t0", "t1"], 0, 1), "both")
    check(want[5] == 1 and row["reversed"] == "1", f"reversal: {row['reversed']}, ref {want[5]}")


def main():
    require_binary()
    rng = np.random.default_rng(1975)
    n_pairs = 0
    with tempdir() as t:
        d = Path(t)
        for n, k, sign in [(60, 4, "both"), (400, 2, "positive"), (1500, 10, "both"),
                           (3000, 6, "negative"), (800, 25, "both")]:
            n_pairs += random_case(d, rng, n, k, sign)
        berkeley(d)
        reversal(d, rng)
        # weighted input: the columns are there and empty (a note says so)
        pd.DataFrame([("a", "fig", "x", 2), ("a", "kale", "x", 2), ("b", "fig", "y", 1),
                      ("c", "kale", "y", 1), ("d", "leek", "x", 1)],
                     columns=["who", "item", "stratum", "w"]).to_csv(d / "w.csv", index=False)
        p = run_raw(["pairs", d / "w.csv", "--segment-col", "stratum", "--weight-col", "w",
                     "--min-count", "0", "--max-q", "1", "--sign", "both"])
        txt = p.stdout.decode()
        check(p.returncode == 0 and txt.splitlines()[0].endswith(",".join(COLS)) and
              all(line.endswith(",,,,,,") for line in txt.splitlines()[1:]),
              f"weighted: {p.returncode} {txt[:300]!r}")
    check(n_pairs >= 40, f"only {n_pairs} pairs compared")
    print(f"stratified: {n_pairs} random pairs compared")
    for k, v in sorted(WORST.items()):
        print(f"stratified: largest relative deviation {k}: {v:.3g}")
    if FAILS:
        for x in FAILS[:20]:
            print("FAIL:", x)
        print(f"stratified: {len(FAILS)} check(s) failed")
        return 1
    print("stratified: all checks passed")
    return 0


if __name__ == "__main__":
    sys.exit(main())
