#!/usr/bin/python3
"""Reference check: `pairmap partners`, for one item and for a set of items.

References:
- one item or a set (the anchor): respondents who chose all of its items, counted here from the
  CSV file (Python sets); measures in exact rational arithmetic (common.exact_measures),
  p-values by the rule of DESIGN.md with scipy (common.ref_p), q-values by statsmodels
  multipletests fdr_bh over the anchor's own family: one test per eligible partner whose total,
  like the anchor's, reaches --min-count (independent filtering on the totals, Bourgon,
  Gentleman & Huber 2010; DESIGN.md). partner_respondents counted here, reverse_confidence in
  exact rational arithmetic, the odds ratio against scipy odds_ratio(kind="conditional") on the
  exact branch (fisher, or a zero cell) and statsmodels Table2x2 (Woolf) otherwise
- one item: together, expected, lift, phi, the odds ratio (same text) and confidence ==
  confidence_ab or confidence_ba of the row of `pairmap pairs` with the pair, where it has one
- confidence interval: 95% Jeffreys, scipy.stats.beta.ppf(0.025 / 0.975, x + 1/2, n - x + 1/2),
  0 at x = 0 and 1 at x = n (Brown, Cai & DasGupta 2001)
- ranking: the order documented in --help (the key, then q ascending, together descending,
  the partner's name), recomputed here; --top K is a prefix
- weighted input: the measures equal the weighted rows of `pairmap pairs`, the confidence its
  weight share with a Jeffreys interval on Kish's effective size; its q-values are not checked
  here (the weighted p-values are checked in weighted.py, BH in the unweighted cases above)
- an unknown name: exit 2, naming the three closest items by Levenshtein distance on bytes
  (computed here with a plain dynamic programme; ties in byte order)
Data: the demo café orders (demo/cafe-orders.csv, invented for demos).
"""

import csv
import io
import math
import random
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
from scipy import stats
from scipy.stats.contingency import odds_ratio
from statsmodels.stats.contingency_tables import Table2x2
from statsmodels.stats.multitest import multipletests

sys.dont_write_bytecode = True
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

DEMO = C.REPO / "demo" / "cafe-orders.csv"
PCOLS = ["partner", "together", "expected", "confidence", "confidence_low", "confidence_high",
         "lift", "phi", "q_value", "partner_respondents", "reverse_confidence", "odds_ratio",
         "odds_ratio_low", "odds_ratio_high"]


def jeffreys(x, n):
    lo = 0.0 if x == 0 else float(stats.beta.ppf(0.025, x + 0.5, n - x + 0.5))
    hi = 1.0 if x == n else float(stats.beta.ppf(0.975, x + 0.5, n - x + 0.5))
    return lo, hi


def load_demo():
    baskets = {}
    with open(DEMO, newline="", encoding="utf-8") as f:
        for r in csv.DictReader(f):
            s = baskets.setdefault(r["order"], set())
            if r["item"].strip():
                s.add(r["item"].strip())
    return baskets


def levenshtein(a, b):
    a = a.encode() if isinstance(a, str) else a
    b = b.encode() if isinstance(b, str) else b
    prev = list(range(len(b) + 1))
    for i in range(1, len(a) + 1):
        cur = [i] + [0] * len(b)
        for j in range(1, len(b) + 1):
            cur[j] = min(prev[j - 1] + (a[i - 1] != b[j - 1]), prev[j] + 1, cur[j - 1] + 1)
        prev = cur
    return prev[-1]


def partners(args, f=DEMO):
    text = C.run(["partners", f, "-q", "--csv", "--top", "0"] + args)
    return list(csv.DictReader(io.StringIO(text)))


def rank_key(r, by, sign):
    lo, hi = float(r["odds_ratio_low"]), float(r["odds_ratio_high"])
    lower = {"positive": lo, "negative": hi,
             "both": max(math.log(lo) if lo > 0 else -math.inf,
                         -math.log(hi) if hi < math.inf else -math.inf)}[sign]
    v = {"phi": float(r["phi"]), "lift": float(r["lift"]), "confidence": float(r["confidence"]),
         "together": float(r["together"]), "lower": lower}[by]
    if sign == "both" and by == "phi":
        v = abs(v)
    if sign == "both" and by == "lift":
        v = abs(math.log(v)) if v > 0 else math.inf
    if sign == "negative":
        v = -v
    return (-v, float(r["q_value"]), -float(r["together"]), C.bkey(r["partner"]))


def check_order(chk, rows, by, sign, label):
    keys = [rank_key(r, by, sign) for r in rows]
    chk.equal(f"ranking by {by} under --sign {sign}", keys == sorted(keys), True, label)


def main():
    C.require_binary()
    chk = C.Checker("network_partners (counted here: numpy, exact fractions, scipy, statsmodels)")
    baskets = load_demo()
    N = len(baskets)
    count = {}
    for s in baskets.values():
        for i in s:
            count[i] = count.get(i, 0) + 1
    eligible = sorted((i for i in count if 0 < count[i] < N), key=C.bkey)

    def anchor_check(items, sign, opts, label, baskets=baskets, f=DEMO):
        """The partners of an anchor (one item or a set), counted here."""
        N = len(baskets)
        count = {}
        for s in baskets.values():
            for i in s:
                count[i] = count.get(i, 0) + 1
        eligible = sorted((i for i in count if 0 < count[i] < N), key=C.bkey)
        sel = [s for s in baskets.values() if all(i in s for i in items)]
        nS = len(sel)
        min_count = int(opts[opts.index("--min-count") + 1]) if "--min-count" in opts else 5
        max_q = float(opts[opts.index("--max-q") + 1]) if "--max-q" in opts else 0.05
        min_phi = float(opts[opts.index("--min-phi") + 1]) if "--min-phi" in opts else 0
        min_lift = float(opts[opts.index("--min-lift") + 1]) if "--min-lift" in opts else 0
        fam = [b for b in eligible if b not in items and count[b] >= min_count] \
            if nS >= min_count else []
        nSb = {b: sum(1 for s in sel if b in s) for b in fam}
        ps = [C.ref_p(N, nS, count[b], nSb[b], sign)[1] for b in fam]
        qs = multipletests(ps, method="fdr_bh")[1] if fam else []
        ref = {}
        for b, p, q in zip(fam, ps, qs):
            m = C.exact_measures(N, nS, count[b], nSb[b])
            direction = {"positive": m["phi"] > 0, "negative": m["phi"] < 0, "both": True}[sign]
            if nSb[b] >= min_count and direction and q <= max_q and \
                    abs(m["phi"]) >= min_phi and m["lift"] >= min_lift:
                ref[b] = (m, q)
        got = partners([a for i in items for a in ("--item", i)] + ["--sign", sign] + opts, f)
        chk.equal("partners == items passing the selection (counted here)",
                  sorted(r["partner"] for r in got), sorted(ref), label)
        for r in got:
            if r["partner"] not in ref:
                continue
            m, q = ref[r["partner"]]
            b = r["partner"]
            w = f"{label}: {b}"
            chk.equal("together == count here", float(r["together"]), m["together"], w)
            chk.close("expected (exact)", r["expected"], m["expected"], rtol=1e-15, where=w)
            chk.close("confidence (exact)", r["confidence"],
                      float(Fraction(int(m["together"]), nS)), rtol=1e-15, where=w)
            chk.close("lift (exact)", r["lift"], m["lift"], rtol=1e-15, where=w)
            chk.close("phi (exact)", r["phi"], m["phi"], rtol=1e-12, atol=1e-15, where=w)
            chk.close_p("q_value (statsmodels fdr_bh over the anchor's filtered family)",
                        r["q_value"], q, rtol=1e-9, where=w + f" m={len(fam)}")
            lo, hi = jeffreys(int(m["together"]), nS)
            chk.close("confidence interval (scipy beta.ppf)", r["confidence_low"], lo,
                      rtol=1e-9, atol=1e-15, where=w)
            chk.close("confidence interval (scipy beta.ppf)", r["confidence_high"], hi,
                      rtol=1e-9, where=w)
            chk.equal("partner_respondents == count here", int(r["partner_respondents"]),
                      count[b], w)
            chk.close("reverse_confidence (exact)", r["reverse_confidence"],
                      float(Fraction(nSb[b], count[b])), rtol=1e-15, where=w)
            t = C.table2x2(N, nS, count[b], nSb[b])
            test = C.rule_test(N, nS, count[b])
            if test == "fisher" or min(min(t[0]), min(t[1])) == 0:
                res = odds_ratio(t, kind="conditional")
                ci = res.confidence_interval(0.95)
                want = (res.statistic, ci.low, ci.high)
                src = "scipy odds_ratio(kind=conditional)"
            else:
                tb = Table2x2(np.array(t, dtype=float))
                want = (tb.oddsratio,) + tuple(tb.oddsratio_confint(0.05, method="normal"))
            src = "scipy conditional / statsmodels Woolf"
            for col, v in zip(("odds_ratio", "odds_ratio_low", "odds_ratio_high"), want):
                v = float(v)
                if math.isinf(v) or v == 0:
                    chk.equal(f"{col} at the support's edge ({src})", float(r[col]), v, w)
                else:
                    chk.close(f"{col} ({src})", r[col], v, rtol=1e-7, where=w)
        check_order(chk, got, "phi", sign, label)
        for by in ("lift", "confidence", "together", "lower"):
            check_order(chk, partners([a for i in items for a in ("--item", i)] +
                                      ["--sign", sign, "--by", by] + opts, f), by, sign, label)
        chk.note(f"{label}: {nS} respondents chose all; family {len(fam)}; "
                 f"{len(got)} partners listed")
        return got

    # ---- one item: counted here, and the point measures == the rows of `pairmap pairs`
    cases = [("positive", []), ("negative", ["--min-count", "0"]),
             ("both", ["--max-q", "0.2", "--min-count", "2"]),
             ("positive", ["--min-phi", "0.1"]), ("positive", ["--min-lift", "2"]),
             ("positive", ["--min-count", "0", "--max-q", "1"])]
    for item in ["Espresso", "Lentil soup", "Apple strudel, warm", "Still water", "Crème caramel"]:
        for sign, extra in cases:
            opts = ["--sign", sign] + extra
            label = f"{item} {' '.join(opts)}"
            got = anchor_check([item], sign, extra, label)
            pairs = C.read_csv(C.run(["pairs", DEMO, "-q", "--min-count", "0", "--max-q", "1",
                                      "--sign", "both"]), C.PAIR_COLUMNS)
            want = {}
            for r in pairs.itertuples(index=False):
                if item in (r.item_a, r.item_b):
                    other = r.item_b if r.item_a == item else r.item_a
                    conf = r.confidence_ab if r.item_a == item else r.confidence_ba
                    want[other] = (r.together, r.expected, conf, r.lift, r.phi, r.odds_ratio,
                                   r.odds_ratio_low, r.odds_ratio_high)
            for r in got:
                if r["partner"] not in want:
                    continue
                chk.equal("together, expected, confidence, lift, phi, odds ratio == pairs row",
                          (r["together"], r["expected"], r["confidence"], r["lift"], r["phi"],
                           r["odds_ratio"], r["odds_ratio_low"], r["odds_ratio_high"]),
                          want[r["partner"]], f"{label}: {r['partner']}")
            # --family all: exactly the rows of `pairs` (same options) with the item, q included
            fam_all = partners(["--item", item, "--family", "all"] + opts)
            prow = C.read_csv(C.run(["pairs", DEMO, "-q"] + opts), C.PAIR_COLUMNS)
            wantq = {}
            for r in prow.itertuples(index=False):
                if item in (r.item_a, r.item_b):
                    wantq[r.item_b if r.item_a == item else r.item_a] = (r.together, r.q_value)
            chk.equal("--family all: partners == rows of pairs with the item (together, q)",
                      {r["partner"]: (r["together"], r["q_value"]) for r in fam_all}, wantq,
                      label)
            top3 = C.run(["partners", DEMO, "-q", "--csv", "--top", "3", "--item", item] + opts)
            chk.equal("--top 3 is the first 3 rows", [r["partner"] for r in
                                                      csv.DictReader(io.StringIO(top3))],
                      [r["partner"] for r in got[:3]], label)

    # ---- a long tail: the demo plus 40 rare items (invented, chosen by 1 to 6 orders each,
    # seeded), so that the family filter on the totals (--min-count) changes the q-values
    with C.tempdir() as td:
        tail = Path(td) / "tail.csv"
        rng = random.Random(15)
        orders = sorted(baskets)
        tb = {o: set(s) for o, s in baskets.items()}
        for j in range(40):
            for o in rng.sample(orders, 1 + j % 6):
                tb[o].add(f"rare dish {j:02d}")
        C.write_long(tail, [(o, i) for o in orders for i in sorted(tb[o])] +
                     [(o, "") for o in orders if not tb[o]], header=("order", "item"))
        for item, sign, opts in [("Espresso", "positive", ["--max-q", "0.5"]),
                                 ("Lentil soup", "both", ["--max-q", "1", "--min-count", "3"]),
                                 ("rare dish 05", "positive", ["--max-q", "1", "--min-count", "2"]),
                                 ("Espresso", "negative", ["--max-q", "1", "--min-count", "0"])]:
            anchor_check([item], sign, opts, f"long tail {item} --sign {sign} {' '.join(opts)}",
                         tb, tail)

    # ---- sets: counted here
    for items, sign, opts in [(["Lentil soup", "Rye bread roll"], "both",
                               ["--min-count", "0", "--max-q", "1"]),
                              (["Espresso", "Walnut cake", "Almond biscuit"], "both",
                               ["--min-count", "0", "--max-q", "1"]),
                              (["Lentil soup", "Rye bread roll"], "positive", []),
                              (["Raclette plate", "Boiled potatoes"], "negative",
                               ["--min-count", "0", "--max-q", "0.5"])]:
        anchor_check(items, sign, opts, f"set {items} --sign {sign} {' '.join(opts)}")

    # ---- weighted input: the family counted here; confidence = weight share, its Jeffreys
    # interval on Kish's effective size of the item's respondents, (sum w)^2 / sum w^2
    # (Kish 1965), with scipy.stats.beta.ppf. Weights drawn per order with a seeded
    # random.Random (test data).
    with C.tempdir() as td:
        wfile = Path(td) / "weighted.csv"
        wt = {}
        with open(DEMO, newline="", encoding="utf-8") as f, \
                open(wfile, "w", newline="", encoding="utf-8") as g:
            rd, wr = csv.reader(f), csv.writer(g, lineterminator="\n")
            wr.writerow(next(rd) + ["weight"])
            for row in rd:
                w = wt.setdefault(row[0], random.Random(row[0]).choice([0.5, 1.0, 1.5, 2.25]))
                wr.writerow(row + [repr(w)])
        item = "Espresso"
        got = list(csv.DictReader(io.StringIO(C.run(
            ["partners", wfile, "-q", "--csv", "--top", "0", "--weight-col", "weight",
             "--item", item]))))
        names = sorted(count, key=C.bkey)
        orders = sorted(baskets)
        M = [[name in baskets[o] for name in names] for o in orders]
        wref = C.Reference(M, names, "positive", weights=[wt[o] for o in orders])
        want = {}
        # the anchor's family, weighted, counted and tested here: every eligible partner whose
        # raw total, like Espresso's, reaches --min-count 5 (DESIGN.md), its p-value from
        # common.Reference (weighted chi-square on Kish's effective size), BH with statsmodels
        # fdr_bh over this family only; the default selection applied here
        fam = {}
        for (a, b), r in wref.pairs.items():
            other = b if a == item else a if b == item else None
            if other is not None and count[other] >= 5:
                fam[other] = r
        fq = multipletests([fam[o]["p"] for o in fam], method="fdr_bh")[1]
        for o, qq in zip(list(fam), fq):
            r = fam[o]
            if r["raw_nab"] >= 5 and r["direction"] == 1 and qq <= 0.05:
                want[o] = (C.float_measures(wref.N, r["na"], r["nb"], r["nab"]), float(qq))
        chk.equal("weighted: partners == the anchor's family passing the selection (counted "
                  "here)", sorted(r["partner"] for r in got), sorted(want))
        anchor = [o for o, s in baskets.items() if item in s]
        sw = sum(wt[o] for o in anchor)
        neff = sw * sw / sum(wt[o] ** 2 for o in anchor)
        for r in got:
            if r["partner"] not in want:
                continue
            m, q = want[r["partner"]]
            for key in ("together", "expected", "lift", "phi"):
                chk.close(f"weighted: {key} (weighted sums here)", r[key], m[key], rtol=1e-9,
                          where=r["partner"])
            chk.close_p("weighted: q_value (statsmodels fdr_bh over the anchor's family)",
                        r["q_value"], q, rtol=1e-9, where=r["partner"])
            c = sum(wt[o] for o in anchor if r["partner"] in baskets[o]) / sw
            chk.close("weighted: confidence == weight share (counted here)", r["confidence"], c,
                      rtol=1e-12, where=r["partner"])
            lo = float(stats.beta.ppf(0.025, c * neff + 0.5, neff - c * neff + 0.5))
            hi = float(stats.beta.ppf(0.975, c * neff + 0.5, neff - c * neff + 0.5))
            chk.close("weighted: interval on Kish's effective size (scipy beta.ppf)",
                      r["confidence_low"], lo, rtol=1e-8, where=r["partner"])
            chk.close("weighted: interval on Kish's effective size (scipy beta.ppf)",
                      r["confidence_high"], hi, rtol=1e-8, where=r["partner"])

    # ---- text table: the same partners in the same order
    text = C.run(["partners", DEMO, "-q", "--item", "Espresso"])
    csvrows = partners(["--item", "Espresso"])[:10]
    lines = text.splitlines()
    chk.equal("text table: title, header, then one line per partner", len(lines),
              2 + len(csvrows))
    chk.equal("text table rows start with the partners in CSV order",
              [ln.startswith(r["partner"] + " ") for ln, r in zip(lines[2:], csvrows)],
              [True] * len(csvrows))

    # ---- an unknown item
    bad = "Expreso"
    p = C.run_raw(["partners", DEMO, "-q", "--item", bad])
    chk.equal("unknown item: exit 2", p.returncode, 2)
    names = sorted(count, key=C.bkey)
    # the rule README.md "Finding an item" states: names beginning with the text (case
    # ignored) first, then names containing it, then the rest; within each group the smaller
    # edit distance (Levenshtein over the case-folded bytes), the shorter name, byte order
    def near_key(n):
        fn, fb = n.lower().encode(), bad.lower().encode()
        group = 0 if fn.startswith(fb) else 1 if fb in fn else 2
        return (group, levenshtein(fn, fb), len(n.encode()), C.bkey(n))
    best = sorted(names, key=near_key)[:3]
    err = p.stderr.decode()
    want = "closest: " + ", ".join(f"'{n}'" for n in best)
    chk.equal("unknown item: the three closest names (Levenshtein on bytes)", want in err, True,
              err.strip())
    p = C.run_raw(["partners", DEMO, "-q"])
    chk.equal("no --item: usage error, exit 1", p.returncode, 1)
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
