#!/usr/bin/python3
"""Run every reference check of tests/ref/ and print a summary.

Usage: /usr/bin/python3 tests/ref/run_all.py [NAME ...]   (names without .py; default: all)
The binary is $PAIRMAP, default build/pairmap under the repository root.
Exit status: 0 when every check passed, 1 otherwise.
"""

import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
# Every check script in this folder (helpers such as common.py excluded), in name order.
CHECKS = sorted(p.stem for p in HERE.glob("*.py") if p.stem not in ("common", "run_all"))


def main(argv):
    names = argv[1:] or CHECKS
    unknown = [n for n in names if n not in CHECKS]
    if unknown:
        print(f"run_all: unknown check(s) {unknown}; known: {CHECKS}", file=sys.stderr)
        return 1
    env = dict(os.environ)
    env.setdefault("PAIRMAP", str(HERE.parents[1] / "build" / "pairmap"))
    results = []
    for n in names:
        t0 = time.monotonic()
        p = subprocess.run([sys.executable, str(HERE / f"{n}.py")], env=env,
                           stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
        dt = time.monotonic() - t0
        sys.stdout.write(p.stdout)
        sys.stdout.flush()
        status = {0: "PASS", 1: "FAIL", 2: "NOT RUN"}.get(p.returncode, f"ERROR {p.returncode}")
        results.append((n, status, dt))
    print("\nreference checks:")
    for n, status, dt in results:
        print(f"  {status:8s} {n:16s} {dt:6.1f} s")
    failed = [n for n, s, _ in results if s != "PASS"]
    print(f"{len(results) - len(failed)} of {len(results)} reference checks passed")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
