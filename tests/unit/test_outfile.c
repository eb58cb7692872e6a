/* Unit tests of src/outfile.c: temporary files, checked completion, commit, roll-back and
 * clean-up of the atomic output directory. */
#include "unit.h"

#include <dirent.h>
#include <sys/stat.h>

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

int main(int argc, char **argv) {
    if (argc > 1) {
        cmocka_set_test_filter(argv[1]);
    }
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_outfile_commit_replaces_all),
        cmocka_unit_test(test_outfile_free_without_commit_leaves_nothing),
        cmocka_unit_test(test_outfile_errors),
    };
    return cmocka_run_group_tests_name("outfile", tests, NULL, NULL);
}
