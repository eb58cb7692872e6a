#!/usr/bin/env bash
# map --help (issue 16 point 10): the picture's options stand under a heading of their own,
# apart from the clustering and layout options, and the seed rule is stated in words, not as
# a constant. (What each listed option does is tried by test_help_options.sh.)
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
CASES=$((CASES + 1))
"$PAIRMAP" map --help >"$TMP/help.txt" || fail "map --help: exit $?"
/usr/bin/python3 - "$TMP/help.txt" <<'PY' || fail "map --help: picture options or seed rule"
import re, sys
t = open(sys.argv[1]).read()
bad = []
if re.search(r"0x[0-9A-Fa-f]{4,}", t):
    bad.append("a hex constant in the help")
parts = re.split(r"\n(?=[A-Z][^\n]*:\n)", t)
pic = [p for p in parts if p.startswith("Picture")]
if len(pic) != 1:
    bad.append("no 'Picture' heading")
else:
    for o in ["--title", "--draw", "--width", "--color-by", "--no-html"]:
        if o not in pic[0]:
            bad.append(f"{o} not under the picture heading")
    for o in ["--seed", "--restarts", "--resolution"]:
        if o in pic[0]:
            bad.append(f"{o} under the picture heading")
if "the same --seed repeat every file" not in re.sub(r"\s+", " ", t):
    bad.append("the seed rule is not stated in words")
for b in bad:
    print(b, file=sys.stderr)
sys.exit(1 if bad else 0)
PY
finish
