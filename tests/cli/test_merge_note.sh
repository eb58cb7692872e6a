#!/usr/bin/env bash
# A merge via --merge-file (issue 16 point 10): two items of one respondent merged into one
# group give one row of the group, by design; that is no duplicate of the input. The warning
# about duplicate rows counts only rows the input repeated (same respondent, same item name as
# read), and a note says how many rows were renamed into how many groups and how many of them
# joined a group the respondent already held. The reference numbers are counted here from the
# rows with pandas (/usr/bin/python3): rows renamed = rows naming a merged item; joined = per
# respondent, the merged items' distinct names beyond the first; duplicates = rows less the
# distinct (respondent, item name) pairs of the input. Checked on the café demo (Boiled
# potatoes and Raclette plate, the demo's pair seen together most often after Black tea / Rye
# bread roll), without and with repeated rows, and on a file from scripts/gen-baskets large
# enough for the parallel reader (>= 16 MB), with --threads 1 and 2 giving the same output.
# Usage: bash test_merge_note.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
cafe="$DEMO/cafe-orders.csv"
GEN="$HERE/../../scripts/gen-baskets"

# the reference: "ROWS GROUPS JOINED DUPS" of FILE with the merge file MERGE (pandas)
reference() {
    /usr/bin/python3 - "$1" "$2" <<'PY'
import sys
import pandas as pd
d = pd.read_csv(sys.argv[1], keep_default_na=False, dtype=str)
m = pd.read_csv(sys.argv[2], keep_default_na=False, dtype=str)
idc, itc = d.columns[0], d.columns[1]
d[itc] = d[itc].str.strip()
group = dict(zip(m.iloc[:, 0].str.strip(), m.iloc[:, 1].str.strip()))
d = d[d[itc] != ""]
merged = d[d[itc].isin(group.keys())]
names = d.drop_duplicates([idc, itc])  # distinct (respondent, name as read)
dups = len(d) - len(names)
g = names[names[itc].isin(group.keys())].assign(g=lambda x: x[itc].map(group))
# the groups' own names read as items join the group too
own = names[names[itc].isin(set(group.values()))].assign(g=lambda x: x[itc])
both = pd.concat([g, own])
per = both.groupby([idc, "g"]).size()
print(len(merged), merged[itc].map(group).nunique(), int((per - 1).sum()), dups)
PY
}

# note_numbers FILE: "ROWS GROUPS JOINED DUPS" as the stderr of a run says them
note_numbers() {
    local rows groups joined dups
    rows=$(sed -n 's/^pairmap: note: \([0-9]*\) rows renamed by --merge-file into .*/\1/p' "$1")
    groups=$(sed -n 's/^pairmap: note: .* --merge-file into \([0-9]*\) group.*/\1/p' "$1")
    joined=$(sed -n 's/^pairmap: note: .* entr[a-z]*); \([0-9]*\) of them joined a group .*/\1/p' "$1")
    dups=$(sed -n 's/^pairmap: warning: \([0-9]*\) duplicate respondent-item rows merged.*/\1/p' "$1")
    echo "${rows:-none} ${groups:-none} ${joined:-0} ${dups:-0}"
}

# compare WHAT ERRFILE DATA MERGE: the note's numbers are pandas' numbers
compare() {
    local want got
    CASES=$((CASES + 1))
    want=$(reference "$3" "$4")
    got=$(note_numbers "$2")
    [ "$want" = "$got" ] || fail "$1: rows, groups, joined, duplicates: want '$want', got '$got'; stderr: $(cat "$2")"
}

printf 'item,group\nBoiled potatoes,Raclette with potatoes\nRaclette plate,Raclette with potatoes\n' \
    >"$TMP/merge.csv"

# the demo without its repeated rows (it repeats 48: pandas' drop_duplicates of order and
# item, first kept): no duplicate warning, the note counts the joined rows
/usr/bin/python3 -c 'import sys, pandas as pd
d = pd.read_csv(sys.argv[1], keep_default_na=False, dtype=str)
d.drop_duplicates(list(d.columns[:2])).to_csv(sys.argv[2], index=False)' "$cafe" "$TMP/once.csv"
"$PAIRMAP" items "$TMP/once.csv" --merge-file "$TMP/merge.csv" >"$TMP/items.out" 2>"$TMP/items.err"
check "items with --merge-file exits 0" [ $? = 0 ]
CASES=$((CASES + 1))
! grep -q "duplicate respondent-item" "$TMP/items.err" ||
    fail "a duplicate warning where the input has none: $(cat "$TMP/items.err")"
compare "café, no repeated rows" "$TMP/items.err" "$TMP/once.csv" "$TMP/merge.csv"
CASES=$((CASES + 1))
grep -q "^pairmap: note: [0-9]* rows renamed by --merge-file into 1 group (2 entries); [0-9]* of them joined a group one of the respondents already held" "$TMP/items.err" ||
    fail "the merge note's words: $(cat "$TMP/items.err")"
# the joined rows are the orders holding both items: 289 (pairs' together), pandas checks it
CASES=$((CASES + 1))
"$PAIRMAP" pairs "$cafe" --min-count 1 --max-q 1 --csv 2>/dev/null |
    grep -q "^Boiled potatoes,Raclette plate,$(note_numbers "$TMP/items.err" | cut -d' ' -f3)," ||
    fail "the joined rows are not the orders holding both items"

# a merge item found after reading, by letter case (src/table_late.c): the same numbers
printf 'item,group\nboiled potatoes,Raclette with potatoes\nRaclette plate,Raclette with potatoes\n' \
    >"$TMP/late.csv"
"$PAIRMAP" items "$TMP/once.csv" --merge-file "$TMP/late.csv" >/dev/null 2>"$TMP/late.err"
CASES=$((CASES + 1))
[ "$(note_numbers "$TMP/late.err")" = "$(note_numbers "$TMP/items.err")" ] ||
    fail "a merge found by letter case counts otherwise: $(cat "$TMP/late.err")"

# repeated rows as well: the demo as shipped (48 repeated rows), every 97th row again (some of
# the merged items) and one order's Raclette plate twice more; the warning gives the true count
awk 'NR > 1 && NR % 97 == 0 { extra = extra $0 "\n" } { print } END { printf "%s", extra }' \
    "$cafe" >"$TMP/dup.csv"
grep -m1 ",Raclette plate," "$cafe" >>"$TMP/dup.csv"
grep -m1 ",Raclette plate," "$cafe" >>"$TMP/dup.csv"
"$PAIRMAP" items "$TMP/dup.csv" --merge-file "$TMP/merge.csv" >/dev/null 2>"$TMP/dup.err"
CASES=$((CASES + 1))
grep -q "duplicate respondent-item rows merged" "$TMP/dup.err" ||
    fail "no duplicate warning where the input repeats rows: $(cat "$TMP/dup.err")"
compare "café with repeated rows" "$TMP/dup.err" "$TMP/dup.csv" "$TMP/merge.csv"
# without the merge file the same duplicates are warned about
"$PAIRMAP" items "$TMP/dup.csv" >/dev/null 2>"$TMP/nomerge.err"
CASES=$((CASES + 1))
[ "$(note_numbers "$TMP/nomerge.err" | cut -d' ' -f4)" = "$(note_numbers "$TMP/dup.err" | cut -d' ' -f4)" ] ||
    fail "duplicates with and without the merge file differ: $(cat "$TMP/nomerge.err") / $(cat "$TMP/dup.err")"

# count shards of three parts, merged: run.json's duplicate rows are the input's repeated rows
for k in 0 1 2; do
    "$PAIRMAP" count "$TMP/dup.csv" --merge-file "$TMP/merge.csv" --part "$k/3" \
        -o "$TMP/p$k.pmc" 2>/dev/null
done
"$PAIRMAP" merge "$TMP/p0.pmc" "$TMP/p1.pmc" "$TMP/p2.pmc" -o "$TMP/all.pmc" 2>/dev/null
"$PAIRMAP" map --from-counts "$TMP/all.pmc" -o "$TMP/shardmap" >/dev/null 2>&1
CASES=$((CASES + 1))
want=$(reference "$TMP/dup.csv" "$TMP/merge.csv" | cut -d' ' -f4)
grep -q "\"duplicate_rows\": $want," "$TMP/shardmap/run.json" ||
    fail "shards of 3 parts: duplicate_rows is not $want: $(grep duplicate_rows "$TMP/shardmap/run.json")"

# the parallel reader: a generated file of >= 16 MB (invented baskets), the two items most
# often chosen merged, rows repeated and rows of the other merged item appended at the end (so
# that one respondent's rows lie in two chunks)
/usr/bin/python3 "$GEN" --respondents 95000 --items 400 --seed 7 -o "$TMP/big.csv" --quiet
top=$(cut -d, -f2 "$TMP/big.csv" | tail -n +2 | sort | uniq -c | sort -k1,1nr -k2 | head -2 |
    awk '{ print $2 }')
a=$(echo "$top" | sed -n 1p)
b=$(echo "$top" | sed -n 2p)
printf 'item,group\n%s,top two\n%s,top two\n' "$a" "$b" >"$TMP/bigmerge.csv"
awk -F, -v a="$a" -v b="$b" 'NR > 1 && NR % 50 == 0 { extra = extra $0 "\n" }
    NR > 1 && $2 == a && NR % 7 == 0 { extra = extra $1 "," b "\n" }
    { print } END { printf "%s", extra }' "$TMP/big.csv" >"$TMP/bigx.csv"
size=$(wc -c <"$TMP/bigx.csv")
check "the generated file is >= 16 MB ($size bytes)" [ "$size" -ge 16777216 ]
for t in 1 2; do
    "$PAIRMAP" pairs "$TMP/bigx.csv" --merge-file "$TMP/bigmerge.csv" --threads "$t" \
        --min-count 1 --max-q 1 --csv >"$TMP/big$t.out" 2>"$TMP/big$t.err"
    check "pairs on the large file, --threads $t, exits 0" [ $? = 0 ]
done
check "the large file: the same pairs with 1 and 2 threads" cmp -s "$TMP/big1.out" "$TMP/big2.out"
check "the large file: the same notes with 1 and 2 threads" cmp -s "$TMP/big1.err" "$TMP/big2.err"
compare "large file, --threads 2" "$TMP/big2.err" "$TMP/bigx.csv" "$TMP/bigmerge.csv"
finish
