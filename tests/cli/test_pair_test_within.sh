#!/usr/bin/env bash
# --pair-test within (issue 14 point 1) on the invented café demo: map, pairs and partners
# select pairs by the Cochran-Mantel-Haenszel test over the segments of location. The planted
# facts come from demo/cafe-segment-key.csv (read here, not written into the test): the pair
# that looks paired overall only because both sell at one location is kept by the pooled test
# and dropped within, the pair that holds at every location is kept by both. Every kept pair's
# q_value is at most --max-q, the three commands agree, run.json's settings and the summary
# say which test selected the pairs, and the usage errors are one line with exit 1.
# (The p- and q-values themselves are checked against statsmodels in
# tests/ref/pair_test_within.py.)
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
D="$DEMO/cafe-orders.csv"
KEY="$DEMO/cafe-segment-key.csv"
key_pair() { # the planted pair of fact $1 as "item_a,item_b" (the key's order: byte order)
    awk -F, -v f="$1" '$1 == f { print $4 "," $5 }' "$KEY"
}
MIX="$(key_pair pooled-only-pair)"
REAL="$(key_pair pair-in-every-segment)"
check "the key names the segment-mix pair" test -n "$MIX"
check "the key names the pair that holds within" test -n "$REAL"
CASES=$((CASES + 1))
"$PAIRMAP" map "$D" --segment-col location --pair-test within -o "$TMP/w" >"$TMP/w.out" 2>"$TMP/w.err" ||
    fail "map --pair-test within: exit $?: $(cat "$TMP/w.err")"
"$PAIRMAP" map "$D" --segment-col location -o "$TMP/p" >"$TMP/p.out" 2>"$TMP/p.err" ||
    fail "map --segment-col (pooled): exit $?"
has_pair() { # has_pair EDGES.CSV "a,b"
    cut -d, -f1,2 "$1" | grep -qxF "$2"
}
check "pooled: the segment-mix pair $MIX is kept" has_pair "$TMP/p/edges.csv" "$MIX"
check "within: the segment-mix pair $MIX is dropped" bash -c "! cut -d, -f1,2 '$TMP/w/edges.csv' | grep -qxF '$MIX'"
check "pooled: the pair $REAL is kept" has_pair "$TMP/p/edges.csv" "$REAL"
check "within: the pair $REAL is kept" has_pair "$TMP/w/edges.csv" "$REAL"
check "summary names the test" grep -q "^pair test     Cochran-Mantel-Haenszel within the segments of 'location'" "$TMP/w.out"
check "pooled summary names the test" grep -q "^pair test     pooled" "$TMP/p.out"
check "the note names the test" grep -q "note: --pair-test within: pairs selected by the Cochran-Mantel-Haenszel test within the 3 segments of 'location'" "$TMP/w.err"
"$PAIRMAP" pairs "$D" --segment-col location --pair-test within >"$TMP/pairs.csv" 2>/dev/null || fail "pairs --pair-test within: exit $?"
"$PAIRMAP" partners "$D" --segment-col location --pair-test within --item "${MIX%%,*}" --csv --top 0 \
    >"$TMP/partners.csv" 2>/dev/null || fail "partners --pair-test within: exit $?"
"$PAIRMAP" partners "$D" --segment-col location --item "${MIX%%,*}" --csv --top 0 \
    >"$TMP/partners-pooled.csv" 2>/dev/null || fail "partners (pooled): exit $?"
"$PAIRMAP" partners "$D" --segment-col location --pair-test within --item "${MIX%%,*}" --csv --top 0 \
    --family all >"$TMP/partners-all.csv" 2>/dev/null || fail "partners --family all: exit $?"
/usr/bin/python3 - "$TMP" "$MIX" <<'EOF' || fail "edges.csv, pairs, partners, run.json: see above"
import json, sys
import pandas as pd

tmp, mix = sys.argv[1], sys.argv[2].split(",")
bad = []
def check(cond, what):
    if not cond:
        bad.append(what)
        print("FAIL:", what, file=sys.stderr)

rd = lambda p: pd.read_csv(p, dtype=str, keep_default_na=False)
w, p, pairs = rd(f"{tmp}/w/edges.csv"), rd(f"{tmp}/p/edges.csv"), rd(f"{tmp}/pairs.csv")
check(list(w.columns) == list(p.columns) and w.columns[-6:].tolist() ==
      ["mh_odds_ratio", "mh_low", "mh_high", "cmh_p", "heterogeneity_p", "reversed"],
      f"columns {list(w.columns)}")
check(w.equals(pairs), "map's edges.csv and pairs --pair-test within differ")
check(len(w) > 20 and (w.q_value.astype(float) <= 0.05).all(), "a kept pair with q > --max-q")
# within, q comes from the CMH p-values: a kept pair's q is at least its cmh_p (BH never
# lowers a p-value), which the pooled q of the segment-mix pair is not
check((w.q_value.astype(float) >= w.cmh_p.astype(float)).all(), "q below cmh_p")
row = p[(p.item_a == mix[0]) & (p.item_b == mix[1])].iloc[0]
check(float(row.q_value) < 1e-10 and float(row.cmh_p) > 0.05,
      f"the planted pair's pooled q {row.q_value} and cmh_p {row.cmh_p}")
# the p_value column stays the pooled test's: equal in both runs for the pairs in both
both = w.merge(p, on=["item_a", "item_b"], suffixes=("_w", "_p"))
check(len(both) > 20 and (both.p_value_w == both.p_value_p).all() and
      (both.test_w == both.test_p).all(), "p_value/test differ between the runs")
check((both.q_value_w != both.q_value_p).any(), "q_value the same in both runs")
pw, pp = rd(f"{tmp}/partners.csv"), rd(f"{tmp}/partners-pooled.csv")
check(mix[1] in set(pp.partner) and mix[1] not in set(pw.partner),
      f"partners of {mix[0]}: {list(pw.partner)} / pooled {list(pp.partner)}")
mine = w[(w.item_a == mix[0]) | (w.item_b == mix[0])]
# --family all: the map's family and its CMH q-values, so the rows of edges.csv with the item
pa = rd(f"{tmp}/partners-all.csv")
check(len(pa) == len(mine), f"partners --family all {len(pa)} rows, edges.csv {len(mine)} with the item")
for d, want in (("w", "within"), ("p", "pooled")):
    s = json.load(open(f"{tmp}/{d}/run.json"))["settings"]
    check(s.get("pair_test") == want, f"run.json settings.pair_test {s.get('pair_test')}")
    check(s.get("pair_test_column") == ("location" if want == "within" else None),
          f"run.json settings.pair_test_column {s.get('pair_test_column')}")
sys.exit(1 if bad else 0)
EOF
CASES=$((CASES + 1))
# usage errors: one line, exit 1, nothing written
expect_fail 1 "" "--pair-test within needs --segment-col COL" -- pairs "$D" --pair-test within
expect_fail 1 "" "--pair-test within takes unweighted input" -- \
    map "$D" --segment-col location --pair-test within --weight-col location -o "$TMP/x"
check "no output directory after the usage error" test ! -e "$TMP/x"
expect_fail 1 "" "--pair-test within takes unweighted input" -- \
    partners "$D" --segment-col location --pair-test within --weight-col location --item Espresso
expect_fail 1 "" "--pair-test expects" -- pairs "$D" --segment-col location --pair-test inside
expect_fail 1 "" "--pair-test within ranks the partners of one --item" -- \
    partners "$D" --segment-col location --pair-test within --item Espresso --item Buttermilk
# the memory of the test within segments is bounded before it allocates: one segment per
# respondent (60,000 segments) makes the per-thread items x segments counts large while the
# pooled counting fits
(cd "$TMP" && awk 'BEGIN { srand(3); print "id,item,seg"; for (r = 0; r < 60000; r++)
    for (j = 0; j < 3; j++) printf "r%d,i%d,s%d\n", r, int(rand() * 300), r }' >manyseg.csv)
cd "$TMP" || exit 1
expect_ok pairs manyseg.csv --segment-col seg --max-memory 100M --threads 2
expect_fail 4 "manyseg.csv: " "the pair tests within segments need about" -- \
    pairs manyseg.csv --segment-col seg --pair-test within --max-memory 100M --threads 2
cd - >/dev/null || exit 1
for cmd in map pairs partners; do
    check "$cmd --help names --pair-test" bash -c "'$PAIRMAP' $cmd --help | grep -q -- '--pair-test T'"
done
finish
