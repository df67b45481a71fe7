/* Helpers for bake tests: load a scene from a JSON string, bake one target into a temporary
 * folder, read a channel back. */
#ifndef BRM_TEST_BAKE_UTIL_H
#define BRM_TEST_BAKE_UTIL_H

#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "check.h"
#include "bake/bake.h"
#include "brume/brv.h"
#include "scene/scene.h"

static inline brm_scene *load_json(const char *json)
{
    brm_diag d;
    brm_diag_init(&d);
    brm_scene *s = NULL;
    brm_status st = brm_scene_load_memory(json, strlen(json), "test.json", &s, &d);
    if (st != BRM_OK) print_error("scene load failed: %s\n", d.message);
    assert_int_equal(st, BRM_OK);
    return s;
}

/* Bakes target t into dir/name.brv and opens it. */
static inline brv_volume *bake_to(const brm_scene *s, uint32_t t, int threads, bool reference, const char *path)
{
    brm_bake_opts o;
    memset(&o, 0, sizeof o);
    o.threads = threads;
    o.reference = reference;
    brm_diag d;
    brm_diag_init(&d);
    brm_status st = brm_bake_target(s, t, &o, path, NULL, &d);
    if (st != BRM_OK) print_error("bake failed: %s\n", d.message);
    assert_int_equal(st, BRM_OK);
    brv_volume *v = NULL;
    assert_int_equal(brv_open_file(path, NULL, &v), BRV_OK);
    return v;
}

static inline float *read_channel(const brv_volume *v, const char *name)
{
    int c = brv_channel_find(v, name);
    if (c < 0) print_error("no channel %s\n", name);
    assert_true(c >= 0);
    size_t n = brv_channel_size(v);
    float *out = malloc(n * sizeof *out);
    assert_non_null(out);
    assert_int_equal(brv_decode_channel(v, (uint32_t)c, out, n), BRV_OK);
    return out;
}

static inline char *temp_dir(void)
{
    char *d = malloc(64);
    snprintf(d, 64, "/tmp/brume-bake-XXXXXX");
    assert_non_null(mkdtemp(d));
    return d;
}

/* A fresh temporary folder per test program (group setup and teardown). */
static char *dir;

static inline int setup(void **state)
{
    (void)state;
    dir = temp_dir();
    return 0;
}

static inline int teardown(void **state)
{
    (void)state;
    char cmd[128];
    snprintf(cmd, sizeof cmd, "rm -rf %s", dir);
    if (system(cmd) != 0) return 1;
    free(dir);
    return 0;
}

/* Whether two files hold the same bytes. */
static inline int files_equal(const char *a, const char *b)
{
    FILE *f = fopen(a, "rb"), *g = fopen(b, "rb");
    int eq = f && g;
    while (eq) {
        int x = fgetc(f), y = fgetc(g);
        if (x != y) eq = 0;
        if (x == EOF || y == EOF) break;
    }
    if (f) fclose(f);
    if (g) fclose(g);
    return eq;
}

#endif
