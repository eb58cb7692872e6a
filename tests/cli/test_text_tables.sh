#!/usr/bin/env bash
# pairs and items on a terminal (issue 16 point 7): an aligned text table when standard output
# is a terminal (util-linux `script -qc` gives the command one), CSV when it is piped, and
# CSV on a terminal with --csv. The text table's rows and rounded numbers are checked against
# the CSV of the same run read with pandas (the CSV's columns are checked elsewhere against
# scipy and statsmodels).
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
cafe="$DEMO/cafe-orders.csv"
command -v script >/dev/null || { fail "util-linux 'script' is missing"; finish; }
on_tty "$TMP/pairs.txt" pairs "$cafe" --sort lift
"$PAIRMAP" pairs "$cafe" --sort lift --quiet >"$TMP/pairs.csv"
on_tty "$TMP/pairs_csv.txt" pairs "$cafe" --sort lift --csv
on_tty "$TMP/items.txt" items "$cafe" --unit orders
"$PAIRMAP" items "$cafe" --sort share --quiet >"$TMP/items.csv"
on_tty "$TMP/items_csv.txt" items "$cafe" --csv
CASES=$((CASES + 1))
/usr/bin/python3 - "$TMP" <<'PY' || fail "the text tables do not match the CSV"
import re, sys
import pandas as pd
d = sys.argv[1]
bad = []
csv = pd.read_csv(f"{d}/pairs.csv", keep_default_na=False)
lines = open(f"{d}/pairs.txt").read().splitlines()
if not lines[0].startswith(f"{len(csv)} pairs kept of "):
    bad.append("pairs: title line " + lines[0])
head = lines[1].split()
if head[:3] != ["item_a", "item_b", "together"] or head[-1] != "q_value":
    bad.append("pairs: header " + lines[1])
rows = lines[2:]
if len(rows) != len(csv):
    bad.append(f"pairs: {len(rows)} rows on the terminal, {len(csv)} in the CSV")
# the columns line up: every row has its together value ending where the header's does
end = lines[1].index("together") + len("together")
for i, (line, r) in enumerate(zip(rows, csv.itertuples())):
    if not (line.startswith(r.item_a) and line[:end].rstrip().endswith(str(r.together))):
        bad.append(f"pairs row {i}: {line!r} is not {r.item_a} / {r.item_b} / {r.together}")
        continue
    num = line[end - 9:].split()
    want = [f"{r.together}", f"{r.expected:.1f}", f"{100 * r.confidence_ab:.1f}%",
            f"{100 * r.confidence_ba:.1f}%", f"{r.lift:.2f}", f"{r.phi:.3f}",
            f"{r.jaccard:.3f}", f"{r.q_value:.2g}"]
    if num != want:
        bad.append(f"pairs row {i}: {num} != {want}")
if open(f"{d}/pairs_csv.txt").read() != open(f"{d}/pairs.csv").read():
    bad.append("pairs --csv on a terminal differs from the piped CSV")
it = pd.read_csv(f"{d}/items.csv", keep_default_na=False)
lines = open(f"{d}/items.txt").read().splitlines()
if "sorted by share" not in lines[0] or lines[1].split()[:2] != ["item", "orders"]:
    bad.append("items: title or header " + lines[0] + " / " + lines[1])
for i, (line, r) in enumerate(zip(lines[2:], it.itertuples())):
    want = (f"{r.respondents} {100 * r.share:.1f}% [{100 * r.share_low:.1f}, "
            f"{100 * r.share_high:.1f}]")
    got = line[len(r.item):] if line.startswith(r.item + " ") else ""
    got = " ".join(got.replace("[", "[ ").replace(",", ", ").split()).replace("[ ", "[")
    if got != want:
        bad.append(f"items row {i}: {line!r}, expected {r.item} {want}")
if len(lines) - 2 != len(it):
    bad.append(f"items: {len(lines) - 2} rows on the terminal, {len(it)} in the CSV")
if open(f"{d}/items_csv.txt").read() != open(f"{d}/items.csv").read():
    bad.append("items --csv on a terminal differs from the piped CSV (--sort share)")
for b in bad[:10]:
    print(b, file=sys.stderr)
sys.exit(1 if bad else 0)
PY
# piped: CSV with the contract header
CASES=$((CASES + 1))
head -1 "$TMP/pairs.csv" | grep -q '^item_a,item_b,together,expected,' ||
    fail "pairs piped is not CSV: $(head -1 "$TMP/pairs.csv")"
finish
