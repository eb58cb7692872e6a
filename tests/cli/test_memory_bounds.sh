#!/usr/bin/env bash
# Memory that must not grow with what the rows do not hold (issue 13 points 1 and 2). Every
# case runs under `ulimit -v` (an ASan build: its hard_rss_limit_mb, see bound_memory) (2 GB of address space), so a regression fails fast ("out of
# memory", exit 4) instead of taking the machine.
# Point 2: `--respondents N` costs nothing per respondent (once a table of N log-factorials:
# 7.8 GB for N = 1e9, 32 GB for the documented maximum 4294967295). The p-values at N = 1e9 are
# checked against scipy.stats.hypergeom (the one-sided Fisher test is its upper tail).
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

bound_memory 2000
CAFE="$DEMO/cafe-orders.csv"

# ---- point 2: --respondents up to the documented maximum ----
for n in 1000000000 4294967295; do
    expect_ok items "$CAFE" --respondents "$n"
    expect_ok pairs "$CAFE" --respondents "$n"
    expect_ok map "$CAFE" --respondents "$n" -o "$TMP/map$n" --quiet
done
CASES=$((CASES + 1))
if "$PAIRMAP" pairs "$CAFE" --respondents 1000000000 --min-count 1 >"$TMP/pairs1e9.csv" 2>/dev/null; then
    if ! "$PAIRMAP" items "$CAFE" --respondents 1000000000 >"$TMP/items1e9.csv" 2>/dev/null; then
        fail "items --respondents 1e9 failed"
    fi
    PAIRS="$TMP/pairs1e9.csv" ITEMS="$TMP/items1e9.csv" /usr/bin/python3 - <<'PY' || fail "p-values at N = 1e9 differ from scipy's hypergeometric tail"
import csv, math, os, sys
from scipy.stats import hypergeom
N = 1000000000
count = {r["item"]: int(r["respondents"]) for r in csv.DictReader(open(os.environ["ITEMS"]))}
bad = checked = 0
for r in csv.DictReader(open(os.environ["PAIRS"])):
    if r["test"] != "fisher":
        continue
    x, na, nb = int(r["together"]), count[r["item_a"]], count[r["item_b"]]
    ref = hypergeom.logsf(x - 1, N, na, nb)  # P(X >= x), scipy
    p = float(r["p_value"])
    checked += 1
    # log-factorials near 1e9 are about 2e10, so their differences carry about 1e-5 of
    # absolute error in log p (double precision): p to 1e-4 relative; p = 0 where it underflows
    ok = ref < -740 if p == 0 else abs(math.log(p) - ref) <= 1e-4
    if not ok:
        bad += 1
        if bad <= 5:
            print(r["item_a"], r["item_b"], p, ref, file=sys.stderr)
print(checked, "fisher p-values checked,", bad, "off", file=sys.stderr)
sys.exit(1 if bad or checked < 100 else 0)
PY
else
    fail "pairs --respondents 1e9 failed under ulimit -v"
fi

finish
