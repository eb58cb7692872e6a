#!/usr/bin/python3
"""Reference check of segments on the two invented demos (issue 14 points 4-5).

Café (demo/cafe-orders.csv, columns location and time_band, written by scripts/make-demo; the
planted facts are listed in its answer key demo/cafe-segment-key.csv):
- base, chose and share of `pairmap segments` equal a pandas group-by of the orders file;
- the characteristic item: its highest shrunk index is in the key's segment, at least 2, with
  q <= 0.001, and scipy.stats.chi2_contingency (correction=False) of that segment against the
  rest agrees with pairmap's p;
- the falling trend: trend_z < 0 and trend_p < 1e-6, equal to the Cochran-Armitage statistic
  (Agresti, Categorical Data Analysis, 2nd ed., section 5.3.5; scores 1..k) computed in numpy;
- the pair made by the location mix: `pairmap pairs` (pooled) keeps it, while within the
  locations statsmodels' StratifiedTable finds nothing (test_null_odds(correction=False)
  p > 0.05, pooled odds ratio within [0.5, 2]); both items have their highest index at the
  key's segment;
- the pair in every segment: kept pooled, and scipy.stats.fisher_exact gives p < 1e-6 inside
  every location.
Festival (demo/festival-survey.csv, wide): the segment tables of age_band and region (base,
chose, share) equal a pandas group-by over the long rows built by wide_unfold.py's own pandas
melt of the file (not by pairmap), with the segment read by pandas.
"""

import io
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats
from statsmodels.stats.contingency_tables import StratifiedTable

sys.dont_write_bytecode = True
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402
import wide_unfold as W  # noqa: E402

CAFE = C.REPO / "demo" / "cafe-orders.csv"
KEY = C.REPO / "demo" / "cafe-segment-key.csv"
SEG_COLUMNS = ["attribute", "segment", "item", "category", "base", "chose", "share", "share_low",
               "share_high", "shrunk", "shrunk_low", "shrunk_high", "index", "test", "p_value",
               "q_value", "trend_z", "trend_p"]


def segments(args):
    df = C.read_csv(C.run(["segments"] + args + ["-q"]), SEG_COLUMNS)
    for c in ("base", "chose"):
        df[c] = df[c].astype(int)
    for c in SEG_COLUMNS[6:13] + SEG_COLUMNS[14:]:
        df[c] = df[c].map(lambda s: float(s) if s != "" else float("nan"))
    return df


def check_counts(chk, got, resp, items, col, label):
    """resp: DataFrame respondent -> segment (col); items: DataFrame respondent, item (distinct).
    Compares base, chose and share per (segment, item) with a pandas group-by."""
    resp = resp[resp[col] != ""]
    base = resp.groupby(col).size()
    j = items.merge(resp, on="respondent")
    chose = j.groupby([col, "item"])["respondent"].nunique()
    g = got[got["attribute"] == col]
    all_items = sorted(set(items["item"]))
    chk.equal(f"{label}: one row per (segment, item)", len(g), len(base) * len(all_items), col)
    for r in g.itertuples(index=False):
        b, x = int(base[r.segment]), int(chose.get((r.segment, r.item), 0))
        chk.equal(f"{label}: base == pandas group-by", r.base, b, f"{col}={r.segment}")
        chk.equal(f"{label}: chose == pandas group-by", r.chose, x,
                  f"{col}={r.segment}, {r.item}")
        chk.close(f"{label}: share == chose/base (pandas)", r.share, x / b, rtol=1e-15,
                  where=f"{col}={r.segment}, {r.item}")


def cochran_armitage(x, n):
    """Agresti (2nd ed., 5.3.5), scores 1..k, no N/(N-1) factor; numpy."""
    t = np.arange(1, len(n) + 1, dtype=float)
    N, p = n.sum(), x.sum() / n.sum()
    tbar = (n * t).sum() / N
    z = (t * (x - n * p)).sum() / np.sqrt(p * (1 - p) * (n * (t - tbar) ** 2).sum())
    return z, 2 * stats.norm.sf(abs(z))


def tables(orders, loc, a, b):
    """2x2 tables [[ab, a~b], [~ab, ~a~b]] of items a, b within each level of loc."""
    out = []
    for _, g in orders.groupby(loc):
        x, y = g["items"].map(lambda s: a in s), g["items"].map(lambda s: b in s)
        out.append(np.array([[(x & y).sum(), (x & ~y).sum()], [(~x & y).sum(),
                                                               (~x & ~y).sum()]]))
    return out


def cafe(chk):
    raw = pd.read_csv(CAFE, dtype=str, keep_default_na=False)
    raw = raw.rename(columns={"order": "respondent"})
    resp = raw.groupby("respondent")[["location", "time_band"]].first().reset_index()
    chk.equal("café: location and time band constant per order",
              int(raw.groupby("respondent")[["location", "time_band"]].nunique().max().max()),
              1, "orders file")
    items = raw[raw["item"] != ""][["respondent", "item"]].drop_duplicates()
    got = segments([CAFE, "--segment-col", "location", "--segment-col", "time_band"])
    for col in ("location", "time_band"):
        check_counts(chk, got, resp, items, col, "café")
    orders = items.groupby("respondent")["item"].apply(set).rename("items").reset_index()
    orders = resp.merge(orders, on="respondent", how="left")
    orders["items"] = orders["items"].map(lambda s: s if isinstance(s, set) else set())
    pooled = pd.read_csv(io.StringIO(C.run(["pairs", CAFE, "-q"])), dtype=str,
                         keep_default_na=False)
    kept = set(zip(pooled["item_a"], pooled["item_b"]))
    key = pd.read_csv(KEY, dtype=str, keep_default_na=False)
    facts = set(key["fact"])
    chk.equal("café key: the four planted facts", sorted(facts),
              sorted(["characteristic-item", "falling-trend", "pair-in-every-segment",
                      "pooled-only-pair"]), str(KEY))
    for f in key.itertuples(index=False):
        g = got[got["attribute"] == f.attribute]
        if f.fact == "characteristic-item":
            rows = g[g["item"] == f.item_a]
            top = rows.loc[rows["index"].idxmax()]
            chk.equal("characteristic item: highest index in its segment", top["segment"],
                      f.segment, f.item_a)
            if not (top["index"] >= 2 and top["q_value"] <= 1e-3):
                chk.fail(f"characteristic item {f.item_a}: index {top['index']}, "
                         f"q {top['q_value']} (want >= 2, <= 0.001)")
            r = resp[f.attribute] == f.segment
            has = resp["respondent"].isin(set(items.loc[items["item"] == f.item_a,
                                                        "respondent"]))
            t = np.array([[(r & has).sum(), (r & ~has).sum()], [(~r & has).sum(),
                                                                (~r & ~has).sum()]])
            chk.close_p("characteristic item p vs scipy chi2_contingency(correction=False)",
                        top["p_value"], stats.chi2_contingency(t, correction=False)[1],
                        rtol=1e-7, where=f.item_a)
            chk.note(f"characteristic item {f.item_a} at {f.segment}: index "
                     f"{top['index']:.3f}, q {top['q_value']:.3g}")
        elif f.fact == "falling-trend":
            rows = g[g["item"] == f.item_a]
            z, p = cochran_armitage(rows["chose"].to_numpy(float), rows["base"].to_numpy(float))
            chk.close("trend_z vs Cochran-Armitage in numpy", rows["trend_z"].iloc[0], z,
                      rtol=1e-9, where=f.item_a)
            chk.close_p("trend_p vs 2 norm.sf(|z|)", rows["trend_p"].iloc[0], p, rtol=1e-7,
                        where=f.item_a)
            if not (z < 0 and rows["trend_p"].iloc[0] < 1e-6):
                chk.fail(f"falling trend of {f.item_a}: z {z}, p {rows['trend_p'].iloc[0]}")
            chk.note(f"falling trend of {f.item_a} over {f.attribute}: z {z:.3f}")
        else:
            pair = (f.item_a, f.item_b)
            chk.equal(f"{f.fact}: kept by the pooled `pairs`", pair in kept, True, str(pair))
            st = StratifiedTable(tables(orders, f.attribute, *pair))
            p_within = st.test_null_odds(correction=False).pvalue
            if f.fact == "pooled-only-pair":
                for it in pair:
                    rows = g[g["item"] == it]
                    chk.equal("pooled-only pair: each item's highest index at the key's segment",
                              rows.loc[rows["index"].idxmax(), "segment"], f.segment, it)
                if not (p_within > 0.05 and 0.5 <= st.oddsratio_pooled <= 2):
                    chk.fail(f"pooled-only pair {pair}: within the locations CMH p {p_within}, "
                             f"MH odds ratio {st.oddsratio_pooled} (want no association)")
            else:
                for t in tables(orders, f.attribute, *pair):
                    p = stats.fisher_exact(t)[1]
                    if not p < 1e-6:
                        chk.fail(f"pair in every segment {pair}: Fisher p {p} in a segment")
            chk.note(f"{f.fact} {pair}: within {f.attribute} (statsmodels) MH odds ratio "
                     f"{st.oddsratio_pooled:.3f}, CMH p {p_within:.3g}")


def festival(chk):
    df = W.read_wide(W.DEMO)
    m = W.name_items(W.raw_long(df, W.DEMO_PREFIXES, W.DEMO_SKIP, W.DEMO_DROP))
    # base answered (the default): respondents with a chosen cell
    answered = sorted(set(m["_row"]))
    resp = df.iloc[answered][["respondent", "age_band", "region"]].copy()
    resp["respondent"] = resp["respondent"].str.strip()
    items = m[["respondent", "item"]].copy()
    items["respondent"] = items["respondent"].str.strip()
    items = items.drop_duplicates()
    wide = W.wide_args(W.DEMO_PREFIXES, W.DEMO_SKIP, W.DEMO_DROP)
    got = segments([W.DEMO] + wide + ["--segment-col", "age_band", "--segment-col", "region"])
    for col in ("age_band", "region"):
        check_counts(chk, got, resp, items, col, "festival")


def main():
    C.require_binary()
    chk = C.Checker("segments_demo (café planted facts; festival tables vs pandas group-by)")
    cafe(chk)
    festival(chk)
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
