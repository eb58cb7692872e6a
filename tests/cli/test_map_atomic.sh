#!/usr/bin/env bash
# `pairmap map` places its files atomically (issue 3; DESIGN.md "Exit codes"): DIR is created
# with its parents when missing; a run that fails removes the directories it created; when
# putting the files in place fails part way (here: run.json is a directory, so the last rename
# fails), the files already replaced are restored and no temporary file is left; the summary
# and run.json agree. Usage: bash test_map_atomic.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
D="$DEMO/cafe-orders.csv"
FILES="map.graphml map.svg map.html edges.csv nodes.csv clusters.csv run.json"

# ---- DIR and its parents are created; a failed run takes them away again -----------------------
expect_ok map "$D" -q -o "$TMP/a/b/c"
for f in $FILES; do
    [ -s "$TMP/a/b/c/$f" ] || fail "map -o a/b/c: $f missing or empty"
done
left="$(find "$TMP/a" -name '.*' | head -3)"
[ -z "$left" ] || fail "map left temporary files: $left"
expect_fail 2 "$DATA/short_row_line3.csv:3: " "" -- map "$DATA/short_row_line3.csv" -o "$TMP/new/dir"
[ -e "$TMP/new" ] && fail "a failed run left the directories it created: $(find "$TMP/new")"

# ---- --no-html: the six other files and no page (README "Output") -----------------------------
CASES=$((CASES + 1))
"$PAIRMAP" map "$D" -o "$TMP/nohtml" --no-html >"$TMP/summary" 2>"$TMP/err" ||
    fail "map --no-html failed: $(cat "$TMP/err")"
[ "$(ls -A "$TMP/nohtml" | tr '\n' ' ')" = "clusters.csv edges.csv map.graphml map.svg nodes.csv run.json " ] ||
    fail "map --no-html wrote: $(ls -A "$TMP/nohtml" | tr '\n' ' ')"
grep -q '^written .*map.html' "$TMP/summary" && fail "map --no-html: the summary names map.html"
grep -q '"map.html"' "$TMP/nohtml/run.json" && fail "map --no-html: run.json lists map.html"
grep -q '"map.html"' "$TMP/a/b/c/run.json" || fail "run.json does not list map.html"

# ---- a rename that fails part way: the earlier files come back ----------------------------------
out="$TMP/results"
expect_ok map "$D" -q -o "$out" --seed 1
rm "$out/run.json"
mkdir -p "$out/run.json/keep"          # the last rename (run.json) must fail
(cd "$out" && sha256sum map.graphml map.svg map.html edges.csv nodes.csv clusters.csv && ls -i map.graphml nodes.csv) \
    >"$TMP/before"
CASES=$((CASES + 1))
"$PAIRMAP" map "$D" -q -o "$out" --seed 2 >"$TMP/out" 2>"$TMP/err"
rc=$?
[ "$rc" -eq 3 ] || fail "map with run.json a directory: exit $rc, expected 3: $(cat "$TMP/err")"
grep -q "^pairmap: $out/run.json: cannot put the output in place" "$TMP/err" ||
    fail "map with run.json a directory: message: $(cat "$TMP/err")"
[ -s "$TMP/out" ] && fail "map printed a summary although it failed"
(cd "$out" && sha256sum map.graphml map.svg map.html edges.csv nodes.csv clusters.csv && ls -i map.graphml nodes.csv) \
    >"$TMP/after"
cmp -s "$TMP/before" "$TMP/after" ||
    fail "a failed rename changed the earlier files: $(diff "$TMP/before" "$TMP/after")"
[ -d "$out/run.json/keep" ] || fail "the directory in the way was touched"
left="$(find "$out" -name '.*' | head -3)"
[ -z "$left" ] || fail "a failed rename left temporary or backup files: $left"
# the same run succeeds once the way is clear, and changes the files (seed 2: another layout)
rm -r "$out/run.json"
expect_ok map "$D" -q -o "$out" --seed 2
(cd "$out" && sha256sum nodes.csv) >"$TMP/after2"
grep nodes.csv "$TMP/before" | cmp -s - "$TMP/after2" && fail "--seed 2 did not change nodes.csv"

# ---- files only appear complete: no reader ever sees a partial map.graphml ----------------------
# (xmllint from libxml2-utils checks the GraphML is well-formed XML)
if command -v xmllint >/dev/null; then
    CASES=$((CASES + 1))
    xmllint --noout "$out/map.graphml" 2>"$TMP/err" || fail "map.graphml is not well-formed: $(head -3 "$TMP/err")"
    xmllint --noout "$out/map.svg" 2>"$TMP/err" || fail "map.svg is not well-formed: $(head -3 "$TMP/err")"
fi

# ---- the summary and run.json agree -----------------------------------------------------------
CASES=$((CASES + 1))
"$PAIRMAP" map "$D" -o "$out" -q >"$TMP/summary" 2>"$TMP/err" || fail "map failed: $(cat "$TMP/err")"
for word in "respondents   4000" "pairs tested" "pairs kept" "clusters" "modularity" "stability"; do
    grep -q "^$word" "$TMP/summary" || fail "summary lacks '$word': $(cat "$TMP/summary")"
done
kept=$(sed -n 's/^pairs kept *\([0-9]*\).*/\1/p' "$TMP/summary")
rows=$(($(wc -l <"$out/edges.csv") - 1))
[ "$kept" = "$rows" ] || fail "summary says $kept pairs kept, edges.csv has $rows rows"
/usr/bin/python3 - "$out/run.json" "$TMP/summary" <<'PY' || fail "run.json and the summary disagree"
import json, re, sys
j = json.load(open(sys.argv[1]))
s = open(sys.argv[2]).read()
q = float(re.search(r"^modularity\s+(\S+)", s, re.M).group(1))
assert abs(q - j["network"]["modularity"]) < 1e-9, (q, j["network"]["modularity"])
assert set(j["timings"]) == {"read", "count", "measures", "graph", "write"}
assert all(v >= 0 for v in j["timings"].values())
assert j["input_file"]["bytes"] > 0 and len(j["input_file"]["sha256"]) == 64
assert j["options"]["output"] == sys.argv[1].rsplit("/", 1)[0]
assert list(j)[-1] == "timings"
PY
# run.json's input size and SHA-256 are those of the file (sha256sum from coreutils)
want="$(sha256sum "$D" | cut -d' ' -f1)"
grep -q "\"sha256\": \"$want\"" "$out/run.json" || fail "run.json SHA-256 differs from sha256sum's $want"
grep -q "\"bytes\": $(stat -c %s "$D")," "$out/run.json" || fail "run.json byte count differs from stat"

finish
