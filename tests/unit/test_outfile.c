/* Unit tests of src/outfile.c: temporary files, checked completion, commit, roll-back and
 * clean-up of the atomic output directory; and of src/outfile_direct.c, the stream that
 * writes full blocks around the page cache. */
#define _GNU_SOURCE /* O_DIRECT, for the probe of the file system (before any header) */
#include "unit.h"

#include <dirent.h>
#include <sys/stat.h>

#include <fcntl.h>
#include <unistd.h>

#include "outfile_direct.h"
#include "pairmap/outfile.h"

static char *tmpdir(void) {
    const char *base = getenv("TMPDIR");
    char *p = malloc(512);
    assert_non_null(p);
    snprintf(p, 512, "%s/pm_outdir_XXXXXX", base && *base ? base : "/tmp");
    assert_non_null(mkdtemp(p));
    return p;
}

/* Number of entries of dir (. and .. aside); hidden counts dot files only. */
static int entries(const char *dir, int hidden) {
    DIR *d = opendir(dir);
    if (!d) {
        return -1;
    }
    int n = 0;
    struct dirent *e;
    while ((e = readdir(d))) {
        if (strcmp(e->d_name, ".") && strcmp(e->d_name, "..") && (!hidden || e->d_name[0] == '.')) {
            n++;
        }
    }
    closedir(d);
    return n;
}

static void slurp(const char *path, char *buf, size_t size) {
    FILE *fp = fopen(path, "r");
    assert_non_null(fp);
    size_t n = fread(buf, 1, size - 1, fp);
    buf[n] = '\0';
    fclose(fp);
}

static void test_outfile_commit_replaces_all(void **state) {
    (void)state;
    char *dir = tmpdir(), path[600], buf[64];
    snprintf(path, sizeof path, "%s/a.txt", dir);
    FILE *old = fopen(path, "w");
    assert_non_null(old);
    fputs("old", old);
    fclose(old);
    pm_outdir_t *od = NULL;
    pm_diag_t d;
    assert_int_equal(pm_outdir_open(dir, &od, &d), PM_OK);
    FILE *a, *b;
    assert_int_equal(pm_outdir_create(od, "a.txt", &a, &d), PM_OK);
    assert_int_equal(pm_outdir_create(od, "b.txt", &b, &d), PM_OK);
    fputs("new a", a);
    fputs("new b", b);
    assert_int_equal(pm_outdir_finish(od, a, &d), PM_OK);
    /* not all finished: nothing replaced */
    assert_int_not_equal(pm_outdir_commit(od, &d), PM_OK);
    slurp(path, buf, sizeof buf);
    assert_string_equal(buf, "old");
    assert_int_equal(pm_outdir_finish(od, b, &d), PM_OK);
    assert_int_equal(entries(dir, 1), 2); /* the two temporaries */
    assert_int_equal(pm_outdir_commit(od, &d), PM_OK);
    pm_outdir_free(od);
    slurp(path, buf, sizeof buf);
    assert_string_equal(buf, "new a");
    assert_int_equal(entries(dir, 1), 0);
    assert_int_equal(entries(dir, 0), 2);
    snprintf(path, sizeof path, "rm -rf '%s'", dir);
    assert_int_equal(system(path), 0);
    free(dir);
}

static void test_outfile_free_without_commit_leaves_nothing(void **state) {
    (void)state;
    char *dir = tmpdir(), sub[600], cmd[700];
    snprintf(sub, sizeof sub, "%s/x/y", dir);
    pm_outdir_t *od = NULL;
    pm_diag_t d;
    assert_int_equal(pm_outdir_open(sub, &od, &d), PM_OK);
    FILE *a;
    assert_int_equal(pm_outdir_create(od, "a.txt", &a, &d), PM_OK);
    fputs("half", a);
    pm_outdir_free(od); /* a failed run: the temporary and the directories it made go */
    assert_int_equal(entries(dir, 0), 0);
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    assert_int_equal(system(cmd), 0);
    free(dir);
}

static void test_outfile_errors(void **state) {
    (void)state;
    char *dir = tmpdir(), path[600], cmd[700];
    pm_outdir_t *od = NULL;
    pm_diag_t d;
    /* a file where the directory should be */
    snprintf(path, sizeof path, "%s/file", dir);
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    fclose(f);
    assert_int_equal(pm_outdir_open(path, &od, &d), PM_EIO);
    assert_null(od);
    assert_string_equal(d.file, path);
    assert_non_null(strstr(d.msg, "not a directory"));
    assert_int_equal(pm_outdir_open("", &od, &d), PM_EUSAGE);
    assert_int_equal(pm_outdir_open(dir, &od, &d), PM_OK);
    FILE *a;
    assert_int_equal(pm_outdir_create(od, "../escape", &a, &d), PM_EUSAGE);
    assert_int_equal(pm_outdir_create(od, "a", &a, &d), PM_OK);
    FILE *again;
    assert_int_equal(pm_outdir_create(od, "a", &again, &d), PM_EUSAGE); /* twice */
    assert_null(again);
    /* a rename that fails: the target is a non-empty directory */
    snprintf(path, sizeof path, "%s/b/keep", dir);
    snprintf(cmd, sizeof cmd, "mkdir -p '%s'", path);
    assert_int_equal(system(cmd), 0);
    FILE *b;
    assert_int_equal(pm_outdir_create(od, "b", &b, &d), PM_OK);
    assert_int_equal(pm_outdir_finish(od, a, &d), PM_OK);
    assert_int_equal(pm_outdir_finish(od, b, &d), PM_OK);
    assert_int_equal(pm_outdir_commit(od, &d), PM_EIO);
    assert_non_null(strstr(d.file, "/b"));
    pm_outdir_free(od);
    /* "a" was renamed first and is taken back (it did not exist before) */
    snprintf(path, sizeof path, "%s/a", dir);
    struct stat st;
    assert_int_not_equal(stat(path, &st), 0);
    assert_int_equal(entries(dir, 1), 0);
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    assert_int_equal(system(cmd), 0);
    free(dir);
}

/* The direct stream (src/outfile_direct.c): 3 MiB and 12,345 bytes written in pieces of
 * uneven sizes (1 byte to more than the 1 MiB block) come back byte for byte, with the three
 * full blocks written direct where the file system takes O_DIRECT; the same bytes when the
 * first direct write is refused (EINVAL, as on a file system without it: the stream goes on
 * through the page cache) and when the hook turns the stream off (no stream: the caller's
 * ordinary one). */
#define DIO_TEST_LEN ((size_t)3 * 1048576 + 12345)

static size_t dio_write_all(const char *path, const char *mode, unsigned char *src, int *made,
                            uint64_t *direct) {
    if (mode) {
        setenv("PM_TEST_OUTPUT_DIRECT", mode, 1);
    } else {
        unsetenv("PM_TEST_OUTPUT_DIRECT");
    }
    int fd = open(path, O_WRONLY | O_CREAT | O_TRUNC, 0600);
    assert_true(fd >= 0);
    pm_i_dio *d = NULL;
    FILE *fp = pm_i_dio_open(fd, &d);
    unsetenv("PM_TEST_OUTPUT_DIRECT");
    *made = fp != NULL;
    if (!fp) {
        assert_null(d);
        fp = fdopen(fd, "w");
        assert_non_null(fp);
    }
    static const size_t piece[] = {1, 7, 4095, 4097, 65536, 65537, 1048575, 1048577, 300000};
    size_t off = 0;
    for (size_t k = 0; off < DIO_TEST_LEN; k++) {
        size_t n = piece[k % (sizeof piece / sizeof piece[0])];
        n = n < DIO_TEST_LEN - off ? n : DIO_TEST_LEN - off;
        assert_int_equal(fwrite(src + off, 1, n, fp), n);
        off += n;
    }
    assert_int_equal(fflush(fp), 0);
    *direct = 0;
    if (d) {
        assert_int_equal(pm_i_dio_end(d), 0);
        *direct = pm_i_dio_direct_bytes(d);
    }
    assert_int_equal(fclose(fp), 0);
    /* read back */
    FILE *in = fopen(path, "rb");
    assert_non_null(in);
    unsigned char *back = malloc(DIO_TEST_LEN + 1);
    assert_non_null(back);
    size_t got = fread(back, 1, DIO_TEST_LEN + 1, in);
    fclose(in);
    assert_int_equal(got, DIO_TEST_LEN);
    assert_memory_equal(back, src, DIO_TEST_LEN);
    free(back);
    return got;
}

static void test_outfile_direct_stream(void **state) {
    (void)state;
    char *dir = tmpdir(), path[600], cmd[700];
    snprintf(path, sizeof path, "%s/direct.bin", dir);
    unsigned char *src = malloc(DIO_TEST_LEN);
    assert_non_null(src);
    uint64_t x = 88172645463325252ULL; /* xorshift64: bytes without a period of a block */
    for (size_t i = 0; i < DIO_TEST_LEN; i++) {
        x ^= x << 13;
        x ^= x >> 7;
        x ^= x << 17;
        src[i] = (unsigned char)(x >> 56);
    }
    /* does this file system take O_DIRECT? asked with open(2), not through the code */
    int probe = open(path, O_WRONLY | O_CREAT | O_DIRECT, 0600);
    int fs_direct = probe >= 0;
    if (probe >= 0) {
        close(probe);
    }
    int made;
    uint64_t direct;
    dio_write_all(path, NULL, src, &made, &direct);
    assert_int_equal(made, fs_direct);
    if (fs_direct) {
        assert_int_equal(direct, (uint64_t)3 * 1048576);
    } else {
        print_message("note: %s refuses O_DIRECT: only the fallback is checked here\n", dir);
    }
    dio_write_all(path, "refuse", src, &made, &direct);
    assert_int_equal(made, fs_direct);
    assert_int_equal(direct, 0);
    dio_write_all(path, "off", src, &made, &direct);
    assert_int_equal(made, 0);
    free(src);
    snprintf(cmd, sizeof cmd, "rm -rf '%s'", dir);
    assert_int_equal(system(cmd), 0);
    free(dir);
}

int main(int argc, char **argv) {
    if (argc > 1) {
        cmocka_set_test_filter(argv[1]);
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_outfile_commit_replaces_all),
        cmocka_unit_test(test_outfile_free_without_commit_leaves_nothing),
        cmocka_unit_test(test_outfile_errors),
        cmocka_unit_test(test_outfile_direct_stream),
    };
    return cmocka_run_group_tests_name("outfile", tests, NULL, NULL);
}
