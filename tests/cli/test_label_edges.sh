#!/usr/bin/env bash
# Edges do not run through labels where a nearby free spot exists (issue 16 point 10). The
# maps of the café demo (the command scripts/demo runs), the festival demo (README's command)
# and the long-tailed assortment (scripts/gen-longtail) are measured by svg_label_edges.py:
# each label's ink box from PIL's FreeType rendering of DejaVu Sans at the label's size and
# anchor (not pairmap's own width table), the <line class="edge"> segments clipped to it
# (Liang-Barsky). Main's binary before this change gave 7 label-edge crossings on the café map,
# 1 on the festival map and 615 on the long tail (labels inside dense planted groups, where no
# free place exists); the bound here is at most half of the two demos' 8 together and no more
# than before on the long tail. No label may sit farther than 2 font sizes from its circle (a
# label moved off the edges goes at most one line further out).
# Usage: bash test_label_edges.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
PY=/usr/bin/python3
MEASURE="$HERE/svg_label_edges.py"

"$PAIRMAP" map "$DEMO/cafe-orders.csv" --category-col category \
    --title "Mountain café: what goes together" -o "$TMP/cafe" >/dev/null 2>&1
check "café map" test -s "$TMP/cafe/map.svg"
"$PAIRMAP" map "$DEMO/festival-survey.csv" --format wide \
    --columns drinks_ --columns "hot dishes" --columns sweets_ \
    --skip-col drinks_other --drop-value - -o "$TMP/fest" >/dev/null 2>&1
check "festival map" test -s "$TMP/fest/map.svg"
$PY "$HERE/../../scripts/gen-longtail" "$TMP/lt.csv" 2>/dev/null || fail "gen-longtail"
"$PAIRMAP" map "$TMP/lt.csv" -o "$TMP/lt" >/dev/null 2>&1
check "long-tail map" test -s "$TMP/lt/map.svg"

read -r cafe_x cafe_n cafe_far < <($PY "$MEASURE" "$TMP/cafe/map.svg")
read -r fest_x fest_n fest_far < <($PY "$MEASURE" "$TMP/fest/map.svg")
read -r lt_x lt_n lt_far < <($PY "$MEASURE" "$TMP/lt/map.svg")
echo "label-edge crossings: café $cafe_x ($cafe_n labels), festival $fest_x ($fest_n labels), long tail $lt_x ($lt_n labels)"
echo "farthest label from its circle (font sizes): café $cafe_far, festival $fest_far, long tail $lt_far"
check "labels measured on the café map ($cafe_n)" [ "${cafe_n:-0}" -ge 40 ]
check "labels measured on the festival map ($fest_n)" [ "${fest_n:-0}" -ge 30 ]
check "café + festival crossings $((cafe_x + fest_x)) <= 4 (main's binary: 8)" \
    [ $((cafe_x + fest_x)) -le 4 ]
check "café crossings $cafe_x below main's 7" [ "$cafe_x" -lt 7 ]
check "festival crossings $fest_x not above main's 1" [ "$fest_x" -le 1 ]
check "long-tail crossings $lt_x not above main's 615" [ "$lt_x" -le 615 ]
for far in "$cafe_far" "$fest_far"; do
    check "a label $far font sizes from its circle (bound 2)" \
        $PY -c "import sys; sys.exit(not float(sys.argv[1]) <= 2.0)" "$far"
done
finish
