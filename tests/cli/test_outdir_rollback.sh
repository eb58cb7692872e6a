#!/usr/bin/env bash
# A failed `map` restores exactly what DIR held (issue 13 points 10 and 12): entries named like
# an output that are not plain files (a user's map.svg symlink) and directories on file systems
# without hard links are kept by renaming them aside, so the roll-back puts back the very same
# entries (same inode, same symlink target); directories created for -o, at any depth, are
# removed again when the run fails or is stopped by a signal. The output layer's test hooks:
# PM_TEST_COMMIT_FAIL=k fails the k-th rename of the commit, PM_TEST_NO_LINK=1 makes every
# backup hard link fail (as on a file system without links).
# Usage: bash test_outdir_rollback.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
D="$DEMO/cafe-orders.csv"
FILES="map.graphml map.svg edges.csv nodes.csv run.json"

# state DIR: every entry with its type, inode, symlink target and content checksum (ls and
# stat from coreutils are the outside view)
state() {
    (cd "$1" && for f in $(ls -A | sort); do
        if [ -L "$f" ]; then printf '%s link %s -> %s\n' "$f" "$(stat -c %i "$f")" "$(readlink "$f")"
        elif [ -d "$f" ]; then printf '%s dir\n' "$f"
        else printf '%s file %s %s\n' "$f" "$(stat -c %i "$f")" "$(cksum <"$f")"; fi
    done)
}

# ---- a user's map.svg symlink survives a failed run ---------------------------------------------
for mode in run.json-dir inject inject-nolink; do
    CASES=$((CASES + 1))
    out="$TMP/links-$mode"
    expect_ok map "$D" -q -o "$out" --seed 1
    printf '<svg xmlns="http://www.w3.org/2000/svg"/>\n' >"$TMP/mine-$mode.svg"
    rm "$out/map.svg"
    ln -s "$TMP/mine-$mode.svg" "$out/map.svg"
    env=()
    case "$mode" in
    run.json-dir) rm "$out/run.json" && mkdir -p "$out/run.json/keep" ;; # the last rename fails
    inject) env=(PM_TEST_COMMIT_FAIL=5) ;;
    inject-nolink) env=(PM_TEST_COMMIT_FAIL=5 PM_TEST_NO_LINK=1) ;;
    esac
    state "$out" >"$TMP/before"
    cksum <"$TMP/mine-$mode.svg" >"$TMP/mine.before"
    env "${env[@]}" "$PAIRMAP" map "$D" -q -o "$out" --seed 2 >"$TMP/out" 2>"$TMP/err"
    rc=$?
    [ "$rc" -eq 3 ] || fail "$mode: exit $rc, expected 3: $(cat "$TMP/err")"
    grep -q "cannot put the output in place" "$TMP/err" || fail "$mode: message: $(cat "$TMP/err")"
    state "$out" | cmp -s - "$TMP/before" ||
        fail "$mode: the failed run changed DIR: $(state "$out" | diff "$TMP/before" - | head -6)"
    cksum <"$TMP/mine-$mode.svg" | cmp -s - "$TMP/mine.before" || fail "$mode: the symlink's target changed"
done

# ---- the same with every kind of failure point: each rename 1..5 fails, no hard links ---------
out="$TMP/nolink"
expect_ok map "$D" -q -o "$out" --seed 1
state "$out" >"$TMP/before"
for k in 1 2 3 4 5; do
    CASES=$((CASES + 1))
    PM_TEST_COMMIT_FAIL=$k PM_TEST_NO_LINK=1 "$PAIRMAP" map "$D" -q -o "$out" --seed 2 \
        >/dev/null 2>"$TMP/err"
    rc=$?
    [ "$rc" -eq 3 ] || fail "rename $k fails without links: exit $rc: $(cat "$TMP/err")"
    state "$out" | cmp -s - "$TMP/before" ||
        fail "rename $k fails without links: DIR changed: $(state "$out" | diff "$TMP/before" - | head -6)"
done
# and without the hooks the run goes through (the new seed changes nodes.csv)
PM_TEST_NO_LINK=1 expect_ok map "$D" -q -o "$out" --seed 2
[ "$(find "$out" -name '.*' | wc -l)" -eq 0 ] || fail "a commit without links left: $(find "$out" -name '.*')"
state "$out" | grep '^nodes.csv' | cmp -s - <(grep '^nodes.csv' "$TMP/before") &&
    fail "--seed 2 without links did not replace nodes.csv"

# ---- directories created for -o go away again when the run fails, at any depth ----------------
deep="$TMP/fresh"
for i in $(seq 1 41); do deep="$deep/level$i"; done
expect_fail 2 "$DATA/short_row_line3.csv:3: " "" -- map "$DATA/short_row_line3.csv" -o "$deep"
[ -e "$TMP/fresh" ] && fail "a failed run left $(find "$TMP/fresh" -type d | wc -l) new directories"
mkdir -p "$TMP/mine/keep"
expect_fail 2 "$DATA/short_row_line3.csv:3: " "" -- map "$DATA/short_row_line3.csv" -o "$TMP/mine/keep/x/y"
[ "$(find "$TMP/mine" | wc -l)" -eq 2 ] || fail "a failed run under an existing directory left: $(find "$TMP/mine")"
# a commit that fails takes them away too
CASES=$((CASES + 1))
PM_TEST_COMMIT_FAIL=3 "$PAIRMAP" map "$D" -q -o "$TMP/fresh2/a/b/c" >/dev/null 2>"$TMP/err"
[ $? -eq 3 ] || fail "a failed commit into new directories: $(cat "$TMP/err")"
[ -e "$TMP/fresh2" ] && fail "a failed commit left the directories it created: $(find "$TMP/fresh2")"
# a signal takes them away too (the run is stopped while it reads a stalled input)
CASES=$((CASES + 1))
stalled_input "$TMP/stalled.csv"
"$PAIRMAP" map "$TMP/stalled.csv" -q -o "$TMP/fresh3/$deep" >/dev/null 2>"$TMP/err" &
pid=$!
for _ in $(seq 1 500); do [ -e "$TMP/fresh3/$deep/.pairmap.lock" ] && break; sleep 0.01; done
[ -e "$TMP/fresh3/$deep/.pairmap.lock" ] || fail "the run into new directories took no lock"
kill -TERM "$pid"
wait "$pid"
rc=$?
stop_stalled_input
[ "$rc" -eq 143 ] || fail "SIGTERM with new directories: exit $rc: $(cat "$TMP/err")"
[ -e "$TMP/fresh3" ] && fail "SIGTERM left the directories created for -o: $(find "$TMP/fresh3" | wc -l) entries"
finish
