#!/usr/bin/env bash
# Bad command lines (issue 6): unknown, repeated and contradictory options, out-of-range
# numbers, missing values and arguments. Exit 1, one line "pairmap: ...; see 'pairmap CMD
# --help'" (no file applies, except where the option does not fit the file's header), nothing
# on stdout, no output directory created.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
D="$DEMO/cafe-orders.csv"

# usage CMD NEEDLE ARGS...: exit 1 with a message naming the problem and the command's help
usage() {
    local cmd="$1" needle="$2"
    shift 2
    expect_fail 1 "" "$needle" -- "$cmd" "$@"
    local line
    line="$(error_line)"
    if [ -n "$line" ] && [[ "$line" != *"; see 'pairmap $cmd --help'" ]]; then
        fail "pairmap $cmd $*: no pointer to the help: $line"
    fi
}

# ---- unknown -----------------------------------------------------------------------------------
for c in map partners pairs items unfold; do
    usage "$c" "unknown option '--frobnicate' for 'pairmap $c'" "$D" --frobnicate
done
usage pairs "unknown option '-x'" "$D" -x
usage pairs "unknown option '--min-count3'" "$D" --min-count3
expect_fail 1 "" "unknown command 'mapp'" -- mapp "$D"
# an option of another command
usage items "option --min-count does not apply to 'pairmap items'" "$D" --min-count 3
usage pairs "option --output does not apply to 'pairmap pairs'" "$D" -o "$TMP/x"
usage pairs "option --item does not apply to 'pairmap pairs'" "$D" --item Espresso
usage partners "option --top-edges does not apply" "$D" --item Espresso --top-edges 3

# ---- repeated ----------------------------------------------------------------------------------
usage pairs "option --min-count given twice" "$D" --min-count 3 --min-count 4
usage pairs "option --max-q given twice" "$D" --max-q=0.1 --max-q 0.2
usage map "option --output given twice" "$D" -o "$TMP/a" --output "$TMP/b"
usage pairs "more than one INPUT given" "$D" "$D"
# repeatable options may repeat
expect_ok pairs "$D" --drop-item "Trail mix" --drop-item Espresso -q

# ---- values --------------------------------------------------------------------------------------
usage pairs "option --min-count needs a value" "$D" --min-count
usage pairs "option --quiet takes no value" "$D" --quiet=yes
usage pairs "no INPUT given" --min-count 3
usage pairs "--max-q expects a number from 0 to 1, got '2'" "$D" --max-q 2
usage pairs "--max-q expects a number from 0 to 1, got 'nan'" "$D" --max-q nan
usage pairs "--max-q expects a number from 0 to 1, got '-0.1'" "$D" --max-q -0.1
usage pairs "--max-q expects a number from 0 to 1, got ''" "$D" --max-q ''
usage pairs "--top-edges expects a whole number >= 1, got '-1'" "$D" --top-edges -1
usage pairs "--top-edges expects a whole number >= 1, got '0'" "$D" --top-edges 0
usage pairs "--min-count expects a whole number from 0 to 4294967295, got '-3'" "$D" --min-count -3
usage pairs "got '1.5'" "$D" --min-count 1.5
usage pairs "got '99999999999999999999999'" "$D" --min-count 99999999999999999999999
usage pairs "got '5x'" "$D" --min-count 5x
usage pairs "--min-phi expects a number from 0 to 1, got '1.5'" "$D" --min-phi 1.5
usage pairs "--min-lift expects a number >= 0, got '-1'" "$D" --min-lift -1
usage pairs "--min-share expects a number from 0 to 1, got 'inf'" "$D" --min-share inf
usage pairs "--threads expects a whole number from 1 to 256, got '0'" "$D" --threads 0
usage pairs "--sign expects one of positive, negative, both, got 'up'" "$D" --sign up
usage pairs "--measure expects one of phi, lift, jaccard, got 'cosine'" "$D" --measure cosine
usage pairs "--format expects one of long, lines, wide, got 'xlsx'" "$D" --format xlsx
usage pairs "--sep expects one of , ; | tab, got 'x'" "$D" --sep x
usage pairs "--respondents expects a whole number from 1 to" "$D" --respondents 0
usage map "--seed expects a whole number >= 0, got '-1'" "$D" -o "$TMP/m" --seed -1
usage map "--resolution expects a number" "$D" -o "$TMP/m" --resolution -1
usage map "--restarts expects a whole number from 1" "$D" -o "$TMP/m" --restarts 0
usage map "--restarts expects a whole number from 1 to 1000" "$D" -o "$TMP/m" --restarts 1001
usage map "--iterations expects a whole number" "$D" -o "$TMP/m" --iterations -5
usage map "--draw expects a whole number" "$D" -o "$TMP/m" --draw -5
usage map "--color-by expects one of cluster, category, got 'size'" "$D" -o "$TMP/m" --color-by size
usage partners "--top expects a whole number >= 0, got '-1'" "$D" --item Espresso --top -1
usage partners "--by expects one of phi, lift, confidence, together, lower, got 'size'" "$D" --item Espresso --by size
[ -e "$TMP/m" ] && fail "a usage error created the output directory"

# ---- missing -------------------------------------------------------------------------------------
usage map "needs -o DIR" "$D"
usage partners "needs --item NAME" "$D"

# ---- contradictions ------------------------------------------------------------------------------
# options that exclude each other, whatever the file holds
expect_fail 1 "" "--respondents cannot be combined with --weight-col" -- \
    pairs "$D" --weight-col category --respondents 5000
expect_fail 1 "" "--category-col does not apply to --format lines" -- \
    pairs "$D" --format lines --category-col category
usage pairs "--item-col does not apply to --format lines" "$D" --format lines --item-col item
usage pairs "--columns needs --format wide" "$D" --columns q1_
usage pairs "--base needs --format wide" "$D" --base all
usage pairs "--format wide needs at least one --columns PREFIX" "$D" --format wide
usage pairs "--item-col and --category-col do not apply to --format wide" "$D" --format wide --columns q --item-col 2
# options that contradict the file: they name the header line
expect_fail 1 "$D:1: " "--id-col and --item-col name the same column" -- pairs "$D" --id-col item
expect_fail 1 "$D:1: " "--id-col and --item-col name the same column" -- pairs "$D" --id-col 2 --item-col item

# ---- help and version are not errors -------------------------------------------------------------
for c in map partners pairs items unfold; do
    expect_ok "$c" --help && [ -s "$TMP/out" ] || fail "pairmap $c --help printed nothing"
done
expect_ok --version && grep -q '^pairmap [0-9]' "$TMP/out" || fail "pairmap --version: $(cat "$TMP/out")"
# no command at all: usage on stderr, exit 1
"$PAIRMAP" >"$TMP/out" 2>"$TMP/err"
[ $? -eq 1 ] && [ ! -s "$TMP/out" ] && grep -q 'Usage' "$TMP/err" || fail "pairmap without a command"

finish
