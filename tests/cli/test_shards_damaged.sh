#!/usr/bin/env bash
# Damaged and mismatched count shards (issue 18) are bad data, exit 2, with one clear line on
# stderr and nothing on stdout, never a crash: every byte of two small shards flipped in turn
# (caught by the checksum), the same flips with the checksum made valid again (caught by the
# parser's own checks, or a valid other shard: exit 0 or 2, never a signal), truncation at
# every length, bytes appended, another format version, shards counted with other options,
# parts of one input from different splits, the same part twice, an item's category differing
# between shards. The checksum is recomputed with Python's hashlib (SHA-256, FIPS 180-4).
# Usage: bash test_shards_damaged.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

printf 'who,what,kind\nr1,tea,drink\nr1,cake,sweet\nr2,tea,drink\nr2,cake,sweet\nr2,soup,dish\nr3,soup,dish\nr3,tea,drink\nr4,cake,sweet\n' \
    >"$TMP/small.csv"
printf 'who,what,w\nr1,tea,1.5\nr1,cake,1.5\nr2,tea,0.25\nr2,soup,0.25\nr3,soup,2\nr4,cake,3\n' \
    >"$TMP/weighted.csv"
expect_ok count "$TMP/small.csv" --category-col kind -o "$TMP/small.pmc"
expect_ok count "$TMP/weighted.csv" --weight-col w -o "$TMP/weighted.pmc"

# flips, truncations, appended bytes, other versions (python drives pairmap: ~1,000 runs)
/usr/bin/python3 - "$PAIRMAP" "$TMP" <<'EOF' || FAILS=$((FAILS + 1))
import hashlib, os, subprocess, sys
pm, tmp = sys.argv[1], sys.argv[2]
bad = 0
def run(data, want, needle, what):
    global bad
    path = os.path.join(tmp, "bad.pmc")
    with open(path, "wb") as f:
        f.write(data)
    p = subprocess.run([pm, "items", "--from-counts", path], capture_output=True)
    err = p.stderr.decode("utf-8", "replace").strip().splitlines()
    ok = p.returncode in want and (p.returncode == 0 or (not p.stdout and len(err) == 1 and
         err[0].startswith("pairmap: " + path + ": ") and needle in err[0]))
    if not ok:
        bad += 1
        if bad < 10:
            print(f"FAIL: {what}: exit {p.returncode}, stderr {err[:3]}", file=sys.stderr)
    return p.returncode
def fix(d):  # a valid checksum again: SHA-256 of everything before the last 32 bytes
    return d[:-32] + hashlib.sha256(d[:-32]).digest()
cases = 0
for name in ("small.pmc", "weighted.pmc"):
    good = open(os.path.join(tmp, name), "rb").read()
    assert run(good, {0}, "", "the intact shard") == 0
    passed = 0
    for i in range(len(good)):
        d = bytearray(good); d[i] ^= 0xFF
        run(bytes(d), {2}, "", f"{name}: byte {i} flipped")
        rc = run(fix(bytes(d)), {0, 2}, "", f"{name}: byte {i} flipped, checksum fixed")
        passed += rc == 0
        cases += 2
    for n in range(len(good)):
        run(good[:n], {2}, "", f"{name}: cut to {n} bytes")
        cases += 1
    run(good + b"\0", {2}, "", f"{name}: a byte appended")
    d = bytearray(good); d[8] = 2
    run(fix(bytes(d)), {2}, "version 2; this pairmap reads version 1", f"{name}: version 2")
    cases += 2
    # flips in the part list's input digests and in the fingerprint's text make other valid
    # shards; the rest must be refused by the parser
    if passed == 0 or passed == len(good):
        print(f"FAIL: {name}: {passed} of {len(good)} fixed-up flips accepted", file=sys.stderr)
        bad += 1
print(f"{cases} damaged shards", file=sys.stderr)
sys.exit(1 if bad else 0)
EOF

# ---- shards that do not add up ----------------------------------------------------------------
expect_ok count "$TMP/small.csv" --category-col kind --part 0/2 -o "$TMP/a02.pmc"
expect_ok count "$TMP/small.csv" --category-col kind --part 1/2 -o "$TMP/a12.pmc"
expect_ok count "$TMP/small.csv" --category-col kind --part 1/3 -o "$TMP/a13.pmc"
expect_ok count "$TMP/small.csv" --category-col kind --drop-item soup -o "$TMP/drop.pmc"
expect_fail 2 "$TMP/a13.pmc: " "the same M" -- merge "$TMP/a02.pmc" "$TMP/a13.pmc" -o "$TMP/x.pmc"
expect_fail 2 "$TMP/a02.pmc: " "added once" -- merge "$TMP/a02.pmc" "$TMP/a02.pmc" -o "$TMP/x.pmc"
expect_fail 2 "$TMP/small.pmc: " "added once" -- merge "$TMP/small.pmc" "$TMP/a02.pmc" "$TMP/small.pmc" -o "$TMP/x.pmc"
expect_fail 2 "$TMP/drop.pmc: " "other input options" -- merge "$TMP/small.pmc" "$TMP/drop.pmc" -o "$TMP/x.pmc"
expect_fail 2 "$TMP/weighted.pmc: " "other input options" -- merge "$TMP/small.pmc" "$TMP/weighted.pmc" -o "$TMP/x.pmc"
# the same item with another category in another file
printf 'who,what,kind\nr9,tea,sweet\nr9,cake,sweet\n' >"$TMP/other.csv"
expect_ok count "$TMP/other.csv" --category-col kind -o "$TMP/other.pmc"
expect_fail 2 "$TMP/small.pmc: " "item 'tea' has category 'drink' here but 'sweet' in $TMP/other.pmc" -- \
    merge "$TMP/other.pmc" "$TMP/small.pmc" -o "$TMP/x.pmc"
# not a shard at all, an empty file, a directory, a missing file
expect_fail 2 "$TMP/small.csv: " "signature" -- merge "$TMP/small.csv" -o "$TMP/x.pmc"
: >"$TMP/empty.pmc"
expect_fail 2 "$TMP/empty.pmc: " "signature" -- items --from-counts "$TMP/empty.pmc"
expect_fail 3 "$TMP: " "directory" -- items --from-counts "$TMP"
expect_fail 3 "$TMP/none.pmc: " "cannot open" -- merge "$TMP/none.pmc" -o "$TMP/x.pmc"
[ -e "$TMP/x.pmc" ] && fail "a refused merge wrote its output"
# merge never replaces its output on failure
cp "$TMP/small.pmc" "$TMP/keep.pmc"
expect_fail 2 "$TMP/a02.pmc: " "added once" -- merge "$TMP/a02.pmc" "$TMP/a02.pmc" -o "$TMP/keep.pmc"
cmp -s "$TMP/small.pmc" "$TMP/keep.pmc" || fail "a failed merge changed its output file"
ls -a "$TMP" | grep -q '\.tmp$' && fail "a temporary file was left behind"

finish
