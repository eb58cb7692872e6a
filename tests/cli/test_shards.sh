#!/usr/bin/env bash
# Count shards (issue 18): `pairmap count` of every split of the respondents (--part K/M for
# M = 2, 3, 7; pre-split files of unequal sizes; parts without any respondent), added up by
# `pairmap merge` in several orders and groupings, give byte-identical shards; map (all files
# but run.json, and the summary), pairs, items and partners built from the sum with
# --from-counts are byte-identical to the same commands run on the rows. On the demo (with
# categories, --drop-item and --merge-file), the wide festival survey, a lines-format file
# without ids, and generated baskets (scripts/gen-baskets). The reference is pairmap's own
# run on the original rows, which is what a shard must reproduce.
# Usage: bash test_shards.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
GEN="$HERE/../../scripts/gen-baskets"

# all_outputs OUT ITEM ARGS...: the outputs of map, pairs, items and partners for ARGS (INPUT
# with its input options, or --from-counts FILE) into directory OUT
all_outputs() {
    local out="$1" item="$2"
    shift 2
    mkdir -p "$out"
    "$PAIRMAP" map "$@" -q -o "$out/map" --restarts 3 >"$out/map.txt" 2>"$out/err" ||
        fail "map $*: exit $?: $(head -c 300 "$out/err")"
    rm -f "$out/map/run.json"
    # map.html's run block (input, options, size: what run.json says) is its one line that
    # names the run; the rest of the page must match
    sed -i '/^<script type="application\/json" id="pm-run">/d' "$out/map/map.html"
    sed -i '/^written /d' "$out/map.txt"
    "$PAIRMAP" pairs "$@" -q >"$out/pairs.csv" || fail "pairs $*"
    "$PAIRMAP" pairs "$@" -q --sign both --min-count 0 --max-q 1 >"$out/pairs_all.csv" ||
        fail "pairs --sign both $*"
    "$PAIRMAP" items "$@" -q >"$out/items.csv" || fail "items $*"
    "$PAIRMAP" partners "$@" -q --item "$item" --csv >"$out/partners.csv" || fail "partners $*"
    "$PAIRMAP" partners "$@" -q --item "$item" --sign negative --min-count 0 \
        >"$out/partners_neg.txt" || fail "partners --sign negative $*"
    rm -f "$out/err"
}

# same_outputs WHAT A B: the two output directories hold the same files, byte for byte
same_outputs() {
    CASES=$((CASES + 1))
    if ! diff -r "$2" "$3" >"$TMP/diff" 2>&1; then
        fail "$1: outputs differ from the run on the rows: $(head -c 600 "$TMP/diff")"
    fi
}

same_file() {
    CASES=$((CASES + 1))
    cmp -s "$2" "$3" || fail "$1: $2 and $3 differ"
}

# The item of the first pair the rows' run lists: eligible, with partners.
first_item() {
    sed -n 2p "$1/pairs.csv" | /usr/bin/python3 -c 'import csv, sys; print(next(csv.reader(sys.stdin))[0])'
}

# check_splits NAME INPUT OPTS...: every --part split of INPUT, merged in three ways
check_splits() {
    local name="$1" input="$2"
    shift 2
    local d="$TMP/$name"
    mkdir -p "$d"
    "$PAIRMAP" pairs "$input" "$@" -q >"$d/probe.csv" || fail "$name: pairs on the rows"
    mkdir -p "$d/rows" && cp "$d/probe.csv" "$d/rows/pairs.csv"
    local item
    item="$(first_item "$d/rows")"
    [ -n "$item" ] || fail "$name: no pair on the rows: the comparison would be empty"
    all_outputs "$d/rows" "$item" "$input" "$@"
    expect_ok count "$input" "$@" -q -o "$d/whole.pmc"
    all_outputs "$d/whole" "$item" --from-counts "$d/whole.pmc"
    same_outputs "$name, one shard" "$d/rows" "$d/whole"
    for m in 2 3 7; do
        local parts=() rev=()
        for ((k = 0; k < m; k++)); do
            expect_ok count "$input" "$@" -q --part "$k/$m" -o "$d/p$k-$m.pmc"
            parts+=("$d/p$k-$m.pmc")
            rev=("$d/p$k-$m.pmc" "${rev[@]}")
        done
        expect_ok merge "${parts[@]}" -q -o "$d/m$m-a.pmc"
        expect_ok merge "${rev[@]}" -q -o "$d/m$m-b.pmc"
        # a tree: the first two, the rest, then the two sums (and the sum of one shard)
        expect_ok merge "${parts[0]}" "${parts[1]}" -q -o "$d/t1-$m.pmc"
        if [ "$m" -gt 2 ]; then
            expect_ok merge "${parts[@]:2}" -q -o "$d/t2-$m.pmc"
            expect_ok merge "$d/t2-$m.pmc" "$d/t1-$m.pmc" -q -o "$d/m$m-c.pmc"
        else
            expect_ok merge "$d/t1-$m.pmc" -q -o "$d/m$m-c.pmc"
        fi
        same_file "$name, $m parts, reversed order" "$d/m$m-a.pmc" "$d/m$m-b.pmc"
        same_file "$name, $m parts, a tree of merges" "$d/m$m-a.pmc" "$d/m$m-c.pmc"
        all_outputs "$d/from$m" "$item" --from-counts "$d/m$m-a.pmc"
        same_outputs "$name, $m parts" "$d/rows" "$d/from$m"
    done
    # the parts of different splits hold the same pairs: two sums of one input, the same file
    # except for the part list, give the same outputs (checked above against the rows)
}

# check_files NAME HEADER_LINES INPUT OPTS...: INPUT cut into three files of unequal sizes
# (5%, 25%, 70% of the respondents, each respondent's rows in one file), counted one by one
check_files() {
    local name="$1" input="$3"
    shift 3
    local d="$TMP/$name"
    /usr/bin/python3 - "$input" "$d" <<'EOF'
import csv, io, sys
src, d = sys.argv[1], sys.argv[2]
lines = open(src, encoding="utf-8", newline="").read().splitlines(keepends=True)
header, body = lines[0], lines[1:]
ids = []
for line in body:
    rid = next(csv.reader([line]))[0]
    if not ids or ids[-1] != rid:
        ids.append(rid)
order = {}
for rid in ids:
    order.setdefault(rid, len(order))
n = len(order)
cut = [int(n * 0.05), int(n * 0.30)]
out = [open(f"{d}/piece{i}.csv", "w", encoding="utf-8", newline="") for i in range(3)]
for f in out:
    f.write(header)
for line in body:
    i = order[next(csv.reader([line]))[0]]
    out[0 if i < cut[0] else 1 if i < cut[1] else 2].write(line)
EOF
    local item
    item="$(first_item "$d/rows")"
    for i in 0 1 2; do
        expect_ok count "$d/piece$i.csv" "$@" -q -o "$d/f$i.pmc"
    done
    expect_ok merge "$d/f0.pmc" "$d/f1.pmc" "$d/f2.pmc" -q -o "$d/fa.pmc"
    expect_ok merge "$d/f2.pmc" "$d/f1.pmc" -q -o "$d/f21.pmc"
    expect_ok merge "$d/f21.pmc" "$d/f0.pmc" -q -o "$d/fb.pmc"
    same_file "$name, three files, another order" "$d/fa.pmc" "$d/fb.pmc"
    all_outputs "$d/files" "$item" --from-counts "$d/fa.pmc"
    same_outputs "$name, three files" "$d/rows" "$d/files"
}

# ---- the data ---------------------------------------------------------------------------------
# demo: categories; and with --drop-item and a --merge-file (two teas become one line)
printf 'item,group\nGreen tea,Tea\nBlack tea,Tea\n' >"$TMP/merge.csv"
check_splits demo "$DEMO/cafe-orders.csv" --category-col category
check_files demo 1 "$DEMO/cafe-orders.csv" --category-col category
check_splits hygiene "$DEMO/cafe-orders.csv" --category-col category --drop-item "Trail mix" \
    --merge-file "$TMP/merge.csv"
# the wide festival survey (one row per respondent)
check_splits festival "$DEMO/festival-survey.csv" --format wide --columns drinks_ \
    --columns "hot dishes" --columns sweets_ --skip-col drinks_other --drop-value -
# generated baskets (invented data: Zipf popularity, taste groups)
/usr/bin/python3 "$GEN" --respondents 6000 --items 300 --mean-k 6 --groups 12 --seed 5 \
    -o "$TMP/gen.csv" --quiet || fail "gen-baskets"
check_splits gen "$TMP/gen.csv"
check_files gen 1 "$TMP/gen.csv"
# weighted (sampling weights with full binary fractions: the exact sums of src/exactsum.h make
# any split add up to the same bits), on the demo with categories and on the generated baskets
/usr/bin/python3 - "$DEMO/cafe-orders.csv" "$TMP/weighted.csv" "$TMP/gen.csv" "$TMP/gen-w.csv" <<'EOF'
import csv, random, sys
for src, dst in ((sys.argv[1], sys.argv[2]), (sys.argv[3], sys.argv[4])):
    rows = list(csv.reader(open(src, encoding="utf-8", newline="")))
    rnd, w = random.Random(7), {}
    with open(dst, "w", encoding="utf-8", newline="") as f:
        out = csv.writer(f, lineterminator="\n")
        out.writerow(rows[0] + ["weight"])
        for r in rows[1:]:
            w.setdefault(r[0], repr(rnd.uniform(0.2, 3.7)))
            out.writerow(r + [w[r[0]]])
EOF
check_splits weighted "$TMP/weighted.csv" --category-col category --weight-col weight
check_files weighted 1 "$TMP/weighted.csv" --category-col category --weight-col weight
check_splits gen-weighted "$TMP/gen-w.csv" --weight-col weight

# lines format without ids: a respondent's part comes from its number in the file
/usr/bin/python3 -c '
import csv, sys
rows = list(csv.reader(open(sys.argv[1])))[1:]
out, cur, last = [], [], None
for r, it in rows:
    if r != last and cur:
        out.append(",".join(cur)); cur = []
    cur.append(it); last = r
out.append(",".join(cur))
print("\n".join(out))' "$TMP/gen.csv" >"$TMP/gen-lines.csv"
check_splits lines "$TMP/gen-lines.csv" --format lines --no-header

# ---- parts without any respondent -----------------------------------------------------------------
# three respondents in seven parts: four parts at least are empty
printf 'who,what\nr1,tea\nr1,cake\nr2,tea\nr2,cake\nr2,soup\nr3,soup\nr3,tea\n' >"$TMP/tiny.csv"
tiny=()
empty=0
for k in 0 1 2 3 4 5 6; do
    expect_ok count "$TMP/tiny.csv" --part "$k/7" -o "$TMP/tiny$k.pmc"
    grep -q ': 0 respondents' "$TMP/err" && empty=$((empty + 1))
    tiny+=("$TMP/tiny$k.pmc")
done
[ "$empty" -ge 4 ] || fail "only $empty of 7 parts of 3 respondents were empty"
expect_ok merge "${tiny[@]}" -o "$TMP/tiny.pmc"
for cmd in "items" "pairs --min-count 0 --max-q 1 --sign both"; do
    # shellcheck disable=SC2086
    "$PAIRMAP" $cmd "$TMP/tiny.csv" -q >"$TMP/tiny-rows.txt"
    # shellcheck disable=SC2086
    "$PAIRMAP" $cmd --from-counts "$TMP/tiny.pmc" -q >"$TMP/tiny-counts.txt"
    same_file "3 respondents in 7 parts: $cmd" "$TMP/tiny-rows.txt" "$TMP/tiny-counts.txt"
done

# ---- the part hash: FNV-1a 64 of the id, SplitMix64's finaliser, mod M (docs/shard-format.md) ----
# written out here from the definition in the document: the respondents of part 1/3 are those
/usr/bin/python3 - "$TMP/gen.csv" "$TMP/want_n" <<'EOF'
import csv, sys
M = (1 << 64) - 1
def part(s, m):
    x = 0xcbf29ce484222325
    for b in s.encode():
        x = ((x ^ b) * 0x100000001b3) & M
    x ^= x >> 30; x = (x * 0xbf58476d1ce4e5b9) & M
    x ^= x >> 27; x = (x * 0x94d049bb133111eb) & M
    x ^= x >> 31
    return x % m
ids = {r[0] for r in list(csv.reader(open(sys.argv[1])))[1:]}
open(sys.argv[2], "w").write(str(sum(part(i, 3) == 1 for i in ids)))
EOF
expect_ok count "$TMP/gen.csv" --part 1/3 -o "$TMP/g13.pmc"
grep -q ": $(cat "$TMP/want_n") respondents (part 1/3)" "$TMP/err" ||
    fail "part 1/3 of gen.csv: want $(cat "$TMP/want_n") respondents, got: $(cat "$TMP/err")"

# the test vectors of docs/shard-format.md (computed there by the definition): each id alone
# in a file lands in its part of 7 and in no other
for v in "a 3" "A00001 6" "c0000001 5" "Zoë 6"; do
    id="${v% *}" want="${v#* }"
    printf 'who,what\n%s,tea\n' "$id" >"$TMP/one.csv"
    for k in 0 1 2 3 4 5 6; do
        expect_ok count "$TMP/one.csv" --part "$k/7" -o "$TMP/one.pmc"
        n=$([ "$k" = "$want" ] && echo 1 || echo 0)
        grep -q ": $n respondents (part $k/7)" "$TMP/err" ||
            fail "id '$id', part $k/7: want $n respondents, got: $(cat "$TMP/err")"
    done
done

# ---- refusals ----------------------------------------------------------------------------------------
expect_fail 1 "" "not both" -- items "$DEMO/cafe-orders.csv" --from-counts "$TMP/tiny.pmc"
expect_fail 1 "" "applies when counting" -- items --from-counts "$TMP/tiny.pmc" --drop-item tea
expect_fail 1 "" "need the respondents' rows" -- partners --from-counts "$TMP/tiny.pmc" \
    --item soup --item cake
expect_fail 1 "" "--part expects K/M" -- count "$TMP/tiny.csv" --part 3/3 -o "$TMP/x.pmc"
expect_fail 1 "" "--part expects K/M" -- count "$TMP/tiny.csv" --part 1 -o "$TMP/x.pmc"
expect_fail 1 "" "needs -o" -- count "$TMP/tiny.csv"
expect_fail 1 "" "needs -o" -- merge "$TMP/tiny0.pmc"
expect_fail 1 "" "not for a part" -- count "$TMP/tiny.csv" --part 0/2 --respondents 9 -o "$TMP/x.pmc"
[ -e "$TMP/x.pmc" ] && fail "a refused count wrote its output"
# a shard of some of the parts: the results describe those respondents, and a warning says so
expect_ok items --from-counts "$TMP/demo/p0-2.pmc"
grep -q 'warning: .*p0-2.pmc holds 1 of the 2 parts of input' "$TMP/err" ||
    fail "no warning for a shard of 1 of 2 parts: $(cat "$TMP/err")"
expect_ok items --from-counts "$TMP/demo/m2-a.pmc"
grep -q 'warning' "$TMP/err" && fail "a warning for a shard of all parts: $(cat "$TMP/err")"

finish
