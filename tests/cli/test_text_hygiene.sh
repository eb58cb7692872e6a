#!/usr/bin/env bash
# Text hygiene (issue 13 points 5, 6, 7, 12): spreadsheet formulas in CSV cells (OWASP's
# CSV-injection guidance: a cell beginning with = + - @ tab CR gets a leading apostrophe unless
# --csv-raw), run.json always valid UTF-8 JSON (checked by Python's json module), control and
# bidirectional characters escaped on the terminal, messages on one line, no respondent id in
# a message.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
PY=/usr/bin/python3
check() { # check WHAT COMMAND...: the command must succeed
    local what="$1"
    shift
    CASES=$((CASES + 1))
    "$@" || fail "$what"
}

# ---- formula injection --------------------------------------------------------------------
# four names a spreadsheet would run, and one that only looks like a number (text all the same)
{
    echo 'id,item,category'
    for r in 1 2 3 4 5 6; do
        echo "$r,\"=HYPERLINK(\"\"http://x\"\",\"\"y\"\")\",=cat"
        echo "$r,+1+2,plain"
        echo "$r,-2+3,plain"
        echo "$r,@SUM(A1),plain"
        [ $((r % 2)) = 0 ] && echo "$r,-5,plain"
    done
    echo "7,Plain,plain"
} >"$TMP/inj.csv"
A=(--category-col category --min-count 0 --max-q 1)
"$PAIRMAP" pairs "$TMP/inj.csv" "${A[@]}" >"$TMP/pairs.csv" 2>/dev/null
"$PAIRMAP" pairs "$TMP/inj.csv" "${A[@]}" --csv-raw >"$TMP/pairs_raw.csv" 2>/dev/null
"$PAIRMAP" items "$TMP/inj.csv" --category-col category >"$TMP/items.csv" 2>/dev/null
"$PAIRMAP" items "$TMP/inj.csv" --category-col category --csv-raw >"$TMP/items_raw.csv" 2>/dev/null
"$PAIRMAP" partners "$TMP/inj.csv" "${A[@]}" --item +1+2 --csv --sign both >"$TMP/partners.csv" 2>/dev/null
"$PAIRMAP" map "$TMP/inj.csv" "${A[@]}" -o "$TMP/m" --quiet >/dev/null 2>&1
"$PAIRMAP" map "$TMP/inj.csv" "${A[@]}" -o "$TMP/mraw" --csv-raw --quiet >/dev/null 2>&1
# every text cell of every CSV: formula-like only behind an apostrophe (python's csv module
# reads the cells; the columns holding names are the non-numeric ones)
cat >"$TMP/cells.py" <<'PY'
import csv, sys
raw = sys.argv[1] == "raw"
bad = 0
names = set()
for path in sys.argv[2:]:
    with open(path, newline="", encoding="utf-8") as f:
        rows = list(csv.reader(f))
    header = rows[0]
    for row in rows[1:]:
        for col, cell in zip(header, row):
            if col in ("item", "item_a", "item_b", "partner", "category"):
                names.add(cell)
                if raw:
                    bad += cell.startswith("'")
                else:
                    bad += cell[:1] in ("=", "+", "-", "@", "\t", "\r")
# the names must be there, marked (or raw) as a whole
want = {"=HYPERLINK(\"http://x\",\"y\")", "+1+2", "-2+3", "@SUM(A1)", "-5", "=cat"}
got = {n[1:] if (not raw and n.startswith("'")) else n for n in names}
missing = want - got
if bad or missing:
    print(f"bad cells: {bad}, names missing: {sorted(missing)}", file=sys.stderr)
    sys.exit(1)
PY
check "apostrophe on formula-like names in pairs, items, partners, edges.csv, nodes.csv" \
    $PY "$TMP/cells.py" marked "$TMP/pairs.csv" "$TMP/items.csv" "$TMP/partners.csv" \
    "$TMP/m/edges.csv" "$TMP/m/nodes.csv"
check "--csv-raw writes names as they are" \
    $PY "$TMP/cells.py" raw "$TMP/pairs_raw.csv" "$TMP/items_raw.csv" "$TMP/mraw/edges.csv" \
    "$TMP/mraw/nodes.csv"
# a quoted cell keeps its apostrophe inside the quotes
check "quoted formula cell" grep -q "^\"'=HYPERLINK" "$TMP/items.csv"
# unfold, meant to be read back, stays raw
printf 'id,d_1,d_2\na,=x,+y\nb,=x,\n' >"$TMP/wide.csv"
"$PAIRMAP" unfold "$TMP/wide.csv" --format wide --columns d_ >"$TMP/long.csv" 2>/dev/null
check "unfold stays raw" grep -q '^a,=x,' "$TMP/long.csv"

# ---- run.json: valid UTF-8 JSON whatever the bytes of paths and options --------------------
out="$TMP/out$(printf '\xff\xfe')"
"$PAIRMAP" map "$DEMO/cafe-orders.csv" -o "$out" --title "$(printf 'caf\xe9 \x01 title')" \
    --drop-item "$(printf 'X\xc3')" --quiet >/dev/null 2>&1
check "map with non-UTF-8 path and options succeeds" test -f "$out/run.json"
check "run.json is UTF-8 JSON" $PY -c '
import json, sys
raw = open(sys.argv[1], "rb").read()
raw.decode("utf-8")                       # strict: valid UTF-8
j = json.loads(raw)
o = j["options"]
# the bytes come back with surrogateescape (PEP 383)
assert o["title"].encode("utf-8", "surrogateescape") == b"caf\xe9 \x01 title", o["title"]
assert o["output"].encode("utf-8", "surrogateescape").endswith(b"out\xff\xfe"), o["output"]
assert o["drop-item"][0].encode("utf-8", "surrogateescape") == b"X\xc3"
' "$out/run.json"

# ---- the terminal: control and bidi characters escaped, one-line messages -----------------
{
    echo 'id,item'
    for r in 1 2 3 4 5 6 7 8; do
        printf '%s,"Esc\033]0;retitled\007"\n%s,B\n' "$r" "$r"
        printf '%s,"R\342\200\256LO"\n' "$r"
    done
    printf '9,"two\nlines"\n9,B\n10,Other\n'
} >"$TMP/esc.csv"
"$PAIRMAP" partners "$TMP/esc.csv" --item B --min-count 0 --max-q 1 >"$TMP/table.txt" 2>/dev/null
check "partners table escapes ESC and BEL" grep -qF 'Esc\x1B]0;retitled\x07' "$TMP/table.txt"
check "partners table escapes a bidi override" grep -qF 'R\u202ELO' "$TMP/table.txt"
check "partners table holds no control or bidi byte" $PY -c '
import sys
t = open(sys.argv[1], encoding="utf-8").read()
bad = [c for c in t if (ord(c) < 32 and c != "\n") or 0x202A <= ord(c) <= 0x202E or 0x2066 <= ord(c) <= 0x2069]
sys.exit(1 if bad else 0)' "$TMP/table.txt"
"$PAIRMAP" map "$TMP/esc.csv" -o "$TMP/escmap" --min-count 0 --max-q 1 >"$TMP/summary.txt" 2>&1
check "map summary holds no ESC byte" bash -c "! LC_ALL=C grep -q $'\033' '$TMP/summary.txt'"
# an unknown item whose name holds a line break: one line, escaped
expect_fail 2 "$TMP/esc.csv: " "no item 'no\\x0Asuch'" -- partners "$TMP/esc.csv" --item "$(printf 'no\nsuch')"
expect_fail 2 "$TMP/esc.csv: " "closest:" -- partners "$TMP/esc.csv" --item "$(printf 'Esc\033')"
# the wide reader's duplicate-id error names the line, never the id
printf 'id,d_1\nsecret-id-42,x\nsecret-id-42,x\n' >"$TMP/dup.csv"
expect_fail 2 "$TMP/dup.csv:3: " "the respondent on this line has a second row" -- items "$TMP/dup.csv" --format wide --columns d_
CASES=$((CASES + 1))
"$PAIRMAP" items "$TMP/dup.csv" --format wide --columns d_ 2>&1 | grep -q secret-id && fail "an id in a message"

finish
