#!/usr/bin/env bash
# q-values print in one style (issue 16 point 10): every text a person reads shows a q-value
# with two significant digits as C's printf "%.2g" writes it (pm_cli_q): the text tables of
# pairs and partners on a terminal (util-linux `script -qc` gives them one), explain's line of
# the --max-q threshold, and map.html's partner tables and q-slider read-out (run in Debian's
# headless chromium, --dump-dom). The reference is Python's printf-style "%.2g" of the same
# run's full-precision q (the CSV, explain's q_value line, the page's data-v attribute; Python
# documents its % formatting as C's). explain's `q_value = ...` line and the CSV keep full
# precision (round-trip numbers) by design.
# Usage: bash test_q_style.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
cafe="$DEMO/cafe-orders.csv"
command -v script >/dev/null || { fail "util-linux 'script' is missing"; finish; }
command -v chromium >/dev/null || { fail "chromium is missing (scripts/setup installs it)"; finish; }
# text and CSV of one run: NAME ARGS...
both() {
    local name="$1"
    shift
    on_tty "$TMP/$name.txt" "$@"
    "$PAIRMAP" "$@" --csv --quiet >"$TMP/$name.csv" 2>/dev/null
}
both pairs pairs "$cafe" --sort q
both pairs_both pairs "$cafe" --sign both --min-count 1 --max-q 1 --sort q
both partners partners "$cafe" --item Espresso --sign both --min-count 1 --max-q 1 --top 0
both partners_set partners "$cafe" --item Espresso --item "Walnut cake" --max-q 1
both partners_neg partners "$cafe" --item Espresso --sign negative --min-count 1 --max-q 1 --top 0
"$PAIRMAP" explain "$cafe" Espresso "Walnut cake" >"$TMP/explain_pos.txt" 2>/dev/null
"$PAIRMAP" explain "$cafe" Espresso Cappuccino >"$TMP/explain_one.txt" 2>/dev/null
"$PAIRMAP" explain "$cafe" "Black tea with lemon" Pretzel --sign both --min-count 1 \
    >"$TMP/explain_mid.txt" 2>/dev/null
"$PAIRMAP" map "$cafe" -o "$TMP/map" >/dev/null 2>&1
check "map.html written" test -s "$TMP/map/map.html"
url="file://$TMP/map/map.html"
n=0
for frag in "item=Espresso" "item=Black%20tea%20with%20lemon&q=0.0005" "item=Pretzel&q=0.00004"; do
    n=$((n + 1))
    HOME="$TMP/home" chromium --headless --no-sandbox --disable-gpu \
        --user-data-dir="$TMP/chromium" --dump-dom "$url#$frag" 2>/dev/null >"$TMP/page-$n.html"
done

CASES=$((CASES + 1))
/usr/bin/python3 - "$TMP" <<'PY' || fail "q-values printed in another style"
import glob, html, re, sys
import pandas as pd
d = sys.argv[1]
bad, seen = [], 0
STYLE = re.compile(r"^(0|1|0\.0{0,3}[1-9][0-9]?|[1-9](\.[0-9])?e-[0-9]{2,3})$")


def want(q):
    return "%.2g" % q  # C's printf, as Python documents its % formatting


def same(where, got, q):
    global seen
    seen += 1
    if got != want(q) or not STYLE.match(got):
        bad.append("%s: %r for q = %r (%%.2g: %r)" % (where, got, q, want(q)))


for name in ("pairs", "pairs_both", "partners", "partners_set", "partners_neg"):
    csv = pd.read_csv("%s/%s.csv" % (d, name), keep_default_na=False)
    lines = open("%s/%s.txt" % (d, name), encoding="utf-8").read().splitlines()
    head = next(i for i, ln in enumerate(lines) if ln.rstrip().endswith("q_value"))
    rows = [ln for ln in lines[head + 1:] if ln.strip() and not ln.startswith("(")]
    if len(rows) != len(csv):
        bad.append("%s: %d text rows, %d CSV rows" % (name, len(rows), len(csv)))
        continue
    for ln, q in zip(rows, csv["q_value"]):
        same("%s: %s" % (name, ln.split("  ")[0]), ln.split()[-1], float(q))
for f in sorted(glob.glob(d + "/explain_*.txt")):
    t = open(f, encoding="utf-8").read()
    q = float(re.search(r"^q_value = (\S+)$", t, re.M).group(1))
    m = re.search(r"--max-q \S+ +q (\S+) \(", t)
    if not m:
        bad.append("%s: no --max-q line" % f)
        continue
    same(f.rsplit("/", 1)[1], m.group(1), q)
pages = sorted(glob.glob(d + "/page-*.html"))
for f in pages:
    t = open(f, encoding="utf-8").read()
    cells = re.findall(r'<td data-col="q_value" data-v="([^"]+)">([^<]*)<', t)
    if not cells:
        bad.append("%s: no q_value cell (the page's script did not run?)" % f)
    for v, shown in cells:
        same(f.rsplit("/", 1)[1], html.unescape(shown), float(v))
    slider = re.search(r'id="pm-q-out"[^>]*>([^<]*)<', t)
    q = {"page-2.html": 0.0005, "page-3.html": 0.00004}.get(f.rsplit("/", 1)[1])
    if q is not None and slider:
        same(f.rsplit("/", 1)[1] + " q read-out", html.unescape(slider.group(1)), q)
    elif q is not None:
        bad.append("%s: no q read-out" % f)
print("q-values checked: %d" % seen)
if seen < 100:
    bad.append("only %d q-values seen" % seen)
if bad:
    print("\n".join(bad[:30]), file=sys.stderr)
    sys.exit(1)
PY
finish
