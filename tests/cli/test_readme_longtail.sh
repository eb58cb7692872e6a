#!/usr/bin/env bash
# The README's long-tail example (issue 15, "the README shows a long-tail example"): the
# commands under "Clusters at more than one scale" (scripts/gen-longtail's invented data, then
# map) give the note and the summary lines the README shows, so the README cannot drift from
# the tool. The note is one of the notes on standard error; the rest is one run of lines of
# the summary.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
readme="$HERE/../../README.md"
CASES=$((CASES + 1))
/usr/bin/python3 - "$readme" "$PAIRMAP" "$TMP" "$HERE/../.." <<'PY' || fail "the README's long-tail block differs from the tool's output"
import re, shlex, subprocess, sys
readme, pairmap, tmp, top = sys.argv[1:5]
part = open(readme, encoding="utf-8").read().split("### Clusters at more than one scale", 1)[1]
blocks = re.findall(r"```[a-z]*\n(.*?)```", part, re.S)
gen, cmd = blocks[0].strip().splitlines()
want = blocks[1].splitlines()
g = shlex.split(gen)
assert g[0] == "scripts/gen-longtail", g
subprocess.run(["/usr/bin/python3", f"{top}/{g[0]}", f"{tmp}/{g[1]}"] + g[2:], check=True)
args = shlex.split(cmd)
assert args[0] == "pairmap" and args[3] == "-o", args
args = [pairmap, args[1], f"{tmp}/{args[2]}", "-o", f"{tmp}/{args[4]}"] + args[5:]
r = subprocess.run(args, capture_output=True, text=True)
err, out = r.stderr.splitlines(), r.stdout.splitlines()
ok = r.returncode == 0 and want[0] in err
rest = want[1:]
ok = ok and any(out[i:i + len(rest)] == rest for i in range(len(out)))
if not ok:
    sys.stderr.write("README:\n%s\n---- pairmap:\n%s\n%s\n" % ("\n".join(want), r.stderr, r.stdout))
sys.exit(0 if ok else 1)
PY
finish
