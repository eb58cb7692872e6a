#!/usr/bin/env bash
# Bad input files (issue 6): each case gets one line "pairmap: FILE:LINE: ..." (or "FILE: ..."
# where no line applies), the exit status of DESIGN.md (2 bad data, 3 I/O, 1 for options that
# do not fit the file) and nothing on stdout. Every reading command is checked.
# Fixtures: tests/data/, named for their defect; binary ones are made here with printf.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

cmds=(pairs items map partners)

# run_all STATUS PREFIX NEEDLE FILE [ARGS...]: the case for every command.
run_all() {
    local status="$1" prefix="$2" needle="$3" file="$4"
    shift 4
    local c
    for c in "${cmds[@]}"; do
        case "$c" in
        map) expect_fail "$status" "$prefix" "$needle" -- map "$file" -o "$TMP/map-out" "$@"
            if [ -e "$TMP/map-out" ] && [ -n "$(ls -A "$TMP/map-out")" ]; then
                fail "map $file: left files in the output directory on failure: $(ls -A "$TMP/map-out")"
            fi
            rm -rf "$TMP/map-out" ;;
        partners) expect_fail "$status" "$prefix" "$needle" -- partners "$file" --item Espresso "$@" ;;
        *) expect_fail "$status" "$prefix" "$needle" -- "$c" "$file" "$@" ;;
        esac
    done
}

# ---- files that cannot be read -------------------------------------------------------------
run_all 3 "$TMP/no-such-file.csv: " "cannot open" "$TMP/no-such-file.csv"
mkdir "$TMP/a-directory"
run_all 3 "$TMP/a-directory: " "is a directory" "$TMP/a-directory"

# ---- empty and header-only files -------------------------------------------------------------
run_all 2 "$DATA/empty_file.csv: " "empty" "$DATA/empty_file.csv"
run_all 2 "$DATA/header_only.csv: " "no data rows" "$DATA/header_only.csv"
# standard input is named "stdin"
expect_fail_stdin 2 "stdin: " "empty" "$DATA/empty_file.csv" -- pairs -

# ---- columns --------------------------------------------------------------------------------
# a named column that does not exist: the message lists the columns there are
run_all 1 "$DEMO/cafe-orders.csv:1: " "'product'" "$DEMO/cafe-orders.csv" --item-col product
line="$(error_line)"
[[ "$line" == *"'order', 'item', 'category'"* ]] || fail "unknown column: columns not listed: $line"
run_all 1 "$DEMO/cafe-orders.csv:1: " "'tier'" "$DEMO/cafe-orders.csv" --category-col tier
run_all 1 "$DEMO/cafe-orders.csv:1: " "'w'" "$DEMO/cafe-orders.csv" --weight-col w
# a column number past the row's width
run_all 1 "$DEMO/cafe-orders.csv:1: " "--item-col 7 is past the 5 columns" "$DEMO/cafe-orders.csv" --item-col 7
run_all 1 "$DEMO/cafe-orders.csv:1: " "--id-col 6 is past the 5 columns" "$DEMO/cafe-orders.csv" --id-col 6
# lines format: an id column past a short line
printf 'Espresso,Tea,Scone\nr2\n' >"$TMP/lines_short.csv"
expect_fail 2 "$TMP/lines_short.csv:2: " "fewer than --id-col 3" -- pairs "$TMP/lines_short.csv" --format lines --id-col 3 --no-header

# ---- rows that do not fit the header -----------------------------------------------------------
run_all 2 "$DATA/short_row_line3.csv:3: " "found 2 fields, expected 3" "$DATA/short_row_line3.csv"
run_all 2 "$DATA/long_row_semicolon_line3.csv:3: " "found more than 2 fields, expected 2" "$DATA/long_row_semicolon_line3.csv"
# a quoted field over two lines (CRLF) before the bad row: the physical line is counted
run_all 2 "$DATA/short_row_line5_after_multiline_quote.csv:5: " "found 1 fields" \
    "$DATA/short_row_line5_after_multiline_quote.csv"
# an empty respondent id
run_all 2 "$DATA/empty_id_line2.csv:2: " "empty respondent id" "$DATA/empty_id_line2.csv"

# ---- quoting -----------------------------------------------------------------------------------
run_all 2 "$DATA/unterminated_quote_line3.csv:3: " "unterminated quoted field" "$DATA/unterminated_quote_line3.csv"
run_all 2 "$DATA/stray_quote_line3.csv:3: " "malformed quoting" "$DATA/stray_quote_line3.csv"
run_all 2 "$DATA/text_after_quote_line2.csv:2: " "malformed quoting" "$DATA/text_after_quote_line2.csv"

# ---- bytes that are not UTF-8 text -----------------------------------------------------------------
printf 'order,item\nA1,Espresso\nA2,Te\000a\nA3,Scone\n' >"$TMP/nul_byte_line3.csv"
run_all 2 "$TMP/nul_byte_line3.csv:3: " "found a NUL byte" "$TMP/nul_byte_line3.csv"
printf 'order,item\nA1,Espresso\nA1,Caf\351 au lait\nA2,Tea\n' >"$TMP/latin1_item_line3.csv"
run_all 2 "$TMP/latin1_item_line3.csv:3: " "invalid UTF-8 in item name 'Caf\\xE9 au lait'" "$TMP/latin1_item_line3.csv"
# a UTF-16 surrogate encoded as UTF-8 and an overlong '/' are not valid UTF-8 either
printf 'order,item\nA1,x\355\240\200y\n' >"$TMP/surrogate_line2.csv"
run_all 2 "$TMP/surrogate_line2.csv:2: " "invalid UTF-8" "$TMP/surrogate_line2.csv"
printf 'order,item\nA1,Espresso\nA2,\300\257\n' >"$TMP/overlong_line3.csv"
run_all 2 "$TMP/overlong_line3.csv:3: " "invalid UTF-8" "$TMP/overlong_line3.csv"
printf 'order,item,category\nA1,Espresso,dr\377nks\n' >"$TMP/bad_category_line2.csv"
expect_fail 2 "$TMP/bad_category_line2.csv:2: " "invalid UTF-8 in category" -- \
    pairs "$TMP/bad_category_line2.csv" --category-col category
# a NUL byte far into the file (past the reader's first block)
{
    printf 'order,item\n'
    awk 'BEGIN { for (i = 1; i <= 120000; i++) printf "R%06d,Item %d\n", i, i % 17 }'
    printf 'R999999,Bad\000item\n'
} >"$TMP/nul_byte_line120002.csv"
expect_fail 2 "$TMP/nul_byte_line120002.csv:120002: " "found a NUL byte" -- items "$TMP/nul_byte_line120002.csv"

# a NUL byte in a line that crosses the reader's 1 MiB block boundary, just before and just
# after it (header 11 bytes + 65535 lines of 16 bytes end at byte 1048571)
for at in before after; do
    {
        printf 'order,item\n'
        awk 'BEGIN { for (i = 0; i < 65535; i++) printf "R%07d,Item %d\n", i, i % 7 }'
        if [ "$at" = before ]; then printf 'R9,B\000item%s\n' "$(printf '%040d' 0)"; else
            printf 'R9,Bag of nu\000ts\n'; fi
        printf 'R8,Item 1\n'
    } >"$TMP/nul_at_block_$at.csv"
    expect_fail 2 "$TMP/nul_at_block_$at.csv:65537: " "found a NUL byte" -- items "$TMP/nul_at_block_$at.csv"
done

# ---- a field over the size limit (PM_INPUT_MAX_FIELD = 65536 bytes) -----------------------------
{
    printf 'order,item\nA1,Espresso\nA2,'
    head -c 65537 /dev/zero | tr '\0' 'x'
    printf '\n'
} >"$TMP/field_too_long_line3.csv"
run_all 2 "$TMP/field_too_long_line3.csv:3: " "over the limit of 65536 bytes" "$TMP/field_too_long_line3.csv"
# quoted, and spread over lines
{
    printf 'order,item\nA1,Espresso\nA2,"'
    awk 'BEGIN { l = sprintf("%99s", ""); gsub(/ /, "y", l); for (i = 0; i < 700; i++) print l }'
    printf '"\n'
} >"$TMP/quoted_field_too_long_line3.csv"
run_all 2 "$TMP/quoted_field_too_long_line3.csv:3: " "quoted field 2 runs past the limit of 65536 bytes" \
    "$TMP/quoted_field_too_long_line3.csv"
# a quote opened early in a big file and never closed: stopped at the limit, not buffered to
# the end of the file (50 MB of rows after it; the run stays far below that in memory)
{
    printf 'order,item\nA1,Espresso\nA2,"Tea\n'
    awk 'BEGIN { for (i = 0; i < 3000000; i++) printf "R%07d,Item %d\n", i, i % 50 }'
} >"$TMP/runaway_quote_line3.csv"
if [ -x /usr/bin/time ]; then
    CASES=$((CASES + 1))
    /usr/bin/time -f '%M' -o "$TMP/rss" "$PAIRMAP" items "$TMP/runaway_quote_line3.csv" >/dev/null 2>"$TMP/err"
    rss=$(tail -n 1 "$TMP/rss")
    # below the 50 MB of rows; a sanitizer build (scripts/test-hardening) adds its own shadow
    # memory and per-thread fake stacks (reader and hash threads), so it gets twice the room
    bound=48000
    if ldd "$PAIRMAP" 2>/dev/null | grep -q 'libasan'; then
        bound=96000
    fi
    [ "$rss" -lt "$bound" ] || fail "a runaway quoted field used $rss kB (bound $bound kB)"
fi
expect_fail 2 "$TMP/runaway_quote_line3.csv:3: " "a closing quote is probably missing" -- items "$TMP/runaway_quote_line3.csv"
# an unquoted field longer than the reader's 1 MiB block, and a line of 300,000 short fields
{
    printf 'order,item\nA1,a\nA2,b\nA3,c\nA4,'
    head -c 2000000 /dev/zero | tr '\0' x
    printf '\nA5,d\n'
} >"$TMP/huge_field_line5.csv"
expect_fail 2 "$TMP/huge_field_line5.csv:5: " "field 2 is over the limit of 65536 bytes" -- items "$TMP/huge_field_line5.csv"
{
    printf 'order,item\nA1,a\nA2,b\nA3,c\n'
    awk 'BEGIN { for (i = 0; i < 300000; i++) printf "f%d,", i; print "x" }'
} >"$TMP/many_fields_line5.csv"
expect_fail 2 "$TMP/many_fields_line5.csv:5: " "found more than 2 fields, expected 2" -- items "$TMP/many_fields_line5.csv"
# exactly at the limit is accepted
{
    printf 'order,item\nA1,Espresso\nA1,'
    head -c 65536 /dev/zero | tr '\0' 'z'
    printf '\nA2,Espresso\n'
} >"$TMP/field_at_limit.csv"
expect_ok items "$TMP/field_at_limit.csv" && [ "$(wc -l <"$TMP/out")" -eq 3 ] ||
    fail "a field of exactly 65536 bytes was not read as one item"

# ---- the merge file (--merge-file): the same care, naming the merge file -----------------------
expect_fail 3 "$TMP/no-merge.csv: " "cannot open the merge file" -- pairs "$DEMO/cafe-orders.csv" --merge-file "$TMP/no-merge.csv"
expect_fail 3 "$TMP/a-directory: " "Is a directory" -- pairs "$DEMO/cafe-orders.csv" --merge-file "$TMP/a-directory"
printf 'item,group\nEspresso,Coffee\nTea,Hot,x\n' >"$TMP/merge_3_fields_line3.csv"
run_all 2 "$TMP/merge_3_fields_line3.csv:3: " "expected 2 fields 'item,group', got 3" "$DEMO/cafe-orders.csv" \
    --merge-file "$TMP/merge_3_fields_line3.csv"
printf 'item,group\nEspresso,Coffee\nEspresso,Hot drinks\n' >"$TMP/merge_twice_line3.csv"
expect_fail 2 "$TMP/merge_twice_line3.csv:3: " "item 'Espresso' is listed twice (first on line 2)" -- \
    items "$DEMO/cafe-orders.csv" --merge-file "$TMP/merge_twice_line3.csv"
printf 'item,group\nEspresso,Caf\351\n' >"$TMP/merge_latin1_line2.csv"
expect_fail 2 "$TMP/merge_latin1_line2.csv:2: " "invalid UTF-8 in the name 'Caf\\xE9'" -- \
    items "$DEMO/cafe-orders.csv" --merge-file "$TMP/merge_latin1_line2.csv"
printf 'item,group\nEspresso,\n' >"$TMP/merge_empty_group_line2.csv"
expect_fail 2 "$TMP/merge_empty_group_line2.csv:2: " "empty item or group name" -- \
    items "$DEMO/cafe-orders.csv" --merge-file "$TMP/merge_empty_group_line2.csv"

# ---- line ends ------------------------------------------------------------------------------------
# old Mac files end lines with CR alone: read like LF files
printf 'order,item\rA1,Espresso\rA1,Tea\rA2,Tea\r' >"$TMP/cr_only.csv"
if expect_ok items "$TMP/cr_only.csv"; then
    [ "$(cat "$TMP/out" | wc -l)" -eq 3 ] || fail "CR-only line ends: expected 2 items, got: $(cat "$TMP/out")"
fi
# a CR inside an unquoted field ends the record there (as libcsv does), quotes or not
printf 'order,item\nA1,Espresso\rTea\nA2,Tea\n' >"$TMP/inner_cr_line2.csv"
expect_fail 2 "$TMP/inner_cr_line2.csv:2: " "found 1 fields, expected 2" -- items "$TMP/inner_cr_line2.csv"

finish
