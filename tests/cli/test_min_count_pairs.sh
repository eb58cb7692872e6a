#!/usr/bin/env bash
# Pairs left out by --min-count alone (issue 16 point 1), pairs and map (partners: its own
# family, tests/cli/test_min_count_note.sh): the note says how many pairs
# pass --sign and --max-q but were seen together (at least once) fewer than --min-count
# times, and how to list them (--min-count 1; the never-seen pairs are a reason of their own
# in the summary). The reference count is computed here from the demo's rows with scipy (Fisher's
# exact test below Cochran's rule, else the one-sided chi-square from the signed root, as
# DESIGN.md states the tests) and statsmodels' Benjamini-Hochberg over the whole family.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
cafe="$DEMO/cafe-orders.csv"
"$PAIRMAP" pairs "$cafe" --sign negative >/dev/null 2>"$TMP/pairs_neg.err"
"$PAIRMAP" pairs "$cafe" --min-count 150 >/dev/null 2>"$TMP/pairs_pos.err"
"$PAIRMAP" map "$cafe" --sign negative -o "$TMP/map" >/dev/null 2>"$TMP/map_neg.err"
CASES=$((CASES + 1))
/usr/bin/python3 - "$cafe" "$TMP" <<'PY' || fail "the --min-count notes differ from the reference"
import re, sys, itertools
import numpy as np
import pandas as pd
from scipy.stats import fisher_exact, norm
from statsmodels.stats.multitest import multipletests
d = pd.read_csv(sys.argv[1], keep_default_na=False, dtype=str)
tmp = sys.argv[2]
idc, itc = d.columns[0], d.columns[1]
d[itc] = d[itc].str.strip()
N = d[idc].nunique()
rows = d[d[itc] != ""].drop_duplicates([idc, itc])
baskets = rows.groupby(idc)[itc].apply(set)
count = rows[itc].value_counts()
def family(mc):  # eligible items whose total reaches --min-count (DESIGN.md)
    return sorted(i for i in count.index if 0 < count[i] < N and count[i] >= mc)
items = family(5)
joint = {}
for b in baskets:
    for a, c in itertools.combinations(sorted(x for x in b if x in count.index), 2):
        joint[(a, c)] = joint.get((a, c), 0) + 1
def test(sign, items):
    out = []
    for a, c in itertools.combinations(items, 2):
        na, nc, nab = int(count[a]), int(count[c]), joint.get((a, c), 0)
        exp = [na * nc / N, na * (N - nc) / N, (N - na) * nc / N, (N - na) * (N - nc) / N]
        phi = (N * nab - na * nc) / np.sqrt(na * nc * (N - na) * (N - nc))
        if min(exp) < 5:
            t = [[nab, na - nab], [nc - nab, N - na - nc + nab]]
            p = fisher_exact(t, alternative="less" if sign < 0 else "greater")[1]
        else:
            z = phi * np.sqrt(N)
            p = norm.cdf(z) if sign < 0 else norm.sf(z)
        out.append((a, c, nab, phi, p))
    q = multipletests([o[4] for o in out], method="fdr_bh")[1]
    return [(a, c, nab, phi, qq) for (a, c, nab, phi, _), qq in zip(out, q)]
bad = []
def note(path):
    m = re.search(r"note: (\d+) pairs? pass(?:es)? --sign and --max-q but (?:was|were) seen "
                  r"together fewer than --min-count \((\d+)\) times.*; (--min-count 1 lists)",
                  open(path).read(), re.M)
    return (int(m.group(1)), m.group(3)) if m else (0, "")
neg = test(-1, items)
hid = [r for r in neg if 0 < r[2] < 5 and r[4] <= 0.05 and r[3] < 0]
for f in ["pairs_neg.err", "map_neg.err"]:
    n, how = note(f"{tmp}/{f}")
    if n != len(hid) or not how:
        bad.append(f"{f}: note says {n} ({how}); scipy: {len(hid)}")
pos = test(1, family(150))  # positive pairs under a high bound: --min-count 150
hidp = [r for r in pos if 0 < r[2] < 150 and r[4] <= 0.05 and r[3] > 0]
if not hidp or note(f"{tmp}/pairs_pos.err")[0] != len(hidp):
    bad.append(f"positive: note says {note(tmp + '/pairs_pos.err')[0]}, scipy {len(hidp)}")
for b in bad:
    print(b, file=sys.stderr)
sys.exit(1 if bad else 0)
PY
finish
