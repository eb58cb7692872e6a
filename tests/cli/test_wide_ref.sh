# CLI test: the pandas reference checks of the wide reader and of item hygiene
# (tests/ref/wide_unfold.py, tests/ref/wide_hygiene.py), so that ctest runs them too.
# Run as `bash test_wide_ref.sh /path/to/pairmap`.
set -u
PAIRMAP="${1:?usage: bash $0 /path/to/pairmap}"
case "$PAIRMAP" in /*) ;; *) PAIRMAP="$(pwd)/$PAIRMAP" ;; esac
HERE="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
rc=0
for check in wide_unfold wide_hygiene; do
    PAIRMAP="$PAIRMAP" /usr/bin/python3 -B "$HERE/../ref/$check.py" || rc=1
done
exit "$rc"
