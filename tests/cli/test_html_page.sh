# map.html in a real browser: tests/cli/html_page.py drives Debian's headless chromium over
# the cafe demo's page and a page of hostile names (see the references named there).
# Run as `bash test_html_page.sh /path/to/pairmap`.
set -u
PAIRMAP="${1:?usage: bash $0 /path/to/pairmap}"
case "$PAIRMAP" in /*) ;; *) PAIRMAP="$(pwd)/$PAIRMAP" ;; esac
HERE="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
REPO="$(cd "$HERE/../.." && pwd)"
for tool in chromium /usr/bin/python3; do
    if ! command -v "$tool" >/dev/null; then
        echo "FAIL: $tool is missing (scripts/setup installs it)" >&2
        exit 1
    fi
done
TMP="$(mktemp -d "${TMPDIR:-/tmp}/pm-html.XXXXXX")"
trap 'rm -rf "$TMP"' EXIT
# chromium keeps its profile under HOME: a fresh one per run
HOME="$TMP/home" /usr/bin/python3 "$HERE/html_page.py" "$PAIRMAP" "$REPO" "$TMP"
