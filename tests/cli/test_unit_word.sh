#!/usr/bin/env bash
# --unit WORD (issue 16 point 8): the word for one respondent in every human-facing text of
# map, pairs, items and partners (summary, notes, tables, the SVG's key and subtitle); the
# CSV columns keep their names. Shown to fail on a binary without the option.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
cafe="$DEMO/cafe-orders.csv"
words() { # words FILE...: fail when "respondent" appears in the human-facing text
    CASES=$((CASES + 1))
    if grep -qi respondent "$@"; then
        fail "--unit orders: 'respondent' still in $(grep -il respondent "$@" | tr '\n' ' '): $(grep -hi respondent "$@" | head -3)"
    fi
}
"$PAIRMAP" map "$cafe" -o "$TMP/m" --unit orders >"$TMP/map.out" 2>"$TMP/map.err" || fail "map --unit"
CASES=$((CASES + 1))
grep -q '^orders  *4000$' "$TMP/map.out" || fail "summary line 'orders 4000': $(head -2 "$TMP/map.out")"
# notes other than the duplicate-rows warning (which names the input's rows, not the unit)
grep -v 'respondent-item rows' "$TMP/map.err" >"$TMP/map.notes"
words "$TMP/map.out" "$TMP/map.notes"
CASES=$((CASES + 1))
grep -q 'orders' "$TMP/map.notes" || fail "notes use the unit: $(cat "$TMP/map.notes")"
"$PAIRMAP" partners "$cafe" --item Espresso --unit orders >"$TMP/p.out" 2>/dev/null
words "$TMP/p.out"
"$PAIRMAP" pairs "$cafe" --unit orders 2>"$TMP/pairs.err" >"$TMP/pairs.csv"
grep -v 'respondent-item rows' "$TMP/pairs.err" >"$TMP/pairs.notes"
words "$TMP/pairs.notes"
# the picture (issue 16 point 8: "SVG key and subtitle"): subtitle, size key and every node's
# tooltip say "orders"; no text of the SVG says "respondent"
CASES=$((CASES + 1))
/usr/bin/python3 - "$TMP/m/map.svg" <<'PY' || fail "map.svg does not use --unit orders"
import sys, xml.etree.ElementTree as ET
S = "{http://www.w3.org/2000/svg}"
root = ET.parse(sys.argv[1]).getroot()
texts = {el.get("class"): "".join(el.itertext()) for el in root.iter(S + "text")}
bad = []
if not texts.get("subtitle", "").startswith("4,000 orders"):
    bad.append("subtitle: %r" % texts.get("subtitle"))
keys = [ "".join(el.itertext()) for el in root.iter(S + "text") if "".join(el.itertext()).startswith("Circle area")]
if keys != ["Circle area: share of orders"]:
    bad.append("size key: %r" % keys)
tips = [c.find(S + "title").text for c in root.iter(S + "circle") if c.get("class") == "node"]
if not tips or not all(" of orders, " in t for t in tips):
    bad.append("tooltips: %r" % tips[:2])
every = " ".join("".join(el.itertext()) for el in root.iter())
if "respondent" in every.lower():
    bad.append("'respondent' in the SVG text")
if bad:
    print("; ".join(bad))
sys.exit(1 if bad else 0)
PY
# segments.svg (map --segment-col) speaks of orders too: subtitle, m, the key's n
"$PAIRMAP" map "$cafe" -o "$TMP/s" --unit orders --segment-col location >/dev/null 2>&1 ||
    fail "map --unit --segment-col"
CASES=$((CASES + 1))
/usr/bin/python3 - "$TMP/s/segments.svg" <<'PY' || fail "segments.svg does not use --unit orders"
import sys, xml.etree.ElementTree as ET
S = "{http://www.w3.org/2000/svg}"
root = ET.parse(sys.argv[1]).getroot()
texts = ["".join(el.itertext()) for el in root.iter(S + "text")]
bad = []
if not any(t.startswith("4,000 orders") for t in texts):
    bad.append("subtitle: %r" % texts[:3])
if not any("n: orders in the segment" in t for t in texts):
    bad.append("key")
if any("respondent" in t.lower() for t in texts):
    bad.append("'respondent' in %r" % [t for t in texts if "respondent" in t.lower()])
if bad:
    print("; ".join(bad))
sys.exit(1 if bad else 0)
PY
# CSV columns keep their names
CASES=$((CASES + 1))
head -1 "$TMP/m/nodes.csv" | grep -q '^item,category,respondents,' || fail "nodes.csv header changed"
expect_fail 1 "" "--unit takes a plural noun" -- pairs "$cafe" --unit '<b>'
finish
