/* The bad-input corpus (tests/corpus): every NAME.json must fail to load with the exit code
 * and a message containing the text given in NAME.expect (line 1: exit code, line 2: the
 * substring, e.g. "bad.json:4:15: targets[0].cells[2]"). Messages are compared with the
 * corpus folder removed, so they read as "NAME.json:LINE:COL: path: ...".
 *
 *   test_corpus CORPUS_DIR            check every file
 *   test_corpus --regen CORPUS_DIR    rewrite every .expect from the current messages (the
 *                                     place and the problem, before "; expected ..."); the
 *                                     same with BRM_REGEN_CORPUS=1. Review the diff before
 *                                     committing: the corpus is only as good as its messages.
 */
#include <dirent.h>
#include <stdlib.h>
#include <string.h>

#include "check.h"
#include "scene/scene.h"

static const char *corpus_dir;
static int regen;

static void strip_dir(const char *msg, char *out, size_t cap)
{
    char prefix[4200];
    snprintf(prefix, sizeof prefix, "%s/", corpus_dir);
    size_t pl = strlen(prefix), k = 0;
    for (const char *p = msg; *p && k + 1 < cap;) {
        if (strncmp(p, prefix, pl) == 0) {
            p += pl;
            continue;
        }
        out[k++] = *p++;
    }
    out[k] = '\0';
}

static void corpus_file_should_fail_with_expected_message(void **state)
{
    const char *name = *state;   /* NAME.json */
    char path[4200], expect_path[4200];
    snprintf(path, sizeof path, "%s/%s", corpus_dir, name);
    snprintf(expect_path, sizeof expect_path, "%s/%.*s.expect", corpus_dir, (int)(strlen(name) - 5), name);
    brm_diag d;
    brm_diag_init(&d);
    brm_scene *s = NULL;
    brm_status st = brm_scene_load(path, &s, &d);
    assert_null(s);                      /* nothing comes out of a failed load */
    assert_int_not_equal(st, BRM_OK);
    assert_int_equal(st, d.status);
    assert_null(strchr(d.message, '\n'));   /* one line */
    char msg[BRM_DIAG_MSG];
    strip_dir(d.message, msg, sizeof msg);
    int code = brm_status_exit_code(st);
    if (regen) {
        FILE *f = fopen(expect_path, "w");
        assert_non_null(f);
        /* The place and the problem: up to "; expected" or the mesh's " (mesh of" note, so
         * the same line also matches the command line's message with its longer paths. */
        size_t keep = strlen(msg);
        const char *cut[] = {"; expected", " (mesh of", "; this brume", "; did you mean", "; each key"};
        for (size_t i = 0; i < sizeof cut / sizeof cut[0]; i++) {
            const char *c = strstr(msg, cut[i]);
            if (c && (size_t)(c - msg) < keep) keep = (size_t)(c - msg);
        }
        fprintf(f, "%d\n%.*s\n", code, (int)keep, msg);
        assert_int_equal(fclose(f), 0);
        return;
    }
    FILE *f = fopen(expect_path, "r");
    if (!f) {
        print_error("%s: no %s; run with --regen to create it\n", name, expect_path);
        fail();
    }
    char line1[64] = "", line2[BRM_DIAG_MSG] = "";
    if (!fgets(line1, sizeof line1, f) || !fgets(line2, sizeof line2, f)) {
        fclose(f);
        print_error("%s: expected two lines (exit code, message substring)\n", expect_path);
        fail();
    }
    fclose(f);
    line2[strcspn(line2, "\r\n")] = '\0';
    if (atoi(line1) != code || line2[0] == '\0' || strstr(msg, line2) == NULL) {
        print_error("%s:\n  got exit %d: %s\n  expected exit %d with: %s\n", name, code, msg, atoi(line1), line2);
        fail();
    }
    /* The message names a place: a file:line[:col] at its start. */
    assert_non_null(strchr(msg, ':'));
}

static int by_name(const void *a, const void *b) { return strcmp(*(char *const *)a, *(char *const *)b); }

int main(int argc, char **argv)
{
    int ai = 1;
    if (ai < argc && strcmp(argv[ai], "--regen") == 0) {
        regen = 1;
        ai++;
    }
    const char *env = getenv("BRM_REGEN_CORPUS");
    if (env && env[0] && strcmp(env, "0") != 0) regen = 1;
    if (ai >= argc) {
        fprintf(stderr, "usage: test_corpus [--regen] CORPUS_DIR\n");
        return 2;
    }
    corpus_dir = argv[ai];
    DIR *dir = opendir(corpus_dir);
    if (!dir) {
        fprintf(stderr, "test_corpus: cannot open %s\n", corpus_dir);
        return 2;
    }
    char **names = NULL;
    size_t n = 0, cap = 0;
    struct dirent *e;
    while ((e = readdir(dir)) != NULL) {
        size_t l = strlen(e->d_name);
        if (l < 6 || strcmp(e->d_name + l - 5, ".json") != 0) continue;
        if (n == cap) {
            cap = cap ? cap * 2 : 64;
            names = realloc(names, cap * sizeof *names);
            if (!names) return 3;
        }
        names[n++] = strdup(e->d_name);
    }
    closedir(dir);
    qsort(names, n, sizeof *names, by_name);
    if (n < 30) {
        fprintf(stderr, "test_corpus: only %zu corpus files in %s; expected at least 30\n", n, corpus_dir);
        return 1;
    }
    struct CMUnitTest *tests = calloc(n, sizeof *tests);
    if (!tests) return 3;
    for (size_t i = 0; i < n; i++) {
        tests[i].name = names[i];
        tests[i].test_func = corpus_file_should_fail_with_expected_message;
        tests[i].initial_state = names[i];
    }
    int rc = _cmocka_run_group_tests("corpus", tests, n, NULL, NULL);
    for (size_t i = 0; i < n; i++) free(names[i]);
    free(names);
    free(tests);
    return rc;
}
