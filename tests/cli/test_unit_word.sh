#!/usr/bin/env bash
# --unit WORD (issue 16 point 8): the word for one respondent in every human-facing text of
# map, pairs, items and partners (summary, notes, tables, the SVG's key and subtitle); the
# CSV columns keep their names. Shown to fail on a binary without the option.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
cafe="$DEMO/cafe-orders.csv"
words() { # words FILE...: fail when "respondent" appears in the human-facing text
    CASES=$((CASES + 1))
    if grep -qi respondent "$@"; then
        fail "--unit orders: 'respondent' still in $(grep -il respondent "$@" | tr '\n' ' '): $(grep -hi respondent "$@" | head -3)"
    fi
}
"$PAIRMAP" map "$cafe" -o "$TMP/m" --unit orders >"$TMP/map.out" 2>"$TMP/map.err" || fail "map --unit"
CASES=$((CASES + 1))
grep -q '^orders  *4000$' "$TMP/map.out" || fail "summary line 'orders 4000': $(head -2 "$TMP/map.out")"
# notes other than the duplicate-rows warning (which names the input's rows, not the unit)
grep -v 'respondent-item rows' "$TMP/map.err" >"$TMP/map.notes"
words "$TMP/map.out" "$TMP/map.notes"
CASES=$((CASES + 1))
grep -q 'orders' "$TMP/map.notes" || fail "notes use the unit: $(cat "$TMP/map.notes")"
"$PAIRMAP" partners "$cafe" --item Espresso --unit orders >"$TMP/p.out" 2>/dev/null
words "$TMP/p.out"
"$PAIRMAP" pairs "$cafe" --unit orders 2>"$TMP/pairs.err" >"$TMP/pairs.csv"
grep -v 'respondent-item rows' "$TMP/pairs.err" >"$TMP/pairs.notes"
words "$TMP/pairs.notes"
# CSV columns keep their names
CASES=$((CASES + 1))
head -1 "$TMP/m/nodes.csv" | grep -q '^item,category,respondents,' || fail "nodes.csv header changed"
expect_fail 1 "" "--unit takes a plural noun" -- pairs "$cafe" --unit '<b>'
finish
