#!/usr/bin/env bash
# `pairmap map` runs the Louvain restarts and the layout in worker processes (--threads N,
# src/network.c pm_network_run): the files are the same, byte for byte, for --threads 1, 2, 3
# and 4 (run.json apart from the option itself and the timings); when the run is stopped by
# SIGTERM, SIGINT or SIGKILL, sent to pairmap alone or to its whole process group, the worker
# processes end with it, and the message "interrupted" appears once (the workers never run
# pairmap's own handler). Usage: bash test_map_workers.sh /path/to/pairmap
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"

# Invented data: a food festival's visitor survey, 1200 dishes in 40 stalls; visitors mostly
# try dishes of one stall. Over 300 dishes with edges: the layout's grid variant.
awk 'BEGIN {
    srand(11); print "visitor,dish"
    for (r = 1; r <= 30000; r++) {
        g = int(rand() * 40); k = 2 + int(rand() * 8)
        for (j = 0; j < k; j++) {
            if (rand() < 0.75) it = g * 30 + int(rand() * 30); else it = int(rand() * 1200)
            printf "v%06d,dish%04d\n", r, it
        }
    }
}' >"$TMP/festival.csv"

# ---- same files for any number of workers --------------------------------------------------------
for t in 1 2 3 4; do
    expect_ok map "$TMP/festival.csv" -q -o "$TMP/t$t" --threads "$t" --restarts 6
done
# run.json without what may differ: the options --threads and -o, and the stage timings
json_core() {
    /usr/bin/python3 -c '
import json, sys
j = json.load(open(sys.argv[1]))
j.pop("timings", None)
for k in ("threads", "output", "o"):
    j.get("options", {}).pop(k, None)
print(json.dumps(j, sort_keys=True))' "$1"
}
if [ -s "$TMP/t1/nodes.csv" ]; then
    clusters=$(cut -d, -f7 "$TMP/t1/nodes.csv" | sort -u | wc -l)
    [ "$clusters" -gt 5 ] || fail "the festival data gave $clusters clusters: the comparison below would be weak"
    json_core "$TMP/t1/run.json" >"$TMP/t1.json"
    for t in 2 3 4; do
        CASES=$((CASES + 1))
        for f in map.graphml nodes.csv map.svg map.html edges.csv; do
            cmp -s "$TMP/t1/$f" "$TMP/t$t/$f" || fail "$f differs between --threads 1 and --threads $t"
        done
        json_core "$TMP/t$t/run.json" >"$TMP/t$t.json"
        cmp -s "$TMP/t1.json" "$TMP/t$t.json" ||
            fail "run.json differs between --threads 1 and --threads $t: $(diff "$TMP/t1.json" "$TMP/t$t.json" | head -c 400)"
    done
    grep -q '"threads": "2"' "$TMP/t2/run.json" || fail "run.json does not record --threads 2"
fi

# ---- stopped while the workers run -------------------------------------------------------------
# gone PID: the process no longer exists or is a zombie waiting for whoever adopted it
gone() {
    local st
    st="$(ps -o stat= -p "$1" 2>/dev/null)"
    [ -z "$st" ] || [ "${st:0:1}" = Z ]
}

# stop_case HOW SIG: HOW is "process" (signal to pairmap alone) or "group" (to its process
# group, as a terminal's Ctrl-C would)
stop_case() {
    local how="$1" sig="$2" pid kids="" i rc
    CASES=$((CASES + 1))
    rm -rf "$TMP/stop"
    if [ "$how" = group ]; then
        setsid "$PAIRMAP" map "$TMP/festival.csv" -q -o "$TMP/stop" --threads 3 \
            --iterations 200000 --restarts 400 >"$TMP/out" 2>"$TMP/err" &
    else
        "$PAIRMAP" map "$TMP/festival.csv" -q -o "$TMP/stop" --threads 3 \
            --iterations 200000 --restarts 400 >"$TMP/out" 2>"$TMP/err" &
    fi
    pid=$!
    # wait for the graph stage: the workers appear as pairmap's children
    for i in $(seq 1 300); do
        kids="$(pgrep -P "$pid" | tr '\n' ' ')"
        [ -n "$kids" ] && break
        sleep 0.1
    done
    if [ -z "$kids" ]; then
        fail "$how SIG$sig: no worker process appeared within 30 s (--threads 3)"
        kill -s KILL "$pid" 2>/dev/null
        wait "$pid" 2>/dev/null
        return
    fi
    sleep 0.3
    kids="$(pgrep -P "$pid" | tr '\n' ' ')" # all of them by now
    [ "$(echo $kids | wc -w)" -eq 2 ] || fail "$how SIG$sig: $(echo $kids | wc -w) workers, expected 2 for --threads 3"
    if [ "$how" = group ]; then
        if [ "$(ps -o pgid= -p "$pid" | tr -d ' ')" != "$pid" ]; then
            fail "setsid did not make pairmap a process group leader"
        fi
        kill -s "$sig" -- "-$pid" 2>/dev/null
    else
        kill -s "$sig" "$pid" 2>/dev/null
    fi
    { wait "$pid"; } 2>/dev/null # no "Killed" notice from the shell
    rc=$?
    case "$sig" in
    KILL) [ "$rc" -eq 137 ] || fail "$how SIG$sig: exit $rc, expected 137" ;;
    *)
        { [ "$rc" -eq 130 ] || { [ "$sig" != INT ] && [ "$rc" -eq 143 ]; }; } || fail "$how SIG$sig: exit $rc, expected 130/143: $(cat "$TMP/err")"
        n=$(grep -c 'interrupted' "$TMP/err")
        [ "$n" -eq 1 ] || fail "$how SIG$sig: 'interrupted' printed $n times: $(cat "$TMP/err")"
        ;;
    esac
    for i in $(seq 1 50); do
        local alive=""
        for k in $kids; do
            gone "$k" || alive="$alive $k"
        done
        [ -z "$alive" ] && break
        sleep 0.1
    done
    [ -z "$alive" ] || {
        fail "$how SIG$sig: worker processes$alive still run 5 s after pairmap ended"
        for k in $alive; do kill -s KILL "$k" 2>/dev/null; done
    }
    [ -e "$TMP/stop/map.graphml" ] && fail "$how SIG$sig: a stopped run wrote map.graphml"
}

if command -v pgrep >/dev/null && command -v setsid >/dev/null && command -v ps >/dev/null; then
    stop_case process TERM
    stop_case process INT
    stop_case process KILL # no handler runs: the workers go by PR_SET_PDEATHSIG
    stop_case group TERM
    stop_case group INT
else
    skip_case core "the stop cases (pgrep, setsid or ps missing: procps, util-linux)"
fi

finish
