# Shared helpers of tests/cli/test_errors_*.sh (sourced, not a test itself).
# Each test script is run as `bash test_errors_x.sh /path/to/pairmap`.
#
# expect_fail STATUS PREFIX NEEDLE -- ARGS...
#   Runs `pairmap ARGS...` and checks that it exits with STATUS, writes nothing to stdout, and
#   writes exactly one line to stderr besides "pairmap: note: ..."/"pairmap: warning: ..." lines.
#   That line must read "pairmap: PREFIXmessage" where PREFIX is "FILE:LINE: " or "FILE: " (or
#   empty where no file applies), the message must contain the fixed string NEEDLE and follow
#   STYLE.md section 5: lowercase start, no closing full stop, a single line.
# expect_ok ARGS...       the command succeeds (exit 0)
# check WHAT COMMAND...   the command (any, not only pairmap) succeeds; WHAT names the case
# Sets FAILS; call finish at the end.

set -u
PAIRMAP="${1:?usage: bash $0 /path/to/pairmap}"
case "$PAIRMAP" in /*) ;; *) PAIRMAP="$(pwd)/$PAIRMAP" ;; esac
HERE="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
DATA="$(cd "$HERE/../data" && pwd)"
DEMO="$(cd "$HERE/../../demo" && pwd)"
TMP="$(mktemp -d "${TMPDIR:-/tmp}/pm-errors.XXXXXX")"
trap 'rm -rf "$TMP"' EXIT
FAILS=0
CASES=0
SKIPS=0

fail() {
    printf 'FAIL: %s\n' "$*" >&2
    FAILS=$((FAILS + 1))
}

check() {
    local what="$1"
    shift
    CASES=$((CASES + 1))
    "$@" || fail "$what"
}

# The one error line of $TMP/err (notes and warnings set aside); empty when there is not
# exactly one.
error_line() {
    grep -v -e '^pairmap: note: ' -e '^pairmap: warning: ' "$TMP/err" >"$TMP/err.other" || true
    if [ "$(wc -l <"$TMP/err.other")" -eq 1 ]; then
        cat "$TMP/err.other"
    fi
}

# style_ok MESSAGE: STYLE.md section 5 on the text after the location.
style_ok() {
    local m="$1"
    case "$m" in
    [A-Z]*) return 1 ;;     # lowercase start (an option name or a quote may open it)
    *.) return 1 ;;          # no closing full stop
    "") return 1 ;;
    esac
    # no control characters (an escaped byte is shown as \xHH)
    if printf '%s' "$m" | LC_ALL=C grep -q '[[:cntrl:]]'; then
        return 1
    fi
    return 0
}

expect_fail() {
    local status="$1" prefix="$2" needle="$3"
    shift 3
    [ "$1" = "--" ] && shift
    CASES=$((CASES + 1))
    local what="pairmap $*"
    "$PAIRMAP" "$@" >"$TMP/out" 2>"$TMP/err" </dev/null
    local rc=$?
    if [ "$rc" -ne "$status" ]; then
        fail "$what: exit $rc, expected $status; stderr: $(head -c 600 "$TMP/err")"
        return
    fi
    if [ -s "$TMP/out" ]; then
        fail "$what: wrote $(wc -c <"$TMP/out") bytes to stdout on failure"
    fi
    local line
    line="$(error_line)"
    if [ -z "$line" ]; then
        fail "$what: expected exactly one error line on stderr, got: $(cat "$TMP/err")"
        return
    fi
    local want="pairmap: $prefix"
    if [ "${line:0:${#want}}" != "$want" ]; then
        fail "$what: message does not start with '$want': $line"
        return
    fi
    local msg="${line:${#want}}"
    # the prefix must be the whole location: the message itself starts with no "N:" part
    if [[ "$msg" =~ ^[0-9]+: ]]; then
        fail "$what: unexpected location part in: $line"
    fi
    if ! style_ok "$msg"; then
        fail "$what: message breaks STYLE.md section 5: $line"
    fi
    if [ -n "$needle" ] && [[ "$msg" != *"$needle"* ]]; then
        fail "$what: message lacks '$needle': $line"
    fi
}

# expect_fail_stdin STATUS PREFIX NEEDLE FILE -- ARGS...: as expect_fail with FILE on stdin.
expect_fail_stdin() {
    local status="$1" prefix="$2" needle="$3" file="$4"
    shift 4
    [ "$1" = "--" ] && shift
    CASES=$((CASES + 1))
    "$PAIRMAP" "$@" <"$file" >"$TMP/out" 2>"$TMP/err"
    local rc=$?
    local line
    line="$(error_line)"
    if [ "$rc" -ne "$status" ] || [ -s "$TMP/out" ] || [ "${line#pairmap: "$prefix"}" = "$line" ] ||
        [[ "$line" != *"$needle"* ]]; then
        fail "pairmap $* < $file: exit $rc (want $status), line '$line' (want prefix '$prefix', '$needle')"
    fi
}

expect_ok() {
    CASES=$((CASES + 1))
    "$PAIRMAP" "$@" >"$TMP/out" 2>"$TMP/err" </dev/null
    local rc=$?
    if [ "$rc" -ne 0 ]; then
        fail "pairmap $*: exit $rc, expected 0; stderr: $(head -c 600 "$TMP/err")"
        return 1
    fi
    return 0
}

# bound_memory MB: from here on $PAIRMAP runs with at most MB megabytes: `ulimit -v` for a
# normal build; for an AddressSanitizer build (which reserves terabytes of shadow address space
# and so cannot start under ulimit -v) ASan's own hard_rss_limit_mb, which stops the process
# with a report when its resident memory passes the bound.
bound_memory() {
    local mb="$1" real="$PAIRMAP"
    if grep -q -a __asan_init "$real" 2>/dev/null; then
        printf '#!/bin/sh\nASAN_OPTIONS="${ASAN_OPTIONS:+$ASAN_OPTIONS:}hard_rss_limit_mb=%s"\nexport ASAN_OPTIONS\nexec "%s" "$@"\n' \
            "$mb" "$real" >"$TMP/bounded"
    else
        printf '#!/bin/sh\nulimit -v %s\nexec "%s" "$@"\n' "$((mb * 1000))" "$real" >"$TMP/bounded"
    fi
    chmod +x "$TMP/bounded"
    PAIRMAP="$TMP/bounded"
}

# stalled_input PATH: makes PATH a FIFO whose writer sends a header and a few rows, then holds
# the pipe open (for 60 s) without closing it, so a run reading PATH is certainly still reading
# when a signal is sent (no timing guess); the writer is ended by stop_stalled_input.
stalled_input() {
    rm -f "$1"
    mkfifo "$1"
    (printf 'order,item\no1,a\no1,b\no2,a\n'; sleep 60) >"$1" &
    STALLED_WRITER=$!
}
stop_stalled_input() {
    kill "$STALLED_WRITER" 2>/dev/null
    wait "$STALLED_WRITER" 2>/dev/null
    return 0
}

# True when `pairmap CMD` is implemented (its --help succeeds).
# same_out NAME ARGS...: pairmap ARGS with --threads 1 and with 2 give the same stdout, stderr
# and exit status (the status, the same for both, is left in $st); outputs in $TMP/NAME.*
same_out() {
    local name="$1"
    shift
    CASES=$((CASES + 1))
    "$PAIRMAP" "$@" --threads 1 >"$TMP/$name.1" 2>"$TMP/$name.e1"
    local s1=$?
    "$PAIRMAP" "$@" --threads 2 >"$TMP/$name.2" 2>"$TMP/$name.e2"
    local s2=$?
    [ "$s1" = "$s2" ] || fail "$name: exit $s1 with one thread, $s2 with two"
    cmp -s "$TMP/$name.1" "$TMP/$name.2" || fail "$name: stdout differs between 1 and 2 threads"
    cmp -s "$TMP/$name.e1" "$TMP/$name.e2" || fail "$name: stderr differs between 1 and 2 threads"
    st="$s1"
}

# on_tty FILE ARGS...: pairmap ARGS with a terminal as stdout (util-linux `script -qec` gives
# it one; stderr silenced by --quiet), what it printed in FILE without the terminal's CRs
on_tty() {
    local out="$1"
    shift
    local cmd
    printf -v cmd '%q ' "$PAIRMAP" "$@" --quiet
    script -qec "$cmd" /dev/null </dev/null | tr -d '\r' >"$out"
}

have_command() {
    "$PAIRMAP" "$1" --help >/dev/null 2>&1
}

# skip_case core|optional WHAT: a case that cannot run here. Counted and printed, and written
# to $PM_SKIP_LOG when set (scripts/test sums them). A core case has no other form that runs:
# with PM_STRICT_SKIPS=1 (scripts/test, CI) skipping it fails the test; an optional one is a
# second form of a case that also runs through a test hook.
skip_case() {
    local kind="$1"
    shift
    SKIPS=$((SKIPS + 1))
    printf 'SKIP (%s): %s\n' "$kind" "$*"
    if [ -n "${PM_SKIP_LOG:-}" ]; then
        printf '%s %s: %s\n' "$kind" "$(basename "$0")" "$*" >>"$PM_SKIP_LOG"
    fi
    if [ "$kind" = core ] && [ "${PM_STRICT_SKIPS:-0}" = 1 ]; then
        fail "core case skipped: $*"
    fi
}

finish() {
    if [ "$FAILS" -ne 0 ]; then
        printf '%s: %d of %d cases failed, %d skipped\n' "$(basename "$0")" "$FAILS" "$CASES" \
            "$SKIPS" >&2
        exit 1
    fi
    printf '%s: %d cases passed, %d skipped\n' "$(basename "$0")" "$CASES" "$SKIPS"
    exit 0
}
