#!/usr/bin/python3
"""Reference check: p-values, test choice and q-values of `pairmap pairs` on random incidence
matrices (generated scale/coverage tests: invented data, several sizes, seeds and densities,
rare items with n = 1..3, common items with n = N-1..N-3, an item chosen by everyone, planted
groups so that strong positive and negative associations occur, N from 20 to 3000).

References (each pair of eligible items, i.e. 0 < n < N):
- test column: the rule of DESIGN.md (Fisher where the smallest expected cell of the 2x2 table is
  below 5, Cochran's rule, common practice; else chi-square 1 df), decided in exact integers
- two-sided p (--sign both): scipy.stats.fisher_exact / scipy.stats.chi2_contingency(correction=False)
- one-sided p (--sign positive / negative): scipy.stats.fisher_exact(alternative="greater"/"less")
  and the signed chi-square root z = sign(phi) sqrt(N phi^2): scipy.stats.norm.sf(z) / norm.cdf(z)
- Fisher p also against exact rational arithmetic (Python fractions), which is the truth
- q: statsmodels.stats.multitest.multipletests(method="fdr_bh") over every pair of eligible
  items, pairs never seen together included (their p is 1 under --sign positive, DESIGN.md)
- point measures against exact rational arithmetic
Tolerance: relative 1e-9 for p and q; p-values below 1e-290 in both agree (underflow).
"""

import sys
from pathlib import Path

import numpy as np

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

ODD_NAMES = ["Zucchini", "apple", "B 12", "b-2", "cr\u00e8me br\u00fbl\u00e9e", "\u00e9clair",
             "NA", "10", "9"]
QUOTED_NAMES = ['tea, "green"', "semi;colon", "tab\there"]


def make_case(seed, N, k, dens_lo, dens_hi, groups, full_item, names_kind):
    """Invented incidence matrix (respondent x item) with exactly-sized rare/common items."""
    rng = np.random.default_rng(seed)
    # Respondents who choose nothing (empty-item rows); none when an item is chosen by all.
    empty = np.zeros(N, bool)
    if not full_item:
        empty[rng.choice(N, max(1, N // 50), replace=False)] = True
    active = np.flatnonzero(~empty)
    Na = len(active)

    def exact(n):
        c = np.zeros(N, bool)
        c[rng.choice(active, n, replace=False)] = True
        return c

    cols = [exact(n) for n in (1, 2, 3)]            # rare items
    cols += [exact(n) for n in (Na - 1, Na - 2, Na - 3)]   # common items (n near N)
    if full_item:                                   # chosen by everyone: not eligible
        cols.append(np.ones(N, bool))
    typ = rng.integers(0, groups + 1, N)            # planted groups
    while len(cols) < k:
        g = len(cols) % (groups + 1)
        p = np.where(typ == g, dens_hi, dens_lo)
        cols.append((rng.random(N) < p) & ~empty)
    M = np.column_stack(cols[:k])
    if names_kind == "plain":
        names = [f"item{j:02d}" for j in range(k)]
    elif names_kind == "odd":
        names = ODD_NAMES + [f"Item{j:03d}" for j in range(k - len(ODD_NAMES))]
    else:
        names = QUOTED_NAMES + [f"x{j}" for j in range(k - len(QUOTED_NAMES))]
    names = names[:k]
    perm = rng.permutation(k)                   # names not in column order
    return M, [names[p] for p in perm]


CASES = [
    # seed, N, k, dens_lo, dens_hi, groups, full_item, names
    (1, 20, 8, 0.3, 0.8, 2, True, "plain"),
    (2, 20, 10, 0.05, 0.5, 3, False, "odd"),
    (3, 57, 14, 0.1, 0.6, 3, False, "odd"),
    (4, 200, 24, 0.02, 0.3, 4, False, "plain"),
    (5, 500, 20, 0.3, 0.9, 3, True, "plain"),
    (6, 1000, 30, 0.01, 0.2, 5, False, "quoted"),
    (7, 3000, 36, 0.005, 0.4, 6, False, "plain"),
    (8, 2500, 12, 0.0, 0.97, 2, False, "plain"),   # near-identical items: p far below 1e-300
]

# Items of exact sizes whose pairs sit on the Fisher/chi-square boundary of the rule: e.g. at
# N = 20 sizes 10 and 10 give a smallest expected cell of exactly 5 (chi2), 10 and 9 give 4.5
# (fisher); at N = 100, 50 & 10, 90 & 50 and 25 & 20 give exactly 5.
BOUNDARY_CASES = [(21, 20, [10, 10, 9, 11, 10, 5, 15]),
                  (22, 100, [50, 10, 90, 25, 20, 50, 11, 9])]


def make_sized_case(seed, N, sizes):
    rng = np.random.default_rng(seed)
    M = np.zeros((N, len(sizes)), bool)
    for j, n in enumerate(sizes):
        M[rng.choice(N, n, replace=False), j] = True
    return M, [f"s{j}_{n}" for j, n in enumerate(sizes)]


def main():
    C.require_binary()
    chk = C.Checker("random_tests (scipy, statsmodels, exact Fisher on random incidence)")
    with C.tempdir() as td:
        cases = [(c[0], c[1], make_case(*c)) for c in CASES] + \
            [(c[0], c[1], make_sized_case(*c)) for c in BOUNDARY_CASES]
        for seed, N, (M, names) in cases:
            label = f"seed={seed} N={N} k={M.shape[1]}"
            f = Path(td) / f"case{seed}.csv"
            C.write_long(f, C.incidence_rows(M, names))
            for sign in ("both", "positive", "negative"):
                try:
                    out = C.run(["pairs", f, "--min-count", "0", "--max-q", "1",
                                 "--sign", sign])
                    df = C.read_csv(out, C.PAIR_COLUMNS)
                except C.RunError as e:
                    chk.fail(f"{label} --sign {sign}: {e}")
                    continue
                ref = C.Reference(M, names, sign)
                C.check_pairs_output(chk, df, ref, f"{label} --sign {sign}")
                if sign == "both" and not M.all(axis=1).any() and (~M.any(axis=1)).any():
                    # Same data without the empty-item rows, N given by --respondents:
                    # must give the same output (DESIGN.md --respondents).
                    f2 = Path(td) / f"case{seed}_noempty.csv"
                    C.write_long(f2, C.incidence_rows(M, names, empty_rows=False))
                    try:
                        out2 = C.run(["pairs", f2, "--min-count", "0", "--max-q", "1",
                                      "--sign", sign, "--respondents", N])
                        chk.equal("--respondents N output == empty-item rows output",
                                  out2 == out, True, label)
                    except C.RunError as e:
                        chk.fail(f"{label} --respondents: {e}")
            print(f"  done {label}", flush=True)
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
