#!/usr/bin/env bash
# Readable files whose content cannot be used (issue 6): too few eligible items, bad weights,
# an item with two categories, --respondents below the respondents seen. Exit 2, one line
# "pairmap: FILE[:LINE]: ...", nothing on stdout, no output files.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

# on_cmds STATUS PREFIX NEEDLE CMDS FILE [ARGS...]: the case for each command in CMDS
on_cmds() {
    local status="$1" prefix="$2" needle="$3" cmds="$4" file="$5"
    shift 5
    local c
    for c in $cmds; do
        case "$c" in
        map)
            expect_fail "$status" "$prefix" "$needle" -- map "$file" -o "$TMP/mapdir" "$@"
            [ -e "$TMP/mapdir" ] && fail "map $file: created the output directory on a failed run"
            rm -rf "$TMP/mapdir" ;;
        partners) expect_fail "$status" "$prefix" "$needle" -- partners "$file" --item Tea "$@" ;;
        *) expect_fail "$status" "$prefix" "$needle" -- "$c" "$file" "$@" ;;
        esac
    done
}
pairing="pairs map partners"
all="pairs items map partners"

# ---- nothing to pair ---------------------------------------------------------------------------
# Espresso is chosen by all three respondents (no defined phi), Tea is the one eligible item
on_cmds 2 "$DATA/one_eligible_item.csv: " "only 1 eligible item" "$pairing" "$DATA/one_eligible_item.csv"
line="$(error_line)"
[[ "$line" == *"at least 2"* ]] || fail "one eligible item: no hint in: $line"
# the reason is noted once
grep -q "^pairmap: note: 1 item.* chosen by all respondents" "$TMP/err" ||
    fail "one eligible item: no note about the item chosen by everyone: $(cat "$TMP/err")"
# every respondent chose every item
on_cmds 2 "$DATA/everyone_chose_everything.csv: " "only 0 eligible items" "pairs map" \
    "$DATA/everyone_chose_everything.csv"
on_cmds 2 "$DATA/everyone_chose_everything.csv: " "item 'Tea' was chosen by every respondent" \
    partners "$DATA/everyone_chose_everything.csv"
# `items` still describes such data: shares of 1 are defined
expect_ok items "$DATA/everyone_chose_everything.csv" &&
    [ "$(awk -F, '$3 == 3 && $4 == 1' "$TMP/out" | wc -l)" -eq 2 ] || fail "items on everyone-chose-everything: $(cat "$TMP/out")"
# --min-share removing all but one item
on_cmds 2 "$DEMO/cafe-orders.csv: " "eligible item" "pairs map" "$DEMO/cafe-orders.csv" --min-share 0.3

# ---- weights -------------------------------------------------------------------------------------
wcase() { # FIXTURE LINE NEEDLE
    on_cmds 2 "$DATA/$1:$2: " "$3" "$all" "$DATA/$1" --weight-col weight
}
wcase weight_not_number_line3.csv 3 "got 'n/a'"
wcase weight_zero_line3.csv 3 "got '0'"
wcase weight_negative_line4.csv 4 "got '-2'"
wcase weight_nan_line2.csv 2 "got 'NaN'"
wcase weight_infinite_line3.csv 3 "got 'inf'"
wcase weight_overflow_line3.csv 3 "got '1e999'"
wcase weight_empty_line3.csv 3 "got ''"
wcase weight_differs_line4.csv 4 "differs from the weight 1.5"
line="$(error_line)"
[[ "$line" == *"on line 2"* ]] || fail "differing weights: first line not named: $line"
# a weight column by number, and weights that underflow to 0
printf 'order,item,w\nA1,Espresso,1e-400\n' >"$TMP/weight_underflow_line2.csv"
on_cmds 2 "$TMP/weight_underflow_line2.csv:2: " "got '1e-400'" "items" "$TMP/weight_underflow_line2.csv" --weight-col 3
# lines format: the weight is a field of the line
printf 'id,w,a,b\nr1,2,Espresso,Tea\nr2,x,Tea\n' >"$TMP/lines_weight_line3.csv"
on_cmds 2 "$TMP/lines_weight_line3.csv:3: " "got 'x'" "pairs items" "$TMP/lines_weight_line3.csv" \
    --format lines --id-col id --weight-col w

# ---- categories ------------------------------------------------------------------------------------
on_cmds 2 "$DATA/two_categories_line4.csv:4: " "item 'Espresso' has category 'coffee' here but 'drinks' on line 2" \
    "$all" "$DATA/two_categories_line4.csv" --category-col category

# ---- the base --------------------------------------------------------------------------------------
on_cmds 2 "$DEMO/cafe-orders.csv: " "--respondents 10 is below the 4000 respondents" "$all" \
    "$DEMO/cafe-orders.csv" --respondents 10

finish
