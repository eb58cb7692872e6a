/* Unit tests of the parallel-for's contract (src/parallel.h): every chunk runs exactly once
 * whatever happens to the threads: on as many threads as asked, on fewer when threads cannot
 * start (the test hook pm_i_parallel_limit_threads), on the calling thread alone when the
 * bookkeeping cannot be allocated (the checked allocators' fault hook); thread indices stay
 * below the number asked; the first non-zero result of the chunk function comes back. */
#include "unit.h"

#include <stdatomic.h>

#include "parallel.h"
#include "util.h"

#define CHUNKS 1000

typedef struct {
    atomic_int runs[CHUNKS];
    atomic_uint max_thread;
    unsigned threads;
    size_t stop_at; /* chunk that returns 7 (CHUNKS: none) */
} count_job;

static int count_chunk(void *ud, size_t c, unsigned th) {
    count_job *j = ud;
    atomic_fetch_add(&j->runs[c], 1);
    unsigned m = atomic_load(&j->max_thread);
    while (th > m && !atomic_compare_exchange_weak(&j->max_thread, &m, th)) {
    }
    return c == j->stop_at ? 7 : 0;
}

static void run_and_check(unsigned threads, unsigned expect_threads) {
    static count_job j;
    for (size_t c = 0; c < CHUNKS; c++) {
        atomic_init(&j.runs[c], 0);
    }
    atomic_init(&j.max_thread, 0);
    j.threads = threads;
    j.stop_at = CHUNKS;
    assert_int_equal(pm_i_parallel(threads, CHUNKS, count_chunk, &j), 0);
    for (size_t c = 0; c < CHUNKS; c++) {
        if (atomic_load(&j.runs[c]) != 1) {
            fail_msg("%u threads: chunk %zu ran %d times", threads, c, atomic_load(&j.runs[c]));
        }
    }
    assert_true(atomic_load(&j.max_thread) < (threads ? threads : 1));
    assert_int_equal(pm_i_parallel_last_threads(), expect_threads);
}

static void test_parallel_every_chunk_once(void **state) {
    (void)state;
    for (unsigned t = 0; t <= 8; t++) {
        run_and_check(t, t ? t : 1);
    }
}

static void test_parallel_threads_that_cannot_start(void **state) {
    (void)state;
    for (unsigned limit = 1; limit <= 3; limit++) {
        pm_i_parallel_limit_threads(limit);
        run_and_check(6, limit); /* the caller plus limit - 1 */
        pm_i_parallel_limit_threads(0);
    }
}

static void test_parallel_no_memory_for_bookkeeping(void **state) {
    (void)state;
    for (long n = 1; n <= 2; n++) { /* the workers' array, then the threads' */
        pm_i_alloc_fail_after(n);
        run_and_check(4, 1);
        pm_i_alloc_fail_after(0);
    }
}

static void test_parallel_stop_result(void **state) {
    (void)state;
    static count_job j;
    for (unsigned t = 1; t <= 4; t++) {
        for (size_t c = 0; c < CHUNKS; c++) {
            atomic_init(&j.runs[c], 0);
        }
        atomic_init(&j.max_thread, 0);
        j.stop_at = 10;
        assert_int_equal(pm_i_parallel(t, CHUNKS, count_chunk, &j), 7);
        assert_int_equal(atomic_load(&j.runs[10]), 1);
    }
}

int main(int argc, char **argv) {
    if (argc > 1) {
        cmocka_set_test_filter(argv[1]);
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_parallel_every_chunk_once),
        cmocka_unit_test(test_parallel_threads_that_cannot_start),
        cmocka_unit_test(test_parallel_no_memory_for_bookkeeping),
        cmocka_unit_test(test_parallel_stop_result),
    };
    return cmocka_run_group_tests_name("parallel", tests, NULL, NULL);
}
