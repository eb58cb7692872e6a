#!/usr/bin/env bash
# What is suspicious but usable gives a warning or note, not an error (issue 6): duplicate
# respondent-item rows (merged), rows with an empty item cell (the respondent counts in N),
# respondents with one item only. Each is counted and reported once per run, never once per
# row; --quiet silences them; the run succeeds.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

# check_notes FILE DUPS EMPTY SINGLE: stderr of the last run holds each line exactly once
check_notes() {
    local what="$1" dups="$2" empty="$3" single="$4"
    local n
    n=$(grep -c "^pairmap: warning: $dups duplicate respondent-item rows merged" "$TMP/err")
    [ "$n" -eq 1 ] || fail "$what: duplicate rows: expected one warning counting $dups: $(cat "$TMP/err")"
    n=$(grep -c "^pairmap: note: $empty rows named no item" "$TMP/err")
    [ "$n" -eq 1 ] || fail "$what: empty items: expected one note counting $empty: $(cat "$TMP/err")"
    n=$(grep -c "^pairmap: note: $single respondents chose one item only" "$TMP/err")
    [ "$n" -eq 1 ] || fail "$what: one-item respondents: expected one note counting $single: $(cat "$TMP/err")"
    # nothing per row: every line of stderr is a distinct message
    n=$(sort "$TMP/err" | uniq -d | wc -l)
    [ "$n" -eq 0 ] || fail "$what: repeated stderr lines: $(sort "$TMP/err" | uniq -d | head -3)"
    n=$(grep -vc -e '^pairmap: warning: ' -e '^pairmap: note: ' -e '^pairmap: [0-9]* respondents' "$TMP/err")
    [ "$n" -eq 0 ] || fail "$what: unexpected stderr lines: $(cat "$TMP/err")"
}

# every_command FILE DUPS EMPTY SINGLE [ARGS...]
every_command() {
    local f="$1" dups="$2" empty="$3" single="$4"
    shift 4
    if expect_ok pairs "$f" --min-count 0 --max-q 1 "$@"; then
        check_notes "pairs $f" "$dups" "$empty" "$single"
        grep -q '^item_a,item_b,' "$TMP/out" || fail "pairs $f: no CSV on stdout"
    fi
    if expect_ok items "$f" "$@"; then
        check_notes "items $f" "$dups" "$empty" "$single"
    fi
    if expect_ok partners "$f" --item Tea --min-count 0 --max-q 1 "$@"; then
        check_notes "partners $f" "$dups" "$empty" "$single"
    fi
    rm -rf "$TMP/map"
    if expect_ok map "$f" -o "$TMP/map" --min-count 0 --max-q 1 "$@"; then
        check_notes "map $f" "$dups" "$empty" "$single"
        [ -s "$TMP/map/nodes.csv" ] || fail "map $f: no nodes.csv"
    fi
    # --quiet: not a word on stderr
    if expect_ok pairs "$f" --min-count 0 --max-q 1 --quiet "$@"; then
        [ -s "$TMP/err" ] && fail "pairs $f --quiet: stderr: $(cat "$TMP/err")"
    fi
}

# the fixture: A1 and A5 repeat Espresso (2 duplicates), A2 and A4 have an empty item row
# (A2 chose nothing, A4 chose Scone), A3 and A4 chose one item each
every_command "$DATA/warn_duplicates_empty_single.csv" 2 2 2

# the same defects in bulk: 3000 respondents, each row repeated, every third respondent with
# an empty cell, every fifth with one item. Still one line each.
awk 'BEGIN {
    print "order,item"
    split("Espresso Tea Scone Croissant Muffin", it, " ")
    single = 0
    for (r = 1; r <= 3000; r++) {
        id = sprintf("B%05d", r)
        if (r % 5 == 0) { print id ",Tea"; print id ",Tea"; single++ }
        else { for (j = 0; j < 3; j++) { x = it[1 + (r + j * j) % 5]; print id "," x; print id "," x } }
        if (r % 3 == 0) print id ","
    }
}' >"$TMP/bulk.csv"
# duplicates: every row once more = 3000 - 600 + 2400 * 3 ... counted by awk for the check
dups=$(awk -F, 'NR > 1 && $2 != "" { k = $1 SUBSEP $2; if (seen[k]++) d++ } END { print d }' "$TMP/bulk.csv")
empty=$(awk -F, 'NR > 1 && $2 == "" { e++ } END { print e }' "$TMP/bulk.csv")
single=$(awk -F, 'NR > 1 && $2 != "" { k = $1 SUBSEP $2; if (!seen[k]++) n[$1]++ } END { for (r in n) if (n[r] == 1) s++; print s }' "$TMP/bulk.csv")
every_command "$TMP/bulk.csv" "$dups" "$empty" "$single"

# the lines format: an empty line field is skipped, a line with no item at all is noted
printf 'Espresso,Tea\nTea,,Scone\n,,\nScone,Espresso,Espresso\nTea\n' >"$TMP/lines.csv"
if expect_ok items "$TMP/lines.csv" --format lines --no-header; then
    grep -q '^pairmap: note: 1 rows named no item' "$TMP/err" || fail "lines: empty line not noted: $(cat "$TMP/err")"
    grep -q '^pairmap: note: 1 respondents chose one item only' "$TMP/err" || fail "lines: one-item line: $(cat "$TMP/err")"
fi

finish
