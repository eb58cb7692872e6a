#!/usr/bin/env bash
# Extreme weights (issue 13 point 9): scaling every weight by one factor must not change any
# result. The café demo's orders get weights 0.5, 1, 2 or 3 (seeded), then the same weights
# times 2^k for k from -996 to 996 (about 1e-300 .. 1e300): `items`, `pairs`, `partners` and
# `map` (nodes.csv, edges.csv) must print the same bytes, except the weighted sums `together`
# and `expected`, which are in the weights' units and must be exactly 2^k times the base run's.
# Decimal factors (1e-300, 1e160, 1e300) change the weights' last bits, so there the numbers
# must agree to 1e-9 (relative), but for the map's layout. The same weight on every row (1e160, 1e300, 1e-308: once nan
# shares and intervals) must give the unweighted shares and intervals (to 1e-12), and weights
# that cannot be represented are refused with exit 2: 1e308 on every row (their sum
# overflows) and two weights 2^1100 apart.
set -u
PAIRMAP="${1:?usage: bash $0 /path/to/pairmap}"
case "$PAIRMAP" in /*) ;; *) PAIRMAP="$(pwd)/$PAIRMAP" ;; esac
HERE="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
TMP="$(mktemp -d "${TMPDIR:-/tmp}/pm-wscale.XXXXXX")"
trap 'rm -rf "$TMP"' EXIT
export PAIRMAP TMP DEMO="$HERE/../../demo"
exec /usr/bin/python3 - <<'EOF'
import csv, io, math, os, random, subprocess, sys
P, T, DEMO = os.environ["PAIRMAP"], os.environ["TMP"], os.environ["DEMO"]
fails = 0
def fail(m):
    global fails
    fails += 1
    print("FAIL:", m, file=sys.stderr)

rows = list(csv.reader(open(os.path.join(DEMO, "cafe-orders.csv"), encoding="utf-8")))[1:]
rng = random.Random(13)
base = {}
for r in rows:
    base.setdefault(r[0], rng.choice([0.5, 1.0, 2.0, 3.0]))

def write(name, weight_of):
    path = os.path.join(T, name)
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["order", "item", "w"])
        for r in rows:
            w.writerow([r[0], r[1], weight_of(r[0])])
    return path

def run(args, expect=0):
    p = subprocess.run([P] + args, capture_output=True)
    if p.returncode != expect:
        fail(f"pairmap {' '.join(args)}: exit {p.returncode}, want {expect}: {p.stderr[-300:]!r}")
    return p

def outputs(path):
    """name -> CSV text of each output of the base commands on the file at path"""
    o = {}
    o["items"] = run(["items", path, "--weight-col", "w"]).stdout.decode()
    o["pairs"] = run(["pairs", path, "--weight-col", "w", "--sign", "both", "--min-count", "0"]).stdout.decode()
    o["partners"] = run(["partners", path, "--weight-col", "w", "--item", "Espresso", "--csv"]).stdout.decode()
    d = os.path.join(T, "map-" + os.path.basename(path))
    run(["map", path, "--weight-col", "w", "-o", d, "--quiet"])
    for f in ("nodes.csv", "edges.csv"):
        o["map " + f] = open(os.path.join(d, f), encoding="utf-8").read() if os.path.exists(os.path.join(d, f)) else ""
    return o

SCALED = {"together", "expected", "partner_respondents"}  # weighted sums: in the weights' units

def compare(name, a, b, factor, exact):
    ra, rb = list(csv.reader(io.StringIO(a))), list(csv.reader(io.StringIO(b)))
    if len(ra) != len(rb) or not ra or ra[0] != rb[0]:
        fail(f"{name} x{factor!r}: {len(ra)} rows vs {len(rb)}")
        return
    hdr = ra[0]
    for x, y in zip(ra[1:], rb[1:]):
        for h, u, v in zip(hdr, x, y):
            if h in SCALED:
                fu, fv = float(u), float(v) / factor
                ok = fu == fv if exact else math.isclose(fu, fv, rel_tol=1e-9, abs_tol=0)
            elif exact:
                ok = u == v
            elif h in ("x", "y"):
                continue  # the layout magnifies last-bit differences (2^k factors: exact)
            else:
                try:
                    ok = math.isclose(float(u), float(v), rel_tol=1e-9, abs_tol=1e-300)
                except ValueError:
                    ok = u == v
            if not ok:
                fail(f"{name} x{factor!r}: column {h}: {u} vs {v}")
                return

ref = outputs(write("base.csv", lambda o: repr(base[o])))
if "nan" in ref["items"] + ref["pairs"] + ref["partners"]:
    fail("nan in the base run")
for k in (-996, -700, -300, -1, 1, 64, 300, 700, 996):
    f = 2.0 ** k
    got = outputs(write(f"pow{k}.csv", lambda o: repr(base[o] * f)))
    for name in ref:
        compare(name, ref[name], got[name], f, exact=True)
for f in (1e-300, 1e160, 1e300):
    got = outputs(write(f"dec{f:g}.csv", lambda o: repr(base[o] * f)))
    for name in ref:
        compare(name, ref[name], got[name], f, exact=False)

# the same weight on every row: the shares and intervals of the unweighted run
plain = list(csv.reader(io.StringIO(run(["items", os.path.join(DEMO, "cafe-orders.csv")]).stdout.decode())))
for wv in ("1e160", "1e300", "1e-308"):
    path = write(f"same{wv}.csv", lambda o: wv)
    got = list(csv.reader(io.StringIO(run(["items", path, "--weight-col", "w"]).stdout.decode())))
    if len(got) != len(plain):
        fail(f"same weight {wv}: {len(got)} rows vs {len(plain)}")
        continue
    for x, y in zip(plain[1:], got[1:]):
        for h, u, v in zip(plain[0], x, y):
            if h.startswith("share") and not math.isclose(float(u), float(v), rel_tol=1e-12):
                fail(f"same weight {wv}: {x[0]} {h} {v}, unweighted {u}")
                break

# what cannot be represented: refused, one clear line, exit 2
p = run(["items", write("same1e308.csv", lambda o: "1e308"), "--weight-col", "w"], expect=2)
if b"weights sum to more than" not in p.stderr or p.stdout:
    fail(f"1e308 on every row: {p.stderr!r}")
first = rows[0][0]
p = run(["items", write("span.csv", lambda o: "1e300" if o == first else "1e-300"), "--weight-col", "w"], expect=2)
if b"cannot be represented" not in p.stderr or p.stdout:
    fail(f"weights 1e600 apart: {p.stderr!r}")

if fails:
    print(f"test_weight_scale: {fails} failures", file=sys.stderr)
    sys.exit(1)
print("test_weight_scale: passed")
EOF
