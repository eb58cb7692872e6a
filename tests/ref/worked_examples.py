#!/usr/bin/python3
"""Reference check: published worked examples.

1. Tea and coffee (Tan, Steinbach & Kumar, Introduction to Data Mining, chapter on association
   analysis; values from memory): 1000 people, 200 drink tea, 800 coffee, 150 both, so 650
   coffee only, 50 tea only and 150 neither (given as empty-item rows, DESIGN.md). Published:
   support 0.15, confidence tea -> coffee 0.75, lift 0.9375 (< 1 although the confidence is
   high: the book's point), phi -0.0625. Shares from `items`: 0.2 and 0.8. The same file
   without the 150 empty rows and `--respondents 1000` must give the same output.
2. The lady tasting tea (Fisher 1935, The Design of Experiments; from memory): 8 cups, 4 with
   the milk poured first; she names 4 as milk-first and gets 3 right: table [[3, 1], [1, 3]].
   Published: P(3 or more right) = 17/70 = 0.2429 (one-sided), two-sided p 0.4857 (= 34/70).
   Also compared with scipy.stats.fisher_exact. Encoded as 8 respondents (cups) and two items,
   "guess: milk first" and "truth: milk first".
"""

import sys
from pathlib import Path

from scipy import stats

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402


def tea_coffee(chk, td):
    rows = []
    i = 0
    for items, count in (((["tea", "coffee"]), 150), ((["coffee"]), 650), ((["tea"]), 50),
                         (([""]), 150)):
        for _ in range(count):
            i += 1
            rows += [[f"p{i:04d}", it] for it in items]
    f = Path(td) / "drinks.csv"
    C.write_long(f, rows)
    f2 = Path(td) / "drinks_noempty.csv"
    C.write_long(f2, [r for r in rows if r[1]])
    args = ["--min-count", "0", "--max-q", "1", "--sign", "both"]
    try:
        out = C.run(["pairs", f] + args)
        out2 = C.run(["pairs", f2, "--respondents", "1000"] + args)
        df = C.read_csv(out, C.PAIR_COLUMNS)
        it = C.read_csv(C.run(["items", f]), C.ITEM_COLUMNS)
        neg = C.read_csv(C.run(["pairs", f, "--min-count", "0", "--max-q", "1",
                                "--sign", "negative"]), C.PAIR_COLUMNS)
        pos = C.read_csv(C.run(["pairs", f, "--min-count", "0", "--max-q", "1",
                                "--sign", "positive"]), C.PAIR_COLUMNS)
    except C.RunError as e:
        chk.fail(f"tea/coffee: {e}")
        return
    chk.equal("tea/coffee: --respondents 1000 == 150 empty-item rows", out2 == out, True, "")
    if len(df) != 1:
        chk.fail(f"tea/coffee: expected one pair row, got {len(df)}")
        return
    r = df.iloc[0]
    chk.equal("tea/coffee: pair order (coffee < tea by bytes)", (r.item_a, r.item_b),
              ("coffee", "tea"), "")
    # published values (Tan, Steinbach & Kumar; from memory)
    w = "Tan, Steinbach & Kumar tea/coffee"
    chk.close("tea/coffee support vs published 0.15", float(r.support), 0.15, rtol=1e-15, where=w)
    chk.close("tea/coffee confidence tea->coffee vs published 0.75", float(r.confidence_ba),
              0.75, rtol=1e-15, where=w)
    chk.close("tea/coffee lift vs published 0.9375", float(r.lift), 0.9375, rtol=1e-15, where=w)
    chk.close("tea/coffee phi vs published -0.0625", float(r.phi), -0.0625, rtol=1e-15, where=w)
    # derived from the same table: confidence coffee->tea 150/800, Jaccard 150/850, expected 160
    chk.close("tea/coffee confidence coffee->tea vs 150/800", float(r.confidence_ab), 0.1875,
              rtol=1e-15, where=w)
    chk.close("tea/coffee jaccard vs 150/850", float(r.jaccard), 150 / 850, rtol=1e-15, where=w)
    chk.close("tea/coffee expected vs 200*800/1000", float(r.expected), 160.0, rtol=1e-15, where=w)
    chk.equal("tea/coffee together", int(r.together), 150, w)
    # smallest expected cell 40 >= 5: chi-square; scipy reference
    chk.equal("tea/coffee test", r.test, "chi2", w)
    p2 = stats.chi2_contingency([[150, 50], [650, 150]], correction=False)[1]
    chk.close_p("tea/coffee two-sided p vs scipy chi2_contingency(correction=False)",
                float(r.p_value), p2, where=w)
    chk.close_p("tea/coffee q (one hypothesis) == p", float(r.q_value), p2, where=w)
    # one-sided: negative association, listed under --sign negative only
    z = -(1000 * 0.0625 ** 2) ** 0.5
    if len(neg) != 1:
        chk.fail(f"tea/coffee --sign negative: expected one row, got {len(neg)}")
    else:
        chk.close_p("tea/coffee --sign negative p vs scipy norm.cdf(signed root)",
                    float(neg.iloc[0].p_value), stats.norm.cdf(z), where=w)
    chk.equal("tea/coffee --sign positive lists no row (phi < 0)", len(pos), 0, w)
    got = {x.item: x for x in it.itertuples(index=False)}
    for name, n in (("tea", 200), ("coffee", 800)):
        if name not in got:
            chk.fail(f"tea/coffee items: {name} missing")
            continue
        chk.equal(f"tea/coffee items respondents {name}", int(got[name].respondents), n, w)
        chk.close(f"tea/coffee items share {name} (N = 1000 incl. empty rows)",
                  float(got[name].share), n / 1000, rtol=1e-15, where=w)


def tea_tasting(chk, td):
    # Cups 1-4 milk first (truth); she guesses cups 1-3 and 5 as milk first: 3 right.
    truth = {1, 2, 3, 4}
    guess = {1, 2, 3, 5}
    rows = []
    for cup in range(1, 9):
        chosen = ([["guess: milk first"]] if cup in guess else []) + \
                 ([["truth: milk first"]] if cup in truth else [])
        if not chosen:
            rows.append([f"cup{cup}", ""])
        rows += [[f"cup{cup}", c[0]] for c in chosen]
    f = Path(td) / "cups.csv"
    C.write_long(f, rows, header=("cup", "label"))
    w = "Fisher 1935 tea tasting [[3,1],[1,3]]"
    table = [[3, 1], [1, 3]]
    for sign, published, alt in (("both", 0.4857, "two-sided"),
                                 ("positive", 0.2429, "greater")):
        try:
            df = C.read_csv(C.run(["pairs", f, "--min-count", "0", "--max-q", "1",
                                   "--sign", sign]), C.PAIR_COLUMNS)
        except C.RunError as e:
            chk.fail(f"tea tasting: {e}")
            return
        if len(df) != 1:
            chk.fail(f"tea tasting --sign {sign}: expected one row, got {len(df)}")
            continue
        r = df.iloc[0]
        chk.equal(f"tea tasting together ({sign})", int(r.together), 3, w)
        chk.equal(f"tea tasting test ({sign}; expected cells 2 < 5)", r.test, "fisher", w)
        p = float(r.p_value)
        chk.close(f"tea tasting {sign} p vs published {published} (4 decimals)", p, published,
                  atol=5e-5, where=w, kind="abs")
        chk.close_p(f"tea tasting {sign} p vs scipy fisher_exact({alt})", p,
                    stats.fisher_exact(table, alternative=alt)[1], where=w)
        exact = 34 / 70 if sign == "both" else 17 / 70
        chk.close_p(f"tea tasting {sign} p vs exact {'34' if sign == 'both' else '17'}/70", p,
                    exact, where=w)
        chk.close(f"tea tasting phi ({sign}) vs (8*3-16)/16", float(r.phi), 0.5, rtol=1e-15,
                  where=w)


def main():
    C.require_binary()
    chk = C.Checker("worked_examples (Tan/Steinbach/Kumar tea-coffee; Fisher 1935 tea tasting)")
    with C.tempdir() as td:
        tea_coffee(chk, td)
        tea_tasting(chk, td)
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
