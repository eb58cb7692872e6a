#!/usr/bin/env bash
# scripts/pairmap-dask (issue 18) on Dask LocalClusters of two worker processes (Debian's
# python3-distributed): on generated baskets (scripts/gen-baskets) its map directory matches
# `pairmap map` on one machine byte for byte (run.json apart): one input in parts; three
# pre-split inputs; a running scheduler given by address with a shared --work-dir; a worker
# killed (SIGKILL, by a wrapper around pairmap that kills its own worker process once, marked
# by a directory) in the middle of a count task, which Dask runs again elsewhere. A task that
# keeps failing (bad input data) stops the run with the worker's message and pairmap's exit
# status, and DIR is not created.
# Usage: bash test_shards_dask.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
DASK="$HERE/../../scripts/pairmap-dask"
GEN="$HERE/../../scripts/gen-baskets"

/usr/bin/python3 "$GEN" --respondents 30000 --items 300 --mean-k 6 --groups 10 --seed 9 \
    -o "$TMP/gen.csv" --quiet || fail "gen-baskets"
"$PAIRMAP" map "$TMP/gen.csv" -q -o "$TMP/single" --restarts 3 >/dev/null || fail "map"
rm -f "$TMP/single/run.json"
# map.html's run block (input, options, size: what run.json says) is its one line that names
# the run; the rest of the page must match
strip_run() { sed -i '/^<script type="application\/json" id="pm-run">/d' "$1/map.html"; }
strip_run "$TMP/single"
[ "$(wc -l <"$TMP/single/edges.csv")" -gt 100 ] || fail "too few edges for a real comparison"

# same_map WHAT DIR: DIR holds the single run's files (run.json apart), byte for byte
same_map() {
    CASES=$((CASES + 1))
    [ -f "$2/run.json" ] || fail "$1: no run.json"
    grep -q '"counts_from"' "$2/run.json" || fail "$1: run.json does not say where the counts came from"
    rm -f "$2/run.json"
    strip_run "$2"
    diff -r "$TMP/single" "$2" >"$TMP/diff" 2>&1 || fail "$1: $(head -c 500 "$TMP/diff")"
}

dask() {
    /usr/bin/python3 "$DASK" --pairmap "$PAIRMAP" "$@" >"$TMP/out" 2>"$TMP/err"
}

# one input in parts (two per worker), a local cluster
dask --scheduler local:2 --parts 4 "$TMP/gen.csv" -o "$TMP/d1" --restarts 3 ||
    fail "pairmap-dask local:2: exit $?: $(tail -c 600 "$TMP/err")"
grep -q 'counted 4 of 4' "$TMP/err" || fail "no progress on stderr: $(cat "$TMP/err")"
grep -q 'merged 4 shards in 2 rounds' "$TMP/err" || fail "no merge tree: $(cat "$TMP/err")"
same_map "local:2, 4 parts" "$TMP/d1"

# three pre-split inputs of unequal sizes (each respondent's rows in one)
awk -F, -v d="$TMP" 'NR == 1 { for (i = 0; i < 3; i++) print > (d "/s" i ".csv"); next }
    { n = substr($1, 2) + 0; f = n % 10 == 0 ? 0 : n % 10 < 4 ? 1 : 2; print > (d "/s" f ".csv") }' \
    "$TMP/gen.csv"
dask --scheduler local:2 "$TMP/s0.csv" "$TMP/s1.csv" "$TMP/s2.csv" -o "$TMP/d2" --restarts 3 ||
    fail "pairmap-dask, three inputs: exit $?: $(tail -c 600 "$TMP/err")"
same_map "local:2, three files" "$TMP/d2"

# a running scheduler given by its address, the shards in a shared --work-dir; one worker is
# killed in the middle of a count task (the wrapper kills its parent, the worker process, once)
cat >"$TMP/wrap.sh" <<EOF
#!/bin/sh
if [ "\$1" = count ] && mkdir "$TMP/killed" 2>/dev/null; then
    ps -o args= -p \$PPID >"$TMP/killed/who"
    echo \$PPID >"$TMP/killed/pid"
    kill -9 \$PPID
    exit 1
fi
exec "$PAIRMAP" "\$@"
EOF
chmod +x "$TMP/wrap.sh"
# (a file, not standard input: the worker processes are spawned from it)
cat >"$TMP/cluster.py" <<'EOF'
import os, sys, time
from distributed import LocalCluster
if __name__ == "__main__":
    d = sys.argv[1]
    c = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                     silence_logs=50)
    open(os.path.join(d, "address.tmp"), "w").write(c.scheduler_address)
    os.rename(os.path.join(d, "address.tmp"), os.path.join(d, "address"))
    while not os.path.exists(os.path.join(d, "stop")):
        time.sleep(0.2)
    c.close()
EOF
/usr/bin/python3 "$TMP/cluster.py" "$TMP" 2>"$TMP/cluster.err" &
cluster=$!
for _ in $(seq 150); do [ -f "$TMP/address" ] && break; sleep 0.2; done
if [ -f "$TMP/address" ]; then
    /usr/bin/python3 "$DASK" --pairmap "$TMP/wrap.sh" --scheduler "$(cat "$TMP/address")" \
        --work-dir "$TMP/work" --parts 3 "$TMP/gen.csv" -o "$TMP/d3" --restarts 3 \
        >"$TMP/out" 2>"$TMP/err" || fail "pairmap-dask ADDRESS: exit $?: $(tail -c 600 "$TMP/err")"
    [ -d "$TMP/killed" ] || fail "the wrapper never killed its worker"
    kill -0 "$(cat "$TMP/killed/pid")" 2>/dev/null && fail "the worker process is still alive"
    grep -q python "$TMP/killed/who" || fail "the wrapper's parent was not a worker: $(cat "$TMP/killed/who")"
    same_map "a scheduler address, a worker killed" "$TMP/d3"
    [ -z "$(ls -A "$TMP/work")" ] || fail "shards left in --work-dir: $(ls "$TMP/work")"
    # a task that fails every time: the worker's message, pairmap's exit status, no DIR
    dask --scheduler "$(cat "$TMP/address")" --work-dir "$TMP/work" \
        "$DATA/short_row_line3.csv" -o "$TMP/d4"
    rc=$?
    CASES=$((CASES + 1))
    [ "$rc" -eq 2 ] || fail "a failing task: exit $rc, want 2: $(tail -c 600 "$TMP/err")"
    grep -q 'failed on a worker: pairmap: .*short_row_line3.csv:3: ' "$TMP/err" ||
        fail "a failing task: the worker's message is missing: $(tail -c 600 "$TMP/err")"
    [ -e "$TMP/d4" ] && fail "a failed run created its output directory"
else
    fail "the LocalCluster did not start"
fi
touch "$TMP/stop"
wait "$cluster"

# usage errors
dask --scheduler local:2 -o "$TMP/d5"
[ $? -eq 1 ] || fail "no INPUT: not a usage error"
dask --scheduler tcp://127.0.0.1:1 "$TMP/gen.csv" -o "$TMP/d5"
[ $? -eq 1 ] && grep -q 'work-dir' "$TMP/err" || fail "an address without --work-dir: $(cat "$TMP/err")"

finish
