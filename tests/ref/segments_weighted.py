#!/usr/bin/python3
"""Reference check of weighted `pairmap segments` and `map --segment-col` (issue 14 point 2,
"Weighted input: shares weighted, intervals on Kish's effective size within the segment, tests
as pairs do with weights") against numpy, scipy and statsmodels, on generated data.

What is checked, per (segment, item) cell of each column:
- base, chose: respondent counts (a pandas group-by, weights ignored);
- share: the chosen weight over the segment's weight (pandas group-by sums);
- share_low/high: scipy.stats.beta.ppf of the Jeffreys prior (Brown, Cai & DasGupta 2001) at
  x' = share * n', n' = (sum w)^2 / sum w^2 over the segment (Kish's effective size, Kish 1965,
  Survey Sampling; the effective-count form of an interval for weighted data is common
  practice);
- m and the log-likelihood: the beta-binomial log-likelihood written with scipy.special
  (gammaln, betaln) at the effective counts (x', n') of every cell, maximised with
  scipy.optimize.minimize_scalar(method="bounded") on log m; pairmap's log-likelihood must reach
  the reference optimum minus 1e-6 and equal the reference at pairmap's m; shrunk and its
  interval from scipy.stats.beta at (x' + m mu, n' - x' + m (1 - mu)), mu the weighted share
  over everyone with a segment;
- test/p_value: "as pairs are tested with weights" (DESIGN.md: chi-square scaled by Kish's
  effective size): scipy.stats.chi2_contingency(correction=False) of the weighted 2x2 table
  (segment against the rest, item against not) rescaled to the effective size of all
  respondents with a segment; q_value: statsmodels multipletests(method="fdr_bh");
- trend_z/p: the Cochran-Armitage formula (Agresti, Categorical Data Analysis, 2nd ed.,
  section 5.3.5; scores 1..k) in numpy at the effective counts, p from scipy.stats.norm.
And: map --segment-col writes the same segments.csv as `pairmap segments` prints; the
Mantel-Haenszel columns of edges.csv are empty with a note (DESIGN.md); --pair-test within
with weights is a usage error (exit 1); weights all scaled by 1024 give the same bytes.
"""

import io
import re
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import optimize, special, stats
from statsmodels.stats.multitest import multipletests

sys.dont_write_bytecode = True
sys.path.insert(0, str(Path(__file__).resolve().parent))
from common import binary, require_binary, run_raw  # noqa: E402

FAILS = []
WORST = {}


def check(cond, what):
    if not cond:
        FAILS.append(what)


def close(name, got, want, rel=1e-9, abs_=1e-12):
    err = abs(got - want)
    WORST[name] = max(WORST.get(name, 0.0), err / abs(want) if want else err)
    check(err <= abs_ + rel * abs(want), f"{name}: {got!r} != {want!r}")


def fnum(s):
    return float(s) if s != "" else float("nan")


def run_ok(args):
    p = run_raw(args)
    if p.returncode != 0:
        raise SystemExit(f"pairmap {' '.join(map(str, args))} exited {p.returncode}: "
                         f"{p.stderr.decode('utf-8', 'replace')[:500]}")
    return p.stdout.decode("utf-8"), p.stderr.decode("utf-8")


def generated(tmp, name, spread, seed, scale=1.0):
    """Long data: id,item,band,day,w. Weights depend on the band (so weighting moves the
    shares) and vary within it; spread 0: the same choice probabilities everywhere."""
    rng = np.random.default_rng(seed)
    bands = ["north", "south", "east", "west"]
    days = ["1 Mon", "2 Tue", "3 Wed"]
    base_p = rng.uniform(0.03, 0.4, 20)
    rows = []
    for r in range(1800):
        b = rng.integers(len(bands))
        d = rng.integers(len(days))
        band = bands[b] if r % 53 else ""
        w = float(np.round(rng.lognormal(0.3 * b, 0.6), 3))
        heavy = w > 1.5  # heavy-weighted respondents choose differently: weighting matters
        w *= scale
        p = np.clip(base_p * (1 + spread * (b - 1.5) * np.linspace(-1, 1, 20))
                    * (1 + 0.3 * spread * d) * (1.6 if heavy else 1.0), 0.005, 0.95)
        chosen = [f"item{i:02d}" for i in range(20) if rng.random() < p[i]] or ["item00"]
        for it in chosen:
            rows.append((f"r{r:05d}", it, band, days[d], w))
    df = pd.DataFrame(rows, columns=["id", "item", "band", "day", "w"])
    path = tmp / f"{name}.csv"
    df.to_csv(path, index=False, float_format="%.17g")
    return path, df


def ref_loglik(x, n, mu):
    keep = (mu > 0) & (mu < 1) & (n > 0)
    x, n, mu = x[keep], n[keep], mu[keep]

    def ll(lm):
        m = np.exp(lm)
        a, b = m * mu, m * (1 - mu)
        lc = special.gammaln(n + 1) - special.gammaln(x + 1) - special.gammaln(n - x + 1)
        return float((lc + special.betaln(x + a, n - x + b) - special.betaln(a, b)).sum())

    lo, hi = np.log(1e-3), np.log(1e8)
    grid = np.linspace(lo, hi, 400)
    vals = [ll(g) for g in grid]
    i = int(np.argmax(vals))
    best = vals[i]
    a, b = grid[max(i - 1, 0)], grid[min(i + 1, len(grid) - 1)]
    if b > a:
        r = optimize.minimize_scalar(lambda t: -ll(t), bounds=(a, b), method="bounded",
                                     options={"xatol": 1e-10})
        best = max(best, -r.fun)
    return best, ll


def check_column(out, note, data, col, ordered):
    got = out[out["attribute"] == col]
    d = data[data[col] != ""]
    resp = d.drop_duplicates("id")[["id", col, "w"]]
    wseg = resp.groupby(col)["w"].sum()
    w2seg = resp.groupby(col)["w"].apply(lambda s: (s * s).sum())
    nseg = resp.groupby(col).size()
    neff = wseg ** 2 / w2seg
    dist = d.drop_duplicates(["id", "item"])
    wch = dist.groupby([col, "item"])["w"].sum()
    nch = dist.groupby([col, "item"]).size()
    WB, W2B = resp["w"].sum(), (resp["w"] ** 2).sum()
    neffB = WB * WB / W2B
    wtot = dist.groupby("item")["w"].sum()
    levels = list(dict.fromkeys(got["segment"]))
    items = sorted(set(got["item"]), key=lambda s: s.encode())
    mu = {it: wtot.get(it, 0.0) / WB for it in items}

    def xeff(lv, it):
        return wch.get((lv, it), 0.0) / wseg[lv] * neff[lv]

    m = float(re.search(r"'%s': prior strength m = ([0-9.e+-]+)" % col, note).group(1))
    llg = float(re.search(r"'%s': prior strength .* log-likelihood ([0-9.e+-]+)" % col,
                          note).group(1))
    x = np.array([xeff(lv, it) for lv in levels for it in items])
    n = np.array([neff[lv] for lv in levels for it in items])
    mv = np.array([mu[it] for lv in levels for it in items])
    best, ll = ref_loglik(x, n, mv)
    if m < 1e7:  # scipy's betaln cancels near m = 1e8 (about 1e-7 a cell): interior m only
        check(llg >= best - 1e-6, f"{col}: log-likelihood {llg} below the optimum {best}")
        close(f"loglik at pairmap's m ({col})", llg, ll(np.log(m)), rel=1e-9, abs_=1e-8)
        WORST[f"loglik below optimum ({col})"] = best - llg
    else:
        # at the bound: the reference likelihood must not be clearly higher anywhere below
        check(ll(np.log(m)) >= best - 1e-5 * len(x), f"{col}: m {m} at the bound, not optimal")
    pv, qg = [], []
    for _, row in got.iterrows():
        lv, it = row["segment"], row["item"]
        check(int(row["base"]) == nseg[lv] and int(row["chose"]) == nch.get((lv, it), 0),
              f"{col}/{lv}/{it}: counts")
        sh = wch.get((lv, it), 0.0) / wseg[lv]
        close("share", fnum(row["share"]), sh, rel=1e-13)
        xx, nn = xeff(lv, it), neff[lv]
        lo = 0.0 if xx == 0 else stats.beta.ppf(0.025, xx + 0.5, nn - xx + 0.5)
        hi = 1.0 if sh == 1 else stats.beta.ppf(0.975, xx + 0.5, nn - xx + 0.5)
        close("share_low (Kish)", fnum(row["share_low"]), lo, rel=1e-8, abs_=1e-14)
        close("share_high (Kish)", fnum(row["share_high"]), hi, rel=1e-8)
        a, b = xx + m * mu[it], nn - xx + m * (1 - mu[it])
        close("shrunk", fnum(row["shrunk"]), a / (a + b), rel=1e-12)
        if 0 < mu[it] < 1:
            close("shrunk_low", fnum(row["shrunk_low"]), stats.beta.ppf(0.025, a, b), rel=1e-8)
            close("shrunk_high", fnum(row["shrunk_high"]), stats.beta.ppf(0.975, a, b), rel=1e-8)
            close("index", fnum(row["index"]), (a / (a + b)) / mu[it], rel=1e-12)
        ntot = dist[dist["item"] == it]["id"].nunique()
        if 0 < nseg[lv] < len(resp) and 0 < ntot < len(resp):
            wab = wch.get((lv, it), 0.0)
            t = np.array([[wab, wseg[lv] - wab], [wtot[it] - wab, WB - wseg[lv] - wtot[it] + wab]])
            p = stats.chi2_contingency(t * (neffB / WB), correction=False)[1]
            check(row["test"] == "chi2", f"{col}/{lv}/{it}: test {row['test']} (weighted: chi2)")
            close("p_value (weighted chi2)", fnum(row["p_value"]), p, rel=1e-7, abs_=1e-14)
            pv.append(p)
            qg.append(fnum(row["q_value"]))
        else:
            check(row["p_value"] == "", f"{col}/{lv}/{it}: a p-value where none is defined")
        if ordered and 0 < ntot < len(resp):
            tt = np.arange(1, len(levels) + 1, dtype=float)
            nv = np.array([neff[l] for l in levels])
            xv = np.array([xeff(l, it) for l in levels])
            pbar, tbar = xv.sum() / nv.sum(), (nv * tt).sum() / nv.sum()
            z = (tt * (xv - nv * pbar)).sum() / np.sqrt(pbar * (1 - pbar) *
                                                        (nv * (tt - tbar) ** 2).sum())
            close("trend_z (Kish)", fnum(row["trend_z"]), z, rel=1e-9, abs_=1e-12)
            close("trend_p (Kish)", fnum(row["trend_p"]), 2 * stats.norm.sf(abs(z)), rel=1e-7,
                  abs_=1e-15)
        elif not ordered:
            check(row["trend_z"] == "", f"{col}: a trend for an unordered column")
    if pv:
        for g, w in zip(qg, multipletests(pv, method="fdr_bh")[1]):
            close("q_value", g, w, rel=1e-9, abs_=1e-15)
    return m


def main():
    require_binary()
    tmp = Path(tempfile.mkdtemp(prefix="pm-segw-"))
    ms = {}
    for name, spread, seed in [("strong", 1.0, 11), ("mild", 0.2, 12), ("none", 0.0, 13)]:
        path, data = generated(tmp, name, spread, seed)
        data = data.fillna("")
        args = ["segments", str(path), "--weight-col", "w", "--segment-col", "band",
                "--segment-col", "day"]
        out, note = run_ok(args)
        df = pd.read_csv(io.StringIO(out), keep_default_na=False, dtype=str)
        check("weighted: shares weighted" in note, f"{name}: no note on weighting")
        ms[name] = check_column(df, note, data, "band", False)
        check_column(df, note, data, "day", True)
        if name == "strong":
            # scaled weights (by 2^10): the same bytes (README: only the weights' ratios matter)
            p2, _ = generated(tmp, name + "-x1024", spread, seed, scale=1024.0)
            out2, _ = run_ok(["segments", str(p2)] + args[2:])
            check(out2 == out, "weights scaled by 1024 changed the segments table")
            # map: segments.csv is the table `segments` prints; mh_* empty with a note
            od = tmp / "map"
            _, mnote = run_ok(["map", str(path), "--weight-col", "w", "--segment-col", "band",
                               "--segment-col", "day", "-o", str(od), "--no-html", "-q"])
            check((od / "segments.csv").read_text(encoding="utf-8") == out,
                  "map's segments.csv differs from pairmap segments")
            check((od / "segments.svg").stat().st_size > 1000, "no segments.svg")
            import json
            rj = json.loads((od / "run.json").read_text(encoding="utf-8"))["segments"][0]
            resp = data[data["band"] != ""].drop_duplicates("id")
            kish = (resp.groupby("band")["w"].sum() ** 2 /
                    resp.groupby("band")["w"].apply(lambda v: (v * v).sum()))
            check(rj["weighted"] is True, "run.json: segments not marked weighted")
            for lv in rj["levels"]:
                close("run.json effective_size (Kish)", lv["effective_size"], kish[lv["segment"]],
                      rel=1e-13)
            e = pd.read_csv(od / "edges.csv", keep_default_na=False, dtype=str)
            check(len(e) > 0 and (e["mh_odds_ratio"] == "").all(),
                  "weighted edges.csv: the Mantel-Haenszel columns should be empty")
            p = subprocess.run([str(binary()), "pairs", str(path), "--weight-col", "w",
                                "--segment-col", "band", "--pair-test", "within"],
                               capture_output=True)
            check(p.returncode == 1 and b"--pair-test within takes unweighted" in p.stderr,
                  f"--pair-test within with weights: exit {p.returncode}")
    check(ms["strong"] < 1e3, f"strong spread: m {ms['strong']} should be small")
    check(ms["none"] > ms["mild"] > ms["strong"], f"m should fall with the spread: {ms}")
    for k in sorted(WORST):
        print(f"  largest deviation {k}: {WORST[k]:.3g}")
    if FAILS:
        for f in FAILS[:20]:
            print("FAIL:", f)
        print(f"segments_weighted: {len(FAILS)} checks failed")
        return 1
    print("segments_weighted: all checks passed")
    return 0


if __name__ == "__main__":
    sys.exit(main())
