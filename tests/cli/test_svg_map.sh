# The SVG map as a file (src/svgmap.c): xmllint accepts it, rsvg-convert renders it to a PNG
# of the canvas size, the same input and seed give the same bytes (any --threads), and the
# geometry check of tests/ref/svg_geometry.py passes on every picture.
# Pictures: the unit-test driver's (build/test_svgmap --write DIR: demo at two sizes and by
# category, invented scale data) and `pairmap map` on the demo with several options.
# Run as `bash test_svg_map.sh /path/to/pairmap`.
set -u
PAIRMAP="${1:?usage: bash $0 /path/to/pairmap}"
case "$PAIRMAP" in /*) ;; *) PAIRMAP="$(pwd)/$PAIRMAP" ;; esac
HERE="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
REPO="$(cd "$HERE/../.." && pwd)"
DEMO="$REPO/demo/cafe-orders.csv"
DRIVER="$(dirname "$PAIRMAP")/test_svgmap"
TMP="$(mktemp -d "${TMPDIR:-/tmp}/pm-svg.XXXXXX")"
trap 'rm -rf "$TMP"' EXIT
FAILS=0

fail() {
    printf 'FAIL: %s\n' "$*" >&2
    FAILS=$((FAILS + 1))
}

for tool in xmllint rsvg-convert /usr/bin/python3; do
    command -v "$tool" >/dev/null || fail "$tool is missing (scripts/setup installs it)"
done
[ -x "$DRIVER" ] || fail "$DRIVER is missing (build the unit tests)"
[ "$FAILS" -eq 0 ] || exit 1

# png_size FILE: "WIDTHxHEIGHT" from the PNG header (IHDR)
png_size() {
    od -An -tu1 -j16 -N8 "$1" | awk '{printf "%dx%d", $1*16777216+$2*65536+$3*256+$4,
                                                     $5*16777216+$6*65536+$7*256+$8}'
}

# check_file SVG: well-formed, renders, PNG of the declared size
check_file() {
    local svg="$1" png="${1%.svg}.png"
    xmllint --noout "$svg" 2>"$TMP/xmllint.err" || fail "xmllint rejects $svg: $(head -3 "$TMP/xmllint.err")"
    if rsvg-convert -o "$png" "$svg" 2>"$TMP/rsvg.err"; then
        [ -s "$TMP/rsvg.err" ] && fail "rsvg-convert warns on $svg: $(head -3 "$TMP/rsvg.err")"
        local w h
        w=$(sed -n 's/.*<svg [^>]*width="\([0-9]*\)".*/\1/p' "$svg" | head -1)
        h=$(sed -n 's/.*<svg [^>]*height="\([0-9]*\)".*/\1/p' "$svg" | head -1)
        [ "$(png_size "$png")" = "${w}x${h}" ] || fail "$png is $(png_size "$png"), not ${w}x${h}"
    else
        fail "rsvg-convert cannot render $svg: $(head -3 "$TMP/rsvg.err")"
    fi
}

# ---- the driver's pictures, twice
mkdir -p "$TMP/a" "$TMP/b"
"$DRIVER" --write "$TMP/a" >"$TMP/a.log" 2>&1 || fail "test_svgmap --write failed: $(tail -5 "$TMP/a.log")"
"$DRIVER" --write "$TMP/b" >"$TMP/b.log" 2>&1 || fail "test_svgmap --write (second run) failed"
n=0
for svg in "$TMP"/a/*.svg; do
    [ -e "$svg" ] || continue
    n=$((n + 1))
    check_file "$svg"
    cmp -s "$svg" "$TMP/b/$(basename "$svg")" || fail "$(basename "$svg") differs between two runs"
done
[ "$n" -ge 4 ] || fail "the driver wrote $n pictures, expected at least 4"

# ---- pairmap map: reruns, thread counts, options
run_map() { # DIR ARGS...
    local dir="$1"
    shift
    "$PAIRMAP" map "$DEMO" -o "$dir" --category-col category --quiet "$@" >"$dir.out" 2>"$dir.err" ||
        fail "pairmap map $* exited $?: $(head -3 "$dir.err")"
}
run_map "$TMP/m1"
run_map "$TMP/m2"
run_map "$TMP/m3" --threads 1
if [ -f "$TMP/m1/map.svg" ]; then
    check_file "$TMP/m1/map.svg"
    cmp -s "$TMP/m1/map.svg" "$TMP/m2/map.svg" || fail "map.svg differs between two runs"
    cmp -s "$TMP/m1/map.svg" "$TMP/m3/map.svg" || fail "map.svg differs with --threads 1"
    run_map "$TMP/m4" --seed 2
    cmp -s "$TMP/m1/map.svg" "$TMP/m4/map.svg" && fail "map.svg is the same for seeds 1 and 2"
    run_map "$TMP/m5" --color-by category --width 900 --height 640 --draw 20 \
        --title 'Café & "friends" <test>'
    check_file "$TMP/m5/map.svg"
    nodes=$(grep -c '<circle class="node"' "$TMP/m5/map.svg")
    [ "$nodes" -le 20 ] && [ "$nodes" -ge 10 ] || fail "--draw 20 drew $nodes items"
    grep -q 'Café &amp; &quot;friends&quot; &lt;test&gt;' "$TMP/m5/map.svg" ||
        fail "the title is not escaped in map.svg"
    grep -q "$nodes of 44 items drawn" "$TMP/m5/map.svg" || fail "the subtitle does not say $nodes of 44 items drawn"
    for d in m1 m4 m5; do
        PAIRMAP="$PAIRMAP" /usr/bin/python3 "$REPO/tests/ref/svg_geometry.py" "$TMP/$d/map.svg" \
            "$TMP/$d/nodes.csv" "$TMP/$d/edges.csv" >"$TMP/geo.$d" 2>&1 ||
            fail "geometry of map.svg ($d): $(grep FAIL "$TMP/geo.$d" | head -5)"
    done
else
    fail "pairmap map wrote no map.svg"
fi

# ---- the geometry check of every driver picture (and of pairmap map's default picture)
PAIRMAP="$PAIRMAP" PM_TEST_SVGMAP="$DRIVER" /usr/bin/python3 "$REPO/tests/ref/svg_geometry.py" \
    >"$TMP/geo.log" 2>&1 || fail "svg_geometry.py: $(grep FAIL "$TMP/geo.log" | head -8)"

if [ "$FAILS" -ne 0 ]; then
    echo "test_svg_map: $FAILS failure(s)" >&2
    exit 1
fi
echo "test_svg_map: all passed ($n driver pictures, 5 map runs)"
