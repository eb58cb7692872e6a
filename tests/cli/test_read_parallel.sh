#!/usr/bin/env bash
# The parallel reader at its real size (src/read_par.c: a regular file of 16 MB or more is
# read in chunks of at least 8 MiB on --threads threads): `items` and `pairs` print the same
# bytes with --threads 1 and 2 on a 20 MB file in the long format (with categories and weights,
# respondents whose rows straddle the cut, duplicate rows) and in the lines format; and the
# errors of a bad file are the serial reader's, byte for byte, whether the defect sits before or
# after the cut, or is a quoted field spread over the lines around it.
# Usage: bash test_read_parallel.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

# Invented data: a mountain café's orders (order id, item, category, a weight per order),
# 600,000 orders of 1 to 6 items from 300 items in 12 categories, a few duplicate rows.
awk 'BEGIN {
    srand(5); print "order,item,category,weight"
    for (r = 1; r <= 600000; r++) {
        k = 1 + int(rand() * 6); w = 1 + int(rand() * 3)
        for (j = 0; j < k; j++) {
            it = int(rand() * rand() * 300)
            printf "order-%07d,Dish %03d,Group %02d,%d\n", r, it, it % 12, w
            if (rand() < 0.001) printf "order-%07d,Dish %03d,Group %02d,%d\n", r, it, it % 12, w
        }
    }
}' >"$TMP/long.csv"
size=$(wc -c <"$TMP/long.csv")
[ "$size" -gt 17000000 ] || fail "the test file is only $size bytes: too small to be read in chunks"

# same_out (errors_lib.sh): stdout, stderr and exit status of --threads 1 and 2 the same
same_out items items "$TMP/long.csv" --category-col category
[ "$st" = 0 ] || fail "items on the long file exited $st"
[ "$(wc -l <"$TMP/items.1")" -eq 301 ] || fail "items: expected 300 items, got $(($(wc -l <"$TMP/items.1") - 1))"
same_out pairs pairs "$TMP/long.csv" --category-col category --min-count 1 --max-q 1
[ "$st" = 0 ] || fail "pairs on the long file exited $st"
same_out wpairs pairs "$TMP/long.csv" --weight-col weight --min-count 1 --max-q 1
[ "$st" = 0 ] || fail "weighted pairs on the long file exited $st"

# the lines format: one order per line, items after the id
awk -F, 'NR > 1 { if ($1 != last) { if (last != "") printf "\n"; printf "%s", $1; last = $1 }
                  printf ",%s", $2 } END { printf "\n" }' "$TMP/long.csv" |
    awk 'BEGIN { print "order,items" } { print }' >"$TMP/lines.csv"
same_out lines pairs "$TMP/lines.csv" --format lines --id-col 1 --min-count 1 --max-q 1
[ "$st" = 0 ] || fail "pairs on the lines file exited $st"

# defects before and after the cut (the middle of the file): the serial reader's message
lines=$(wc -l <"$TMP/long.csv")
for at in 1000 $((lines * 3 / 4)); do
    # an item with a second category
    awk -v at="$at" 'NR == at { print "order-9999999,Dish 001,Group 99,1" } { print }' \
        "$TMP/long.csv" >"$TMP/cat$at.csv"
    same_out "cat$at" items "$TMP/cat$at.csv" --category-col category
    [ "$st" = 2 ] || fail "a second category at line $at: exit $st, expected 2"
    grep -q "has category 'Group 99' here" "$TMP/cat$at.e1" || fail "category message at line $at"
    # a weight that is not a number
    awk -v at="$at" 'NR == at { print "order-9999998,Dish 002,Group 02,heavy" } { print }' \
        "$TMP/long.csv" >"$TMP/w$at.csv"
    same_out "w$at" pairs "$TMP/w$at.csv" --weight-col weight
    [ "$st" = 2 ] || fail "a bad weight at line $at: exit $st, expected 2"
    grep -q ":$at: expected a weight" "$TMP/w$at.e1" || fail "weight message names line $at"
done
# a quoted item spread over 20,000 lines around the middle: the cut falls inside it
awk -v mid="$((lines / 2))" 'NR == mid - 10000 { printf "order-9999997,\"Dish\n" }
    NR > mid - 10000 && NR < mid + 10000 { print "x"; next }
    NR == mid + 10000 { print "end\",Group 01,1" } { print }' "$TMP/long.csv" >"$TMP/quoted.csv"
same_out quoted items "$TMP/quoted.csv" --category-col category
[ "$st" = 0 ] || fail "a quoted multi-line item across the cut: exit $st, expected 0"
grep -q '^"Dish' "$TMP/quoted.1" || fail "the multi-line item is not listed"

# two columns only (respondent, item): the fast reader of plain lines; `map` on two threads
# leaves the SHA-256 to finish in the background, and run.json must still hold the file's own
# (sha256sum from coreutils); the maps of one and two threads are the same files
cut -d, -f1,2 "$TMP/long.csv" >"$TMP/two.csv"
same_out two pairs "$TMP/two.csv" --min-count 1 --max-q 1
[ "$st" = 0 ] || fail "pairs on the two-column file exited $st"
CASES=$((CASES + 1))
for t in 1 2; do
    "$PAIRMAP" map "$TMP/two.csv" -o "$TMP/map$t" --threads "$t" --quiet \
        >/dev/null 2>"$TMP/map$t.err" ||
        fail "map --threads $t on the two-column file failed: $(cat "$TMP/map$t.err")"
done
want="$(sha256sum "$TMP/two.csv" | cut -d' ' -f1)"
for t in 1 2; do
    grep -q "\"sha256\": \"$want\"" "$TMP/map$t/run.json" ||
        fail "run.json of --threads $t lacks the file's SHA-256 $want"
done
for f in map.graphml map.svg edges.csv nodes.csv; do
    cmp -s "$TMP/map1/$f" "$TMP/map2/$f" || fail "$f differs between --threads 1 and 2"
done

finish
