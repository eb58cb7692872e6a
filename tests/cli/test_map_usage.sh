#!/usr/bin/env bash
# Usage and data errors of `pairmap map` and `pairmap partners` (issue 3): exit 1 for bad
# usage, 2 for a name the data does not hold, one styled line each; --help documents what the
# issue asks to be said. Usage: bash test_map_usage.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
D="$DEMO/cafe-orders.csv"

expect_fail 1 "" "-o DIR" -- map "$D"
expect_fail 1 "" "--restarts" -- map "$D" -o "$TMP/o" --restarts 0
expect_fail 1 "" "--resolution" -- map "$D" -o "$TMP/o" --resolution -1
expect_fail 1 "" "--iterations" -- map "$D" -o "$TMP/o" --iterations 0
expect_fail 1 "" "--color-by" -- map "$D" -o "$TMP/o" --color-by size
expect_fail 1 "" "--item" -- map "$D" -o "$TMP/o" --item Espresso
[ -e "$TMP/o" ] && fail "a usage error created the output directory"
expect_fail 1 "" "--item NAME" -- partners "$D"
expect_fail 1 "" "--by" -- partners "$D" --item Espresso --by size
expect_fail 1 "" "--top-edges" -- partners "$D" --item Espresso --top-edges 3
expect_fail 2 "$D: " "closest: 'Espresso'" -- partners "$D" --item Expresso
expect_fail 2 "$D: " "no item 'Tea'" -- partners "$D" --item espresso --item Tea
expect_fail 2 "$DATA/everyone_chose_everything.csv: " "every respondent" -- \
    partners "$DATA/everyone_chose_everything.csv" --item Espresso

# --help says what the issue asks to be said
CASES=$((CASES + 1))
"$PAIRMAP" map --help >"$TMP/help" || fail "map --help failed"
for s in "negative edges" "take no part" "singleton" "the same --seed repeat every file" "timings" "temporary"; do
    grep -q -- "$s" "$TMP/help" || fail "map --help does not mention '$s'"
done
CASES=$((CASES + 1))
"$PAIRMAP" partners --help >"$TMP/help" || fail "partners --help failed"
for s in "hint, not proof" "different" "closest" "own tests" "Jeffreys" "--csv"; do
    grep -q -- "$s" "$TMP/help" || fail "partners --help does not mention '$s'"
done

# a set nobody chose whole: a note, no rows, exit 0
CASES=$((CASES + 1))
"$PAIRMAP" partners "$D" --item Espresso --item "Fish fingers with chips" --item "Raclette plate" \
    --item "Dark lager" --csv >"$TMP/out" 2>"$TMP/err"
rc=$?
[ "$rc" -eq 0 ] || fail "partners of a set nobody chose: exit $rc: $(cat "$TMP/err")"
[ "$(cat "$TMP/out")" = "partner,together,expected,confidence,confidence_low,confidence_high,lift,phi,q_value,partner_respondents,reverse_confidence,odds_ratio,odds_ratio_low,odds_ratio_high" ] ||
    fail "partners of a set nobody chose: output $(head -3 "$TMP/out")"
grep -q "no respondent chose all 4 items" "$TMP/err" || fail "partners of a set nobody chose: $(cat "$TMP/err")"

finish
