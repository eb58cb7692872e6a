#!/usr/bin/python3
"""Reference check: `pairmap partners`, for one item and for a set of items.

References:
- one item: its partners computed here from the CSV file, not from pairmap's output: every
  pair of eligible items counted with numpy, measures in exact rational arithmetic
  (common.exact_measures), p-values by the rule of DESIGN.md with scipy (common.ref_p) and
  q-values by statsmodels multipletests fdr_bh over the whole family (common.Reference, pairs
  never seen together included); the selection applied here in its documented order
  (--min-count, --sign, --max-q, --min-phi, --min-lift); confidence = together / n(item)
- confidence interval: 95% Jeffreys, scipy.stats.beta.ppf(0.025 / 0.975, x + 1/2, n - x + 1/2),
  0 at x = 0 and 1 at x = n (Brown, Cai & DasGupta 2001)
- a set: respondents who chose all of its items, counted here from the CSV file (Python sets);
  measures in exact rational arithmetic (common.exact_measures), p-values by the rule of
  DESIGN.md with scipy (common.ref_p), q-values by statsmodels multipletests fdr_bh over the
  set's own tests (one per eligible item outside the set)
- ranking: the order documented in --help, recomputed here; --top K is a prefix
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

from scipy import stats
from statsmodels.stats.multitest import multipletests

sys.dont_write_bytecode = True
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

DEMO = C.REPO / "demo" / "cafe-orders.csv"
PCOLS = ["partner", "together", "expected", "confidence", "confidence_low", "confidence_high",
         "lift", "phi", "q_value"]


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


def partners(args):
    text = C.run(["partners", DEMO, "-q", "--csv", "--top", "0"] + args)
    return list(csv.DictReader(io.StringIO(text)))


def rank_key(r, by, sign):
    v = {"phi": float(r["phi"]), "lift": float(r["lift"]), "confidence": float(r["confidence"]),
         "together": float(r["together"])}[by]
    if sign == "both" and by == "phi":
        v = abs(v)
    if sign == "both" and by == "lift":
        v = abs(math.log(v))
    if sign == "negative":
        v = -v
    return (-v, C.bkey(r["partner"]))


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

    # ---- one item: the family counted and tested here (common.Reference)
    names = sorted(count, key=C.bkey)
    orders = sorted(baskets)
    M = [[name in baskets[o] for name in names] for o in orders]
    refs = {}
    cases = [("positive", []), ("negative", ["--min-count", "0"]),
             ("both", ["--max-q", "0.2", "--min-count", "2"]),
             ("positive", ["--min-phi", "0.1"]), ("positive", ["--min-lift", "2"])]
    for item in ["Espresso", "Lentil soup", "Apple strudel, warm", "Still water", "Crème caramel"]:
        for sign, extra in cases:
            opts = ["--sign", sign] + extra
            label = f"{item} {' '.join(opts)}"
            got = partners(["--item", item] + opts)
            if sign not in refs:
                refs[sign] = C.Reference(M, names, sign)
            ref = refs[sign]

            def opt(name, default):
                return float(extra[extra.index(name) + 1]) if name in extra else default
            min_count, max_q = opt("--min-count", 5), opt("--max-q", 0.05)
            min_phi, min_lift = opt("--min-phi", 0), opt("--min-lift", 0)
            want = {}
            for (a, b), r in ref.pairs.items():
                if item not in (a, b):
                    continue
                if r["raw_nab"] < min_count or r["raw_nab"] == 0:
                    continue  # never-seen pairs are listed only under negative --min-count 0
                if sign != "both" and r["direction"] != (1 if sign == "positive" else -1):
                    continue
                if not r["q"] <= max_q:
                    continue
                m = ref.measures((a, b))
                if abs(m["phi"]) < min_phi or m["lift"] < min_lift:
                    continue
                want[b if a == item else a] = (m, r["q"])
            if sign == "negative" and min_count == 0:  # never-seen partners are listed too
                for (a, b), r in ref.pairs.items():
                    if item in (a, b) and r["raw_nab"] == 0 and r["q"] <= max_q:
                        want[b if a == item else a] = (ref.measures((a, b)), r["q"])
            chk.equal("partners == pairs with the item passing the selection (counted here)",
                      sorted(r["partner"] for r in got), sorted(want), label)
            for r in got:
                if r["partner"] not in want:
                    continue
                m, q = want[r["partner"]]
                w = f"{label}: {r['partner']}"
                chk.equal("together == count here", float(r["together"]), float(m["together"]), w)
                chk.close("expected (exact)", r["expected"], m["expected"], rtol=1e-15, where=w)
                chk.close("confidence == together / n(item) (exact)", r["confidence"],
                          float(Fraction(int(m["together"]), count[item])), rtol=1e-15, where=w)
                chk.close("lift (exact)", r["lift"], m["lift"], rtol=1e-15, where=w)
                chk.close("phi (exact)", r["phi"], m["phi"], rtol=1e-12, where=w)
                chk.close_p("q_value (statsmodels fdr_bh over the family)", r["q_value"], q,
                            rtol=1e-9, where=w)
                x = int(float(r["together"]))
                lo, hi = jeffreys(x, count[item])
                chk.close("confidence interval == scipy beta.ppf (Jeffreys)",
                          float(r["confidence_low"]), lo, rtol=1e-9, atol=1e-15, where=w)
                chk.close("confidence interval == scipy beta.ppf (Jeffreys)",
                          float(r["confidence_high"]), hi, rtol=1e-9, where=w)
            check_order(chk, got, "phi", sign, label)
            for by in ("lift", "confidence", "together"):
                check_order(chk, partners(["--item", item, "--by", by] + opts), by, sign, label)
            top3 = C.run(["partners", DEMO, "-q", "--csv", "--top", "3", "--item", item] + opts)
            chk.equal("--top 3 is the first 3 rows", [r["partner"] for r in
                                                      csv.DictReader(io.StringIO(top3))],
                      [r["partner"] for r in got[:3]], label)

    # ---- sets: counted here
    for items, sign, opts in [(["Lentil soup", "Rye bread roll"], "both",
                               ["--min-count", "0", "--max-q", "1"]),
                              (["Espresso", "Walnut cake", "Almond biscuit"], "both",
                               ["--min-count", "0", "--max-q", "1"]),
                              (["Lentil soup", "Rye bread roll"], "positive", []),
                              (["Raclette plate", "Boiled potatoes"], "negative",
                               ["--min-count", "0", "--max-q", "0.5"])]:
        label = f"set {items} --sign {sign} {' '.join(opts)}"
        sel = [s for s in baskets.values() if all(i in s for i in items)]
        nS = len(sel)
        fam = [b for b in eligible if b not in items]
        nSb = {b: sum(1 for s in sel if b in s) for b in fam}
        ps = [C.ref_p(N, nS, count[b], nSb[b], sign)[1] for b in fam]
        qs = multipletests(ps, method="fdr_bh")[1]
        ref = {}
        min_count = int(opts[opts.index("--min-count") + 1]) if "--min-count" in opts else 5
        max_q = float(opts[opts.index("--max-q") + 1]) if "--max-q" in opts else 0.05
        for b, p, q in zip(fam, ps, qs):
            m = C.exact_measures(N, nS, count[b], nSb[b])
            direction = {"positive": m["phi"] > 0, "negative": m["phi"] < 0, "both": True}[sign]
            if nSb[b] >= min_count and direction and q <= max_q:
                ref[b] = (m, q)
        got = partners([a for i in items for a in ("--item", i)] + ["--sign", sign] + opts)
        chk.equal("set partners == items passing the selection (counted here)",
                  sorted(r["partner"] for r in got), sorted(ref), label)
        for r in got:
            if r["partner"] not in ref:
                continue
            m, q = ref[r["partner"]]
            w = f"{label}: {r['partner']}"
            chk.equal("set: together == count here", float(r["together"]), m["together"], w)
            chk.close("set: expected (exact)", r["expected"], m["expected"], rtol=1e-15, where=w)
            chk.close("set: confidence (exact)", r["confidence"],
                      float(Fraction(int(m["together"]), nS)), rtol=1e-15, where=w)
            chk.close("set: lift (exact)", r["lift"], m["lift"], rtol=1e-15, where=w)
            chk.close("set: phi (exact)", r["phi"], m["phi"], rtol=1e-12, where=w)
            chk.close_p("set: q_value (statsmodels fdr_bh over the set's tests)",
                        r["q_value"], q, rtol=1e-9, where=w)
            lo, hi = jeffreys(int(m["together"]), nS)
            chk.close("set: confidence interval (scipy beta.ppf)", r["confidence_low"], lo,
                      rtol=1e-9, atol=1e-15, where=w)
            chk.close("set: confidence interval (scipy beta.ppf)", r["confidence_high"], hi,
                      rtol=1e-9, where=w)
        check_order(chk, got, "phi", sign, label)
        chk.note(f"{label}: {nS} respondents chose all; {len(got)} partners listed")

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
        # the family weighted, counted and tested here (common.Reference: weighted
        # chi-square on Kish's effective size, statsmodels fdr_bh), default selection
        wref = C.Reference(M, names, "positive", weights=[wt[o] for o in orders])
        want = {}
        for (a, b), r in wref.pairs.items():
            if item in (a, b) and r["raw_nab"] >= 5 and r["direction"] == 1 and r["q"] <= 0.05:
                m = C.float_measures(wref.N, r["na"], r["nb"], r["nab"])
                want[b if a == item else a] = (m, r["q"])
        chk.equal("weighted: partners == pairs passing the selection (counted here)",
                  sorted(r["partner"] for r in got), sorted(want))
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
            chk.close_p("weighted: q_value (statsmodels fdr_bh over the family)", r["q_value"], q,
                        rtol=1e-9, where=r["partner"])
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
