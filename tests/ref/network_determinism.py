#!/usr/bin/python3
"""Determinism of `pairmap map` (DESIGN.md: same input, options and seed give byte-identical
files on every run, for any row order of the input and any thread count).

Compared byte for byte: map.graphml, map.svg, edges.csv, nodes.csv, and run.json with its
"timings" object removed (documented as the one part that varies). Where the runs differ on
purpose, those run.json keys are set aside as well and named: the options as given
("options": --threads), and the input file's size and SHA-256 ("input_file", "input"; a
shuffled file is another file). The counts, pairs, clusters, modularity and stability must
still agree. A different --seed must change the layout (so the comparison can fail).
Data: the demo café orders (invented for demos), shuffled with Python's random module, and a
generated scale case (1200 items in blocks, 30000 respondents, numpy's seeded generator) where
the layout takes igraph's grid variant (above 1000 laid-out vertices) and counting is split
over threads.
"""

import json
import random

import numpy as np
import shutil
import sys
from pathlib import Path

sys.dont_write_bytecode = True
sys.path.insert(0, str(Path(__file__).resolve().parent))
import common as C  # noqa: E402

DEMO = C.REPO / "demo" / "cafe-orders.csv"
FILES = ["map.graphml", "map.svg", "edges.csv", "nodes.csv"]


def runjson(d, drop=()):
    j = json.loads((d / "run.json").read_text(encoding="utf-8"))
    if "timings" not in j or set(j["timings"]) != {"read", "count", "measures", "graph",
                                                     "write"}:
        raise C.RunError(f"{d}/run.json lacks the timings object of the benchmark")
    for k in ("timings",) + tuple(drop):
        j.pop(k, None)
    return j


def compare(chk, a, b, label, drop=()):
    for f in FILES:
        chk.equal(f"{label}: {f} byte-identical", (a / f).read_bytes() == (b / f).read_bytes(),
                  True)
    chk.equal(f"{label}: run.json without {('timings',) + tuple(drop)}", runjson(a, drop),
              runjson(b, drop))


def main():
    C.require_binary()
    chk = C.Checker("network_determinism (byte comparison)")
    opts = ["--category-col", "category", "-q"]
    with C.tempdir() as td:
        td = Path(td)
        out = td / "out"
        C.run(["map", DEMO, "-o", out] + opts)
        first = td / "first"
        shutil.copytree(out, first)
        C.run(["map", DEMO, "-o", out] + opts)  # rerun into the same DIR
        compare(chk, first, out, "rerun")
        # run.json text is identical up to the timings object, which comes last
        ta = (first / "run.json").read_text(encoding="utf-8")
        tb = (out / "run.json").read_text(encoding="utf-8")
        chk.equal("rerun: run.json text identical before \"timings\"",
                  ta.split('"timings"')[0], tb.split('"timings"')[0])

        # shuffled rows (header kept)
        lines = DEMO.read_text(encoding="utf-8").splitlines(keepends=True)
        body = lines[1:]
        for seed in (1, 2):
            random.Random(seed).shuffle(body)
            shuf = td / f"shuffled{seed}.csv"
            shuf.write_text(lines[0] + "".join(body), encoding="utf-8")
            o = td / "out"
            C.run(["map", shuf, "-o", o] + opts)
            compare(chk, first, o, f"shuffled rows ({seed})", drop=("input", "input_file"))

        # threads
        for th in ("1", "2"):
            o = td / "out"
            C.run(["map", DEMO, "-o", o, "--threads", th] + opts)
            compare(chk, first, o, f"--threads {th}", drop=("options",))
        # and the same through standard input
        o = td / "out"
        C.run(["map", "-", "-o", o] + opts, stdin=DEMO.read_bytes())
        compare(chk, first, o, "standard input", drop=("input", "input_file"))

        # generated scale case: 1200 items in blocks of 6, 30000 respondents
        rng = np.random.default_rng(12345)
        n_items, n_resp = 1200, 30000
        rows = []
        for r in range(n_resp):
            block = rng.integers(0, n_items // 6)
            chosen = set((block * 6 + rng.choice(6, size=rng.integers(2, 5), replace=False))
                         .tolist())
            chosen |= set(rng.integers(0, n_items, size=rng.integers(0, 3)).tolist())
            rows += [[f"r{r}", f"item {i:04d}"] for i in chosen]
        big = td / "big.csv"
        C.write_long(big, rows)
        rows2 = list(rows)
        random.Random(3).shuffle(rows2)
        big2 = td / "big-shuffled.csv"
        C.write_long(big2, rows2)
        o1, o2, o3 = td / "b1", td / "b2", td / "b3"
        C.run(["map", big, "-o", o1, "-q", "--threads", "1", "--iterations", "100"])
        C.run(["map", big, "-o", o2, "-q", "--threads", "2", "--iterations", "100"])
        C.run(["map", big2, "-o", o3, "-q", "--threads", "2", "--iterations", "100"])
        compare(chk, o1, o2, "scale case, --threads 1 vs 2", drop=("options",))
        compare(chk, o1, o3, "scale case, shuffled rows", drop=("options", "input", "input_file"))
        j = runjson(o1)
        chk.note(f"scale case: {j['network']['vertices']} vertices, {j['network']['edges']} "
                 f"edges, {j['network']['clusters']} clusters, modularity "
                 f"{j['network']['modularity']:.4f}, stability {j['network']['stability']:.4f}")

        # a different seed changes the layout: the comparison above can fail
        o = td / "seed2"
        C.run(["map", DEMO, "-o", o, "--seed", "2"] + opts)
        chk.equal("--seed 2 changes nodes.csv (x, y)",
                  (o / "nodes.csv").read_bytes() != (first / "nodes.csv").read_bytes(), True)
    return chk.finish()


if __name__ == "__main__":
    sys.exit(main())
