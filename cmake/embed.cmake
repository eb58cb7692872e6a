# Writes OUT, a C file defining `const unsigned char NAME[]` (NUL-terminated) and `const size_t
# NAME_len` from the bytes of IN: the page's style sheet and script compiled into the library
# (run as `cmake -DIN=... -DOUT=... -DNAME=... -P embed.cmake` at build time; nothing fetched).
file(READ "${IN}" hex HEX)
string(LENGTH "${hex}" nhex)
math(EXPR nbytes "${nhex} / 2")
string(REGEX REPLACE "([0-9a-f][0-9a-f])" "0x\\1," body "${hex}")
string(REGEX REPLACE "(0x..,0x..,0x..,0x..,0x..,0x..,0x..,0x..,0x..,0x..,0x..,0x..,0x..,0x..,0x..,0x..,)" "\\1\n" body "${body}")
file(WRITE "${OUT}.tmp" "/* generated from ${IN} by cmake/embed.cmake: do not edit */\n#include <stddef.h>\nextern const unsigned char ${NAME}[];\nextern const size_t ${NAME}_len;\nconst unsigned char ${NAME}[] = {\n${body}0x00};\nconst size_t ${NAME}_len = ${nbytes};\n")
file(RENAME "${OUT}.tmp" "${OUT}")
