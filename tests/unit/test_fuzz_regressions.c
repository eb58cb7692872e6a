/* Replays the inputs the fuzzers found (tests/fuzz/regressions/<harness>/) and their seed
 * corpora (tests/fuzz/corpus/<harness>/) through the harnesses' own code, so every case a
 * fuzzer once crashed on stays a test: under the sanitizer build (scripts/test-hardening,
 * build-asan) a memory error fails it, and in every build the harnesses' contract checks
 * (abort on a broken invariant) do. */
#define _GNU_SOURCE /* memfd_create in fuzz_input.c */
#include "unit.h"

#include <dirent.h>

/* the command-line parser lives in the executable, not the library: compile it in */
#include "../../src/cli/cli.c"
#include "../../src/cli/cli_counts.c"
#include "../../src/cli/cli_segments.c"
#include "../../src/cli/cli_memory.c"

/* the harnesses, with their libFuzzer entry points renamed */
#define LLVMFuzzerInitialize fuzz_input_init
#define LLVMFuzzerTestOneInput fuzz_input_one
#include "../fuzz/fuzz_input.c"
#undef LLVMFuzzerInitialize
#undef LLVMFuzzerTestOneInput
#define LLVMFuzzerInitialize fuzz_cli_init
#define LLVMFuzzerTestOneInput fuzz_cli_one
#include "../fuzz/fuzz_cli.c"
#undef LLVMFuzzerInitialize
#undef LLVMFuzzerTestOneInput
#define LLVMFuzzerInitialize fuzz_shard_init
#define LLVMFuzzerTestOneInput fuzz_shard_one
#define check fuzz_shard_check
#include "../fuzz/fuzz_shard.c"
#undef check
#undef LLVMFuzzerInitialize
#undef LLVMFuzzerTestOneInput

/* tests/fuzz/ from this file's path (CMake compiles it by absolute path) */
static void fuzz_dir(char *buf, size_t size, const char *sub) {
    const char *f = __FILE__;
    const char *slash = strrchr(f, '/');
    assert_non_null(slash);
    snprintf(buf, size, "%.*s/../fuzz/%s", (int)(slash - f), f, sub);
}

/* Runs every file of dir through fn; returns the number of files. */
static size_t replay(const char *sub, int (*fn)(const uint8_t *, size_t)) {
    char dir[4096];
    fuzz_dir(dir, sizeof dir, sub);
    DIR *d = opendir(dir);
    if (!d) {
        fail_msg("cannot open %s", dir);
    }
    size_t n = 0;
    struct dirent *e;
    while ((e = readdir(d)) != NULL) {
        if (e->d_name[0] == '.') {
            continue;
        }
        char path[4352];
        snprintf(path, sizeof path, "%s/%s", dir, e->d_name);
        FILE *fp = fopen(path, "rb");
        assert_non_null(fp);
        static uint8_t buf[1 << 20];
        size_t len = fread(buf, 1, sizeof buf, fp);
        fclose(fp);
        fprintf(stderr, "replay %s/%s (%zu bytes)\n", sub, e->d_name, len);
        /* the harness returns 0 whatever happens (libFuzzer's contract), so its result says
         * nothing; what fails is a broken contract check inside it (abort) or, under the
         * sanitizer build, a memory error: either ends this test with a crash */
        (void)fn(buf, len);
        n++;
    }
    closedir(d);
    return n;
}

static void test_fuzz_regressions_input(void **state) {
    (void)state;
    /* at least the two cases of issue 6 (cooccur.c row buffer, assoc.c qsort of NULL) */
    assert_true(replay("regressions/fuzz_input", fuzz_input_one) >= 2);
}

static void test_fuzz_regressions_shard(void **state) {
    (void)state;
    /* at least the shard of issue 18 whose part list held two splits of one input */
    assert_true(replay("regressions/fuzz_shard", fuzz_shard_one) >= 1);
    assert_true(replay("corpus/fuzz_shard", fuzz_shard_one) >= 4);
}

/* The command-line harness: its seed corpus, and any case its fuzzer finds later
 * (regressions/fuzz_cli/ is empty so far, so it is no test of its own that asserts nothing). */
static void test_fuzz_regressions_corpus(void **state) {
    (void)state;
    assert_true(replay("corpus/fuzz_input", fuzz_input_one) >= 5);
    size_t n = replay("corpus/fuzz_cli", fuzz_cli_one);
    n += replay("regressions/fuzz_cli", fuzz_cli_one);
    assert_true(n >= 5);
}

static int setup(void **state) {
    (void)state;
    int argc = 0;
    char **argv = NULL;
    return fuzz_input_init(&argc, &argv); /* not fuzz_cli_init: it closes stdout */
}

int main(int argc, char **argv) {
    if (argc > 1) {
        cmocka_set_test_filter(argv[1]);
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_fuzz_regressions_input),
        cmocka_unit_test(test_fuzz_regressions_shard),
        cmocka_unit_test(test_fuzz_regressions_corpus),
    };
    return cmocka_run_group_tests_name("fuzz_regressions", tests, setup, NULL);
}
