#!/usr/bin/env bash
# Every output file is written through src/outfile_direct.c: its full 1 MiB blocks go to the
# disk with O_DIRECT, around the page cache, and the last partial block through it. The files
# of `map` (three of them over 2 MB here, so several direct blocks each and a partial tail),
# and of `count` are the same, byte for byte, whether the stream writes direct, has
# its first direct write refused with EINVAL (PM_TEST_OUTPUT_DIRECT=refuse: what a file
# system without O_DIRECT does; the stream goes on through the page cache) or is not used at
# all (=off: an ordinary stdio stream). run.json differs only in the output path and timings.
# Usage: bash test_output_direct.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

# Invented data: a food festival's visitor survey, 800 dishes in 20 stalls of 40.
awk 'BEGIN {
    srand(5); print "visitor,dish"
    for (r = 1; r <= 20000; r++) {
        g = int(rand() * 20); k = 3 + int(rand() * 8)
        for (j = 0; j < k; j++) {
            if (rand() < 0.8) it = g * 40 + int(rand() * 40); else it = int(rand() * 800)
            printf "v%06d,dish%04d\n", r, it
        }
    }
}' >"$TMP/festival.csv"

json_core() {
    /usr/bin/python3 -c '
import json, sys
j = json.load(open(sys.argv[1]))
j.pop("timings", None)
for k in ("output", "o"):
    j.get("options", {}).pop(k, None)
print(json.dumps(j, sort_keys=True))' "$1"
}

for mode in on refuse off; do
    if [ "$mode" = on ]; then unset PM_TEST_OUTPUT_DIRECT; else export PM_TEST_OUTPUT_DIRECT=$mode; fi
    expect_ok map "$TMP/festival.csv" -q -o "$TMP/map-$mode"
    expect_ok count "$TMP/festival.csv" -o "$TMP/c-$mode.pmc"
done
unset PM_TEST_OUTPUT_DIRECT

big=0
for f in "$TMP"/map-on/*; do
    [ "$(stat -c %s "$f")" -gt 2097152 ] && big=$((big + 1))
done
check "three map files over 2 MiB (found $big): the direct blocks would not be exercised" \
    test "$big" -ge 3
for mode in refuse off; do
    for f in "$TMP"/map-on/*; do
        b=$(basename "$f")
        if [ "$b" = run.json ]; then
            check "run.json, direct against $mode" \
                cmp -s <(json_core "$f") <(json_core "$TMP/map-$mode/$b")
        else
            check "$b, direct against $mode" cmp "$f" "$TMP/map-$mode/$b"
        fi
    done
    check "count shard, direct against $mode" cmp "$TMP/c-on.pmc" "$TMP/c-$mode.pmc"
done
check "same set of map files" diff <(ls "$TMP/map-on") <(ls "$TMP/map-off")

finish
