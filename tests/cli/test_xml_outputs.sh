#!/usr/bin/env bash
# XML outputs that are XML (issue 13 points 4 and 12, issue 12 point 4): item and category
# names holding U+FFFE, U+FFFF, another non-character, C0 and C1 controls, DEL, a tab and a
# bidirectional override, and a --title that is not UTF-8, give a map.graphml and a map.svg
# that xmllint (libxml2, the XML 1.0 reader of Debian's libxml2-utils) accepts, and both
# files treat each character the same way: the rule README.md states under "Names in XML
# outputs" (XML 1.0 section 2.2 lists the characters allowed).
source "$(dirname "${BASH_SOURCE[0]}")/errors_lib.sh"
PY=/usr/bin/python3
command -v xmllint >/dev/null || { fail "xmllint is missing (Debian package libxml2-utils)"; finish; }

# ten names, four categories (invented); every respondent chooses four of them
$PY - "$TMP/x.csv" <<'PY'
import random, sys
names = [b"Tea \xef\xbf\xbe one", b"Tea \xef\xbf\xbf two", b"Bell\x07cake", b"C1 \xc2\x85 bun",
         b"Esc\x1b[2Jsoup", b"Tab\there", b"Plain scone", b"R\xe2\x80\xaeLO",
         b"Nonchar \xef\xb7\x90 x", b"Del\x7fpie"]
cats = [b"cat \xef\xbf\xbe", b"drinks\x01", b"sweets \xef\xbf\xbf", b"food"]
random.seed(3)
out = [b"id,item,category"]
for r in range(300):
    for i in random.sample(range(len(names)), 4):
        out.append(str(r).encode() + b"," + names[i] + b"," + cats[i % 4])
open(sys.argv[1], "wb").write(b"\n".join(out) + b"\n")
PY
TITLE="$(printf 'Caf\xe9 \xff map')" # Latin-1 bytes: not UTF-8
"$PAIRMAP" map "$TMP/x.csv" --category-col category --min-count 0 --max-q 1 --title "$TITLE" \
    -o "$TMP/m" >/dev/null 2>"$TMP/err"
check "map runs on hostile names: $(head -c 300 "$TMP/err")" test -s "$TMP/m/map.svg"
check "xmllint accepts map.graphml" xmllint --noout "$TMP/m/map.graphml"
check "xmllint accepts map.svg" xmllint --noout "$TMP/m/map.svg"

# The rule, written out from README.md: bad bytes and characters that are not allowed or are
# discouraged become U+FFFD; tab, LF, CR stay in the GraphML; a picture's one line turns
# them into spaces (runs collapsed, ends trimmed) and shows a bidirectional control as the
# text \u202E.
check "the same rule in map.graphml and map.svg" $PY - "$TMP/m" <<'PY'
import sys, xml.etree.ElementTree as ET
d = sys.argv[1]
FFFD = "\ufffd"
def clean(s, line):
    out = []
    for ch in s:
        cp = ord(ch)
        if ch in "\t\n\r":
            out.append(" " if line else ch)
        elif cp < 0x20 or cp == 0x7F or 0x80 <= cp <= 0x9F or 0xFDD0 <= cp <= 0xFDEF or (cp & 0xFFFE) == 0xFFFE:
            out.append(FFFD)
        elif line and (0x202A <= cp <= 0x202E or 0x2066 <= cp <= 0x2069 or cp in (0x200E, 0x200F, 0x61C)):
            out.append("\\u%04X" % cp)
        else:
            out.append(ch)
    t = "".join(out)
    return " ".join(x for x in t.split(" ") if x) if line else t
raw_names = ["Tea \ufffe one", "Tea \uffff two", "Bell\x07cake", "C1 \x85 bun", "Esc\x1b[2Jsoup",
             "Tab\there", "Plain scone", "R\u202eLO", "Nonchar \ufdd0 x", "Del\x7fpie"]
raw_cats = ["cat \ufffe", "drinks\x01", "sweets \uffff", "food"]
title = "Caf\udce9 \udcff map"  # two bad bytes
bad = 0
ns = {"g": "http://graphml.graphdrawing.org/xmlns"}
g = ET.parse(d + "/map.graphml").getroot()
keys = {k.get("id"): k.get("attr.name") for k in g.findall("g:key", ns)}
names, cats, gtitle = set(), set(), None
for node in g.iter("{%s}node" % ns["g"]):
    for dd in node.findall("g:data", ns):
        if keys[dd.get("key")] == "name":
            names.add(dd.text)
        if keys[dd.get("key")] == "category":
            cats.add(dd.text)
for dd in g.find("g:graph", ns).findall("g:data", ns):
    if keys[dd.get("key")] == "title":
        gtitle = dd.text
def cl_title(line):  # each bad byte one U+FFFD
    return clean(title.replace("\udce9", FFFD).replace("\udcff", FFFD), line)
want_names = {clean(n, False) for n in raw_names}
want_cats = {clean(c, False) for c in raw_cats}
if names != want_names:
    print("graphml names", sorted(names ^ want_names)); bad += 1
if cats != want_cats:
    print("graphml categories", sorted(cats ^ want_cats)); bad += 1
if gtitle != cl_title(False):
    print("graphml title", repr(gtitle)); bad += 1
s = ET.parse(d + "/map.svg").getroot()
S = "{http://www.w3.org/2000/svg}"
items = {c.get("data-item") for c in s.iter(S + "circle") if c.get("class") == "node"}
scats = {c.get("data-category") for c in s.iter(S + "circle") if c.get("class") == "node"}
want_line = {clean(n, True) for n in raw_names}
if items != want_line:
    print("svg items", sorted(items ^ want_line)); bad += 1
if scats != {clean(c, True) for c in raw_cats}:
    print("svg categories", sorted(scats)); bad += 1
stitle = s.find(S + "title").text
if stitle != cl_title(True):
    print("svg title", repr(stitle)); bad += 1
# no text of the picture holds a control, a non-character or a raw bidirectional control
for el in s.iter():
    for t in [el.text or ""] + list(el.attrib.values()):
        for ch in t:
            cp = ord(ch)
            if (cp < 0x20 and ch not in "\n") or 0x7F <= cp <= 0x9F or 0x202A <= cp <= 0x202E or 0x2066 <= cp <= 0x2069 or (cp & 0xFFFE) == 0xFFFE:
                print("svg holds U+%04X in %r" % (cp, t)); bad += 1
sys.exit(1 if bad else 0)
PY
finish
