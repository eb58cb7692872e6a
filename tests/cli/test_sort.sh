#!/usr/bin/env bash
# --sort (issue 16 point 7): pairs and items in the order asked for. The reference order is
# pandas' stable sort_values of the default (name-ordered) output on the stated keys.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
cafe="$DEMO/cafe-orders.csv"
"$PAIRMAP" pairs "$cafe" --sign both --min-count 3 >"$TMP/name.csv" 2>/dev/null
for key in together lift phi q confidence; do
    "$PAIRMAP" pairs "$cafe" --sign both --min-count 3 --sort $key >"$TMP/$key.csv" 2>/dev/null
done
"$PAIRMAP" pairs "$cafe" --sign negative --min-count 0 >"$TMP/neg.csv" 2>/dev/null
"$PAIRMAP" pairs "$cafe" --sign negative --min-count 0 --sort phi >"$TMP/neg_phi.csv" 2>/dev/null
"$PAIRMAP" items "$cafe" >"$TMP/items.csv" 2>/dev/null
"$PAIRMAP" items "$cafe" --sort share >"$TMP/items_share.csv" 2>/dev/null
CASES=$((CASES + 1))
/usr/bin/python3 - "$TMP" <<'PY' || fail "sorted output differs from pandas' order"
import sys
import pandas as pd
d = sys.argv[1]
def rd(n):
    return pd.read_csv(f"{d}/{n}.csv", keep_default_na=False)
base = rd("name")
base["pos"] = range(len(base))
base["conf"] = base[["confidence_ab", "confidence_ba"]].max(axis=1)
bad = 0
for key, col, asc in [("together", "together", False), ("lift", "lift", False),
                      ("phi", "phi", False), ("q", "q_value", True), ("confidence", "conf", False)]:
    want = base.sort_values([col, "q_value", "together", "pos"],
                            ascending=[asc, True, False, True], kind="mergesort")
    got = rd(key)
    if list(zip(got.item_a, got.item_b)) != list(zip(want.item_a, want.item_b)):
        print(f"--sort {key}: order differs", file=sys.stderr); bad += 1
neg = rd("neg"); neg["pos"] = range(len(neg))
want = neg.sort_values(["phi", "q_value", "together", "pos"], ascending=[True, True, False, True],
                       kind="mergesort")
got = rd("neg_phi")
if list(zip(got.item_a, got.item_b)) != list(zip(want.item_a, want.item_b)):
    print("--sign negative --sort phi: order differs", file=sys.stderr); bad += 1
it = rd("items"); it["pos"] = range(len(it))
want = it.sort_values(["share", "pos"], ascending=[False, True], kind="mergesort")
if list(rd("items_share").item) != list(want.item):
    print("items --sort share: order differs", file=sys.stderr); bad += 1
# same rows, only reordered
if sorted(rd("lift").to_csv(index=False).splitlines()) != sorted(rd("name").to_csv(index=False).splitlines()):
    print("--sort changed the rows themselves", file=sys.stderr); bad += 1
sys.exit(1 if bad else 0)
PY
expect_fail 1 "" "--sort expects one of name, together, lift, phi, q, confidence, got 'size'" \
    -- pairs "$cafe" --sort size
finish
