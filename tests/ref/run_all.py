#!/usr/bin/python3
"""Run every reference check of tests/ref/ and print a summary.

Usage: /usr/bin/python3 tests/ref/run_all.py [NAME ...]   (names without .py; default: all but
the checks ctest runs, see BY_CTEST)
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
ALL = sorted(p.stem for p in HERE.glob("*.py") if p.stem not in ("common", "run_all"))
# The checks ctest runs already (through tests/cli/test_svg_map.sh and test_wide_ref.sh): left
# out of the default run so that each check runs once in scripts/test; named ones still run.
BY_CTEST = {"svg_geometry": "test_svg_map.sh", "wide_unfold": "test_wide_ref.sh",
            "wide_hygiene": "test_wide_ref.sh"}
CHECKS = [n for n in ALL if n not in BY_CTEST]


def ctest_list_is_true():
    """Each check of BY_CTEST is named by its CLI test, so the list cannot go stale quietly."""
    bad = [n for n, t in BY_CTEST.items()
           if n not in ALL or n not in (HERE.parent / "cli" / t).read_text(encoding="utf-8")]
    for n in bad:
        print(f"run_all: {n}.py is listed as run by tests/cli/{BY_CTEST[n]}, which does not "
              "run it", file=sys.stderr)
    return not bad


def main(argv):
    if not ctest_list_is_true():
        return 1
    names = argv[1:] or CHECKS
    unknown = [n for n in names if n not in ALL]
    if unknown:
        print(f"run_all: unknown check(s) {unknown}; known: {ALL}", file=sys.stderr)
        return 1
    if not argv[1:]:
        print(f"run_all: {', '.join(sorted(BY_CTEST))} run under ctest, not here")
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
