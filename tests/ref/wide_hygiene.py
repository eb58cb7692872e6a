#!/usr/bin/python3
"""Reference check: item hygiene (--drop-item, --merge-file; issue 7) against merging and
dropping the rows by hand with pandas.

Data: the invented demos demo/cafe-orders.csv (long) and demo/festival-survey.csv (wide,
converted by the independent pandas melt of wide_unfold.py).
Rules done by hand here (DESIGN.md, issue 7):
- --merge-file item,group renames an item to its group before counting; a group may then be
  dropped by --drop-item;
- --drop-item removes the item's rows; the respondent stays in N (pairmap's choice: a
  respondent who chose only dropped items is still a respondent, as in long format; the hand
  version writes one row with an empty item for them);
- wide: a name matches the label under every question, or "label (category)" under that
  question only (the qualified name first); names "label (category)" are given after merging
  and dropping, so a label that is no longer ambiguous loses its qualifier.
Checks: `pairs` (all pairs, both signs) and `items` outputs with the options are
byte-identical to those of the hand-edited long file; the notes count the rows merged and
dropped as pandas does; for wide input `unfold` with the options gives the hand rows.
"""

import csv
import re
import sys
from pathlib import Path

import pandas as pd

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402
import wide_unfold as W  # noqa: E402

CAFE = C.REPO / "demo" / "cafe-orders.csv"
PAIRS_OPTS = ["--min-count", "0", "--max-q", "1", "--sign", "both"]


def write_merge(path, pairs, header=True):
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f, lineterminator="\n")
        if header:
            w.writerow(["item", "group"])
        w.writerows(pairs)


def note_count(stderr, pattern):
    m = re.search(pattern, stderr)
    return int(m.group(1)) if m else 0


def same_outputs(chk, label, args_a, args_b):
    """pairs and items of run a and run b are byte-identical; returns a's pairs stderr."""
    err = ""
    for cmd, opts in (("pairs", PAIRS_OPTS), ("items", [])):
        a = C.run_raw([cmd] + args_a + opts)
        b = C.run_raw([cmd] + args_b + opts)
        chk.equal(f"{cmd}: exit 0 with the options", a.returncode, 0,
                  f"{label}: {a.stderr[:300]!r}")
        chk.equal(f"{cmd}: exit 0 on the hand-edited file", b.returncode, 0,
                  f"{label}: {b.stderr[:300]!r}")
        chk.equal(f"{cmd} output with the options == on the hand-edited file",
                  W.first_difference(a.stdout, b.stdout), None, label)
        chk.equal(f"{cmd} output is not empty", a.stdout.count(b"\n") > 5, True, label)
        if cmd == "pairs":
            err = a.stderr.decode("utf-8")
    return err


def check_long(chk, td):
    df = pd.read_csv(CAFE, dtype=str, keep_default_na=False, na_filter=False)
    cat = df.columns[2]
    merge = [("Espresso", "Coffee"), ("Cappuccino", "Coffee"), ("Filter coffee", "Coffee"),
             ("Still water", "Water"), ("Sparkling water", "Water"),
             ("Chestnut soup", "Soup"), ("Lentil soup", "Soup"), ("Goulash soup", "Soup"),
             ("Tomato soup", "Soup")]
    mf = Path(td) / "cafe-merge.csv"
    write_merge(mf, merge)
    mapping = dict(merge)
    cases = [
        ("merge", [], True),
        ("drop", ["Pretzel", "Still water", "Vanilla sauce"], False),
        ("merge+drop group", ["Water", "Trail mix"], True),
    ]
    for label, drops, use_merge in cases:
        d = df.copy()
        merged = 0
        if use_merge:
            hit = d.iloc[:, 1].str.strip().isin(mapping)
            merged = int(hit.sum())
            d.iloc[:, 1] = d.iloc[:, 1].str.strip().replace(mapping)
        drop_hit = d.iloc[:, 1].str.strip().isin(set(drops))
        dropped = int(drop_hit.sum())
        ids_before = list(dict.fromkeys(d.iloc[:, 0]))
        d = d[~drop_hit]
        # respondents left with no row stay in N: one row with an empty item
        left = set(d.iloc[:, 0])
        lost = [r for r in ids_before if r not in left]
        if lost:
            d = pd.concat([d, pd.DataFrame({d.columns[0]: lost, d.columns[1]: "",
                                            cat: ""})])
        hand = Path(td) / f"hand-cafe-{label.replace(' ', '_').replace('+', '_')}.csv"
        d.to_csv(hand, index=False, lineterminator="\n")
        opts = ["--category-col", "category"]
        a = [CAFE] + opts + (["--merge-file", mf] if use_merge else [])
        for x in drops:
            a += ["--drop-item", x]
        err = same_outputs(chk, f"long {label}", a, [hand] + opts)
        chk.equal("note: rows renamed by --merge-file == pandas count",
                  note_count(err, r"(\d+) rows renamed by --merge-file"), merged, label)
        if use_merge:
            chk.equal("note: merge entries", note_count(err, r"\((\d+) entries\)"), len(merge),
                      label)
        chk.equal("note: rows dropped by --drop-item == pandas count",
                  note_count(err, r"(\d+) rows dropped by --drop-item"), dropped, label)
        chk.equal(f"hand edit changed something ({label})", merged + dropped > 0, True, label)


def hand_wide(m, merge, drops):
    """Applies the wide name rules to the raw long frame m (label, category)."""
    m = m.copy()

    def q(label, cat):
        return f"{label} ({cat})"

    merged = dropped = 0
    labels, keep = [], []
    for label, cat in zip(m["label"], m["category"]):
        if q(label, cat) in drops or label in drops:
            dropped += 1
            labels.append(label)
            keep.append(False)
            continue
        g = merge.get(q(label, cat), merge.get(label))
        if g is not None:
            merged += 1
            label = g
            if q(label, cat) in drops or label in drops:
                dropped += 1
                labels.append(label)
                keep.append(False)
                continue
        labels.append(label)
        keep.append(True)
    m["label"] = labels
    return m[keep], merged, dropped


def check_wide(chk, td):
    df = W.read_wide(W.DEMO)
    raw = W.raw_long(df, W.DEMO_PREFIXES, W.DEMO_SKIP, W.DEMO_DROP)
    answered = set(raw["_row"])
    wargs = W.wide_args(W.DEMO_PREFIXES, W.DEMO_SKIP, W.DEMO_DROP)
    merge = [("Iced tea", "Tea"), ("Mint tea", "Tea"), ("Pancakes (sweets)", "Sweet pancakes"),
             ("Gelato", "Ices"), ("Lemonade (sweets)", "Ices")]
    mf = Path(td) / "festival-merge.csv"
    write_merge(mf, merge, header=False)  # also: a merge file without the header row
    cases = [
        ("wide merge", {}, dict(merge), []),
        ("wide drop", {}, {}, ["Lemonade (sweets)", "Still water", "Pancakes"]),
        ("wide merge+drop", {}, dict(merge), ["Tea (drinks)", "Churros"]),
    ]
    for label, _, mapping, drops in cases:
        m, merged, dropped = hand_wide(raw, mapping, set(drops))
        m = W.name_items(m)
        want = W.long_rows(df, m, base_all=False, keep_rows=answered)
        hand = Path(td) / f"hand-{label.replace(' ', '_').replace('+', '_')}.csv"
        with open(hand, "w", newline="", encoding="utf-8") as f:
            w = csv.writer(f, lineterminator="\n")
            w.writerow(["respondent", "item", "category"])
            w.writerows(want)
        opts = list(wargs) + (["--merge-file", mf] if mapping else [])
        for x in drops:
            opts += ["--drop-item", x]
        err = same_outputs(chk, label, [W.DEMO] + opts, [hand, "--category-col", "category"])
        chk.equal("wide note: rows renamed by --merge-file == hand count",
                  note_count(err, r"(\d+) rows renamed by --merge-file"), merged, label)
        chk.equal("wide note: rows dropped by --drop-item == hand count",
                  note_count(err, r"(\d+) rows dropped by --drop-item"), dropped, label)
        p = C.run_raw(["unfold", W.DEMO] + opts + ["-q"])
        got = W.parse_csv(p.stdout.decode("utf-8"))[1:]
        chk.equal("wide unfold with the options == hand rows", got, want, label)
        if label == "wide drop":
            chk.equal("dropping 'Lemonade (sweets)' leaves 'Lemonade' unqualified",
                      "Lemonade" in set(m["item"]), True, label)


def main():
    C.require_binary()
    chk = C.Checker("wide_hygiene (--drop-item, --merge-file vs rows edited by hand)")
    with C.tempdir() as td:
        try:
            check_long(chk, td)
            check_wide(chk, td)
        except (C.RunError, ValueError) as e:
            chk.fail(str(e))
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
