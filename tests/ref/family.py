#!/usr/bin/python3
"""Reference check: the family of hypotheses behind the q-values (issue 15 point 7, DESIGN.md).

The family is every pair of eligible items (0 < n < N) whose smaller item total reaches
--min-count: a pair with a rarer item can never be seen together --min-count times, so it can
never be reported, and since the tests condition on the item totals, filtering on them alone
keeps the false-discovery control (independent filtering: Bourgon, Gentleman & Huber 2010,
PNAS 107:9546-9551).
Reference: statsmodels multipletests(method="fdr_bh") over that filtered family, with the
p-values of common.Reference (scipy fisher_exact / chi-square by the rule of DESIGN.md; never-seen
pairs p = 1 under --sign positive), on the columns of the items in the family only. The family
size is also checked in run.json (pairs.tested, pairs.family_items) and in the note of `pairs`.
Data: invented long-tailed incidence matrices (generated test data): many items chosen by 1 to
6 respondents, a few common ones, planted groups.
"""

import json
import re
import sys
from pathlib import Path

import numpy as np

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402


def make_case(seed, N, rare, common):
    rng = np.random.default_rng(seed)
    cols = []
    for j in range(rare):                          # the long tail: exact small totals
        c = np.zeros(N, bool)
        c[rng.choice(N, 1 + j % 6, replace=False)] = True
        cols.append(c)
    typ = rng.integers(0, 3, N)
    for j in range(common):                        # common items in planted groups
        p = np.where(typ == j % 3, 0.35, 0.06)
        cols.append(rng.random(N) < p)
    M = np.column_stack(cols)
    names = [f"tail{j:03d}" for j in range(rare)] + [f"dish{j:02d}" for j in range(common)]
    return M, names


def main():
    C.require_binary()
    chk = C.Checker("family (independent filtering; statsmodels fdr_bh on the filtered family)")
    with C.tempdir() as tds:
        td = Path(tds)
        for seed, N, rare, common in [(1, 150, 60, 12), (2, 400, 120, 10)]:
            M, names = make_case(seed, N, rare, common)
            f = td / f"case{seed}.csv"
            C.write_long(f, C.incidence_rows(M, names))
            n = M.sum(axis=0)
            for min_count in (3, 5):
                for sign in ("positive", "both"):
                    label = f"seed={seed} N={N} --min-count {min_count} --sign {sign}"
                    fam = [j for j in range(M.shape[1]) if min_count <= n[j] < N]
                    ref = C.Reference(M[:, fam], [names[j] for j in fam], sign)
                    opts = ["--min-count", str(min_count), "--max-q", "1", "--sign", sign]
                    try:
                        p = C.run_raw(["pairs", f] + opts)
                        if p.returncode:
                            raise C.RunError(p.stderr.decode()[:300])
                        df = C.read_csv(p.stdout.decode(), C.PAIR_COLUMNS)
                        out = td / f"map{seed}{min_count}{sign}"
                        C.run(["map", f, "-o", out, "-q", "--restarts", "1"] + opts)
                        run = json.loads((out / "run.json").read_text())
                    except C.RunError as e:
                        chk.fail(f"{label}: {e}")
                        continue
                    F = len(fam)
                    chk.equal("run.json pairs.tested == F (F - 1) / 2, F items with n >= "
                              "--min-count", run["pairs"]["tested"], F * (F - 1) // 2, label)
                    chk.equal("run.json pairs.family_items == F", run["pairs"]["family_items"],
                              F, label)
                    m = re.search(r"(\d+) pairs tested \(the family: pairs of the (\d+) items",
                                  p.stderr.decode())
                    chk.equal("pairs note: family size and items",
                              (int(m.group(1)), int(m.group(2))) if m else None,
                              (F * (F - 1) // 2, F), label)
                    for r in df.itertuples(index=False):
                        k = (r.item_a, r.item_b)
                        if k not in ref.pairs:
                            chk.fail(f"{label}: listed pair {k} outside the family")
                            continue
                        chk.close_p("q vs statsmodels fdr_bh over the filtered family",
                                    float(r.q_value), ref.pairs[k]["q"], rtol=1e-9,
                                    where=f"{label} {k} m={ref.m}")
                    chk.note(f"{label}: family {ref.m} of "
                             f"{(M.shape[1]) * (M.shape[1] - 1) // 2} pairs; {len(df)} listed")
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
