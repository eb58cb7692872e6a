#!/usr/bin/env bash
# Help that is true (issue 16 point 2): every command's --help lists exactly the options the
# command accepts. The commands come from `pairmap --help`; each command's options are the
# option lines of its --help ("  --name VALUE   text" or "  -o, --name ..."). Every option
# that any command lists is tried on every command: accepted where the command lists it, and
# refused ("does not apply" or "unknown option") where it does not. Then each listed option
# is used on the café demo with a plausible value and the command must succeed.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

mapfile -t CMDS < <("$PAIRMAP" --help | sed -n 's/^  pairmap \([a-z][a-z]*\) .*/\1/p' | sort -u)
[ "${#CMDS[@]}" -ge 7 ] || fail "expected at least 7 commands in pairmap --help, got ${CMDS[*]}"

# options of one command: "name takes-value(0/1)"
options_of() {
    "$PAIRMAP" "$1" --help | sed -n -E 's/^  +(-[a-zA-Z], )?--([a-z][a-z-]*)( ([A-Z][A-Za-z0-9./|_-]*|[a-z]+(\|[a-z]+)+))?.*/\2 \3/p' |
        awk '{ print $1, (NF > 1 ? 1 : 0) }' | sort -u
}
declare -A LISTED TAKES
ALLOPTS=()
for c in "${CMDS[@]}"; do
    while read -r name v; do
        [ "$name" = help ] && continue
        LISTED["$c $name"]=1
        if [ -z "${TAKES[$name]+x}" ]; then
            TAKES[$name]=$v
            ALLOPTS+=("$name")
        fi
    done < <(options_of "$c")
done
[ "${#ALLOPTS[@]}" -ge 30 ] || fail "expected 30 or more distinct options, got ${#ALLOPTS[@]}"

for c in "${CMDS[@]}"; do
    for o in "${ALLOPTS[@]}"; do
        CASES=$((CASES + 1))
        args=("--$o")
        [ "${TAKES[$o]}" = 1 ] && args+=(1)
        err="$("$PAIRMAP" "$c" "${args[@]}" 2>&1 </dev/null >/dev/null)"
        refused=0
        case "$err" in *"does not apply to"* | *"unknown option"*) refused=1 ;; esac
        if [ -n "${LISTED["$c $o"]+x}" ]; then
            [ $refused = 0 ] || fail "$c lists --$o but refuses it: $err"
        else
            [ $refused = 1 ] || fail "$c accepts --$o but its --help does not list it"
        fi
    done
done

# each option of the commands that read a file, with a plausible value, on the demo
cafe="$DEMO/cafe-orders.csv"
value_for() { # a value that makes sense for the option on the café demo
    case "$1" in
    format) echo long ;; id-col) echo 1 ;; item-col) echo 2 ;; category-col) echo category ;;
    weight-col | segment-col | segment-file | segment-levels | only-segment) echo SKIP ;;
    sep) echo , ;; respondents) echo 5000 ;; drop-item) echo Espresso ;;
    merge-file) echo SKIP ;; columns | drop-value | skip-col | base | from-counts | part) echo SKIP ;;
    threads) echo 2 ;; min-count) echo 3 ;; min-share) echo 0.01 ;; max-q) echo 0.1 ;;
    min-phi) echo 0.01 ;; min-lift) echo 1 ;; top-edges) echo 30 ;; sign) echo both ;;
    measure) echo lift ;; output) echo "$TMP/out-$RANDOM" ;; seed) echo 3 ;; restarts) echo 2 ;;
    resolution) echo 1.5 ;; iterations) echo 50 ;; draw) echo 20 ;; title) echo "A title" ;;
    width) echo 900 ;; height) echo 700 ;; color-by) echo category ;; item) echo Espresso ;;
    top) echo 5 ;; by) echo lift ;; unit) echo orders ;; max-basket) echo 50 ;;
    max-memory) echo 4G ;; sort) echo lift ;; pair-test) echo SKIP ;; family) echo all ;; *) echo ;;
    esac
}
for c in map partners pairs items count; do
    printf '%s\n' "${CMDS[@]}" | grep -qx "$c" || continue
    while read -r name v; do
        [ "$name" = help ] && continue
        val="$(value_for "$name")"
        [ "$c $name" = "items sort" ] && val=share
        [ "$val" = SKIP ] && continue
        base=("$cafe")
        case "$c" in map) base+=(-o "$TMP/m-$name") ;; count) base+=(-o "$TMP/c-$name.pmc") ;;
        partners) [ "$name" != item ] && base+=(--item "Carrot cake") ;; esac
        [ "$name" = quiet ] || base+=(--quiet)
        [ "$name" = output ] && base=("$cafe")
        args=("--$name")
        [ "$v" = 1 ] && args+=("$val")
        CASES=$((CASES + 1))
        "$PAIRMAP" "$c" "${base[@]}" "${args[@]}" >/dev/null 2>"$TMP/err" ||
            fail "$c ${args[*]}: exit $?: $(head -c 300 "$TMP/err")"
    done < <(options_of "$c")
done
finish
