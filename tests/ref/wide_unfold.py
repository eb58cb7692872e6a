#!/usr/bin/python3
"""Reference check: wide survey input (issue 7) against an independent pandas conversion.

Data: the invented food-festival survey demo/festival-survey.csv (scripts/make-survey-demo),
plus a small edge-case file written here. The reference conversion is done with pandas
(DataFrame.melt plus filtering), following the rules of DESIGN.md / issue 7 written out
below, without any code of pairmap:
- option columns of a question: headers starting with its prefix (the longest matching prefix
  wins), minus the id, weight and --skip-col columns;
- "not chosen": empty, 0, no, false, or a --drop-value, in any ASCII letter case;
- a chosen cell gives its text as the label, or, when the column holds 1/yes/true, the header
  without the prefix and leading separators;
- category: the prefix without trailing digits and separators;
- an item is (category, label), named "label (category)" where the label occurs under more
  than one category; a repeated item of one respondent counts once;
- --base answered leaves out respondents with no chosen cell; --base all keeps them, and
  unfold writes one row with an empty item for each.

Checks:
1. `pairmap unfold` rows == the pandas long pairs, in order (respondents in file order, items
   in column order), for --base answered and --base all.
2. `pairmap items` on the wide file: N and every item's respondents == pandas counts.
3. The wide file and the unfolded long file (read with --category-col category) give
   byte-identical `pairs` (all pairs, both signs) and `items` outputs, and, once `pairmap map`
   exists, byte-identical map.graphml, map.svg, edges.csv and nodes.csv.
"""

import csv
import io
import re
import sys
from pathlib import Path

import pandas as pd

sys.dont_write_bytecode = True  # keep the source tree clean
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

SEPS = "_-:. \t"
NOT_CHOSEN = {"", "0", "no", "false"}
FLAGS = {"1", "yes", "true"}

DEMO = C.REPO / "demo" / "festival-survey.csv"
DEMO_PREFIXES = ["drinks_", "hot dishes", "sweets_"]
DEMO_SKIP = ["drinks_other"]
DEMO_DROP = ["-"]


def ascii_lower(s):
    return "".join(chr(ord(c) + 32) if "A" <= c <= "Z" else c for c in s)


def category_of(prefixes):
    """Prefix -> category: without trailing digits and separators; where two prefixes would
    give the same, without trailing separators only (DESIGN.md choice documented in
    `pairmap unfold --help`)."""
    lvl1 = {p: re.sub(r"[0-9_\-:. \t]+$", "", p) for p in prefixes}
    out = {}
    for p in prefixes:
        shared = lvl1[p] == "" or sum(1 for q in prefixes if lvl1[q] == lvl1[p]) > 1
        c = p.rstrip(SEPS) if shared else lvl1[p]
        out[p] = c or p
    return out


def raw_long(df, prefixes, skip=(), drop_values=(), id_col=None, weight_col=None):
    """The chosen cells of a wide DataFrame (all str) as a long DataFrame with columns
    _row, respondent, label, category, colpos (not yet named, not deduplicated)."""
    id_col = id_col or df.columns[0]
    cats = category_of(prefixes)
    owner = {}
    for pos, col in enumerate(df.columns):
        h = col.strip()
        if col in (id_col, weight_col) or col in skip:
            continue
        match = [p for p in prefixes if h.startswith(p)]
        if match:
            owner[col] = max(match, key=len)
    d = df.copy()
    d["_row"] = range(len(d))
    m = d.melt(id_vars=["_row", id_col], value_vars=list(owner), var_name="column",
               value_name="value")
    m["value"] = m["value"].str.strip()
    lowered = m["value"].map(ascii_lower)
    off = NOT_CHOSEN | {ascii_lower(v.strip()) for v in drop_values}
    m = m[~lowered.isin(off)].copy()
    m["flag"] = m["value"].map(ascii_lower).isin(FLAGS)
    kinds = m.groupby("column")["flag"].agg(["all", "any"])
    mixed = kinds[kinds["all"] != kinds["any"]]
    if len(mixed):
        raise ValueError(f"mixed columns {list(mixed.index)}")

    def option_name(col):
        p = owner[col]
        rest = col.strip()[len(p):].lstrip(SEPS)
        return rest or col.strip()

    m["label"] = [option_name(c) if f else v for c, f, v in zip(m["column"], m["flag"],
                                                                 m["value"])]
    m["category"] = m["column"].map(lambda c: cats[owner[c]])
    m["colpos"] = m["column"].map({c: i for i, c in enumerate(df.columns)})
    m = m.rename(columns={id_col: "respondent"})
    return m[["_row", "respondent", "label", "category", "colpos"]]


def name_items(m):
    """Adds the item column: the label, or "label (category)" where it is ambiguous."""
    m = m.copy()
    ncat = m.groupby("label")["category"].nunique()
    amb = set(ncat[ncat > 1].index)
    m["item"] = [f"{l} ({c})" if l in amb else l for l, c in zip(m["label"], m["category"])]
    return m


def long_rows(df, m, base_all, keep_rows=None, id_col=None):
    """Expected unfold rows [respondent, item, category]: respondents in file order, items in
    column order, repeats once; respondents with no kept item get ["id", "", ""] when they are
    kept (base all, or listed in keep_rows: they ticked something that was removed later)."""
    id_col = id_col or df.columns[0]
    m = m.sort_values(["_row", "colpos"], kind="stable")
    m = m.drop_duplicates(["_row", "item"], keep="first")
    by_row = {r: g for r, g in m.groupby("_row", sort=True)}
    keep_rows = keep_rows or set()
    rows = []
    for r, rid in enumerate(df[id_col].str.strip()):
        if r in by_row:
            g = by_row[r]
            rows.extend([rid, i, c] for i, c in zip(g["item"], g["category"]))
        elif base_all or r in keep_rows:
            rows.append([rid, "", ""])
    return rows


def read_wide(path):
    return pd.read_csv(path, dtype=str, keep_default_na=False, na_filter=False)


def parse_csv(text):
    return [row for row in csv.reader(io.StringIO(text))]


def wide_args(prefixes, skip=(), drop=(), extra=()):
    a = ["--format", "wide"]
    for p in prefixes:
        a += ["--columns", p]
    for s in skip:
        a += ["--skip-col", s]
    for d in drop:
        a += ["--drop-value", d]
    return a + list(extra)


def first_difference(a, b):
    """None when the byte strings are equal, else the first differing line of each."""
    if a == b:
        return None
    la, lb = a.split(b"\n"), b.split(b"\n")
    for i, (x, y) in enumerate(zip(la + [b"<end>"], lb + [b"<end>"])):
        if x != y:
            return f"line {i + 1}: {x[:200]!r} vs {y[:200]!r}"
    return "lengths differ"


def compare_outputs(chk, label, wide_file, wargs, long_file, td):
    """pairs, items and map of the wide file and the long file agree."""
    pairs_opts = ["--min-count", "0", "--max-q", "1", "--sign", "both", "-q"]
    for cmd, opts in (("pairs", pairs_opts), ("items", ["-q"])):
        a = C.run_raw([cmd, wide_file] + wargs + opts)
        b = C.run_raw([cmd, long_file, "--category-col", "category"] + opts)
        chk.equal(f"{cmd}: wide exit 0", a.returncode, 0, f"{label}: {a.stderr[:300]!r}")
        chk.equal(f"{cmd}: long exit 0", b.returncode, 0, f"{label}: {b.stderr[:300]!r}")
        chk.equal(f"{cmd} output: wide == unfolded long (byte-identical)",
                  first_difference(a.stdout, b.stdout), None, label)
        if cmd == "pairs":
            chk.equal("pairs output is not trivially empty", a.stdout.count(b"\n") > 10, True,
                      label)
    da, db = Path(td) / f"map-wide-{label}", Path(td) / f"map-long-{label}"
    title = ["--title", "Festival survey", "-q"]
    a = C.run_raw(["map", wide_file, "-o", da] + wargs + title)
    b = C.run_raw(["map", long_file, "--category-col", "category", "-o", db] + title)
    chk.equal("map: wide exit 0", a.returncode, 0, f"{label}: {a.stderr[:300]!r}")
    chk.equal("map: long exit 0", b.returncode, 0, f"{label}: {b.stderr[:300]!r}")
    if a.returncode or b.returncode:
        return
    for f in ("map.graphml", "map.svg", "edges.csv", "nodes.csv"):
        fa, fb = da / f, db / f
        if not fa.is_file() or not fb.is_file():
            chk.fail(f"map {label}: {f} missing")
            continue
        chk.equal(f"map {f}: wide == unfolded long (byte-identical)",
                  first_difference(fa.read_bytes(), fb.read_bytes()), None, label)


def check_demo(chk, td):
    df = read_wide(DEMO)
    m = name_items(raw_long(df, DEMO_PREFIXES, DEMO_SKIP, DEMO_DROP))
    wargs = wide_args(DEMO_PREFIXES, DEMO_SKIP, DEMO_DROP)
    # the demo must exercise what it is for
    chk.equal("demo: some label under two questions", sorted(
        set(m.loc[m["item"].str.endswith(")"), "label"])), ["Lemonade", "Pancakes"], "demo")
    chk.equal("demo: the three questions", sorted(set(m["category"])),
              ["drinks", "hot dishes", "sweets"], "demo")
    for base_all in (False, True):
        base = ["--base", "all"] if base_all else []
        tag = "base all" if base_all else "base answered"
        want = long_rows(df, m, base_all)
        p = C.run_raw(["unfold", DEMO] + wargs + base + ["-q"])
        chk.equal(f"unfold exit 0 ({tag})", p.returncode, 0, p.stderr[:300])
        got = parse_csv(p.stdout.decode("utf-8"))
        chk.equal(f"unfold header ({tag})", got[:1], [["respondent", "item", "category"]], tag)
        got = got[1:]
        chk.equal(f"unfold row count == pandas melt ({tag})", len(got), len(want), tag)
        # the rows themselves, in order (the first differing row is named on failure)
        first = next((i for i, (a, b) in enumerate(zip(got + [None], want + [None]))
                      if a != b), None)
        chk.equal(f"unfold rows == pandas melt + filtering, in order ({tag})",
                  None if first is None else (first + 1, got[first:first + 2]),
                  None if first is None else (first + 1, want[first:first + 2]), tag)
        long_file = Path(td) / f"festival-long-{tag.replace(' ', '-')}.csv"
        long_file.write_bytes(p.stdout)

        # N and item counts (pandas: distinct respondents per item)
        answered = m["_row"].nunique()
        n_total = len(df)
        N = n_total if base_all else answered
        items = C.run(["items", DEMO] + wargs + base + ["-q"])
        it = C.read_csv(items, C.ITEM_COLUMNS)
        counts = m.drop_duplicates(["_row", "item"]).groupby("item")["_row"].nunique()
        cats = m.drop_duplicates("item").set_index("item")["category"]
        chk.equal(f"items: the item set == pandas ({tag})", sorted(it["item"]),
                  sorted(counts.index), tag)
        for r in it.itertuples(index=False):
            if r.item not in counts.index:
                continue
            chk.equal(f"items: respondents == pandas nunique ({tag})", int(r.respondents),
                      int(counts[r.item]), r.item)
            chk.equal(f"items: category == question ({tag})", r.category, cats[r.item], r.item)
            chk.close(f"items: share == n / N with N = {N} ({tag})", float(r.share),
                      int(counts[r.item]) / N, rtol=1e-15, where=r.item)
        compare_outputs(chk, tag.replace(" ", "-"), DEMO, wargs + base, long_file, td)


EDGE = "".join(line + "\n" for line in [
    'id ; weight ; q1_a ; q1_b ; q10_x ; q10_y ; Drinks: Tea ; Drinks: Water ; q1_other ; note',
    'r1 ; 1.5 ; Tea ; ; TRUE ; 0 ; YES ; no ; ; "a, b"',
    'r2 ; 2 ; ; "Milk ""fresh""" ; 0 ; True ; n/a ; Yes ; free text ; x',
    'r3 ; 1 ; ; ; ; ; NO ; N/A ; something ;',
    'r4 ; 0.25 ; Tea ; Coffee ; 1 ; 1 ; No ; no ; ; ',
    'r5 ; 3 ;  Coffee ; ; false ; FALSE ; yes ; yes ; ; z',
])
# Prefixes q1 and q10 both match q10_x: the longer wins. Categories: q1 -> "q" and q10 ->
# "q" would clash, so only separators are removed: "q1", "q10". "Drinks" -> "Drinks".
# "Tea" is a label in q1 and an option (flag column) of Drinks: two items. q1_other carries
# the prefix q1 and is skipped; "n/a" is dropped by --drop-value N/A (letter case ignored).
EDGE_PREFIXES = ["q1", "q10", "Drinks"]


def check_edge(chk, td):
    f = Path(td) / "edge.csv"
    f.write_text(EDGE, encoding="utf-8")
    df = pd.read_csv(f, dtype=str, keep_default_na=False, na_filter=False, sep=";",
                     skipinitialspace=True)
    df.columns = [c.strip() for c in df.columns]
    df = df.apply(lambda s: s.str.strip())
    extra = ["--weight-col", "weight", "--skip-col", "note"]
    wargs = wide_args(EDGE_PREFIXES, ["q1_other"], ["N/A"], extra)
    m = name_items(raw_long(df, EDGE_PREFIXES, ["q1_other", "note"], ["N/A"],
                            weight_col="weight"))
    for base_all in (False, True):
        base = ["--base", "all"] if base_all else []
        tag = "edge base all" if base_all else "edge base answered"
        want = long_rows(df, m, base_all)
        weights = dict(zip(df["id"], df["weight"]))
        want = [r + [C.fmt_weight(float(weights[r[0]]))] for r in want]
        p = C.run_raw(["unfold", f] + wargs + base + ["-q"])
        chk.equal(f"unfold exit 0 ({tag})", p.returncode, 0, p.stderr[:300])
        got = parse_csv(p.stdout.decode("utf-8"))
        chk.equal(f"unfold header with --weight-col ({tag})", got[:1],
                  [["respondent", "item", "category", "weight"]], tag)
        chk.equal(f"unfold rows == pandas melt + filtering ({tag})", got[1:], want, tag)
        long_file = Path(td) / f"edge-long-{base_all}.csv"
        long_file.write_bytes(p.stdout)
        for cmd in ("pairs", "items"):
            opts = ["--min-count", "0", "--max-q", "1", "--sign", "both"] \
                if cmd == "pairs" else []
            a = C.run_raw([cmd, f] + wargs + base + opts + ["-q"])
            b = C.run_raw([cmd, long_file, "--category-col", "category", "--weight-col",
                           "weight"] + opts + ["-q"])
            chk.equal(f"{cmd}: weighted wide == unfolded long ({tag})",
                      (a.returncode, b.returncode, first_difference(a.stdout, b.stdout)),
                      (0, 0, None), tag)
    chk.equal("edge: categories (q1/q10 clash -> separators only)", sorted(set(m["category"])),
              ["Drinks", "q1", "q10"], "edge")
    chk.equal("edge: Tea named per question", sorted(set(m.loc[m["label"] == "Tea", "item"])),
              ["Tea (Drinks)", "Tea (q1)"], "edge")


def main():
    C.require_binary()
    chk = C.Checker("wide_unfold (wide survey input vs pandas melt)")
    if not DEMO.is_file():
        chk.fail(f"{DEMO} is missing (scripts/make-survey-demo writes it)")
        return chk.finish()
    with C.tempdir() as td:
        try:
            check_demo(chk, td)
            check_edge(chk, td)
        except (C.RunError, ValueError) as e:
            chk.fail(str(e))
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
