#!/usr/bin/env bash
# `pairmap partners` with an item it cannot rank (issue 6): an unknown name (exit 2, the
# closest names listed), one unknown name in a set, an item removed by --drop-item or
# --merge-file, an item below --min-share or chosen by every respondent. One line
# "pairmap: FILE: ...", nothing on stdout.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
D="$DEMO/cafe-orders.csv"

expect_fail 2 "$D: " "no item 'Espressso'" -- partners "$D" --item Espressso
line="$(error_line)"
[[ "$line" == *"closest: 'Espresso'"* ]] || fail "unknown item: the nearest name is not offered first: $line"
# a name in another letter case is found when that is unambiguous (tests/cli/test_item_find.sh);
# one that is still unknown is named
expect_fail 2 "$D: " "no item 'expresso'" -- partners "$D" --item expresso
expect_fail 2 "$D: " "no item 'expresso'" -- partners "$D" --item expresso --csv
expect_fail 2 "$D: " "no item ''" -- partners "$D" --item ''
# one unknown name in a set
expect_fail 2 "$D: " "no item 'Nope'" -- partners "$D" --item Espresso --item Nope
# removed before counting
expect_fail 2 "$D: " "no item 'Espresso'" -- partners "$D" --item Espresso --drop-item Espresso
expect_fail 2 "$D: " "no item 'Espresso'" -- partners "$D" --item Espresso --merge-file "$DEMO/cafe-groups.csv"
# present but not eligible
expect_fail 2 "$D: " "item 'Espresso' is below --min-share" -- partners "$D" --item Espresso --min-share 0.5
expect_fail 2 "$DATA/one_eligible_item.csv: " "item 'Espresso' was chosen by every respondent" -- \
    partners "$DATA/one_eligible_item.csv" --item Espresso
# standard input is named stdin
expect_fail_stdin 2 "stdin: " "no item 'Nope'" "$D" -- partners - --item Nope
# and the item that exists works, in both output forms
expect_ok partners "$D" --item Espresso --csv && head -1 "$TMP/out" | grep -q '^partner,' ||
    fail "partners --csv: $(head -2 "$TMP/out")"
expect_ok partners "$D" --item Espresso && grep -q "Partners of 'Espresso'" "$TMP/out" ||
    fail "partners: $(head -2 "$TMP/out")"

finish
