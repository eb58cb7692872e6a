#!/usr/bin/env bash
# One `map` at a time per output directory (issue 13 point 11): the run holds DIR/.pairmap.lock,
# created exclusively (O_CREAT | O_EXCL, as version-control tools create their lock files:
# common practice) with "PID HOST"; a second run into the same DIR fails at once with exit 3 and
# a message naming the holder, and leaves the first run's files alone; the lock goes on every
# way out (success, bad input, a failed commit, SIGINT/SIGTERM/SIGHUP/SIGQUIT, a closed stdout:
# SIGPIPE is ignored, so the write fails with EPIPE, exit 3); a lock left by
# a process that no longer runs on this host is reported and replaced.
# Usage: bash test_outdir_lock.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
D="$DEMO/cafe-orders.csv"
out="$TMP/outdir"
lock="$out/.pairmap.lock"
nolock() { [ ! -e "$lock" ] || fail "$1: the lock is left behind: $(cat "$lock")"; }

# ---- two runs at once: the second fails, the first finishes with its own files ----------------
expect_ok map "$D" -q -o "$out" --seed 1
nolock "a successful run"
CASES=$((CASES + 1))
PM_TEST_COMMIT_PAUSE=0 "$PAIRMAP" map "$D" -q -o "$out" --seed 2 --restarts 2 >/dev/null 2>"$TMP/first.err" &
first=$!
for _ in $(seq 1 200); do [ -e "$lock" ] && break; sleep 0.01; done
[ -e "$lock" ] || fail "the first run holds no lock"
lpid="" lhost=""
[ -e "$lock" ] && read -r lpid lhost <"$lock"
[ "$lpid" = "$first" ] || fail "the lock names process '$lpid', the run is $first"
[ "$lhost" = "$(hostname)" ] || fail "the lock names host '$lhost', this is $(hostname)"
expect_fail 3 "$out: " "in use by another run (process $first on $(hostname)" -- map "$D" -q -o "$out" --seed 3
wait "$first" || fail "the first run failed: $(cat "$TMP/first.err")"
grep -o '"seed": [0-9]*' "$out/run.json" | grep -q '"seed": 2' || fail "run.json is not the first run's (seed 2)"
nolock "the first run"

# ---- every way out removes the lock -----------------------------------------------------------
expect_fail 2 "$DATA/short_row_line3.csv:3: " "" -- map "$DATA/short_row_line3.csv" -o "$out"
nolock "bad input"
CASES=$((CASES + 1))
PM_TEST_COMMIT_FAIL=2 "$PAIRMAP" map "$D" -q -o "$out" >/dev/null 2>&1
[ $? -eq 3 ] || fail "a failed commit did not exit 3"
nolock "a failed commit"
for sig in INT TERM HUP QUIT; do
    CASES=$((CASES + 1))
    stalled_input "$TMP/stalled.csv" # the run is still reading when the signal comes
    "$PAIRMAP" map "$TMP/stalled.csv" -q -o "$out" >/dev/null 2>"$TMP/err" &
    pid=$!
    for _ in $(seq 1 500); do [ -e "$lock" ] && break; sleep 0.01; done
    [ -e "$lock" ] || fail "SIG$sig: the run took no lock"
    kill -s "$sig" "$pid"
    wait "$pid"
    rc=$?
    stop_stalled_input
    [ "$rc" -eq 130 ] || [ "$rc" -eq 143 ] || fail "SIG$sig: exit $rc: $(cat "$TMP/err")"
    nolock "SIG$sig"
done
# a closed standard output (SIGPIPE, ignored: the summary's write fails with EPIPE, exit 3)
CASES=$((CASES + 1))
"$PAIRMAP" map "$D" -o "$out" --seed 6 2>"$TMP/err" | true
rc=${PIPESTATUS[0]}
[ "$rc" -eq 3 ] || fail "map into a closed pipe: exit $rc, expected 3: $(cat "$TMP/err")"
grep -q "cannot write to standard output" "$TMP/err" || fail "map into a closed pipe: $(cat "$TMP/err")"
nolock "a closed standard output"
# a signal while the commit is paused (the run holds the commit lock then)
CASES=$((CASES + 1))
PM_TEST_COMMIT_PAUSE=2 "$PAIRMAP" map "$D" -q -o "$out" --seed 4 >/dev/null 2>"$TMP/err" &
pid=$!
for _ in $(seq 1 300); do [ -n "$(find "$out" -name '*.bak' | head -1)" ] && break; sleep 0.01; done
kill -TERM "$pid"
wait "$pid"
[ $? -eq 143 ] || fail "SIGTERM in the commit: $(cat "$TMP/err")"
nolock "SIGTERM in the commit"

# ---- a stale lock: its process is gone --------------------------------------------------------
sh -c 'exit 0' &
dead=$!
wait "$dead" # a pid that ran on this host and no longer does (reuse within the test is unlikely)
printf '%s %s\n' "$dead" "$(hostname)" >"$lock"
CASES=$((CASES + 1))
"$PAIRMAP" map "$D" -o "$out" --seed 5 >/dev/null 2>"$TMP/err"
rc=$?
[ "$rc" -eq 0 ] || fail "a stale lock stopped the run: exit $rc: $(cat "$TMP/err")"
grep -q "^pairmap: warning: $out: removed a stale lock of process $dead on $(hostname), which no longer runs" "$TMP/err" ||
    fail "the stale lock was not reported: $(cat "$TMP/err")"
nolock "a run after a stale lock"
# a lock of a live process (this shell) or of another host is not stale
for holder in "$$ $(hostname)" "$dead another-host.invalid" "garbage"; do
    printf '%s\n' "$holder" >"$lock"
    expect_fail 3 "$out: " "remove" -- map "$D" -q -o "$out"
    [ "$(cat "$lock")" = "$holder" ] || fail "a failed run touched the other run's lock ($holder)"
done
rm -f "$lock"
finish
