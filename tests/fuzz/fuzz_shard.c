/* libFuzzer harness over the count shard reader (issue 18): the input is a shard file, parsed
 * without its checksum check (so that the parser's own checks are what is fuzzed). A shard
 * that parses must encode to a file that parses again with its checksum and encodes to the
 * same bytes; merging it alone must give it back byte for byte; and its counts are carried
 * on through pm_shard_incidence and the scoring stage (pm_assoc_run with given pairs). */
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "pairmap/assoc.h"
#include "pairmap/error.h"
#include "pairmap/network.h"
#include "pairmap/shard.h"

int LLVMFuzzerInitialize(int *argc, char ***argv);
int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerInitialize(int *argc, char ***argv) {
    (void)argc;
    (void)argv;
    pm_init();
    return 0;
}

static void check(int ok, const char *what) {
    if (!ok) {
        fprintf(stderr, "fuzz_shard: %s\n", what);
        abort();
    }
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size) {
    pm_diag_t d;
    pm_diag_clear(&d);
    pm_shard_t *s = NULL, *s2 = NULL, *m = NULL;
    pm_err_t rc = pm_shard_decode(data, size, "fuzz.pmc", false, &s, &d);
    check(rc == PM_OK || (rc == PM_EDATA && d.msg[0]) || rc == PM_ENOMEM, "decode: bad result");
    if (rc) {
        return 0;
    }
    unsigned char *e1 = NULL, *e2 = NULL, *e3 = NULL;
    size_t n1 = 0, n2 = 0, n3 = 0;
    check(pm_shard_encode(s, &e1, &n1, &d) == PM_OK, "encode failed");
    check(pm_shard_decode(e1, n1, "again.pmc", true, &s2, &d) == PM_OK, "re-decode failed");
    check(pm_shard_encode(s2, &e2, &n2, &d) == PM_OK, "re-encode failed");
    check(n1 == n2 && memcmp(e1, e2, n1) == 0, "encode(decode(encode(x))) != encode(x)");
    const pm_shard_t *one[1] = {s};
    const char *names[2] = {"a.pmc", "b.pmc"};
    check(pm_shard_merge(one, names, 1, &m, &d) == PM_OK, "merging one shard failed");
    check(pm_shard_encode(m, &e3, &n3, &d) == PM_OK, "encoding the merge failed");
    check(n1 == n3 && memcmp(e1, e3, n1) == 0, "a shard merged alone changed");
    const pm_shard_t *two[2] = {s, s2};
    pm_shard_t *twice = NULL;
    check(pm_shard_merge(two, names, 2, &twice, &d) == PM_EDATA, "the same parts twice merged");
    pm_incidence_t *inc = NULL;
    pm_counts_t *pairs = NULL;
    if (s->N <= 100000 && pm_shard_incidence(s, &inc, &pairs, &d) == PM_OK) {
        pm_assoc_opts_t ao;
        pm_assoc_opts_init(&ao);
        ao.threads = 1;
        ao.given = pairs;
        ao.sign = (pm_sign_t)(size % 3);
        ao.min_count = (uint32_t)(size % 4);
        pm_pairs_t *pp = NULL;
        rc = pm_assoc_run(inc, &ao, &pp, &d);
        check(rc == PM_OK || rc == PM_ENOMEM || d.msg[0], "scoring: an error without message");
        pm_pairs_free(pp);
    }
    pm_counts_free(pairs);
    pm_incidence_free(inc);
    pm_shard_free(twice);
    free(e1);
    free(e2);
    free(e3);
    pm_shard_free(m);
    pm_shard_free(s2);
    pm_shard_free(s);
    return 0;
}
