#!/usr/bin/python3
"""Reference check: `pairmap explain INPUT A B` (issue 15 point 8).

1. A hand-worked 2x2 table: the numbers of Fisher's tea-tasting experiment (Fisher 1935, The
   Design of Experiments, ch. II: 8 cups, 4 of each kind, 3 of the 4 named right), as invented
   data: 8 respondents, A chosen by 4, B by 4, both by 3. By hand: expected 4*4/8 = 2, support
   3/8, both confidences 3/4, lift 8*3/16 = 3/2, phi (8*3 - 16)/sqrt(4*4*4*4) = 1/2, Jaccard
   3/5; the smallest expected cell is 2 < 5, so Fisher's test (Cochran's rule); one-sided
   p = (C(4,3)C(4,1) + C(4,4)C(4,0)) / C(8,4) = 17/70, two-sided 34/70; a family of one pair,
   so rank 1 and q = p. The conditional MLE of the odds ratio and its exact interval: scipy
   odds_ratio(kind="conditional"). With the default --min-count 5 the items (4 each) are
   outside the family: no test, removed by --min-count.
2. Against `pairmap pairs` on the demo café orders (demo/cafe-orders.csv, invented): for pairs
   kept and removed, every number of explain equals the text of the `pairs --max-q 1` row of
   the pair (same family), the verdict is "kept" exactly for the rows of plain `pairs`, and the
   first failing threshold is the one the selection order (DESIGN.md) gives; the rank is the
   number of family p-values at most the pair's (common.Reference: scipy p-values over every
   pair of eligible items).
3. The clusters of A and B equal the cluster column of nodes.csv from `pairmap map` with the
   same options (the command's contract).
"""

import io
import math
import re
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.stats.contingency import odds_ratio

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

DEMO = C.REPO / "demo" / "cafe-orders.csv"


def parse(text):
    """The `name = value` lines of explain's output."""
    out = {}
    for line in text.splitlines():
        m = re.match(r"^([a-z_]+) = (.*)$", line)
        if m:
            out[m.group(1)] = m.group(2)
    return out


def explain(f, a, b, opts):
    return parse(C.run(["explain", f, a, b, "-q"] + opts))


def hand_worked(chk, td):
    rows = []
    for i in range(8):  # respondents 0-3 chose A; B: 3 of them and one other
        if i < 4:
            rows.append((f"r{i}", "tea first"))
        if i in (0, 1, 2, 4):
            rows.append((f"r{i}", "milk first"))
        if i in (5, 6, 7):
            rows.append((f"r{i}", ""))  # chose nothing: counts in N (DESIGN.md)
    f = td / "tea.csv"
    C.write_long(f, rows)
    want = {"together": 3, "expected": 2, "support": Fraction(3, 8),
            "confidence_ab": Fraction(3, 4), "confidence_ba": Fraction(3, 4),
            "lift": Fraction(3, 2), "phi": Fraction(1, 2), "jaccard": Fraction(3, 5)}
    res = odds_ratio([[3, 1], [1, 3]], kind="conditional")
    ci = res.confidence_interval(0.95)
    for sign, p in (("positive", Fraction(17, 70)), ("both", Fraction(34, 70))):
        try:
            got = explain(f, "tea first", "milk first",
                          ["--min-count", "3", "--sign", sign, "--max-q", "0.05"])
        except C.RunError as e:
            chk.fail(f"hand-worked: {e}")
            return
        w = f"hand-worked --sign {sign}"
        for k, v in want.items():
            chk.close(f"hand-worked {k} (by hand)", float(got[k]), float(v), rtol=1e-15,
                      where=w)
        chk.equal("hand-worked test: fisher (smallest expected cell 2 < 5)", got["test"],
                  "fisher", w)
        chk.close("hand-worked p (17/70 one-sided, 34/70 two-sided; Fisher 1935)",
                  float(got["p_value"]), float(p), rtol=1e-12, where=w)
        chk.equal("hand-worked family: one pair; rank 1",
                  (got["family"], got["rank"]), ("1", "1"), w)
        chk.close("hand-worked q = p (a family of one)", float(got["q_value"]), float(p),
                  rtol=1e-12, where=w)
        for k, v in (("odds_ratio", res.statistic), ("odds_ratio_low", ci.low),
                     ("odds_ratio_high", ci.high)):
            chk.close(f"hand-worked {k} vs scipy odds_ratio(kind=conditional)",
                      float(got[k]), float(v), rtol=1e-8, where=w)
        chk.equal("hand-worked verdict: removed (q above 0.05)", got["verdict"], "removed", w)
    got = explain(f, "tea first", "milk first", [])
    chk.equal("hand-worked, --min-count 5: outside the family (items chosen 4 times)",
              (got["family"], got["rank"], got["q_value"], got["verdict"]),
              ("0", "none", "nan", "removed"), "defaults")
    got = explain(f, "tea first", "milk first", ["--min-count", "3", "--max-q", "0.5"])
    chk.equal("hand-worked, --max-q 0.5: kept", got["verdict"], "kept", "--max-q 0.5")


def first_failing(r, sign, min_count, max_q):
    """The selection order of DESIGN.md: --min-count, --sign, --max-q."""
    if int(r["together"]) < min_count:
        return "--min-count"
    phi = float(r["phi"])
    if (sign == "positive" and not phi > 0) or (sign == "negative" and not phi < 0):
        return "--sign"
    if not float(r["q_value"]) <= max_q:
        return "--max-q"
    return None


def against_pairs(chk, td):
    demo = pd.read_csv(DEMO, dtype=str, keep_default_na=False)
    orders = sorted(set(demo["order"]))
    names = sorted({i.strip() for i in demo["item"] if i.strip()}, key=C.bkey)
    pos = {o: k for k, o in enumerate(orders)}
    col = {n: k for k, n in enumerate(names)}
    M = np.zeros((len(orders), len(names)), bool)
    for o, i in zip(demo["order"], demo["item"]):
        if i.strip():
            M[pos[o], col[i.strip()]] = True
    cols = ["together", "expected", "support", "confidence_ab", "confidence_ba", "lift", "phi",
            "jaccard", "test", "p_value", "q_value", "odds_ratio", "odds_ratio_low",
            "odds_ratio_high"]
    for sign in ("positive", "both"):
        ref = C.Reference(M, names, sign)
        allp = np.array([v["p"] for v in ref.pairs.values()])
        full = C.read_csv(C.run(["pairs", DEMO, "-q", "--max-q", "1", "--min-count", "0",
                                 "--sign", sign]), C.PAIR_COLUMNS)
        kept = C.read_csv(C.run(["pairs", DEMO, "-q", "--sign", sign]), C.PAIR_COLUMNS)
        keptset = {(r.item_a, r.item_b) for r in kept.itertuples(index=False)}
        rows = full.to_dict("records")
        rng = np.random.default_rng(3)
        pick = [rows[i] for i in rng.choice(len(rows), 10, replace=False)]
        pick += [r for r in rows if (r["item_a"], r["item_b"]) in keptset][:5]
        out = td / f"map-{sign}"
        C.run(["map", DEMO, "-o", out, "-q", "--sign", sign])
        nodes = pd.read_csv(out / "nodes.csv", dtype=str, keep_default_na=False)
        cluster = dict(zip(nodes["item"], nodes["cluster"]))
        for r in pick:
            a, b = r["item_a"], r["item_b"]
            w = f"--sign {sign} {a!r},{b!r}"
            # B given first: explain puts the pair in canonical order, as pairs does
            got = explain(DEMO, b, a, ["--sign", sign])
            chk.equal("explain numbers == the pairs row (same family, --max-q 1)",
                      tuple(got[k] for k in cols), tuple(str(r[k]) for k in cols), w)
            is_kept = (a, b) in keptset
            chk.equal("verdict kept == the pair is a row of plain `pairs`",
                      got["verdict"], "kept" if is_kept else "removed", w)
            p = float(r["p_value"])
            lo = int((allp < p * (1 - 1e-9)).sum())
            hi = int((allp <= p * (1 + 1e-9)).sum())
            chk.equal("rank == family p-values at most p (scipy reference p-values)",
                      lo <= int(got["rank"]) <= hi, True, w + f" rank {got['rank']} [{lo},{hi}]")
            chk.equal("family == pairs of eligible items", int(got["family"]), ref.m, w)
            chk.equal("clusters == nodes.csv of map with the same options",
                      (got["cluster_a"], got["cluster_b"]), (cluster[a], cluster[b]), w)
            ff = first_failing(r, sign, 5, 0.05)
            text = C.run(["explain", DEMO, a, b, "-q", "--sign", sign])
            m = re.search(r"\(removed by (--[a-z-]+)", text)
            chk.equal("removed by: the first failing threshold in the selection order",
                      m.group(1) if m else None, ff, w)


def errors(chk):
    p = C.run_raw(["explain", DEMO, "Espresso", "No such dish"])
    chk.equal("unknown item: exit 2", p.returncode, 2)
    p = C.run_raw(["explain", DEMO, "Espresso"])
    chk.equal("one item only: usage error, exit 1", p.returncode, 1)
    p = C.run_raw(["explain", DEMO, "Espresso", "Espresso"])
    chk.equal("the same item twice: usage error, exit 1", p.returncode, 1)


def main():
    C.require_binary()
    chk = C.Checker("explain (hand-worked Fisher 1935 table, pairs rows, scipy, map clusters)")
    with C.tempdir() as tds:
        td = Path(tds)
        hand_worked(chk, td)
        against_pairs(chk, td)
        errors(chk)
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
