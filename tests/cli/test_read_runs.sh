#!/usr/bin/env bash
# Respondents whose rows come in several runs, at the size where their runs are merged on all
# threads (src/table_runs.c: from 2^20 runs, in buckets of their hashes): 450,000 orders whose
# rows come in three passes over the file, so each order appears in up to three runs (1.16 M
# runs). The respondents counted are the distinct ids (counted by sort -u from coreutils), and
# `items`, `pairs` (weighted too) and the map print the same bytes with --threads 1 (one
# bucket) and 2; a weight that differs between two runs of one order is the same error, naming
# the same line, on both.
# Usage: bash test_read_runs.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

# Invented data: a mountain café's orders (order id, item, weight per order); pass p writes
# the items j = p mod 3 of every order, so an order's rows are split over up to three runs.
awk 'BEGIN {
    srand(11); print "order,item,weight"
    for (r = 1; r <= 450000; r++) { k[r] = 1 + int(rand() * 7); w[r] = 1 + int(rand() * 3) }
    for (p = 0; p < 3; p++) {
        for (r = 1; r <= 450000; r++) {
            for (j = p; j < k[r]; j += 3) {
                srand(r * 7 + j); it = int(rand() * rand() * 400)
                printf "order-%07d,Dish %03d,%d\n", r, it, w[r]
            }
        }
    }
}' >"$TMP/runs.csv"
size=$(wc -c <"$TMP/runs.csv")
[ "$size" -gt 17000000 ] || fail "the test file is only $size bytes: too small to be read in chunks"
runs=$(awk -F, 'NR > 1 && $1 != last { n++ } { last = $1 } END { print n }' "$TMP/runs.csv")
[ "$runs" -gt 1048576 ] || fail "only $runs runs: below the size where buckets are used"
ids=$(tail -n +2 "$TMP/runs.csv" | cut -d, -f1 | sort -u | wc -l)


same_out items items "$TMP/runs.csv"
[ "$st" = 0 ] || fail "items exited $st"
same_out pairs pairs "$TMP/runs.csv" --min-count 1 --max-q 1
[ "$st" = 0 ] || fail "pairs exited $st"
same_out wpairs pairs "$TMP/runs.csv" --weight-col weight --min-count 1 --max-q 1
[ "$st" = 0 ] || fail "weighted pairs exited $st"
CASES=$((CASES + 1))
for t in 1 2; do
    "$PAIRMAP" map "$TMP/runs.csv" -o "$TMP/map$t" --threads "$t" --quiet >/dev/null \
        2>"$TMP/map$t.err" || fail "map --threads $t failed: $(cat "$TMP/map$t.err")"
    grep -q "\"respondents\": $ids," "$TMP/map$t/run.json" ||
        fail "map --threads $t: run.json does not count the $ids distinct ids as respondents"
done
for f in map.graphml edges.csv nodes.csv clusters.csv; do
    cmp -s "$TMP/map1/$f" "$TMP/map2/$f" || fail "$f differs between --threads 1 and 2"
done

# order 300000's weight differs in its last run (every row of it): the error names that run's
# first line, where the merge of the runs finds it
first=$(awk -F, '$1 == "order-0300000" && last != $1 { s = NR } { last = $1 } END { print s }' \
    "$TMP/runs.csv")
awk -F, -v at="$first" 'NR >= at && $1 == "order-0300000" { $3 = $3 + 5 } { print }' OFS=, \
    "$TMP/runs.csv" >"$TMP/w.csv"
same_out weight pairs "$TMP/w.csv" --weight-col weight
[ "$st" = 2 ] || fail "two weights of one order: exit $st, expected 2"
grep -q ":$first: weight .* differs from the weight" "$TMP/weight.e1" ||
    fail "the weight message does not name line $first: $(cat "$TMP/weight.e1")"

finish
