#!/bin/sh
# Builds the libFuzzer harnesses of tests/fuzz/ with clang (ASan + UBSan) into DIR (default
# build-fuzz/): fuzz_input (the input reader and the stages after it), fuzz_cli (the
# command-line parser, src/cli/cli.c compiled in) and fuzz_shard (the count shard reader). The CSV reader reads 128-byte blocks here
# (PM_CSV_BLOCK) instead of 1 MiB, so that lines across reads are fuzzed too.
# Usage: sh tests/fuzz/build.sh [DIR]
set -eu
cd "$(dirname "$0")/../.."
out="${1:-build-fuzz}"
mkdir -p "$out/obj"
CC="${CC_FUZZ:-clang}"
san="-fsanitize=address,undefined -fno-sanitize-recover=undefined -fno-omit-frame-pointer"
cflags="-std=c11 -g -O1 $san -D_POSIX_C_SOURCE=200809L -DPM_VERSION_STRING=\"fuzz\" -DPM_CSV_BLOCK=128 \
 -Iinclude -Isrc $(pkg-config --cflags igraph gsl)"
libs="$(pkg-config --libs igraph gsl) -lcsv -lpthread -lm"
objs=""
for f in src/*.c src/cli/cli.c src/cli/cli_counts.c src/cli/cli_segments.c src/cli/cli_memory.c; do
    o="$out/obj/$(echo "$f" | tr / _).o"
    if [ ! -f "$o" ] || [ "$f" -nt "$o" ] || [ "$0" -nt "$o" ]; then
        # shellcheck disable=SC2086
        $CC $cflags -fsanitize=fuzzer-no-link -c "$f" -o "$o"
    fi
    objs="$objs $o"
done
# the HTML page's style sheet and script, embedded as the CMake build does (cmake/embed.cmake)
mkdir -p "$out/generated"
for a in page.css page.js; do
    sym="pm_i_$(echo "$a" | tr . _)"
    g="$out/generated/$sym.c"
    o="$out/obj/$sym.o"
    if [ ! -f "$o" ] || [ "src/html/$a" -nt "$o" ] || [ cmake/embed.cmake -nt "$o" ]; then
        cmake -DIN="src/html/$a" -DOUT="$g" -DNAME="$sym" -P cmake/embed.cmake
        # shellcheck disable=SC2086
        $CC $cflags -fsanitize=fuzzer-no-link -c "$g" -o "$o"
    fi
    objs="$objs $o"
done
lib_objs=$(echo "$objs" | tr ' ' '\n' | grep -v src_cli_ | tr '\n' ' ')
# shellcheck disable=SC2086
$CC $cflags -fsanitize=fuzzer tests/fuzz/fuzz_input.c $lib_objs $libs -o "$out/fuzz_input"
# shellcheck disable=SC2086
$CC $cflags -fsanitize=fuzzer tests/fuzz/fuzz_cli.c $objs $libs -o "$out/fuzz_cli"
# shellcheck disable=SC2086
$CC $cflags -fsanitize=fuzzer tests/fuzz/fuzz_shard.c $lib_objs $libs -o "$out/fuzz_shard"
