#!/usr/bin/python3
"""Reference check: `pairmap items`, shares and their 95% Jeffreys intervals.

Source: Brown, Cai & DasGupta (2001), "Interval estimation for a binomial proportion",
Statistical Science 16(2): the Jeffreys interval is the 2.5% and 97.5% quantiles of
Beta(x + 1/2, n - x + 1/2), with the lower bound set to 0 at x = 0 and the upper bound to 1 at
x = n. Reference values: scipy.stats.beta.ppf([0.025, 0.975], x + 0.5, n - x + 0.5).
Cases: x = 1, 2, 3, n/2, n-1, n for small n; at
n = 1,000,000 from a file (x = 1, 2, n/2, n-1: the GSL beta-quantile traps of API-NOTES.md);
x = 2,500,000 of 5,000,000 and small x of 10,000,000 via --respondents; a wide file with
--base all. x = 0 is never listed by `items` (checked); its bounds are checked on
pm_assoc_jeffreys in tests/unit/test_assoc.c.
Tolerance: relative 1e-9 on each bound (bounds that must be exactly 0 or 1: exact).
"""

import sys
from pathlib import Path

import numpy as np
from scipy import stats

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

RTOL = 1e-9


def ref_bounds(x, n):
    lo, hi = stats.beta.ppf([0.025, 0.975], x + 0.5, n - x + 0.5)  # source: scipy
    if x == 0:
        lo = 0.0   # Brown, Cai & DasGupta 2001
    if x == n:
        hi = 1.0
    return float(lo), float(hi)


def write_items_file(path, xs, n_file):
    """Item 'x<x>' chosen by respondents 1..x; respondents up to n_file appear (empty-item rows
    for the ones that chose nothing). Written in one go: cheap even for millions of rows."""
    with open(path, "w", encoding="utf-8") as f:
        f.write("respondent,item\n")
        covered = max(xs) if xs else 0
        for x in xs:
            f.write("".join(f"r{i},x{x}\n" for i in range(x)))
        if n_file > covered:
            f.write("".join(f"r{i},\n" for i in range(covered, n_file)))


def check(chk, out, xs, n, label):
    try:
        df = C.read_csv(out, C.ITEM_COLUMNS)
    except C.RunError as e:
        chk.fail(f"{label}: {e}")
        return
    got = {r.item: r for r in df.itertuples(index=False)}
    for x in xs:
        name = f"x{x}"
        where = f"{label} x={x} n={n}"
        if name not in got:
            chk.fail(f"{where}: item {name} not listed by `items`")
            continue
        r = got[name]
        chk.equal("respondents == x", int(r.respondents), x, where)
        chk.close("share vs x/n", float(r.share), x / n, rtol=1e-15, where=where)
        lo, hi = ref_bounds(x, n)
        chk.close("share_low vs scipy beta.ppf(0.025, x+.5, n-x+.5)", float(r.share_low), lo,
                  rtol=RTOL, where=where)
        chk.close("share_high vs scipy beta.ppf(0.975, x+.5, n-x+.5)", float(r.share_high), hi,
                  rtol=RTOL, where=where)
        if x == 0:
            chk.equal("share_low == 0 at x = 0", float(r.share_low), 0.0, where)
        if x == n:
            chk.equal("share_high == 1 at x = n", float(r.share_high), 1.0, where)


def main():
    C.require_binary()
    chk = C.Checker("jeffreys (scipy beta.ppf; Brown, Cai & DasGupta 2001)")
    with C.tempdir() as td:
        td = Path(td)
        # small n, N from the file itself
        for n in (1, 2, 3, 5, 10, 37, 100, 1000):
            xs = sorted({x for x in (1, 2, 3, n // 2, n - 1, n) if 1 <= x <= n})
            f = td / f"n{n}.csv"
            write_items_file(f, xs, n)
            try:
                check(chk, C.run(["items", f]), xs, n, f"file n={n}")
            except C.RunError as e:
                chk.fail(str(e))
        # n = 1e6 from a file: x = n-1 has the one remaining respondent as an empty-item row
        n = 1_000_000
        xs = [1, 2, 500_000, n - 1]
        f = td / "n1e6.csv"
        write_items_file(f, xs, n)
        try:
            check(chk, C.run(["items", f]), xs, n, "file n=1e6")
        except C.RunError as e:
            chk.fail(str(e))
        f.unlink()
        # n = 5e6 (x = n/2: the case where gsl_cdf_beta_Pinv spins) and n = 1e7, --respondents
        for n, xs in ((5_000_000, [1, 2_500_000]),
                      (10_000_000, [1, 2, 3, 10, 1000, 100_000])):
            f = td / f"resp{n}.csv"
            write_items_file(f, xs, 0)
            try:
                check(chk, C.run(["items", f, "--respondents", n]), xs, n,
                      f"--respondents {n}")
            except C.RunError as e:
                chk.fail(str(e))
            f.unlink()
        # x = 0 cannot reach `items`: it lists the items somebody chose, and a wide option
        # column nobody ticked is no item (checked here). The bounds at x = 0 and x = n are
        # checked on pm_assoc_jeffreys against scipy in tests/unit/test_assoc.c. The wide run
        # with --base all also checks the two ticked columns against scipy with N = 40.
        n = 40
        f = td / "wide.csv"
        rng = np.random.default_rng(7)
        tick = rng.random((n, 2)) < 0.5
        with open(f, "w", encoding="utf-8") as fh:
            fh.write("id,q_alpha,q_beta,q_nobody\n")
            for i in range(n):
                fh.write(f"w{i},{int(tick[i, 0])},{int(tick[i, 1])},0\n")
        p = C.run_raw(["items", f, "--format", "wide", "--id-col", "id", "--columns", "q_",
                       "--base", "all", "-q"])
        chk.equal("items --format wide exit 0", p.returncode, 0,
                  p.stderr.decode("utf-8", "replace").strip()[:200])
        if p.returncode == 0:
            try:
                df = C.read_csv(p.stdout.decode("utf-8"), C.ITEM_COLUMNS)
                chk.equal("wide: the listed items (nobody ticked q_nobody)", sorted(df["item"]),
                          ["alpha", "beta"], "wide n=40")
                for r in df.itertuples(index=False):
                    x = int(tick[:, 0 if r.item == "alpha" else 1].sum())
                    where = f"wide x={x} n={n} item {r.item!r}"
                    chk.equal("respondents == x", int(r.respondents), x, where)
                    lo, hi = ref_bounds(x, n)
                    chk.close("share_low vs scipy beta.ppf(0.025, x+.5, n-x+.5)",
                              float(r.share_low), lo, rtol=RTOL, where=where)
                    chk.close("share_high vs scipy beta.ppf(0.975, x+.5, n-x+.5)",
                              float(r.share_high), hi, rtol=RTOL, where=where)
            except C.RunError as e:
                chk.fail(f"wide: {e}")
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
