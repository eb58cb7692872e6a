#!/usr/bin/env bash
# Finding an item the way a person types it (issue 16 point 3; rules in
# include/pairmap/itemfind.h): --item, --drop-item and --merge-file items are found exactly,
# else ignoring letter case when that is unambiguous, else as the plain label of wide-format
# items split by question; what matches nothing is named with the closest items (names that
# begin with the text first, then names that contain it). The reference for "which items
# match" is pandas' case-insensitive comparison of the item column of `pairmap items`; the
# reference for the effect of a name found loosely is the run given the exact name.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
cafe="$DEMO/cafe-orders.csv"
fest="$DEMO/festival-survey.csv"
W=(--format wide --columns drinks_ --columns "hot dishes" --columns sweets_
    --skip-col drinks_other --drop-value -)

"$PAIRMAP" items "$cafe" --sort name >"$TMP/cafe_items.csv" 2>/dev/null
"$PAIRMAP" items "$fest" "${W[@]}" --sort name >"$TMP/fest_items.csv" 2>/dev/null

# 1. --item in another letter case: the one item pandas finds ignoring case, same table
CASES=$((CASES + 1))
"$PAIRMAP" partners "$cafe" --item "Espresso" >"$TMP/p_exact" 2>/dev/null
"$PAIRMAP" partners "$cafe" --item "espresso" >"$TMP/p_lower" 2>"$TMP/err" ||
    fail "partners --item espresso failed: $(cat "$TMP/err")"
cmp -s "$TMP/p_exact" "$TMP/p_lower" || fail "--item espresso differs from --item Espresso"
want=$(/usr/bin/python3 -c '
import sys, pandas as pd
it = pd.read_csv(sys.argv[1], keep_default_na=False).item
m = list(it[it.str.lower() == "espresso"])
print(m[0] if len(m) == 1 else "AMBIGUOUS")' "$TMP/cafe_items.csv")
grep -qF "note: --item 'espresso' taken as '$want'" "$TMP/err" ||
    fail "no note that 'espresso' was taken as '$want': $(cat "$TMP/err")"

# 2. an unknown name: closest names, those beginning with it first (pandas startswith)
expect_fail 2 "$cafe: " "no item 'raclette'; closest: 'Raclette plate'" -- \
    partners "$cafe" --item raclette
CASES=$((CASES + 1))
"$PAIRMAP" partners "$cafe" --item soup >/dev/null 2>"$TMP/err"
/usr/bin/python3 - "$TMP/cafe_items.csv" "$TMP/err" <<'PY' || fail "suggestions for 'soup' are not the names that contain it"
import re, sys, pandas as pd
it = pd.read_csv(sys.argv[1], keep_default_na=False).item
contain = set(it[it.str.lower().str.contains("soup", regex=False)])
line = [l for l in open(sys.argv[2]) if "no item 'soup'" in l][0]
got = re.findall(r"'([^']*)'", line.split("closest: ")[1])
# no name begins with "soup", so the three suggestions are among the four that contain it
sys.exit(0 if len(got) == 3 and set(got) <= contain and len(contain) >= 3 else 1)
PY

# 3. a wide label under several questions: --item asks which, listing each (pandas: the items
#    named "lemonade (...)" ignoring case)
want=$(/usr/bin/python3 -c '
import sys, pandas as pd
it = pd.read_csv(sys.argv[1], keep_default_na=False).item
print(", ".join("'"'"'%s'"'"'" % s for s in sorted(it[it.str.lower().str.startswith("lemonade (")])))' \
    "$TMP/fest_items.csv")
expect_fail 2 "$fest: " "'lemonade' is the label of 2 items, one per question: $want" -- \
    partners "$fest" "${W[@]}" --item lemonade

# 4. --drop-item in another letter case drops the item, as the exact name does
CASES=$((CASES + 1))
"$PAIRMAP" items "$cafe" --drop-item Espresso >"$TMP/d_exact" 2>/dev/null
"$PAIRMAP" items "$cafe" --drop-item espresso >"$TMP/d_lower" 2>"$TMP/err"
cmp -s "$TMP/d_exact" "$TMP/d_lower" || fail "--drop-item espresso differs from --drop-item Espresso"
grep -qF "note: --drop-item 'espresso' taken as 'Espresso'" "$TMP/err" ||
    fail "no note for --drop-item espresso: $(cat "$TMP/err")"

# 5. a --drop-item that matches nothing: a warning naming the closest items, nothing dropped
CASES=$((CASES + 1))
"$PAIRMAP" items "$cafe" >"$TMP/all" 2>/dev/null
"$PAIRMAP" items "$cafe" --drop-item Raclette >"$TMP/d_none" 2>"$TMP/err" ||
    fail "--drop-item Raclette failed"
cmp -s "$TMP/all" "$TMP/d_none" || fail "--drop-item Raclette changed the items"
grep -qF "warning: --drop-item 'Raclette' matches no item; closest: 'Raclette plate'" \
    "$TMP/err" || fail "no warning for --drop-item Raclette: $(cat "$TMP/err")"

# 6. merge-file items: one in another letter case is merged as the exact name is; a misspelt
#    one is a warning with the merge file's line and the closest item
CASES=$((CASES + 1))
printf 'item,group\nespresso,coffee\nFilter coffee,coffee\nCapuccino,coffee\n' >"$TMP/m_loose.csv"
printf 'item,group\nEspresso,coffee\nFilter coffee,coffee\n' >"$TMP/m_exact.csv"
"$PAIRMAP" pairs "$cafe" --merge-file "$TMP/m_exact.csv" >"$TMP/mx" 2>/dev/null
"$PAIRMAP" pairs "$cafe" --merge-file "$TMP/m_loose.csv" >"$TMP/ml" 2>"$TMP/err"
cmp -s "$TMP/mx" "$TMP/ml" || fail "merge item 'espresso' differs from 'Espresso'"
grep -qF "warning: $TMP/m_loose.csv:4: merge item 'Capuccino' matches no item; closest: 'Cappuccino'" \
    "$TMP/err" || fail "no warning for the misspelt merge item: $(cat "$TMP/err")"

# 7. wide: a lower-case label drops or merges the item under every question, and the files are
#    those of the exact names (labels left under one question lose their "(question)")
CASES=$((CASES + 1))
"$PAIRMAP" items "$fest" "${W[@]}" --drop-item "Pancakes (sweets)" >"$TMP/w1" 2>/dev/null
"$PAIRMAP" items "$fest" "${W[@]}" --drop-item "pancakes (SWEETS)" >"$TMP/w2" 2>/dev/null
cmp -s "$TMP/w1" "$TMP/w2" || fail "wide --drop-item 'pancakes (SWEETS)' differs from the exact name"
printf 'item,group\nLemonade,Lemon drinks\n' >"$TMP/wm1.csv"
printf 'item,group\nlemonade,Lemon drinks\n' >"$TMP/wm2.csv"
"$PAIRMAP" map "$fest" "${W[@]}" --merge-file "$TMP/wm1.csv" -o "$TMP/o1" >/dev/null 2>&1
"$PAIRMAP" map "$fest" "${W[@]}" --merge-file "$TMP/wm2.csv" -o "$TMP/o2" >"$TMP/out" 2>"$TMP/err"
for f in edges.csv nodes.csv map.graphml; do
    cmp -s "$TMP/o1/$f" "$TMP/o2/$f" || fail "wide merge of 'lemonade': $f differs from 'Lemonade'"
done
grep -qF "merge item 'lemonade' taken as 'Lemonade (drinks)', 'Lemonade (sweets)'" "$TMP/err" ||
    fail "no note for the wide merge item 'lemonade': $(cat "$TMP/err")"
finish
