#!/usr/bin/env bash
# A line of delimiters (issue 13 point 3): a row with more fields than the format can use stops
# the read at once with the usual FILE:LINE message and exit 2, before the fields are held
# (each held field costs about 20 bytes, so 100 million of them would need 2 GB). Every case
# runs under `ulimit -v` (an ASan build: its hard_rss_limit_mb, see bound_memory) (1 GB of address space), so a reader that holds the fields fails
# fast with "out of memory" (exit 4) instead of taking the machine. The bounds: long and wide
# rows have at most the header's (or first line's) count; any line at most PM_INPUT_MAX_FIELDS
# (100,000, include/pairmap/input.h, README "Limits").
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

bound_memory 1000

commas() { head -c "$1" /dev/zero | tr '\0' ,; }

# long format: header, one good row, then 100 million commas on line 3
{ printf 'order,item\nA1,tea\n'; commas 100000000; printf '\n'; } >"$TMP/long_commas_line3.csv"
expect_fail 2 "$TMP/long_commas_line3.csv:3: " "found more than 2 fields, expected 2 as on the header" \
    -- items "$TMP/long_commas_line3.csv"
expect_fail 2 "$TMP/long_commas_line3.csv:3: " "found more than 2 fields" \
    -- pairs "$TMP/long_commas_line3.csv" --threads 1
# without a header the first line sets the count
{ printf 'A1,tea\nA2,jam\n'; commas 100000000; } >"$TMP/nohdr_commas_line3.csv"
expect_fail 2 "$TMP/nohdr_commas_line3.csv:3: " "expected 2 as on the first line" \
    -- items --no-header "$TMP/nohdr_commas_line3.csv"
# the header itself: the general bound
{ commas 100000000; printf '\nA1,tea\n'; } >"$TMP/header_commas_line1.csv"
expect_fail 2 "$TMP/header_commas_line1.csv:1: " "more than 100000 fields on one line" \
    -- items "$TMP/header_commas_line1.csv"
# lines format: the general bound
{ printf 'tea,jam\n'; commas 100000000; printf '\n'; } >"$TMP/lines_commas_line2.csv"
expect_fail 2 "$TMP/lines_commas_line2.csv:2: " "more than 100000 fields on one line, over the limit of 100000" \
    -- items --format lines --no-header "$TMP/lines_commas_line2.csv"
# wide format: the header's count
{ printf 'id,drinks_1,drinks_2\nv1,Tea,\n'; commas 100000000; printf '\n'; } >"$TMP/wide_commas_line3.csv"
expect_fail 2 "$TMP/wide_commas_line3.csv:3: " "found more than 3 fields, expected 3 as on the header" \
    -- items --format wide --columns drinks_ "$TMP/wide_commas_line3.csv"
rm -f "$TMP"/*_commas_*.csv

# exactly at the bound is accepted: an id and 99,999 (empty) fields; one more is refused
{ printf 'r1,tea,jam\nr2,'; commas 99998; printf '\n'; } >"$TMP/at_bound.csv"
expect_ok items --format lines --no-header --id-col 1 "$TMP/at_bound.csv"
{ printf 'r1,tea,jam\nr2,'; commas 99999; printf '\n'; } >"$TMP/over_bound_line2.csv"
expect_fail 2 "$TMP/over_bound_line2.csv:2: " "more than 100000 fields" \
    -- items --format lines --no-header --id-col 1 "$TMP/over_bound_line2.csv"

finish
