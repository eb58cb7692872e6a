# CLI test: every mixed, empty and malformed case of --format wide, and the bad merge files of
# --merge-file (issue 7): exit status, nothing on stdout, one error line naming file and line.
# Run as `bash test_wide_errors.sh /path/to/pairmap`.
set -u
PAIRMAP="${1:?usage: bash $0 /path/to/pairmap}"
case "$PAIRMAP" in /*) ;; *) PAIRMAP="$(pwd)/$PAIRMAP" ;; esac
TMP="$(mktemp -d "${TMPDIR:-/tmp}/pm-wide-err.XXXXXX")"
trap 'rm -rf "$TMP"' EXIT
cd "$TMP" || exit 1
FAILS=0
CASES=0

fail() {
    printf 'FAIL: %s\n' "$*" >&2
    FAILS=$((FAILS + 1))
}

# expect STATUS PREFIX NEEDLE -- ARGS...: `pairmap ARGS` exits STATUS, writes nothing to
# stdout, and its first stderr line that is not a note, warning or "see --help" hint reads
# "pairmap: PREFIX<message>" with NEEDLE in the message, which starts lowercase (or with an
# option or a quote) and has no closing full stop (STYLE.md section 5).
expect() {
    local status="$1" prefix="$2" needle="$3"
    shift 3
    [ "$1" = "--" ] && shift
    CASES=$((CASES + 1))
    "$PAIRMAP" "$@" >out 2>err <"${STDIN:-/dev/null}"
    local rc=$?
    local what="pairmap $*"
    if [ "$rc" -ne "$status" ]; then
        fail "$what: exit $rc, expected $status; stderr: $(head -c 400 err)"
        return
    fi
    if [ -s out ]; then
        fail "$what: wrote to stdout on failure: $(head -c 200 out)"
    fi
    local line
    line="$(grep -v -e '^pairmap: note: ' -e '^pairmap: warning: ' -e "^pairmap: see 'pairmap" err |
        head -n 1)"
    local want="pairmap: $prefix"
    if [ "${line:0:${#want}}" != "$want" ]; then
        fail "$what: error line does not start with '$want': $line"
        return
    fi
    local msg="${line:${#want}}"
    case "$msg" in
    [A-Z]* | *. | "") fail "$what: message breaks STYLE.md section 5: $line" ;;
    esac
    if [[ "$msg" =~ ^[0-9]+: ]]; then
        fail "$what: a location beyond '$prefix' in: $line"
    fi
    if [[ "$msg" != *"$needle"* ]]; then
        fail "$what: message lacks '$needle': $line"
    fi
}

W=(--format wide --columns d_)

# ---- data errors (exit 2) -------------------------------------------------------------------
printf 'id,d_1,d_2\na,Cola,\nb,1,\n' >mixed_label_then_flag_line3.csv
expect 2 "mixed_label_then_flag_line3.csv:3: " \
    "column 'd_1' mixes option labels and 1/0, yes/no or true/false flags: '1' here but 'Cola' on line 2" \
    -- items mixed_label_then_flag_line3.csv "${W[@]}"
printf 'id,d_1,d_2\na,yes,\nb,,no\nc,Tea,\n' >mixed_flag_then_label_line4.csv
expect 2 "mixed_flag_then_label_line4.csv:4: " "'Tea' here but 'yes' on line 2" \
    -- pairs mixed_flag_then_label_line4.csv "${W[@]}"
expect 2 "mixed_flag_then_label_line4.csv:4: " "column 'd_1' mixes" \
    -- unfold mixed_flag_then_label_line4.csv "${W[@]}"
# "-" is a label until --drop-value says it means "not chosen"
printf 'id,d_1,d_2\na,1,0\nb,-,-\n' >dash_in_flags_line3.csv
expect 2 "dash_in_flags_line3.csv:3: " "'-' here but '1' on line 2" \
    -- items dash_in_flags_line3.csv "${W[@]}"
CASES=$((CASES + 1))
"$PAIRMAP" items dash_in_flags_line3.csv "${W[@]}" --drop-value - --base all >out 2>err ||
    fail "--drop-value - should accept dash_in_flags_line3.csv: $(cat err)"

: >empty.csv
expect 2 "empty.csv:1: " "the file is empty" -- items empty.csv "${W[@]}"
printf '\n\n  \n' >blank_lines_only.csv
expect 2 "blank_lines_only.csv:1: " "the file is empty" -- unfold blank_lines_only.csv "${W[@]}"
printf 'id,d_1,d_2\n' >header_only.csv
expect 2 "header_only.csv:1: " "the header is the only line; no respondent rows follow" \
    -- items header_only.csv "${W[@]}"
printf 'id,d_1,d_2\na,x,y\nb,x\n' >short_row_line3.csv
expect 2 "short_row_line3.csv:3: " "found 2 fields, expected 3 as on the header" \
    -- items short_row_line3.csv "${W[@]}"
printf 'id,d_1,d_2\na,x,y\n\nb,x,y,z\n' >long_row_line4.csv
expect 2 "long_row_line4.csv:4: " "found more than 3 fields, expected 3 as on the header" \
    -- unfold long_row_line4.csv "${W[@]}"
printf 'id,d_1,d_2\na,x,y\na,x,\n' >duplicate_id_line3.csv
expect 2 "duplicate_id_line3.csv:3: " "the respondent on this line has a second row (the first is on line 2)" \
    -- items duplicate_id_line3.csv "${W[@]}"
# a respondent left out of N (chose nothing) still owns its id
printf 'id,d_1,d_2\na,,\nb,x,\na,x,\n' >duplicate_blank_id_line4.csv
expect 2 "duplicate_blank_id_line4.csv:4: " "the first is on line 2" \
    -- items duplicate_blank_id_line4.csv "${W[@]}"
printf 'id,d_1,d_2\na,x,\nb,,\nb,,\n' >duplicate_blank_ids_line4.csv
expect 2 "duplicate_blank_ids_line4.csv:4: " "the respondent on this line has a second row (the first is on line 3)" \
    -- items duplicate_blank_ids_line4.csv "${W[@]}"
printf 'id,d_1,d_2\n  ,x,y\n' >empty_id_line2.csv
expect 2 "empty_id_line2.csv:2: " "empty respondent id in column 'id'" \
    -- items empty_id_line2.csv "${W[@]}"
printf 'id,d_1,d_2\na,0,no\nb,,FALSE\nc,No,false\n' >nothing_chosen.csv
expect 2 "nothing_chosen.csv: " "none of the 3 respondents chose anything in the selected columns" \
    -- items nothing_chosen.csv "${W[@]}"
printf 'id,d_1,d_2\na,"x,\n' >open_quote_line2.csv
expect 2 "open_quote_line2.csv:2: " "unterminated quoted field" -- items open_quote_line2.csv "${W[@]}"
printf 'id,d_1,d_2\na,x,y\nb,x"y,\n' >stray_quote_line3.csv
expect 2 "stray_quote_line3.csv:3: " "malformed quoting" -- items stray_quote_line3.csv "${W[@]}"
printf 'id,d_1,d_2\na,x,\nb,\xe9t\xe9,\n' >latin1_label_line3.csv
expect 2 "latin1_label_line3.csv:3: " "(column 'd_1'); save the file as UTF-8" \
    -- items latin1_label_line3.csv "${W[@]}"
printf 'id,d_1,d_2\na,x,\nb,"\xe9",\n' >latin1_quoted_line3.csv
expect 2 "latin1_quoted_line3.csv:3: " "invalid UTF-8" -- items latin1_quoted_line3.csv "${W[@]}"
# "Tea" under d and under s is ambiguous -> "Tea (d)", which is also a label under s
printf 'id,d_1,s_1,s_2\na,Tea,Tea,\nb,,,"Tea (d)"\n' >name_clash_line3.csv
expect 2 "name_clash_line3.csv:3: " \
    "the item name 'Tea (d)' would stand for two items: 'Tea' under 'd' (line 2) and 'Tea (d)' under 's'" \
    -- items name_clash_line3.csv --format wide --columns d_ --columns s_
printf 'id,w,d_1\na,2,x\nb,-1,y\n' >negative_weight_line3.csv
expect 2 "negative_weight_line3.csv:3: " "expected a weight that is a finite number > 0, got '-1'" \
    -- items negative_weight_line3.csv "${W[@]}" --weight-col w
printf 'id,d_1,d_2\na,x,y\n' >ok.csv
STDIN=short_row_line3.csv expect 2 "stdin:3: " "found 2 fields, expected 3" -- items - "${W[@]}"
printf 'id,d_1,d_2\na,x,y\nb,y,\n' >two.csv
expect 2 "two.csv: " "--respondents 1 is below the 2 respondents in the file" \
    -- items two.csv "${W[@]}" --respondents 1
expect 3 "missing.csv: " "cannot open" -- items missing.csv "${W[@]}"

# ---- usage errors (exit 1) ------------------------------------------------------------------
expect 1 "ok.csv:1: " "--columns 'q_' matches no column; the columns are 'id', 'd_1', 'd_2'" \
    -- items ok.csv --format wide --columns q_
expect 1 "ok.csv:1: " "--columns 'id' matches only the id, weight or skipped columns" \
    -- items ok.csv --format wide --columns d_ --columns id
expect 1 "ok.csv:1: " "--columns 'd_' matches only the id, weight or skipped columns" \
    -- items ok.csv --format wide --columns d_ --skip-col d_1 --skip-col 3
expect 1 "ok.csv:1: " "--skip-col 'nope' names no column; the columns are 'id', 'd_1', 'd_2'" \
    -- items ok.csv "${W[@]}" --skip-col nope
expect 1 "ok.csv:1: " "--id-col 'who' names no column" -- items ok.csv "${W[@]}" --id-col who
expect 1 "ok.csv:1: " "--weight-col '9' names no column" -- items ok.csv "${W[@]}" --weight-col 9
expect 1 "ok.csv:1: " "--id-col and --weight-col name the same column" \
    -- items ok.csv "${W[@]}" --weight-col id
expect 1 "" "--format wide needs the header row" -- items ok.csv "${W[@]}" --no-header
expect 1 "" "--format wide needs at least one --columns PREFIX" -- items ok.csv --format wide
expect 1 "" "--columns needs --format wide" -- items ok.csv --columns d_
expect 1 "" "--drop-value needs --format wide" -- pairs ok.csv --drop-value x
expect 1 "" "--skip-col needs --format wide" -- unfold ok.csv --skip-col x
expect 1 "" "--base needs --format wide" -- items ok.csv --base all
expect 1 "" "--base expects one of answered, all, got 'some'" -- items ok.csv "${W[@]}" --base some
expect 1 "" "--item-col and --category-col do not apply to --format wide" \
    -- items ok.csv "${W[@]}" --category-col d_1
expect 1 "" "--columns 'd_' and 'd-' both give the question (category) 'd'" \
    -- items ok.csv "${W[@]}" --columns d-
expect 1 "" "--columns 'd_' is given twice" -- items ok.csv "${W[@]}" --columns d_
expect 1 "" "--columns needs a non-empty prefix" -- items ok.csv --format wide --columns " "
printf 'a;b\nc;d\n' >lines_without_ids.csv
expect 1 "lines_without_ids.csv: " "unfold writes the respondent ids of the input" \
    -- unfold lines_without_ids.csv --format lines

# ---- --merge-file and --drop-item (every format) ---------------------------------------------
printf 'order,item\n1,Espresso\n1,Bun\n2,Cappuccino\n2,Bun\n' >orders.csv
printf 'item,group\nEspresso,Coffee\nCappuccino,Coffee\nEspresso,Tea\n' >merge_listed_twice_line4.csv
expect 2 "merge_listed_twice_line4.csv:4: " "item 'Espresso' is listed twice (first on line 2)" \
    -- items orders.csv --merge-file merge_listed_twice_line4.csv
printf 'Espresso,Coffee\nEspresso , Coffee\n' >merge_twice_no_header_line2.csv
expect 2 "merge_twice_no_header_line2.csv:2: " "item 'Espresso' is listed twice (first on line 1)" \
    -- items orders.csv --merge-file merge_twice_no_header_line2.csv
printf 'item,group\nEspresso,Coffee,hot\n' >merge_three_fields_line2.csv
expect 2 "merge_three_fields_line2.csv:2: " "expected 2 fields 'item,group', got 3" \
    -- items orders.csv --merge-file merge_three_fields_line2.csv
printf 'item,group\nEspresso,Coffee\nCappuccino\n' >merge_one_field_line3.csv
expect 2 "merge_one_field_line3.csv:3: " "expected 2 fields 'item,group', got 1" \
    -- pairs orders.csv --merge-file merge_one_field_line3.csv
printf 'item,group\nEspresso,  \n' >merge_empty_group_line2.csv
expect 2 "merge_empty_group_line2.csv:2: " "empty item or group name in the merge file" \
    -- items orders.csv --merge-file merge_empty_group_line2.csv
printf 'item,group\nEspresso,Caf\xe9\n' >merge_latin1_line2.csv
expect 2 "merge_latin1_line2.csv:2: " "invalid UTF-8 in" \
    -- items orders.csv --merge-file merge_latin1_line2.csv
printf 'item,group\n"Espresso,Coffee\n' >merge_open_quote_line2.csv
expect 2 "merge_open_quote_line2.csv:2: " "unterminated quoted field" \
    -- items orders.csv --merge-file merge_open_quote_line2.csv
expect 3 "no_such_merge.csv: " "cannot open the merge file" \
    -- items orders.csv --merge-file no_such_merge.csv
expect 3 "no_such_merge.csv: " "cannot open the merge file" \
    -- items ok.csv "${W[@]}" --merge-file no_such_merge.csv
# merging two items of different categories (long format): the category clash names both lines
printf 'order,item,category\n1,Espresso,hot\n1,Lemonade,cold\n' >cats.csv
printf 'Espresso,Drinks\nLemonade,Drinks\n' >merge_across.csv
expect 2 "cats.csv:3: " "item 'Drinks' has category 'cold' here but 'hot' on line 2" \
    -- items cats.csv --category-col category --merge-file merge_across.csv
# wide: a merge group keeps its question, so merging across questions is no clash
printf 'id,d_1,s_1\na,Tea,Cake\n' >wide_across.csv
printf 'Tea,Treat\nCake,Treat\n' >merge_treat.csv
CASES=$((CASES + 1))
if ! "$PAIRMAP" unfold wide_across.csv --format wide --columns d_ --columns s_ \
    --merge-file merge_treat.csv -q >out 2>err; then
    fail "wide merge across questions: $(cat err)"
elif [ "$(cat out)" != "$(printf 'respondent,item,category\na,Treat (d),d\na,Treat (s),s')" ]; then
    fail "wide merge across questions: got $(cat out)"
fi

# ---- I/O: a full standard output ------------------------------------------------------------
if [ -w /dev/full ]; then
    CASES=$((CASES + 1))
    "$PAIRMAP" unfold ok.csv "${W[@]}" >/dev/full 2>err
    rc=$?
    if [ "$rc" -ne 3 ] || ! grep -q "^pairmap: cannot write to standard output" err; then
        fail "unfold > /dev/full: exit $rc, stderr $(cat err)"
    fi
fi

if [ "$FAILS" -ne 0 ]; then
    printf '%s: %d of %d cases failed\n' "$(basename "$0")" "$FAILS" "$CASES" >&2
    exit 1
fi
printf '%s: %d cases passed\n' "$(basename "$0")" "$CASES"
