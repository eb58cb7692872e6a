"""Shared helpers for the reference checks of pairmap (tests/ref/*.py).

The checks treat pairmap as a black box: they write input files at test time, run the CLI
(contract of /work/shared/DESIGN.md) and compare its CSV output with outside references:
numpy, scipy, statsmodels, networkx and exact rational arithmetic (Python's fractions module).

Binary: $PAIRMAP, default build/pairmap relative to the repository root.
Exit status of every check script: 0 all passed, 1 a check failed, 2 could not run (no binary).
"""

import csv
import decimal
import functools
import io
import math
import os
import subprocess
import sys
import tempfile
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats
from statsmodels.stats.multitest import multipletests

REPO = Path(__file__).resolve().parents[2]

# Output columns, contract of DESIGN.md ("Output files").
PAIR_COLUMNS = ["item_a", "item_b", "together", "expected", "support", "confidence_ab",
                "confidence_ba", "lift", "phi", "jaccard", "test", "p_value", "q_value",
                "odds_ratio", "odds_ratio_low", "odds_ratio_high"]
ITEM_COLUMNS = ["item", "category", "respondents", "share", "share_low", "share_high"]
NUMERIC_PAIR_COLUMNS = PAIR_COLUMNS[2:10] + ["p_value", "q_value"]

# p-values below this are compared only as "both tiny": scipy and GSL underflow at different
# points near the bottom of the double range (chi-square tail beyond x ~ 1400 is 0 in both).
TINY_P = 1e-290


def binary():
    env = os.environ.get("PAIRMAP")
    return Path(env) if env else REPO / "build" / "pairmap"


def require_binary():
    b = binary()
    if not (b.is_file() and os.access(b, os.X_OK)):
        print(f"SETUP ERROR: pairmap binary not found or not executable: {b} "
              f"(build it, or set PAIRMAP)")
        sys.exit(2)
    return b


class RunError(Exception):
    pass


def run(args, stdin=None):
    """Run pairmap with args; return stdout decoded as UTF-8. Raise RunError on non-zero exit."""
    cmd = [str(binary())] + [str(a) for a in args]
    try:
        p = subprocess.run(cmd, input=stdin, capture_output=True, timeout=900)
    except (OSError, subprocess.TimeoutExpired) as e:
        raise RunError(f"`{' '.join(cmd)}` could not run: {e}") from e
    if p.returncode != 0:
        raise RunError(f"`{' '.join(cmd)}` exited {p.returncode}: "
                       f"{p.stderr.decode('utf-8', 'replace').strip()[:2000]}")
    return p.stdout.decode("utf-8")


def run_raw(args, stdin=None):
    cmd = [str(binary())] + [str(a) for a in args]
    return subprocess.run(cmd, input=stdin, capture_output=True, timeout=900)


def read_csv(text, columns):
    """Parse CSV keeping every cell a string (no NA guessing: an item may be named "NA")."""
    try:
        df = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False, na_filter=False)
    except Exception as e:  # empty output, ragged rows, bad quoting
        raise RunError(f"output is not the expected CSV ({e}): {text[:300]!r}") from e
    if list(df.columns) != columns:
        raise RunError(f"output columns {list(df.columns)} differ from contract {columns}")
    return df


def tempdir():
    return tempfile.TemporaryDirectory(prefix="pairmap-ref-")


def bkey(s):
    """Byte order of DESIGN.md ('item names sorted by bytes')."""
    return s.encode("utf-8")


# ---------------------------------------------------------------- input files

def write_long(path, rows, header=("respondent", "item")):
    """rows: iterables of cells. Written with the csv module (quotes where needed)."""
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(header)
        w.writerows(rows)


def incidence_rows(M, names, ids=None, weights=None, empty_rows=True):
    """Long rows (id, item[, weight]) from a boolean respondent x item matrix.
    A respondent who chose nothing gets one row with an empty item (DESIGN.md: counts in N)."""
    M = np.asarray(M, dtype=bool)
    rows = []
    for i in range(M.shape[0]):
        rid = ids[i] if ids is not None else f"r{i + 1:05d}"
        extra = [] if weights is None else [fmt_weight(weights[i])]
        chosen = np.flatnonzero(M[i])
        if len(chosen) == 0:
            if empty_rows:
                rows.append([rid, ""] + extra)
        for j in chosen:
            rows.append([rid, names[j]] + extra)
    return rows


def fmt_weight(w):
    return repr(float(w)) if not float(w).is_integer() else str(int(w))


# ---------------------------------------------------------------- references

def table2x2(N, na, nb, nab):
    return [[nab, na - nab], [nb - nab, N - na - nb + nab]]


def rule_test(N, na, nb):
    """DESIGN.md: Fisher where the smallest expected cell of the 2x2 table is below 5 (Cochran's
    rule, common practice), else chi-square 1 df. Decided in exact integer arithmetic:
    min(r_i c_j)/N < 5  <=>  min(r_i c_j) < 5 N."""
    m = min(na * nb, na * (N - nb), (N - na) * nb, (N - na) * (N - nb))
    return "fisher" if m < 5 * N else "chi2"


SCIPY_ALT = {"both": "two-sided", "positive": "greater", "negative": "less"}


@functools.lru_cache(maxsize=None)
def ref_p(N, na, nb, nab, sign):
    """Reference p of one unweighted pair under the rule: (test, p, source).
    Fisher: scipy.stats.fisher_exact (alternative two-sided/greater/less).
    chi2 two-sided: scipy.stats.chi2_contingency(correction=False);
    chi2 one-sided: signed root z = sign(phi) sqrt(chi2): greater scipy.stats.norm.sf(z),
    less scipy.stats.norm.cdf(z)."""
    test = rule_test(N, na, nb)
    t = table2x2(N, na, nb, nab)
    if test == "fisher":
        p = float(stats.fisher_exact(t, alternative=SCIPY_ALT[sign])[1])
        return test, p
    chi2, p2, _, _ = stats.chi2_contingency(np.array(t, dtype=float), correction=False)
    if sign == "both":
        return test, float(p2)
    num = N * nab - na * nb
    z = math.copysign(math.sqrt(chi2), num) if num != 0 else 0.0
    return test, float(stats.norm.sf(z) if sign == "positive" else stats.norm.cdf(z))


@functools.lru_cache(maxsize=None)
def exact_fisher(N, na, nb, nab, sign):
    """Fisher's exact test in exact rational arithmetic (hypergeometric weights
    C(na,x) C(N-na,nb-x) / C(N,nb)); two-sided sums the tables no more probable than the
    observed one, with exact ties. A second, independent reference for scipy."""
    lo, hi = max(0, na + nb - N), min(na, nb)
    w = {x: math.comb(na, x) * math.comb(N - na, nb - x) for x in range(lo, hi + 1)}
    if sign == "positive":
        s = sum(v for x, v in w.items() if x >= nab)
    elif sign == "negative":
        s = sum(v for x, v in w.items() if x <= nab)
    else:
        s = sum(v for v in w.values() if v <= w[nab])
    return Fraction(s, math.comb(N, nb))


def ref_weighted_p(neff, phi, sign):
    """Weighted test of DESIGN.md: chi-square 1 df of neff * phi^2 (Kish 1965 effective sample
    size neff = (sum w)^2 / sum w^2): two-sided scipy.stats.chi2.sf; one-sided from the signed
    root with scipy.stats.norm.sf / norm.cdf."""
    chi2 = neff * phi * phi
    if sign == "both":
        return float(stats.chi2.sf(chi2, 1))
    z = math.copysign(math.sqrt(chi2), phi) if phi != 0 else 0.0
    return float(stats.norm.sf(z) if sign == "positive" else stats.norm.cdf(z))


def exact_phi(N, na, nb, nab):
    """phi from exact integers, square root in 50-digit decimal, rounded once to double."""
    num = N * nab - na * nb
    den = na * nb * (N - na) * (N - nb)
    with decimal.localcontext() as ctx:
        ctx.prec = 50
        return float(decimal.Decimal(num) / decimal.Decimal(den).sqrt())


def exact_measures(N, na, nb, nab):
    """Point measures of DESIGN.md in exact rational arithmetic, each rounded once to double."""
    return {
        "together": float(nab),
        "expected": float(Fraction(na * nb, N)),
        "support": float(Fraction(nab, N)),
        "confidence_ab": float(Fraction(nab, na)),
        "confidence_ba": float(Fraction(nab, nb)),
        "lift": float(Fraction(N * nab, na * nb)),
        "phi": exact_phi(N, na, nb, nab),
        "jaccard": float(Fraction(nab, na + nb - nab)),
    }


def float_measures(N, na, nb, nab):
    """The same measures with numpy float64 arithmetic (used for non-integer weights)."""
    N, na, nb, nab = (np.float64(v) for v in (N, na, nb, nab))
    return {
        "together": float(nab),
        "expected": float(na * nb / N),
        "support": float(nab / N),
        "confidence_ab": float(nab / na),
        "confidence_ba": float(nab / nb),
        "lift": float(N * nab / (na * nb)),
        "phi": float((N * nab - na * nb) / np.sqrt(na * nb * (N - na) * (N - nb))),
        "jaccard": float(nab / (na + nb - nab)),
    }


class Reference:
    """Every pair of eligible items (0 < n < N) of an incidence matrix, with counts, the
    reference test and p under one sign, and Benjamini-Hochberg q over all of them
    (statsmodels multipletests fdr_bh), pairs never seen together included. Under
    --sign positive the p of a never-seen pair is 1 (DESIGN.md); under negative and both it is
    computed like any other pair.  weights=None: unweighted rule (Fisher / chi-square);
    otherwise the weighted chi-square with Kish's effective sample size."""

    def __init__(self, M, names, sign, weights=None):
        M = np.asarray(M, dtype=bool)
        self.sign = sign
        self.weighted = weights is not None
        raw_n = M.sum(axis=0)
        Nraw = M.shape[0]
        self.eligible = [j for j in range(M.shape[1]) if 0 < raw_n[j] < Nraw]
        self.ineligible = [names[j] for j in range(M.shape[1]) if not 0 < raw_n[j] < Nraw]
        order = sorted(self.eligible, key=lambda j: bkey(names[j]))
        Mi = M.astype(np.int64)
        raw_joint = Mi.T @ Mi
        if self.weighted:
            w = np.asarray(weights, dtype=float)
            self.N = float(w.sum())
            self.neff = float(w.sum() ** 2 / (w * w).sum())
            wn = (M * w[:, None]).sum(axis=0)
            wjoint = (Mi * w[:, None]).T @ Mi.astype(float)
        else:
            self.N = int(Nraw)
        self.pairs = {}
        keys, pvals = [], []
        for x in range(len(order)):
            for y in range(x + 1, len(order)):
                ja, jb = order[x], order[y]
                a, b = names[ja], names[jb]
                seen = int(raw_joint[ja, jb]) > 0
                if self.weighted:
                    na, nb, nab = float(wn[ja]), float(wn[jb]), float(wjoint[ja, jb])
                    meas = float_measures(self.N, na, nb, nab)
                    phi = meas["phi"]
                    test = "chi2"
                    p = 1.0 if (sign == "positive" and not seen) else \
                        ref_weighted_p(self.neff, phi, sign)
                    direction = np.sign(self.N * nab - na * nb)
                else:
                    na, nb, nab = int(raw_n[ja]), int(raw_n[jb]), int(raw_joint[ja, jb])
                    meas = None  # computed lazily (exact arithmetic) for listed pairs only
                    test, p = ref_p(self.N, na, nb, nab, sign)
                    if sign == "positive" and not seen:
                        p = 1.0
                    direction = np.sign(self.N * nab - na * nb)
                self.pairs[(a, b)] = dict(na=na, nb=nb, nab=nab, raw_nab=int(raw_joint[ja, jb]),
                                          seen=seen, test=test, p=p, direction=int(direction),
                                          meas=meas)
                keys.append((a, b))
                pvals.append(p)
        self.m = len(keys)
        if self.m:
            q = multipletests(np.array(pvals), method="fdr_bh")[1]
            for k, qq in zip(keys, q):
                self.pairs[k]["q"] = float(qq)

    def measures(self, key):
        r = self.pairs[key]
        if r["meas"] is None:
            r["meas"] = exact_measures(self.N, r["na"], r["nb"], r["nab"])
        return r["meas"]

    def expected_listing(self):
        """Pairs that `--min-count 0 --max-q 1 --sign S` must list: seen together, and for
        positive/negative associated in that direction (phi > 0 / phi < 0)."""
        want = {"both": None, "positive": 1, "negative": -1}[self.sign]
        return {k for k, r in self.pairs.items()
                if r["seen"] and (want is None or r["direction"] == want)}


# ---------------------------------------------------------------- checking

class Checker:
    """Collects comparisons: the largest deviation per reference label, and failures."""

    def __init__(self, name):
        self.name = name
        self.dev = {}        # label -> [max deviation, kind, count, where]
        self.tiny = {}       # label -> count of p pairs both below TINY_P
        self.failures = []
        self.notes = []
        self.nchecks = 0

    def _record(self, label, d, kind, where):
        e = self.dev.setdefault(label, [0.0, kind, 0, ""])
        e[2] += 1
        self.nchecks += 1
        if d > e[0] or (math.isnan(d) and not math.isnan(e[0])):
            e[0], e[3] = d, where

    def fail(self, msg):
        self.nchecks += 1
        self.failures.append(msg)

    def note(self, msg):
        if msg not in self.notes:
            self.notes.append(msg)

    def close(self, label, got, ref, rtol=0.0, atol=0.0, where="", kind="rel"):
        """Pass if |got - ref| <= atol + rtol |ref|. Records |got-ref| (kind abs) or
        |got-ref|/|ref| (kind rel; 0 when both are 0) as the deviation."""
        got, ref = float(got), float(ref)
        if math.isnan(got) or math.isnan(ref):
            d = 0.0 if (math.isnan(got) and math.isnan(ref)) else math.inf
        elif got == ref:
            d = 0.0
        else:
            d = abs(got - ref) if kind == "abs" else abs(got - ref) / abs(ref) if ref else math.inf
        self._record(label, d, kind, where)
        ok = (got == ref) or (not math.isnan(got) and not math.isnan(ref)
                              and abs(got - ref) <= atol + rtol * abs(ref))
        if not ok:
            self.failures.append(f"{label}: {where}: got {got!r}, expected {ref!r}")
        return ok

    def close_p(self, label, got, ref, rtol=1e-9, where=""):
        """p or q: relative tolerance, except that two values both below TINY_P agree."""
        got, ref = float(got), float(ref)
        if max(got, ref) < TINY_P and got >= 0 and ref >= 0:
            self.tiny[label] = self.tiny.get(label, 0) + 1
            self.nchecks += 1
            return True
        return self.close(label, got, ref, rtol=rtol, where=where)

    def equal(self, label, got, ref, where=""):
        self.nchecks += 1
        e = self.dev.setdefault(label, [0, "mismatches", 0, ""])
        e[2] += 1
        if got != ref:
            e[0] += 1
            e[3] = e[3] or where
            self.failures.append(f"{label}: {where}: got {got!r}, expected {ref!r}")
            return False
        return True

    def finish(self):
        print(f"== {self.name}")
        for label, (d, kind, n, where) in self.dev.items():
            if kind == "mismatches":
                print(f"  {label}: {d} mismatches in {n}" + (f" (first: {where})" if d else ""))
            else:
                sym = "|d|" if kind == "abs" else "|d|/|ref|"
                print(f"  max {sym} {label}: {d:.3g} over {n}" + (f" (at {where})" if d else ""))
        for label, n in self.tiny.items():
            print(f"  {label}: {n} values with both p below {TINY_P:g} (counted as agreeing)")
        for n in self.notes:
            print(f"  note: {n}")
        if self.failures:
            print(f"  FAIL: {len(self.failures)} of {self.nchecks} checks failed; first ones:")
            for f in self.failures[:25]:
                print(f"    - {f}")
            print(f"RESULT {self.name}: FAIL")
            return 1
        print(f"RESULT {self.name}: PASS ({self.nchecks} checks)")
        return 0


def check_pairs_output(chk, df, ref, label, weighted=False, measure_rtol=1e-12,
                       p_rtol=1e-9, compare_tests=True):
    """Compare a parsed `pairs` output with a Reference: order, listed set, every column."""
    rows = list(df.itertuples(index=False))
    keys = [(r.item_a, r.item_b) for r in rows]
    for (a, b) in keys:
        if not bkey(a) < bkey(b):
            chk.fail(f"{label}: row {a!r},{b!r}: item_a is not below item_b by bytes")
    if keys != sorted(keys, key=lambda k: (bkey(k[0]), bkey(k[1]))):
        chk.fail(f"{label}: rows are not ordered by item_a, item_b (bytes)")
    if len(set(keys)) != len(keys):
        chk.fail(f"{label}: duplicate rows")
    want = ref.expected_listing()
    got = set(keys)
    for k in sorted(want - got):
        chk.fail(f"{label}: pair {k} (seen together, direction {ref.pairs[k]['direction']}) "
                 f"not listed under --sign {ref.sign}")
    for k in sorted(got - want):
        if k not in ref.pairs:
            chk.fail(f"{label}: listed pair {k} is not a pair of eligible items "
                     f"(ineligible items: {ref.ineligible})")
        elif not ref.pairs[k]["seen"]:
            chk.note(f"{label}: pairs never seen together are listed (together = 0)")
        elif ref.pairs[k]["direction"] == 0:
            chk.note(f"{label}: pairs with phi exactly 0 are listed under --sign {ref.sign}")
        else:
            chk.fail(f"{label}: pair {k} with direction {ref.pairs[k]['direction']} listed "
                     f"under --sign {ref.sign}")
    src_chi2 = "scipy chi2_contingency(correction=False)" if ref.sign == "both" \
        else "signed chi-square root (scipy norm)"
    for r in rows:
        k = (r.item_a, r.item_b)
        if k not in ref.pairs:
            continue
        e = ref.pairs[k]
        where = f"{label} {k[0]!r},{k[1]!r} N={ref.N} na={e['na']} nb={e['nb']} nab={e['nab']}"
        m = ref.measures(k)
        mref = "numpy float64 formulas" if weighted else "exact rational arithmetic"
        for col in ("together", "expected", "support", "confidence_ab", "confidence_ba",
                    "lift", "jaccard"):
            chk.close(f"{col} vs {mref}", float(getattr(r, col)), m[col], rtol=measure_rtol,
                      where=where)
        chk.close(f"phi vs {mref}", float(r.phi), m["phi"], rtol=measure_rtol, atol=1e-15,
                  where=where)
        if compare_tests:
            chk.equal("test column vs rule (min expected cell < 5 -> fisher)" if not weighted
                      else "test column (weighted: chi2 only)", r.test, e["test"], where)
        got_p = float(r.p_value)
        if weighted:
            chk.close_p(f"p ({ref.sign}) vs scipy chi2.sf(n_eff*phi^2) / norm", got_p, e["p"],
                        rtol=p_rtol, where=where)
        elif e["test"] == "fisher":
            # Two references: scipy fisher_exact, and exact rational arithmetic (the truth).
            # pairmap must agree with the exact value; with scipy too, unless scipy itself
            # differs from the exact value (then noted, not held against pairmap).
            exf = float(exact_fisher(ref.N, e["na"], e["nb"], e["nab"], ref.sign))
            chk.close_p(f"p ({ref.sign}) vs exact rational Fisher", got_p, exf, rtol=p_rtol,
                        where=where)
            lab = f"p ({ref.sign}) vs scipy fisher_exact(alternative={SCIPY_ALT[ref.sign]})"
            if max(exf, e["p"]) < TINY_P or abs(e["p"] - exf) <= p_rtol * exf:
                chk.close_p(lab, got_p, e["p"], rtol=p_rtol, where=where)
            else:
                chk.note(f"{where}: scipy fisher_exact {e['p']!r} differs from the exact "
                         f"value {exf!r}; pairmap gives {got_p!r}")
        else:
            chk.close_p(f"p ({ref.sign}) vs {src_chi2}", got_p, e["p"], rtol=p_rtol, where=where)
        chk.close_p(f"q ({ref.sign}) vs statsmodels multipletests fdr_bh over all "
                    f"eligible pairs", float(r.q_value), e["q"], rtol=p_rtol,
                    where=where + f" m={ref.m}")
