#!/usr/bin/env bash
# One item's partners cost memory in the number of items, not of pairs (issue 15 point 9):
# `partners --item X --sign negative --min-count 0` on a generated long-tailed file of 6,000
# items (scripts/gen-baskets: invented baskets, Zipf shares) runs under a 300 MB bound
# (bound_memory: ulimit -v, or ASan's hard_rss_limit_mb). Listing every pair of items, as the
# command did before, takes 18 million pairs of about 29 bytes each: over the bound.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

/usr/bin/python3 "$HERE/../../scripts/gen-baskets" --respondents 12000 --items 6000 --exponent 1.1 \
    --mean-k 6 --seed 5 --quiet -o "$TMP/tail.csv" || { fail "gen-baskets failed"; finish; }
"$PAIRMAP" items "$TMP/tail.csv" -q --sort share >"$TMP/items.csv" 2>/dev/null ||
    fail "items failed"
TOP=$(sed -n 2p "$TMP/items.csv" | cut -d, -f1)
bound_memory 300
expect_ok partners "$TMP/tail.csv" --item "$TOP" --sign negative --min-count 0 --max-q 1 \
    --top 0 --csv -q
CASES=$((CASES + 1))
rows=$(($(wc -l <"$TMP/out") - 1))
[ "$rows" -gt 1000 ] || fail "partners --sign negative --min-count 0 --max-q 1 listed $rows rows"
finish
