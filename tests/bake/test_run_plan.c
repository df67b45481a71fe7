/* The plan runner (brm_run_plan): units computed by any thread, written in file order by
 * whichever thread finds the next one ready, through a ring of unit buffers. Checked with plans
 * of our own whose values are known: the file is the same at any thread count and holds
 * exactly what the units computed; a brick the writer refuses, or a cancel while units wait for
 * a free slot, fails the bake, writes nothing and leaves the previous file as it was. */
#include <math.h>
#include <stdatomic.h>
#include <stdint.h>
#include <time.h>

#include "bake_util.h"
#include "bake/bake_internal.h"
#include "voxel/grid.h"

/* 3 x 2 x 5 bricks of 16³: more units than the ring has slots at 1 to 3 threads. */
static const char *SCENE =
    "{\"brume\": 1, \"name\": \"plan\","
    " \"targets\": [{\"name\": \"t\", \"grid\": \"world\", \"min\": [0,0,0], \"max\": [48,32,80],"
    " \"cells\": [48,32,80], \"samples\": 1}]}";

typedef struct plan_case {
    const brm_grid *g;
    uint32_t bad_unit;         /* this unit writes a NaN (UINT32_MAX: none) */
    uint32_t cancel_unit;      /* computing this unit raises the cancel flag (UINT32_MAX: none) */
    atomic_int *cancel;
} plan_case;

/* Value of cell (x, y, z) of the grid: exact in float. */
static float cell_value(uint32_t x, uint32_t y, uint32_t z) { return (float)(x + 100u * y + 10000u * z) + 0.25f; }

static void compute(void *ctx, uint32_t unit, int worker, float *out)
{
    (void)worker;
    const plan_case *pc = ctx;
    uint32_t lo[3], hi[3];
    brm_grid_brick_range(pc->g, unit, lo, hi);
    size_t i = 0;
    for (uint32_t z = lo[2]; z < hi[2]; z++)
        for (uint32_t y = lo[1]; y < hi[1]; y++)
            for (uint32_t x = lo[0]; x < hi[0]; x++) out[i++] = cell_value(x, y, z);
    if (unit == pc->bad_unit) out[7] = NAN;
    /* Uneven work, so that threads finish out of order and wait for the writer's turn. */
    if (unit % 3 == 1) {
        struct timespec ts = {0, 2000000};
        nanosleep(&ts, NULL);
    }
    if (unit == pc->cancel_unit) atomic_store(pc->cancel, 1);
}

static brm_status run(const brm_scene *s, const brm_grid *g, plan_case *pc, int threads, const char *path,
                      brm_diag *d)
{
    brm_plan pl;
    memset(&pl, 0, sizeof pl);
    brm_plan_channel(&pl, "value", "1", BRV_ENCODING_F32);
    pl.unit_count = brm_grid_brick_count(g);
    pl.bricks_per_unit = 1;
    pl.compute = compute;
    pl.brick_of = brm_plan_brick_is_unit;
    pl.ctx = pc;
    brm_bake_opts o;
    memset(&o, 0, sizeof o);
    o.threads = threads;
    o.cancel = pc->cancel;
    brm_bake_stats st;
    memset(&st, 0, sizeof st);
    brm_diag_init(d);
    return brm_run_plan(s, 0, &o, g, &pl, path, &st, d);
}

static uint8_t *slurp(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    if (!f) return NULL;
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    uint8_t *b = malloc((size_t)n + 1);
    assert_non_null(b);
    assert_int_equal(fread(b, 1, (size_t)n, f), (size_t)n);
    fclose(f);
    *len = (size_t)n;
    return b;
}

static size_t files_in(const char *dir)
{
    char cmd[128];
    snprintf(cmd, sizeof cmd, "ls -A %s | wc -l", dir);
    FILE *p = popen(cmd, "r");
    assert_non_null(p);
    unsigned n = 0;
    assert_int_equal(fscanf(p, "%u", &n), 1);
    pclose(p);
    return n;
}

static void run_plan_should_write_what_the_units_computed_in_file_order_at_any_thread_count(void **state)
{
    (void)state;
    brm_scene *s = load_json(SCENE);
    brm_grid g;
    assert_int_equal(brm_grid_init(&g, &s->targets[0], NULL), BRM_OK);
    assert_int_equal(brm_grid_brick_count(&g), 30);
    char *dir = temp_dir();
    atomic_int cancel = 0;
    plan_case pc = {&g, UINT32_MAX, UINT32_MAX, &cancel};
    uint8_t *first = NULL;
    size_t first_len = 0;
    for (int threads = 1; threads <= 3; threads++) {
        char path[128];
        snprintf(path, sizeof path, "%s/t%d.brv", dir, threads);
        brm_diag d;
        brm_status st = run(s, &g, &pc, threads, path, &d);
        if (st != BRM_OK) print_error("%s\n", d.message);
        assert_int_equal(st, BRM_OK);
        size_t len = 0;
        uint8_t *bytes = slurp(path, &len);
        assert_non_null(bytes);
        if (!first) {
            first = bytes, first_len = len;
            /* every cell holds its unit's value, each brick where the grid puts it */
            brv_volume *v = NULL;
            assert_int_equal(brv_open_file(path, NULL, &v), BRV_OK);
            float *val = read_channel(v, "value");
            size_t i = 0;
            for (uint32_t z = 0; z < 80; z++)
                for (uint32_t y = 0; y < 32; y++)
                    for (uint32_t x = 0; x < 48; x++, i++)
                        if (val[i] != cell_value(x, y, z)) fail_msg("cell (%u, %u, %u): %g", x, y, z, (double)val[i]);
            free(val);
            brv_free(v);
        } else {
            assert_int_equal(len, first_len);
            assert_memory_equal(bytes, first, len);
            free(bytes);
        }
        unlink(path);
    }
    free(first);
    rmdir(dir);
    free(dir);
    brm_grid_free(&g);
    brm_scene_free(s);
}

/* A previous file at the output path; after a failed run it must be byte for byte the same,
 * and nothing else may be left in the folder. */
static void expect_failure_leaves_previous(const brm_scene *s, const brm_grid *g, plan_case *pc, brm_status want,
                                           const char *words)
{
    char *dir = temp_dir();
    char path[128];
    snprintf(path, sizeof path, "%s/t.brv", dir);
    const char previous[] = "the previous bake, which must survive";
    FILE *f = fopen(path, "wb");
    assert_non_null(f);
    fwrite(previous, 1, sizeof previous, f);
    fclose(f);
    for (int threads = 1; threads <= 3; threads++) {
        atomic_store(pc->cancel, 0);
        brm_diag d;
        brm_status st = run(s, g, pc, threads, path, &d);
        if (st != want) print_error("threads %d: status %d: %s\n", threads, (int)st, d.message);
        assert_int_equal(st, want);
        if (!strstr(d.message, words)) fail_msg("threads %d: message \"%s\" lacks \"%s\"", threads, d.message, words);
        size_t len = 0;
        uint8_t *b = slurp(path, &len);
        assert_non_null(b);
        assert_int_equal(len, sizeof previous);
        assert_memory_equal(b, previous, len);
        free(b);
        assert_int_equal(files_in(dir), 1); /* no temporary left behind */
    }
    unlink(path);
    rmdir(dir);
    free(dir);
}

static void run_plan_should_fail_cleanly_when_the_writer_refuses_a_brick(void **state)
{
    (void)state;
    brm_scene *s = load_json(SCENE);
    brm_grid g;
    assert_int_equal(brm_grid_init(&g, &s->targets[0], NULL), BRM_OK);
    atomic_int cancel = 0;
    /* first unit, one in the middle, the last: the writer's failure must stop every thread,
     * also those waiting for a free slot */
    const uint32_t bad[] = {0, 13, 29};
    for (size_t k = 0; k < sizeof bad / sizeof bad[0]; k++) {
        plan_case pc = {&g, bad[k], UINT32_MAX, &cancel};
        expect_failure_leaves_previous(s, &g, &pc, BRM_E_INPUT, "cannot write volume");
    }
    brm_grid_free(&g);
    brm_scene_free(s);
}

static void run_plan_should_stop_on_cancel_and_keep_the_previous_file(void **state)
{
    (void)state;
    brm_scene *s = load_json(SCENE);
    brm_grid g;
    assert_int_equal(brm_grid_init(&g, &s->targets[0], NULL), BRM_OK);
    atomic_int cancel = 0;
    const uint32_t at[] = {0, 11, 20}; /* a cancel after the last unit started may let the bake finish */
    for (size_t k = 0; k < sizeof at / sizeof at[0]; k++) {
        plan_case pc = {&g, UINT32_MAX, at[k], &cancel};
        expect_failure_leaves_previous(s, &g, &pc, BRM_E_INTERRUPTED, "interrupted");
    }
    brm_grid_free(&g);
    brm_scene_free(s);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(run_plan_should_write_what_the_units_computed_in_file_order_at_any_thread_count),
        cmocka_unit_test(run_plan_should_fail_cleanly_when_the_writer_refuses_a_brick),
        cmocka_unit_test(run_plan_should_stop_on_cancel_and_keep_the_previous_file),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
