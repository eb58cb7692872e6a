#!/usr/bin/python3
"""Reference check: weighted input (`--weight-col`).

1. Integer weights (common practice: a frequency weight w stands for w identical respondents):
   the point measures (together = weighted joint count, expected, support, both confidences,
   lift, phi, Jaccard) of a weighted file must equal those of the same rows repeated w times,
   run unweighted; both are also compared with numpy float64 / exact rational formulas.
2. Kish's effective sample size (Kish 1965, Survey Sampling: n_eff = (sum w)^2 / sum w^2),
   checked through the p-value of a hand-worked case: chi-square 1 df of n_eff * phi_w^2,
   scipy.stats.chi2.sf, and norm.sf of the signed root for the one-sided test.
3. Equal weights (all 2.5): n_eff = N, so the weighted p equals the unweighted chi-square p.
4. Random non-integer weights, all three signs: p against scipy chi2.sf(n_eff phi^2) / norm,
   q against statsmodels multipletests fdr_bh over all eligible pairs; test column always chi2.
5. `items` with weights (pairmap --help: "the share is weighted and the interval uses Kish's
   effective sample size"): share = weighted share s, interval = Jeffreys interval of
   x = s n_eff successes in n_eff trials, scipy.stats.beta.ppf([.025, .975], s n_eff + .5,
   (1 - s) n_eff + .5) (effective-sample-size interval: common practice for weighted
   proportions); respondents = the unweighted count.
"""

import math
import sys
from pathlib import Path

import numpy as np
from scipy import stats

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

ALL = ["--min-count", "0", "--max-q", "1"]


def random_matrix(seed, N, k, dens):
    rng = np.random.default_rng(seed)
    typ = rng.integers(0, 3, N)
    cols = [(rng.random(N) < np.where(typ == j % 3, dens[1], dens[0])) for j in range(k)]
    M = np.column_stack(cols)
    M[rng.choice(N, 3, replace=False)] = False        # respondents who chose nothing
    return M, rng


def pairs_csv(args):
    return C.read_csv(C.run(["pairs"] + [str(a) for a in args]), C.PAIR_COLUMNS)


def integer_weights(chk, td):
    M, rng = random_matrix(11, 80, 9, (0.15, 0.6))
    names = [f"dish{j}" for j in range(M.shape[1])]
    w = rng.integers(1, 5, M.shape[0])
    fw = td / "weighted.csv"
    C.write_long(fw, C.incidence_rows(M, names, weights=w), header=("id", "item", "weight"))
    Mrep = np.repeat(M, w, axis=0)
    ids = [f"r{i}_{c}" for i in range(M.shape[0]) for c in range(w[i])]
    fr = td / "repeated.csv"
    C.write_long(fr, C.incidence_rows(Mrep, names, ids=ids), header=("id", "item"))
    try:
        dw = pairs_csv([fw, "--weight-col", "weight", "--sign", "both"] + ALL)
        dr = pairs_csv([fr, "--sign", "both"] + ALL)
        # weight column by 1-based number too (DESIGN.md: name or number)
        dw3 = C.run(["pairs", fw, "--weight-col", "3", "--sign", "both"] + ALL)
    except C.RunError as e:
        chk.fail(f"integer weights: {e}")
        return
    chk.equal("--weight-col 3 == --weight-col weight", dw3,
              C.run(["pairs", fw, "--weight-col", "weight", "--sign", "both"] + ALL), "")
    kw = [(r.item_a, r.item_b) for r in dw.itertuples(index=False)]
    kr = [(r.item_a, r.item_b) for r in dr.itertuples(index=False)]
    chk.equal("weighted and repeated files list the same pairs", kw, kr, "")
    rep = {(r.item_a, r.item_b): r for r in dr.itertuples(index=False)}
    for r in dw.itertuples(index=False):
        k = (r.item_a, r.item_b)
        if k not in rep:
            continue
        for col in ("together", "expected", "support", "confidence_ab", "confidence_ba",
                    "lift", "phi", "jaccard"):
            chk.close(f"weighted {col} vs repeated rows (pairmap unweighted)",
                      float(getattr(r, col)), float(getattr(rep[k], col)), rtol=1e-14,
                      atol=1e-16, where=f"{k}")
    # both against outside arithmetic (numpy float64 weighted sums / exact rationals)
    C.check_pairs_output(chk, dw, C.Reference(M, names, "both", weights=w),
                         "integer weights --sign both", weighted=True)
    C.check_pairs_output(chk, dr, C.Reference(Mrep, names, "both"), "repeated rows --sign both")


def kish_worked_case(chk, td):
    # Hand-worked case. Respondent: weight, items
    #   k1: 1 A,B   k2: 2 A,B   k3: 3 A   k4: 4 B   k5: 5 (nothing)   k6: 1 A,B
    # N = sum w = 16, sum w^2 = 56, n_eff = 16^2/56 = 32/7 (Kish 1965)
    # n_A = 7, n_B = 8, n_AB = 4; phi = (16*4 - 7*8)/sqrt(7*8*9*8) = 8/sqrt(4032)
    # chi2 = n_eff phi^2 = (32/7)(64/4032) = 2048/28224
    rows = [["k1", "A", 1], ["k1", "B", 1], ["k2", "A", 2], ["k2", "B", 2], ["k3", "A", 3],
            ["k4", "B", 4], ["k5", "", 5], ["k6", "A", 1], ["k6", "B", 1]]
    f = td / "kish.csv"
    C.write_long(f, rows, header=("id", "item", "weight"))
    neff = 16 ** 2 / 56
    phi = 8 / math.sqrt(4032)
    chi2 = neff * phi ** 2
    w = "Kish worked case"
    for sign, pref in (("both", stats.chi2.sf(chi2, 1)),
                       ("positive", stats.norm.sf(math.sqrt(chi2)))):
        try:
            df = pairs_csv([f, "--weight-col", "weight", "--sign", sign] + ALL)
        except C.RunError as e:
            chk.fail(f"Kish case: {e}")
            return
        if len(df) != 1:
            chk.fail(f"Kish case --sign {sign}: expected 1 row, got {len(df)}")
            continue
        r = df.iloc[0]
        chk.close(f"Kish case phi vs 8/sqrt(4032) ({sign})", float(r.phi), phi, rtol=1e-14,
                  where=w)
        chk.close(f"Kish case together vs 4 ({sign})", float(r.together), 4.0, where=w)
        chk.close(f"Kish case expected vs 7*8/16 ({sign})", float(r.expected), 3.5, rtol=1e-15,
                  where=w)
        chk.equal(f"Kish case test ({sign})", r.test, "chi2", w)
        src = "scipy chi2.sf(n_eff phi^2, 1)" if sign == "both" else \
            "scipy norm.sf(sqrt(n_eff phi^2))"
        ok = chk.close_p(f"Kish case p ({sign}) vs {src}, n_eff = 32/7", float(r.p_value), pref,
                         where=w)
        if not ok:   # say which base pairmap seems to use instead
            for nm, n in (("sum of weights 16", 16), ("raw respondents 6", 6)):
                alt = stats.chi2.sf(n * phi ** 2, 1) if sign == "both" else \
                    stats.norm.sf(math.sqrt(n * phi ** 2))
                if abs(float(r.p_value) - alt) <= 1e-9 * alt:
                    chk.note(f"Kish case: pairmap p matches n = {nm} instead of n_eff")
        chk.close_p(f"Kish case q ({sign}), one hypothesis", float(r.q_value), pref, where=w)


def equal_weights(chk, td):
    M, _ = random_matrix(12, 300, 8, (0.2, 0.6))
    names = [f"stall{j}" for j in range(M.shape[1])]
    w = np.full(M.shape[0], 2.5)
    fw = td / "equal.csv"
    C.write_long(fw, C.incidence_rows(M, names, weights=w), header=("id", "item", "weight"))
    fu = td / "unweighted.csv"
    C.write_long(fu, C.incidence_rows(M, names), header=("id", "item"))
    try:
        dw = pairs_csv([fw, "--weight-col", "weight", "--sign", "both"] + ALL)
        du = pairs_csv([fu, "--sign", "both"] + ALL)
    except C.RunError as e:
        chk.fail(f"equal weights: {e}")
        return
    un = {(r.item_a, r.item_b): r for r in du.itertuples(index=False)}
    n = 0
    for r in dw.itertuples(index=False):
        u = un.get((r.item_a, r.item_b))
        if u is None or u.test != "chi2":
            continue
        n += 1
        chk.close_p("equal weights 2.5: weighted p vs unweighted chi2 p (n_eff = N)",
                    float(r.p_value), float(u.p_value), where=f"{r.item_a},{r.item_b}")
        chk.close("equal weights 2.5: weighted phi vs unweighted phi", float(r.phi),
                  float(u.phi), rtol=1e-14, atol=1e-16, where=f"{r.item_a},{r.item_b}")
    if n == 0:
        chk.fail("equal weights: no chi2 pair to compare (test data too small)")
    C.check_pairs_output(chk, dw, C.Reference(M, names, "both", weights=w),
                         "equal weights --sign both", weighted=True)


def random_weights(chk, td):
    for seed, N, k in ((13, 150, 10), (14, 1200, 16)):
        M, rng = random_matrix(seed, N, k, (0.05, 0.5))
        names = [f"ride{j:02d}" for j in range(k)]
        w = np.round(rng.uniform(0.2, 5.0, N), 3)
        f = td / f"rw{seed}.csv"
        C.write_long(f, C.incidence_rows(M, names, weights=w), header=("id", "item", "weight"))
        for sign in ("both", "positive", "negative"):
            try:
                df = pairs_csv([f, "--weight-col", "weight", "--sign", sign] + ALL)
            except C.RunError as e:
                chk.fail(f"random weights: {e}")
                continue
            C.check_pairs_output(chk, df, C.Reference(M, names, sign, weights=w),
                                 f"random weights seed={seed} N={N} --sign {sign}",
                                 weighted=True)


def weighted_items(chk, td):
    M, rng = random_matrix(15, 400, 6, (0.1, 0.7))
    names = [f"stand{j}" for j in range(M.shape[1])]
    w = np.round(rng.uniform(0.3, 4.0, M.shape[0]), 2)
    f = td / "witems.csv"
    C.write_long(f, C.incidence_rows(M, names, weights=w), header=("id", "item", "weight"))
    try:
        it = C.read_csv(C.run(["items", f, "--weight-col", "weight"]), C.ITEM_COLUMNS)
    except C.RunError as e:
        chk.fail(f"weighted items: {e}")
        return
    got = {r.item: r for r in it.itertuples(index=False)}
    neff = w.sum() ** 2 / (w * w).sum()
    for j, name in enumerate(names):
        if name not in got:
            chk.fail(f"weighted items: {name} missing")
            continue
        r = got[name]
        s = float(w[M[:, j]].sum() / w.sum())
        lo, hi = stats.beta.ppf([0.025, 0.975], s * neff + 0.5, (1 - s) * neff + 0.5)
        where = f"{name} share={s:.6g} n_eff={neff:.6g}"
        chk.equal("weighted items respondents == unweighted count", int(r.respondents),
                  int(M[:, j].sum()), where)
        chk.close("weighted items share vs numpy weighted share", float(r.share), s,
                  rtol=1e-13, where=where)
        chk.close("weighted items share_low vs scipy beta.ppf(0.025, s n_eff+.5, (1-s) n_eff+.5)",
                  float(r.share_low), lo, rtol=1e-9, where=where)
        chk.close("weighted items share_high vs scipy beta.ppf(0.975, s n_eff+.5, (1-s) n_eff+.5)",
                  float(r.share_high), hi, rtol=1e-9, where=where)


def main():
    C.require_binary()
    chk = C.Checker("weighted (repeated rows; Kish 1965 n_eff via scipy chi2.sf; fdr_bh)")
    with C.tempdir() as td:
        td = Path(td)
        integer_weights(chk, td)
        kish_worked_case(chk, td)
        equal_weights(chk, td)
        random_weights(chk, td)
        weighted_items(chk, td)
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
