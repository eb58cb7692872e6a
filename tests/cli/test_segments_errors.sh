#!/usr/bin/env bash
# Bad segment options and data (issue 14): each a one-line error naming file and line where
# there is one, with the documented exit status (1 usage, 2 bad data).
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
cd "$TMP" || exit 1
printf 'id,item,store\na,Tea,north\na,Cake,north\nb,Tea,south\nb,Pie,south\nc,Cake,\n' >seg.csv
expect_ok segments seg.csv --segment-col store
printf 'id,item,store\na,Tea,north\nb,Tea,south\na,Cake,south\n' >differs_line4.csv
expect_fail 2 "differs_line4.csv:4: " "segment 'south' in column 'store' differs from the one this respondent has on line 2" \
    -- segments differs_line4.csv --segment-col store
expect_fail 1 "seg.csv:1: " "--segment-col 'region' is not a column of the header" \
    -- segments seg.csv --segment-col region
printf 'respondent,region\na,hill\nb,lake\na,lake\n' >dup_ids_line4.csv
expect_fail 2 "dup_ids_line4.csv:4: " "the respondent on this line is also on line 2" \
    -- segments seg.csv --segment-file dup_ids_line4.csv --segment-col region
expect_fail 1 "" "--segment-levels: level 'east' never occurs in column 'store'" \
    -- segments seg.csv --segment-col store --segment-levels store=north,east,south
expect_fail 1 "" "--segment-levels: level 'south' of column 'store' is not listed" \
    -- segments seg.csv --segment-col store --segment-levels store=north
expect_fail 1 "" "give --segment-col COL" -- segments seg.csv
# a segment file: ids not in the input are counted in a note, respondents missing from it
# have no segment
printf 'respondent,region\na,hill\nzz,lake\n' >file.csv
CASES=$((CASES + 1))
"$PAIRMAP" segments seg.csv --segment-file file.csv --segment-col region >out.csv 2>err.txt ||
    fail "segment file: exit $?"
grep -q "1 ids of the segment file are not in the input" err.txt || fail "note on unknown ids: $(cat err.txt)"
grep -q "1 respondents with a segment, 2 without" err.txt || fail "note on respondents without: $(cat err.txt)"
CASES=$((CASES + 1))
[ "$(grep -c '^region,hill,' out.csv)" = 3 ] || fail "rows of the one segment: $(cat out.csv)"
finish
