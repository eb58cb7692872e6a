#!/usr/bin/env bash
# Notes about how a file was read (issue 16 point 6, issue 13 point 12, issue 16 point 9):
# - a header line taken from a file that may have none is named, with its line and text:
#   always in the lines format, in the long format when a header cell is seen again as data;
# - lines format without --id-col whose first field differs on every line and looks like an
#   id (e-mail address, number, code with digits) warns that the ids would become items,
#   before any output (the note is on stderr, the output on stdout comes after reading);
# - a weight with a decimal comma says that a decimal point is expected.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

# has_note PATTERN ARGS...: pairmap ARGS succeeds and stderr holds a line matching PATTERN
has_note() {
    local pat="$1"
    shift
    expect_ok "$@" || return
    grep -q -- "$pat" "$TMP/err" || fail "pairmap $*: no note matching '$pat' in: $(cat "$TMP/err")"
}
no_note() {
    local pat="$1"
    shift
    expect_ok "$@" || return
    if grep -q -- "$pat" "$TMP/err"; then fail "pairmap $*: unexpected note: $(grep -- "$pat" "$TMP/err")"; fi
}

# headerless baskets: the first basket is read as a header, and the note says so
printf 'Espresso,Croissant\nEspresso,Bun\nTea,Bun\n' >"$TMP/baskets.csv"
has_note "^pairmap: note: line 1 was read as a header ('Espresso,Croissant'); --no-header keeps it as data$" \
    items --format lines "$TMP/baskets.csv"
no_note "read as a header" items --format lines --no-header "$TMP/baskets.csv"
# long format: a header cell seen again as data (an item, or a respondent)
printf 'A1,Tea\nA1,Bun\nA2,Tea\n' >"$TMP/long_nohdr.csv"
has_note "line 1 was read as a header ('A1,Tea')" items "$TMP/long_nohdr.csv"
printf 'order,item\nA1,Tea\nA2,Bun\n' >"$TMP/long_hdr.csv"
no_note "read as a header" items "$TMP/long_hdr.csv"
no_note "read as a header" items "$DEMO/cafe-orders.csv"

# ids as the first field of basket lines, without --id-col
printf 'u1@example.org,Tea,Bun\nu2@example.org,Tea\nu3@example.org,Bun,Jam\n' >"$TMP/id_lines.csv"
has_note "^pairmap: warning: the first field differs on each of the first 3 lines and looks like an id ('u1@example.org'); without --id-col 1 the ids become items$" \
    items --format lines --no-header "$TMP/id_lines.csv"
no_note "looks like an id" items --format lines --no-header --id-col 1 "$TMP/id_lines.csv"
printf '1001,Tea,Bun\n1002,Tea\n1003,Bun,Jam\n1004,Jam\n' >"$TMP/num_lines.csv"
has_note "looks like an id ('1001')" pairs --format lines --no-header "$TMP/num_lines.csv"
# the warning comes before the output: stderr's warning is written before stdout's first row
"$PAIRMAP" items --format lines --no-header "$TMP/num_lines.csv" >"$TMP/both" 2>&1
head -1 "$TMP/both" | grep -q 'looks like an id' || fail "the id warning is not the first line: $(head -2 "$TMP/both")"
# plain baskets (a first item repeated) get no warning
no_note "looks like an id" items --format lines --no-header "$TMP/baskets.csv"

# a decimal comma in a weight column
printf 'order;item;w\nA1;Tea;1\nA2;Bun;1,5\n' >"$TMP/comma_weight_line3.csv"
expect_fail 2 "$TMP/comma_weight_line3.csv:3: " "weight '1,5' has a decimal comma; a decimal point is expected (1.5)" \
    -- items "$TMP/comma_weight_line3.csv" --weight-col w
printf 'id;drinks_1;w\nv1;Tea;2,25\n' >"$TMP/wide_comma_weight_line2.csv"
expect_fail 2 "$TMP/wide_comma_weight_line2.csv:2: " "a decimal point is expected (2.25)" \
    -- items --format wide --columns drinks_ --weight-col w "$TMP/wide_comma_weight_line2.csv"

finish
