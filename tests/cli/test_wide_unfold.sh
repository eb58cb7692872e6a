# CLI test: `pairmap unfold` and --format wide on a small hand-made survey export, with the
# expected long pairs written out by hand from the rules of issue 7 (labels, 1/0 and yes/no
# cells, --drop-value, --skip-col, `label (category)`, --base), the same file as ;-separated
# with BOM and CRLF and on stdin, the notes on stderr, --drop-item and --merge-file counts.
# Run as `bash test_wide_unfold.sh /path/to/pairmap`.
set -u
PAIRMAP="${1:?usage: bash $0 /path/to/pairmap}"
case "$PAIRMAP" in /*) ;; *) PAIRMAP="$(pwd)/$PAIRMAP" ;; esac
TMP="$(mktemp -d "${TMPDIR:-/tmp}/pm-wide.XXXXXX")"
trap 'rm -rf "$TMP"' EXIT
cd "$TMP" || exit 1
FAILS=0
CASES=0

fail() {
    printf 'FAIL: %s\n' "$*" >&2
    FAILS=$((FAILS + 1))
}

# run NAME ARGS...: pairmap ARGS > NAME.out 2> NAME.err, must exit 0
run() {
    local name="$1"
    shift
    CASES=$((CASES + 1))
    if ! "$PAIRMAP" "$@" >"$name.out" 2>"$name.err" <"${STDIN:-/dev/null}"; then
        fail "$name: pairmap $* failed: $(head -c 400 "$name.err")"
        return 1
    fi
}

# same NAME FILE_A FILE_B
same() {
    CASES=$((CASES + 1))
    if ! cmp -s "$2" "$3"; then
        fail "$1: $2 and $3 differ: $(diff "$2" "$3" | head -n 6)"
    fi
}

# has NAME FILE TEXT: FILE holds the fixed line TEXT
has() {
    CASES=$((CASES + 1))
    if ! grep -qxF -- "$3" "$2"; then
        fail "$1: $2 lacks the line '$3'; it has: $(head -c 600 "$2")"
    fi
}

# The export: drinks hold labels (one option per column; drinks_2 and drinks_3 both hold
# "Lemonade" for v2: one item), "hot:" holds 1/0, sweets_ Yes/No in mixed letter case;
# drinks_other is free text carrying the drinks_ prefix (skipped); "-" marks a question the
# respondent never saw (--drop-value -); v3 chose nothing; Pancakes is a hot dish and a sweet.
cat >survey.csv <<'EOF'
id,region,drinks_1,drinks_2,drinks_3,drinks_other,hot: Ramen,hot: Pancakes,sweets_Pancakes,sweets_Churros,rating
v1,north,Lemonade,"Tea, green",,kombucha,1,0,Yes,no,4
v2,south,,Lemonade,Lemonade,,0,1,YES,No,5
v3,north,,,,tap water,0,0,no,NO,3
v4,east,-,-,-,,1,1,-,-,2
v5,west,"Tea, green",,,,0,0,No,yes,1
EOF
W=(--format wide --columns drinks_ --columns hot --columns sweets_ --skip-col drinks_other
    --drop-value -)

cat >want_answered.csv <<'EOF'
respondent,item,category
v1,Lemonade,drinks
v1,"Tea, green",drinks
v1,Ramen,hot
v1,Pancakes (sweets),sweets
v2,Lemonade,drinks
v2,Pancakes (hot),hot
v2,Pancakes (sweets),sweets
v4,Ramen,hot
v4,Pancakes (hot),hot
v5,"Tea, green",drinks
v5,Churros,sweets
EOF
run answered unfold survey.csv "${W[@]}" && same "unfold --base answered" answered.out want_answered.csv
has "unfold note" answered.err "pairmap: note: 1 respondents chose nothing in the selected questions and are left out (--base answered; --base all keeps them)"
has "unfold note" answered.err "pairmap: note: 1 repeated respondent-item pairs written once"
has "unfold summary" answered.err "pairmap: 4 respondents, 11 respondent-item rows, 0 respondents with no item"

awk 'NR == 9 { print "v3,," } { print }' want_answered.csv >want_all.csv
run all unfold survey.csv "${W[@]}" --base all && same "unfold --base all" all.out want_all.csv
has "unfold --base all summary" all.err "pairmap: 5 respondents, 11 respondent-item rows, 1 respondents with no item"

# the same export as ;-separated, with a UTF-8 BOM and CRLF line ends, and on stdin
{
    printf '\xef\xbb\xbf'
    sed 's/,/;/g; s/"Tea; green"/"Tea, green"/g; s/$/\r/' survey.csv
} >survey_semicolon_bom_crlf.csv
run semi unfold survey_semicolon_bom_crlf.csv "${W[@]}" && same "; BOM CRLF" semi.out want_answered.csv
STDIN=survey.csv run stdin unfold - "${W[@]}" && same "stdin" stdin.out want_answered.csv
# -q silences the notes, not the data
run quiet unfold survey.csv "${W[@]}" -q && same "-q" quiet.out want_answered.csv
CASES=$((CASES + 1))
[ -s quiet.err ] && fail "-q: stderr not empty: $(cat quiet.err)"

# id column by name elsewhere, by number; weights ride along
cat >swapped.csv <<'EOF'
region,id,drinks_1,drinks_2,drinks_3,drinks_other,hot: Ramen,hot: Pancakes,sweets_Pancakes,sweets_Churros,rating
north,v1,Lemonade,"Tea, green",,kombucha,1,0,Yes,no,4
south,v2,,Lemonade,Lemonade,,0,1,YES,No,5
north,v3,,,,tap water,0,0,no,NO,3
east,v4,-,-,-,,1,1,-,-,2
west,v5,"Tea, green",,,,0,0,No,yes,1
EOF
run byname unfold swapped.csv "${W[@]}" --id-col id -q && same "--id-col id" byname.out want_answered.csv
run bynumber unfold swapped.csv "${W[@]}" --id-col 2 -q && same "--id-col 2" bynumber.out want_answered.csv
sed '1s/$/,w/; 2,$s/$/,0.5/; 3s/0\.5$/2/' survey.csv >weighted.csv
run weighted unfold weighted.csv "${W[@]}" --weight-col w -q --base all
has "weight column" weighted.out "respondent,item,category,weight"
has "weight of v1" weighted.out "v1,Ramen,hot,0.5"
has "weight of v2" weighted.out "v2,Lemonade,drinks,2"
has "weight of an empty row" weighted.out "v3,,,0.5"

# without --skip-col the free text of drinks_other is a drinks label (and v3 answered: N=5);
# without --drop-value a '-' under labels is a label (under yes/no it is a mixed-column error,
# see test_wide_errors.sh)
run noskip items survey.csv --format wide --columns drinks_ --columns hot --columns sweets_ \
    --drop-value - -q
CASES=$((CASES + 1))
cut -d, -f1-4 noskip.out | grep -qxF -- "kombucha,drinks,1,0.2" || fail "free text: $(cat noskip.out)"
cut -d, -f1-4 noskip.out | grep -qxF -- "tap water,drinks,1,0.2" || fail "free text: $(cat noskip.out)"
run nodrop items survey.csv --format wide --columns drinks_ --columns hot --skip-col drinks_other -q
# (items marks a cell beginning with "-" with an apostrophe: the CSV-injection rule)
CASES=$((CASES + 1))
cut -d, -f1-4 nodrop.out | grep -qxF -- "'-,drinks,1,0.25" || fail "'-' without --drop-value: $(cat nodrop.out)"

# items and pairs: N is the respondents who answered (4) or all (5)
run items items survey.csv "${W[@]}"
CASES=$((CASES + 1))
cut -d, -f1-4 items.out | grep -qxF "Lemonade,drinks,2,0.5" || fail "items N=4: $(cat items.out)"
has "items note" items.err "pairmap: note: 1 respondents chose nothing in the selected questions and are left out of N (--base answered)"
run items_all items survey.csv "${W[@]}" --base all
CASES=$((CASES + 1))
cut -d, -f1-4 items_all.out | grep -qxF "Lemonade,drinks,2,0.4" || fail "items N=5: $(cat items_all.out)"
# the unfolded long file counts the same
run long_items items answered.out --category-col category
same "items: wide == unfolded long" items.out long_items.out
run pairs pairs survey.csv "${W[@]}" --min-count 0 --max-q 1 --sign both
run long_pairs pairs answered.out --category-col category --min-count 0 --max-q 1 --sign both
same "pairs: wide == unfolded long" pairs.out long_pairs.out
CASES=$((CASES + 1))
grep -q '^Lemonade,Pancakes (sweets),2,' pairs.out || fail "pair Lemonade / Pancakes (sweets) together 2: $(cat pairs.out)"

# --drop-item and --merge-file on wide input: label alone, or "label (category)"
printf 'item,group\n"Tea, green",Tea\nPancakes (sweets),Sweet pancakes\n' >merge.csv
run hygiene unfold survey.csv "${W[@]}" --merge-file merge.csv --drop-item Ramen -q
cat >want_hygiene.csv <<'EOF'
respondent,item,category
v1,Lemonade,drinks
v1,Tea,drinks
v1,Sweet pancakes,sweets
v2,Lemonade,drinks
v2,Pancakes,hot
v2,Sweet pancakes,sweets
v4,Pancakes,hot
v5,Tea,drinks
v5,Churros,sweets
EOF
same "unfold with --merge-file and --drop-item" hygiene.out want_hygiene.csv
run hygiene_items items survey.csv "${W[@]}" --merge-file merge.csv --drop-item Ramen
has "dropped note" hygiene_items.err "pairmap: note: 2 rows dropped by --drop-item"
has "merged note" hygiene_items.err "pairmap: note: 4 rows renamed by --merge-file into 2 groups (2 entries)"
# a respondent whose only choices are dropped stays in N with no item
run dropall unfold survey.csv "${W[@]}" --drop-item Ramen --drop-item Pancakes -q
has "dropped to nothing" dropall.out "v4,,"

# --drop-item and --merge-file on long input
printf 'order,item\n1,Espresso\n1,Bun\n2,Cappuccino\n2,Bun\n3,Bag\n3,Tea\n4,Bag\n' >orders.csv
printf 'Espresso,Coffee\nCappuccino,Coffee\n' >coffee.csv
run long_h items orders.csv --merge-file coffee.csv --drop-item Bag
has "long merged note" long_h.err "pairmap: note: 2 rows renamed by --merge-file into 1 group (2 entries)"
has "long dropped note" long_h.err "pairmap: note: 2 rows dropped by --drop-item"
CASES=$((CASES + 1))
[ "$(cut -d, -f1-3 long_h.out | tr '\n' ' ')" = "item,category,respondents Bun,,2 Coffee,,2 Tea,,1 " ] ||
    fail "long hygiene items: $(cat long_h.out)"
printf 'order,item\n1,Coffee\n1,Bun\n2,Coffee\n2,Bun\n3,Tea\n4,\n' >orders_by_hand.csv
run long_h_pairs pairs orders.csv --merge-file coffee.csv --drop-item Bag --min-count 0 --max-q 1 --sign both
run by_hand_pairs pairs orders_by_hand.csv --min-count 0 --max-q 1 --sign both
same "long: --merge-file/--drop-item == edited by hand" long_h_pairs.out by_hand_pairs.out
run long_unfold unfold orders.csv --merge-file coffee.csv --drop-item Bag -q
cat >want_long.csv <<'EOF'
respondent,item,category
1,Coffee,
1,Bun,
2,Coffee,
2,Bun,
3,Tea,
4,,
EOF
same "unfold of long input" long_unfold.out want_long.csv

# the old name `reshape` still works for one release (same rows, a note naming the new name),
# and the usage lists only `unfold`
run alias reshape survey.csv "${W[@]}" && same "reshape alias" alias.out want_answered.csv
has "reshape alias note" alias.err "pairmap: note: 'reshape' is now called 'unfold'; the old name goes in the next release"
run usage --help
CASES=$((CASES + 1))
grep -q '^  pairmap unfold ' usage.out || fail "--help does not list unfold: $(cat usage.out)"
CASES=$((CASES + 1))
grep -q 'reshape' usage.out && fail "--help lists the hidden alias reshape"

if [ "$FAILS" -ne 0 ]; then
    printf '%s: %d of %d cases failed\n' "$(basename "$0")" "$FAILS" "$CASES" >&2
    exit 1
fi
printf '%s: %d cases passed\n' "$(basename "$0")" "$CASES"
