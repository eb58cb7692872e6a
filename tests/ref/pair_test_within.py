#!/usr/bin/python3
"""Reference check of --pair-test within (issue 14 point 3): the Cochran-Mantel-Haenszel
p-value of every pair of the family, and the Benjamini-Hochberg q-values over the family that
select the pairs and fill q_value.

References:
- statsmodels.stats.contingency_tables.StratifiedTable(tables).test_null_odds(correction=False)
  for each pair of eligible items (0 < n < N over all respondents), over the per-segment 2x2
  tables of the respondents with a segment (a pandas-free numpy tabulation of the generated
  input): its statistic gives the two-sided p by scipy.stats.chi2.sf and the one-sided ones by
  the signed root with scipy.stats.norm (statsmodels' own p is 1 - cdf, which loses every digit
  below about 1e-16; where p is above 1e-12 its own pvalue is compared too);
- statsmodels.stats.multitest.multipletests(method="fdr_bh") over the p-values of every pair
  of the family, never-seen ones included; a pair whose statistic is not defined (no segment
  where both items vary: statsmodels divides by a zero variance) enters with p = 1, as
  pairmap documents.
Random data (invented here): items of very different shares so that many pairs are never
chosen together within a segment, a few respondents without a segment, strata of different
sizes; in one case a few items chosen by 3 respondents only, outside the family at the default
--min-count 5 and inside it at --min-count 1.
"""

import io
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats
from statsmodels.stats.contingency_tables import StratifiedTable
from statsmodels.stats.multitest import multipletests

from common import Checker, require_binary, run_raw, tempdir

CHK = Checker("pair_test_within")


def pm(args):
    p = run_raw(args)
    if p.returncode != 0:
        raise SystemExit(f"pairmap {' '.join(map(str, args))} exited {p.returncode}: "
                         f"{p.stderr.decode('utf-8', 'replace')[:600]}")
    return (pd.read_csv(io.StringIO(p.stdout.decode()), dtype=str, keep_default_na=False),
            p.stderr.decode())


def generate(rng, n, k, n_items):
    while True:
        shares = np.exp(rng.uniform(np.log(0.006), np.log(0.5), size=n_items))
        shares[:2] = 0.2, 0.1  # the planted pair's items: common enough to be seen
        seg = rng.integers(0, k, size=n)
        seg[rng.random(n) < 0.04] = -1  # no segment
        tilt = rng.uniform(0.3, 2.0, size=(k + 1, n_items))  # shares differ by segment
        prob = np.minimum(shares[None, :] * tilt[seg], 0.95)
        M = rng.random((n, n_items)) < prob
        M[:, 1] |= M[:, 0] & (rng.random(n) < 0.5)  # a pair that holds within
        # a pair that only the segment mix makes: both frequent in segment 0, independent
        M[:, 2] = np.where(seg == 0, rng.random(n) < 0.6, rng.random(n) < 0.05)
        M[:, 3] = np.where(seg == 0, rng.random(n) < 0.6, rng.random(n) < 0.05)
        if (M.sum(0) >= 5).all() and (M.sum(0) < n).all():
            return M, seg


def write_input(path, M, seg, names):
    rows = []
    for r in range(M.shape[0]):
        chosen = np.flatnonzero(M[r])
        s = "" if seg[r] < 0 else f"zone {seg[r] + 1}"
        for j in chosen if len(chosen) else [None]:
            rows.append((f"v{r:05d}", "" if j is None else names[j], s))
    pd.DataFrame(rows, columns=["visit", "item", "zone"]).to_csv(path, index=False)


def cmh_p(M, seg, k, a, b, sign):
    tables = []
    for s in range(k):
        m = seg == s
        x, y = M[m, a], M[m, b]
        tables.append(np.array([[np.sum(x & y), np.sum(x & ~y)], [np.sum(~x & y), np.sum(~x & ~y)]],
                               dtype=float))
    with np.errstate(divide="ignore", invalid="ignore"):
        t = StratifiedTable(tables).test_null_odds(correction=False)
    if not np.isfinite(t.statistic):
        return np.nan, np.nan
    sa = sum(x[0, 0] for x in tables)
    se = sum(x[0].sum() * x[:, 0].sum() / x.sum() for x in tables if x.sum() > 0)
    z = np.sign(sa - se) * np.sqrt(t.statistic)
    p = {"both": stats.chi2.sf(t.statistic, 1), "positive": stats.norm.sf(z),
         "negative": stats.norm.cdf(z)}[sign]
    return p, t.pvalue


def family(M, seg, k, names, sign, min_count):
    """Every pair of the family with its CMH p (NaN: undefined) and its BH q: the pairs of the
    items chosen by at least min_count respondents (DESIGN.md's family; every item here is
    chosen by some but not all)."""
    keys, ps = [], []
    cnt = M.sum(0)
    order = sorted((i for i in range(len(names)) if cnt[i] >= min_count),
                   key=lambda i: names[i].encode())
    for i, a in enumerate(order):
        for b in order[i + 1:]:
            p, own = cmh_p(M, seg, k, a, b, sign)
            keys.append((names[a], names[b]))
            ps.append(p)
            if np.isfinite(p) and 1e-12 < p and sign == "both":
                CHK.close("statsmodels' own test_null_odds pvalue", p, own, rtol=1e-9,
                          where=f"{names[a]}-{names[b]}")
    ps = np.array(ps)
    q = multipletests(np.where(np.isnan(ps), 1.0, ps), method="fdr_bh")[1]
    return {key: (p, qq) for key, p, qq in zip(keys, ps, q)}


def compare(label, out, ref, max_q):
    for _, r in out.iterrows():
        key = (r["item_a"], r["item_b"])
        p, q = ref[key]
        where = f"{key[0]}-{key[1]}"
        got_p = float(r["cmh_p"]) if r["cmh_p"] != "" else np.nan
        if np.isnan(p):
            CHK.equal(f"{label}: undefined cmh_p empty", r["cmh_p"], "", where)
        else:
            CHK.close_p(f"{label}: cmh_p", got_p, p, rtol=1e-9, where=where)
        CHK.close_p(f"{label}: q_value", float(r["q_value"]), q, rtol=1e-9, where=where)
        if not q <= max_q * (1 + 1e-12):
            CHK.fail(f"{label}: {where} kept with reference q {q} > {max_q}")


def case(d, rng, n, k, n_items, rare=0):
    M, seg = generate(rng, n, k, n_items)
    if rare:  # items chosen by 3 respondents: outside the family at --min-count 5; each by
        # respondents who chose dish 00, so that their small p-values would shift the family's
        # ranks if they entered it
        R = np.zeros((n, rare), dtype=bool)
        with0 = np.flatnonzero(M[:, 0])
        for j in range(rare):
            R[rng.choice(with0, size=3, replace=False), j] = True
        M = np.hstack([M, R])
        n_items += rare
    names = [f"dish {j:02d}" for j in range(n_items)]
    write_input(d / "in.csv", M, seg, names)
    base = ["pairs", d / "in.csv", "--segment-col", "zone", "--pair-test", "within", "--quiet"]
    n_pairs = 0
    N = M.shape[0]
    joint = M.T.astype(int) @ M.astype(int)
    cnt = M.sum(0)
    for sign, extra, max_q in [("both", ["--min-count", "1"], 1.0),
                               ("negative", ["--min-count", "0"], 1.0),
                               ("positive", ["--min-count", "1"], 1.0),
                               ("positive", [], 0.05), ("both", [], 1.0),
                               ("both", ["--min-count", "1"], 0.01)]:
        min_count = int(extra[1]) if extra else 5
        ref = family(M, seg, k, names, sign, min_count)
        label = f"n={n} k={k} rare={rare} {sign} max-q {max_q}"
        out, _ = pm(base + ["--sign", sign, "--max-q", str(max_q)] + extra)
        compare(label, out, ref, max_q)
        n_pairs += len(out)
        # the kept set: the pooled listing rules (joint count, direction of the pooled phi)
        # and the reference q
        want = set()
        for (x, y), (p, q) in ref.items():
            a, b = names.index(x), names.index(y)
            phi_num = N * joint[a, b] - cnt[a] * cnt[b]
            ok_sign = {"both": True, "positive": phi_num > 0, "negative": phi_num < 0}[sign]
            if joint[a, b] >= min_count and ok_sign and q <= max_q:
                want.add((x, y))
        got = {(r["item_a"], r["item_b"]) for _, r in out.iterrows()}
        CHK.equal(f"{label}: kept pairs", sorted(got ^ want), [], f"{len(got)} vs {len(want)}")
    # partners --pair-test within (the item's own family, partners' default --family item):
    # BH over the CMH p-values of the pairs (a, b) for every other item b whose total reaches
    # --min-count (every item here holds at least 5), against statsmodels as above
    for anchor, sign, max_q in [("dish 00", "positive", 0.05), ("dish 02", "both", 0.5),
                                ("dish 05", "negative", 1.0)]:
        a = names.index(anchor)
        others = [b for b in range(n_items) if b != a and cnt[b] >= 1]
        ps = np.array([cmh_p(M, seg, k, a, b, sign)[0] for b in others])
        qs = multipletests(np.where(np.isnan(ps), 1.0, ps), method="fdr_bh")[1]
        label = f"n={n} k={k} partners of {anchor} {sign} max-q {max_q}"
        out, _ = pm(["partners", d / "in.csv", "--segment-col", "zone", "--pair-test", "within",
                     "--item", anchor, "--sign", sign, "--max-q", str(max_q), "--min-count", "1",
                     "--csv", "--top", "0", "--quiet"])
        want = set()
        for b, p, q in zip(others, ps, qs):
            phi_num = N * joint[a, b] - cnt[a] * cnt[b]
            ok_sign = {"both": True, "positive": phi_num > 0, "negative": phi_num < 0}[sign]
            if joint[a, b] >= 1 and ok_sign and q <= max_q:
                want.add(names[b])
        got = set(out["partner"])
        CHK.equal(f"{label}: kept partners", sorted(got ^ want), [], f"{len(got)} vs {len(want)}")
        for _, r in out.iterrows():
            j = others.index(names.index(r["partner"]))
            CHK.close_p(f"{label}: q_value", float(r["q_value"]), qs[j], rtol=1e-9,
                        where=r["partner"])
            if not np.isnan(ps[j]):
                CHK.close_p(f"{label}: cmh_p", float(r["cmh_p"]), ps[j], rtol=1e-9,
                            where=r["partner"])
        n_pairs += len(out)
    # the planted pairs under the default selection
    out, err = pm(base)
    got = {(r["item_a"], r["item_b"]) for _, r in out.iterrows()}
    CHK.equal("planted pair within segments kept", ("dish 00", "dish 01") in got, True, f"n={n}")
    CHK.equal("planted segment-mix pair dropped", ("dish 02", "dish 03") in got, False, f"n={n}")
    pooled, _ = pm(["pairs", d / "in.csv", "--segment-col", "zone", "--quiet"])
    got = {(r["item_a"], r["item_b"]) for _, r in pooled.iterrows()}
    CHK.equal("planted segment-mix pair kept by the pooled test", ("dish 02", "dish 03") in got,
              True, f"n={n}")
    return n_pairs


def main():
    require_binary()
    rng = np.random.default_rng(20261203)
    n_pairs = 0
    with tempdir() as t:
        d = Path(t)
        for n, k, n_items, rare in [(900, 3, 18, 0), (2500, 6, 24, 0), (400, 2, 12, 0),
                                    (1200, 4, 16, 5)]:
            n_pairs += case(d, rng, n, k, n_items, rare)
    CHK.note(f"{n_pairs} listed pairs compared (every family pair's p enters each reference "
             "Benjamini-Hochberg)")
    if n_pairs < 200:
        CHK.fail(f"only {n_pairs} pairs compared")
    return CHK.finish()


if __name__ == "__main__":
    sys.exit(main())
