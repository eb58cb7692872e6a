#!/usr/bin/env bash
# Signals during `map` (issue 12 point 2, issue 13 point 8): SIGINT exits 130; SIGTERM, SIGHUP
# and SIGQUIT exit 143 (128 + SIGTERM, the shell's convention); each leaves no temporary file
# in DIR and the earlier outputs as they were. A write over `ulimit -f` (SIGXFSZ, ignored)
# fails as an I/O error, exit 3, without temporaries. PM_TEST_COMMIT_PAUSE=k (the output
# layer's test hook) stops the commit before rename k, so the signal lands inside the rename
# phase: the directory then holds every new file (exit 130/143, "the new files are kept").
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
D="$DEMO/cafe-orders.csv"
old="$TMP/old" out="$TMP/out"
expect_ok map "$D" -q -o "$old" --seed 1 --restarts 2
expect_ok map "$D" -q -o "$TMP/new" --seed 2 --restarts 2
snapshot() { # run.json holds timings: only its seed is compared
    (cd "$1" && for f in *; do
        if [ "$f" = run.json ]; then printf '%s %s\n' "$f" "$(grep -o '"seed": [0-9]*' "$f")"
        else printf '%s %s\n' "$f" "$(cksum <"$f")"; fi
    done)
}
snapshot "$old" >"$TMP/old.sum"
snapshot "$TMP/new" >"$TMP/new.sum"
cmp -s "$TMP/old.sum" "$TMP/new.sum" && fail "seeds 1 and 2 gave the same files: the checks are blind"
awk 'BEGIN { srand(7)
    for (r = 1; r <= 20000; r++) { g = int(rand() * 30); k = 3 + int(rand() * 8)
        for (j = 0; j < k; j++) {
            if (rand() < 0.7) it = g * 50 + int(rand() * 50); else it = int(rand() * 1500)
            printf "c%06d,item%04d\n", r, it } } }' >"$TMP/big.csv"
temps() { find "$out" -name '.*' -type f | head -3; }

for sig in INT TERM HUP QUIT; do
    CASES=$((CASES + 1))
    rm -rf "$out" && cp -a "$old" "$out"
    "$PAIRMAP" map "$TMP/big.csv" -q -o "$out" --min-count 3 --iterations 100000 --restarts 50 \
        >/dev/null 2>"$TMP/err" &
    pid=$!
    sleep 0.5
    kill -s "$sig" "$pid"
    wait "$pid"
    rc=$?
    want=143
    [ "$sig" = INT ] && want=130
    [ "$rc" -eq "$want" ] || fail "SIG$sig during map: exit $rc, expected $want: $(cat "$TMP/err")"
    grep -q '^pairmap: interrupted; no output file was replaced' "$TMP/err" ||
        fail "SIG$sig during map: message: $(cat "$TMP/err")"
    [ -z "$(temps)" ] || fail "SIG$sig during map left temporaries: $(temps)"
    snapshot "$out" | cmp -s - "$TMP/old.sum" || fail "SIG$sig during map changed the old outputs"
done

# a signal at each rename step of the commit: every new file is in place
for k in 0 1 2 3 4; do
    for sig in INT TERM; do
        CASES=$((CASES + 1))
        rm -rf "$out" && cp -a "$old" "$out"
        PM_TEST_COMMIT_PAUSE=$k "$PAIRMAP" map "$D" -q -o "$out" --seed 2 --restarts 2 \
            >/dev/null 2>"$TMP/err" &
        pid=$!
        for _ in $(seq 1 100); do # until the commit has started (a backup link exists)
            [ -n "$(find "$out" -name '*.bak' | head -1)" ] && break
            sleep 0.02
        done
        sleep 0.2
        kill -s "$sig" "$pid"
        wait "$pid"
        rc=$?
        want=143
        [ "$sig" = INT ] && want=130
        [ "$rc" -eq "$want" ] || fail "SIG$sig at rename $k: exit $rc, expected $want: $(cat "$TMP/err")"
        grep -q 'the new files are kept' "$TMP/err" || fail "SIG$sig at rename $k: message: $(cat "$TMP/err")"
        snapshot "$out" | cmp -s - "$TMP/new.sum" ||
            fail "SIG$sig at rename $k: not every new file: $(snapshot "$out" | diff - "$TMP/new.sum" | head -4)"
        [ -z "$(temps)" ] || fail "SIG$sig at rename $k left temporaries: $(temps)"
    done
done

# SIGXFSZ: a file-size limit makes the write fail, exit 3, no temporaries
CASES=$((CASES + 1))
rm -rf "$out" && cp -a "$old" "$out"
(ulimit -f 8 && exec "$PAIRMAP" map "$TMP/big.csv" -q -o "$out" --min-count 3 --restarts 1) >/dev/null 2>"$TMP/err"
rc=$?
[ "$rc" -eq 3 ] || fail "map over ulimit -f: exit $rc, expected 3: $(cat "$TMP/err")"
[ -z "$(temps)" ] || fail "map over ulimit -f left temporaries: $(temps)"
snapshot "$out" | cmp -s - "$TMP/old.sum" || fail "map over ulimit -f changed the old outputs"

finish
