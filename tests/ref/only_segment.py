#!/usr/bin/python3
"""Reference check of --only-segment COL=NAME (issue 14 point 1) on generated data.

The restriction is checked against pandas doing it itself:
- which respondents are kept: a pandas boolean mask over the input (values of one column
  add up, different columns must all hold; a segment file joined on the respondent id);
- `items`: respondents and share of each item among the kept respondents from a pandas
  group-by, the 95% Jeffreys interval from scipy.stats.beta.ppf (Brown, Cai & DasGupta 2001);
- `pairs`: the joint counts from a numpy product of the kept respondents' incidence matrix,
  and the whole output equal to the output on the file pandas filtered (the documented
  promise: the result a file of those respondents' rows alone gives);
- `unfold`, `count` + `--from-counts`, `segments` bases: the same kept respondents;
- bad options: one-line errors with exit status 1.
"""

import io
import sys

import numpy as np
import pandas as pd
from scipy import stats

from common import require_binary, run_raw, tempdir

FAILS = []
WORST = {}


def check(cond, what):
    if not cond:
        FAILS.append(what)


def close(name, got, want, tol=1e-12):
    err = abs(got - want)
    WORST[name] = max(WORST.get(name, 0.0), err)
    check(err <= tol * max(1.0, abs(want)), f"{name}: {got!r} != {want!r}")


def pm(args, want_rc=0):
    p = run_raw(args)
    if p.returncode != want_rc:
        raise SystemExit(f"pairmap {' '.join(map(str, args))} exited {p.returncode} "
                         f"(expected {want_rc}): {p.stderr.decode('utf-8', 'replace')[:600]}")
    return p.stdout.decode("utf-8"), p.stderr.decode("utf-8")


def csv_df(text):
    return pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False, na_filter=False)


def make_data(rng, n=600, items=14):
    stores = ["hill", "lake", "pass", "town"]
    days = ["Mon", "Sat", "Sun"]
    names = [f"dish {chr(65 + j)}" for j in range(items)]
    rows, seg = [], []
    for r in range(n):
        rid = f"v{r:04d}"
        st = "" if rng.random() < 0.05 else stores[rng.integers(len(stores))]
        p = 0.08 + 0.25 * rng.random(items) * (1 + (np.arange(items) % 4 == stores.index(st)
                                                     if st else 0))
        chosen = np.flatnonzero(rng.random(items) < p)
        if st == "hill" and rng.random() < 0.3:  # chosen only at one store: gone elsewhere
            rows.append((rid, "hill special", st))
        elif len(chosen) == 0:
            rows.append((rid, "", st))
        for j in chosen:
            rows.append((rid, names[j], st))
        if rng.random() < 0.9:  # some respondents are missing from the segment file
            seg.append((rid, days[rng.integers(len(days))]))
    long = pd.DataFrame(rows, columns=["visitor", "item", "store"])
    segf = pd.DataFrame(seg, columns=["visitor", "day"])
    return long, segf


def jeffreys(x, n):
    lo = 0.0 if x == 0 else stats.beta.ppf(0.025, x + 0.5, n - x + 0.5)
    hi = 1.0 if x == n else stats.beta.ppf(0.975, x + 0.5, n - x + 0.5)
    return lo, hi


def kept_ids(long, segf, only):
    """The pandas mask: per column the allowed values (either), all columns (both)."""
    per = long.groupby("visitor", sort=False)["store"].first()
    ids = pd.Series(per.index, index=per.index)
    day = segf.set_index("visitor")["day"].reindex(per.index).fillna("")
    cols = {"store": per, "day": day}
    mask = pd.Series(True, index=per.index)
    for col in {c for c, _ in only}:
        allowed = {v for c, v in only if c == col}
        mask &= cols[col].isin(allowed)
    return set(ids[mask])


def check_items(d, long, segf, only, args):
    keep = kept_ids(long, segf, only)
    sub = long[long.visitor.isin(keep)]
    n = len(keep)
    chose = sub[sub.item != ""].groupby("item")["visitor"].nunique()
    out, err = pm(["items", d / "in.csv", "--sort", "name"] + args)
    got = csv_df(out)
    check(sorted(got.item) == sorted(chose.index), f"items under {only}: {sorted(got.item)}")
    check(f"kept {n} of" in err, f"note on kept respondents under {only}: {err}")
    for _, row in got.iterrows():
        x = int(chose.get(row["item"], 0))
        check(int(row["respondents"]) == x, f"{row['item']}: respondents {row['respondents']} "
              f"!= {x}")
        close("share", float(row["share"]), x / n)
        lo, hi = jeffreys(x, n)
        close("jeffreys", float(row["share_low"]), lo, 1e-9)
        close("jeffreys", float(row["share_high"]), hi, 1e-9)
    return keep


def check_pairs(d, long, keep, args):
    sub = long[long.visitor.isin(keep)]
    sub.to_csv(d / "filtered.csv", index=False)
    common = ["--min-count", "0", "--max-q", "1", "--sign", "both"]
    out, _ = pm(["pairs", d / "in.csv"] + common + args)
    ref, _ = pm(["pairs", d / "filtered.csv"] + common)
    check(out == ref, f"pairs under {args}: output differs from the pandas-filtered file's")
    # the joint counts from the kept respondents' incidence matrix (numpy)
    sub = sub[sub.item != ""]
    M = pd.crosstab(sub.visitor, sub.item).clip(upper=1)
    J = M.T.values @ M.values
    names = list(M.columns)
    got = csv_df(out)
    for _, row in got.iterrows():
        a, b = names.index(row["item_a"]), names.index(row["item_b"])
        check(int(row["together"]) == J[a, b], f"together {row['item_a']},{row['item_b']}")
    seen = int((np.triu(J, 1) > 0).sum())
    check(len(got) == seen, f"pairs listed {len(got)} != pairs seen together {seen}")
    return out


def check_errors(d):
    cases = [
        (["--only-segment", "nowhere=x"], "--only-segment column 'nowhere' is not a column"),
        (["--only-segment", "store=moon"], "column 'store' has no segment 'moon'"),
        (["--only-segment", "store"], "--only-segment expects COL=NAME"),
        (["--only-segment", "store=hill", "--only-segment", "store=lake", "--segment-file",
          d / "seg.csv", "--only-segment", "day=Mon", "--only-segment", "day=Tue"],
         "column 'day' has no segment 'Tue'"),
    ]
    for extra, needle in cases:
        p = run_raw(["pairs", d / "in.csv"] + extra)
        err = p.stderr.decode("utf-8", "replace")
        check(p.returncode == 1, f"{extra}: exit {p.returncode}, expected 1")
        check(needle in err and err.count("\n") == 1, f"{extra}: message {err!r}")
    pm(["count", d / "in.csv", "-o", d / "all.pmc", "--quiet"])
    p = run_raw(["pairs", "--from-counts", d / "all.pmc", "--only-segment", "store=hill"])
    check(p.returncode == 1 and b"do not apply to --from-counts" in p.stderr,
          f"--from-counts with --only-segment: {p.returncode} {p.stderr!r}")


def main():
    require_binary()
    rng = np.random.default_rng(1405)
    with tempdir() as t:
        from pathlib import Path
        d = Path(t)
        long, segf = make_data(rng)
        long.to_csv(d / "in.csv", index=False)
        segf.to_csv(d / "seg.csv", index=False)
        sf = ["--segment-file", d / "seg.csv"]
        # one level; two levels of one column (either); two columns (both)
        k1 = check_items(d, long, segf, [("store", "lake")], ["--only-segment", "store=lake"])
        a2 = ["--only-segment", "store=hill", "--only-segment", "store=town"]
        k2 = check_items(d, long, segf, [("store", "hill"), ("store", "town")], a2)
        a3 = ["--only-segment", "store=pass"] + sf + ["--only-segment", "day=Sat",
                                                      "--only-segment", "day=Sun"]
        only3 = [("store", "pass"), ("day", "Sat"), ("day", "Sun")]
        k3 = check_items(d, long, segf, only3, a3)
        check(0 < len(k3) < len(k2) and len(k1) > 0, "restrictions of different sizes")
        check_pairs(d, long, k1, ["--only-segment", "store=lake"])
        out3 = check_pairs(d, long, k3, a3)
        # unfold: the kept respondents' rows, as pandas filters them
        out, _ = pm(["unfold", d / "in.csv", "--item-col", "item"] + a3)
        got = csv_df(out)
        want = long[long.visitor.isin(k3)]  # a respondent who chose nothing: an empty item
        check(sorted(zip(got.iloc[:, 0], got.iloc[:, 1])) == sorted(zip(want.visitor, want.item)),
              "unfold under --only-segment: rows differ from pandas' filter")
        # a count shard of the kept respondents gives the same pairs
        pm(["count", d / "in.csv", "-o", d / "k3.pmc", "--quiet"] + a3)
        out, _ = pm(["pairs", "--from-counts", d / "k3.pmc", "--min-count", "0", "--max-q", "1",
                     "--sign", "both"])
        check(out == out3, "pairs from the shard of the kept respondents differ")
        # shards of different restrictions do not add
        pm(["count", d / "in.csv", "-o", d / "k1.pmc", "--quiet", "--only-segment", "store=lake"])
        p = run_raw(["merge", d / "k1.pmc", d / "k3.pmc", "-o", d / "both.pmc"])
        check(p.returncode == 2, f"merge of shards of different restrictions: exit {p.returncode}")
        # segments: the bases of the store column among Sat/Sun visitors
        out, _ = pm(["segments", d / "in.csv", "--segment-col", "store"] + sf +
                    ["--only-segment", "day=Sat", "--only-segment", "day=Sun"])
        got = csv_df(out).drop_duplicates("segment").set_index("segment")["base"].astype(int)
        days = segf.set_index("visitor")["day"]
        per = long.groupby("visitor")["store"].first()
        per = per[per.index.isin(days[days.isin(["Sat", "Sun"])].index)]
        want = per[per != ""].value_counts()
        check(dict(got) == dict(want), f"segment bases {dict(got)} != pandas {dict(want)}")
        check_errors(d)
    for k, v in sorted(WORST.items()):
        print(f"only_segment: largest deviation {k}: {v:.3g}")
    if FAILS:
        for f in FAILS[:20]:
            print("FAIL:", f)
        print(f"only_segment: {len(FAILS)} check(s) failed")
        return 1
    print("only_segment: all checks passed")
    return 0


if __name__ == "__main__":
    sys.exit(main())
