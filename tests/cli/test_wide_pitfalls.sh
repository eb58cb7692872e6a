#!/usr/bin/env bash
# Wide-format pitfalls said out loud (issue 16 point 9): a selected label column that holds
# free text, and a placeholder such as '-' that reads as "not asked", each get a note naming
# the column, the most frequent such values and the option that fixes it (--skip-col,
# --drop-value). The counts in the notes are checked against pandas' value_counts of the
# demo file's columns; the clean selection of the README gets no such note.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
fest="$DEMO/festival-survey.csv"
"$PAIRMAP" items "$fest" --format wide --columns drinks_ >/dev/null 2>"$TMP/raw.err" ||
    fail "items --columns drinks_ failed: $(cat "$TMP/raw.err")"
"$PAIRMAP" items "$fest" --format wide --columns drinks_ --columns "hot dishes" \
    --columns sweets_ --skip-col drinks_other --drop-value - >/dev/null 2>"$TMP/clean.err" ||
    fail "the README's selection failed: $(cat "$TMP/clean.err")"
CASES=$((CASES + 1))
/usr/bin/python3 - "$fest" "$TMP/raw.err" "$TMP/clean.err" <<'PY' || fail "the pitfall notes do not match the file"
import re, sys
import pandas as pd
d = pd.read_csv(sys.argv[1], keep_default_na=False, dtype=str)
err = open(sys.argv[2]).read().splitlines()
clean = open(sys.argv[3]).read()
bad = []
# free text: drinks_other's answers (empty and '-' are not answers)
other = d["drinks_other"][~d["drinks_other"].isin(["", "-"])].value_counts()
free = [l for l in err if "column 'drinks_other' looks like free text" in l]
if len(free) != 1:
    bad.append("no free-text note for drinks_other")
else:
    l = free[0]
    if f": {len(other)} different answers" not in l:
        bad.append(f"free text: expected {len(other)} answers: {l}")
    top = re.findall(r"'([^']*)' \((\d+) cells\)", l)
    want = [(k, str(v)) for k, v in other.head(3).items()]
    if sorted(top, key=lambda t: -int(t[1])) != want and [int(v) for _, v in top] != [v for v in other.head(3)]:
        bad.append(f"free text: most frequent {top}, pandas {want}")
    if "--skip-col 'drinks_other'" not in l:
        bad.append("free text: no --skip-col hint")
# the placeholder '-' in the label columns drinks_01..drinks_10
cols = [c for c in d.columns if re.fullmatch(r"drinks_\d+", c)]
dash = int((d[cols] == "-").sum().sum())
ph = [l for l in err if "looks like 'not asked'" in l]
if len(ph) != 1 or f"'-' ({dash} cells)" not in ph[0] or "--drop-value '-'" not in ph[0] \
        or f"'{cols[0]}'" not in ph[0]:
    bad.append(f"placeholder: expected '-' ({dash} cells) from '{cols[0]}': {ph}")
if "free text" in clean or "not asked" in clean:
    bad.append("a pitfall note on the README's clean selection")
for b in bad:
    print(b, file=sys.stderr)
sys.exit(1 if bad else 0)
PY
finish
