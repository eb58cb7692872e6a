#!/usr/bin/env bash
# Privacy (issue 6): no respondent id appears in any output of any command, nor in the notes
# and summaries on stderr. Respondent ids are distinctive strings that cannot occur by
# chance; every file, stdout and stderr of map, pairs, items and partners is scanned for every
# id of the input, in the long and lines formats, weighted and not. `unfold` converts the
# user's own file and keeps the ids: it serves as the positive control that the scan finds
# them.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

# 800 invented respondents with ids like "qz7k-0042-vx"; café items in planted groups so that
# pairs pass the thresholds and map has edges and clusters
awk 'BEGIN {
    srand(11)
    split("Espresso Croissant Cappuccino Scone Tea Muffin Soup Bread Salad Lemonade Cake Pie", it, " ")
    split("drinks bakery drinks bakery drinks bakery mains bakery mains drinks sweets sweets", cat, " ")
    print "respondent,item,category,weight"
    for (r = 1; r <= 800; r++) {
        id = sprintf("qz7k-%04d-vx", r)
        w = 0.5 + (r % 7) / 4
        g = r % 3
        k = 2 + int(rand() * 4)
        for (j = 0; j < k; j++) {
            i = (rand() < 0.75) ? 1 + g * 4 + int(rand() * 4) : 1 + int(rand() * 12)
            print id "," it[i] "," cat[i] "," w
        }
        if (r % 50 == 0) print id ",,," w
    }
}' >"$TMP/ids.csv"
awk -F, 'NR > 1 { print $1 }' "$TMP/ids.csv" | sort -u >"$TMP/ids.txt"
[ "$(wc -l <"$TMP/ids.txt")" -eq 800 ] || fail "generator: expected 800 ids"
# the same respondents in the lines format, id in the first field
awk -F, 'NR > 1 { if ($1 != last) { if (line != "") print line; line = $1; last = $1 } if ($2 != "") line = line "," $2 }
         END { print line }' "$TMP/ids.csv" >"$TMP/ids-lines.csv"

mkdir "$TMP/scan"
n=0
# capture NAME ARGS...: runs pairmap, keeps stdout and stderr for the scan
capture() {
    local name="$1"
    shift
    n=$((n + 1))
    CASES=$((CASES + 1))
    "$PAIRMAP" "$@" >"$TMP/scan/$n-$name.stdout" 2>"$TMP/scan/$n-$name.stderr" </dev/null
    local rc=$?
    [ "$rc" -eq 0 ] || fail "pairmap $*: exit $rc: $(head -c 400 "$TMP/scan/$n-$name.stderr")"
}

for variant in plain weighted; do
    extra=()
    [ "$variant" = weighted ] && extra=(--weight-col weight)
    f="$TMP/ids.csv"
    capture "map-$variant" map "$f" -o "$TMP/scan/map-$variant" --category-col category --restarts 3 "${extra[@]}"
    capture "map-both-$variant" map "$f" -o "$TMP/scan/map-both-$variant" --sign both --min-count 0 --max-q 1 "${extra[@]}"
    capture "pairs-$variant" pairs "$f" --category-col category "${extra[@]}"
    capture "pairs-all-$variant" pairs "$f" --min-count 0 --max-q 1 --sign both "${extra[@]}"
    capture "items-$variant" items "$f" --category-col category "${extra[@]}"
    capture "partners-$variant" partners "$f" --item Espresso --top 0 "${extra[@]}"
    capture "partners-csv-$variant" partners "$f" --item Espresso --csv --sign both --min-count 0 --max-q 1 "${extra[@]}"
    capture "partners-set-$variant" partners "$f" --item Espresso --item Croissant --csv "${extra[@]}"
done
capture map-lines map "$TMP/ids-lines.csv" -o "$TMP/scan/map-lines" --format lines --id-col 1 --no-header
capture pairs-lines pairs "$TMP/ids-lines.csv" --format lines --id-col 1 --no-header --min-count 0 --max-q 1
capture items-lines items "$TMP/ids-lines.csv" --format lines --id-col 1 --no-header
capture partners-lines partners "$TMP/ids-lines.csv" --format lines --id-col 1 --no-header --item Tea --csv
# messages about results: an unknown item (the closest names are listed)
CASES=$((CASES + 1))
"$PAIRMAP" partners "$TMP/ids.csv" --item Espreso >"$TMP/scan/unknown.stdout" 2>"$TMP/scan/unknown.stderr"
[ $? -eq 2 ] || fail "partners with an unknown item did not fail"

# every map wrote its seven files (map.html and clusters.csv among them: scanned like the others)
for d in "$TMP"/scan/map-*/; do
    [ "$(ls "$d" | wc -l)" -eq 7 ] || fail "map into $d wrote: $(ls "$d")"
done
# the scan: fixed strings, every file under scan/
CASES=$((CASES + 1))
files=$(find "$TMP/scan" -type f | wc -l)
if grep -r -F -f "$TMP/ids.txt" -l "$TMP/scan" >"$TMP/leaks"; then
    fail "respondent ids in $(wc -l <"$TMP/leaks") of $files outputs: $(head -5 "$TMP/leaks" | tr '\n' ' '); e.g. $(grep -r -F -o -h -f "$TMP/ids.txt" "$TMP/scan" | head -3 | tr '\n' ' ')"
fi
# the scan looked at something: the outputs name the items
grep -r -q -F "Croissant" "$TMP/scan" || fail "the scanned outputs do not even name the items"

# positive control: unfold keeps the ids, and the scan finds every one of them
CASES=$((CASES + 1))
"$PAIRMAP" unfold "$TMP/ids.csv" --category-col category >"$TMP/unfolded.csv" 2>/dev/null ||
    fail "unfold failed"
found=$(grep -F -o -f "$TMP/ids.txt" "$TMP/unfolded.csv" | sort -u | wc -l)
[ "$found" -eq 800 ] || fail "positive control: the scan found $found of 800 ids in unfold's output"

finish
