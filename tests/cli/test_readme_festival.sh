#!/usr/bin/env bash
# The README's festival example (issue 16 point 10): the output block under "From file to
# map in one command" is what the command above it prints today (notes and summary), so the
# README cannot drift from the tool.
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
readme="$HERE/../../README.md"
CASES=$((CASES + 1))
/usr/bin/python3 - "$readme" "$PAIRMAP" "$TMP" "$DEMO/.." <<'PY' || fail "the README's festival block differs from the tool's output"
import re, shlex, subprocess, sys
readme, pairmap, tmp, top = sys.argv[1:5]
text = open(readme).read()
part = text.split("From file to map in one command:", 1)[1]
blocks = re.findall(r"```[a-z]*\n(.*?)```", part, re.S)
cmd = blocks[0].replace("\\\n", " ")
want = blocks[1].splitlines()
args = shlex.split(cmd)
assert args[0] == "pairmap" and args[-2] == "-o", args
out = args[-1]
args = [pairmap] + args[1:-1] + [f"{tmp}/{out}"]
r = subprocess.run(args, cwd=top, capture_output=True, text=True)
got = (r.stderr + r.stdout).replace(f"{tmp}/{out}", out).splitlines()
if r.returncode != 0 or got != want:
    import difflib
    sys.stderr.write("\n".join(difflib.unified_diff(want, got, "README", "pairmap", lineterm="")))
    sys.exit(1)
PY
finish
