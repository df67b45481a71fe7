/* The .brv writer and reader: round trips, error bounds, hostile files, golden bytes,
 * sampling and threads. */
#define _POSIX_C_SOURCE 200809L /* mkstemp, truncate */
#include <pthread.h>
#include <stdlib.h>
#include <unistd.h>

#include "check.h"
#include "fixture.h"
#include "volume/brv_internal.h"

static const char *golden_path; /* argv[1]: tests/volume/golden_v1.brv */

static uint8_t *write_or_fail(const brv_write_desc *d, fixture_field f, void *user, size_t *size)
{
    brv_result r;
    uint8_t *buf = fixture_write(d, f, user, size, &r);
    if (!buf) print_error("write: %s\n", brv_result_text(r));
    assert_non_null(buf);
    return buf;
}

static brv_volume *open_or_fail(const uint8_t *buf, size_t size)
{
    brv_volume *v = NULL;
    brv_result r = brv_open_memory(buf, size, NULL, &v);
    if (r != BRV_OK) print_error("open: %s\n", brv_result_text(r));
    assert_int_equal(r, BRV_OK);
    return v;
}

/* f16 bound of brv.h: |d − v| ≤ max(|v|·2^-11, s·2^-25). */
static double f16_bound(double v, int scale_exp) { return fmax(fabs(v) * ldexp(1.0, -11), ldexp(1.0, scale_exp - 25)); }

/* ---- round trips ----------------------------------------------------------------------- */

static void roundtrip_should_return_same_floats_for_f32(void **state)
{
    (void)state;
    brv_channel_desc ch[2] = {{"extinction", "1/m", BRV_ENCODING_F32}, {"occupancy", "", BRV_ENCODING_F32}};
    brv_write_desc d = fixture_world(37, 21, 18, ch, 2); /* clipped bricks on every axis */
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, fixture_smooth, NULL, &size);
    brv_volume *v = open_or_fail(buf, size);
    const brv_grid_info *g = brv_grid(v);
    assert_int_equal(g->kind, BRV_GRID_WORLD);
    assert_int_equal(g->cells[0], 37);
    assert_int_equal(g->bricks[0], 3);
    assert_int_equal(g->bricks[1], 2);
    assert_int_equal(g->brick_count, 3 * 2 * 2);
    assert_int_equal(brv_channel_find(v, "occupancy"), 1);
    assert_int_equal(brv_channel_find(v, "Occupancy"), -1);
    assert_string_equal(brv_channel(v, 0)->units, "1/m");
    size_t n = brv_channel_size(v);
    assert_int_equal(n, 37 * 21 * 18);
    float *all = malloc(brv_all_size(v) * sizeof(float));
    assert_int_equal(brv_decode_all(v, all, brv_all_size(v)), BRV_OK);
    float *one = malloc(n * sizeof(float));
    float lo = INFINITY, hi = -INFINITY;
    for (uint32_t c = 0; c < 2; c++) {
        assert_int_equal(brv_decode_channel(v, c, one, n), BRV_OK);
        for (uint32_t z = 0, i = 0; z < 18; z++)
            for (uint32_t y = 0; y < 21; y++)
                for (uint32_t x = 0; x < 37; x++, i++) {
                    float want = fixture_smooth(c, x, y, z, NULL);
                    assert_true(one[i] == want);
                    assert_true(all[c * n + i] == want);
                    if (c == 1) {
                        lo = fminf(lo, want);
                        hi = fmaxf(hi, want);
                    }
                }
    }
    assert_true(brv_channel(v, 1)->min == lo && brv_channel(v, 1)->max == hi);
    assert_int_equal(brv_decode_channel(v, 0, one, n - 1), BRV_E_BUFFER);
    assert_int_equal(brv_decode_channel(v, 2, one, n), BRV_E_NOT_FOUND);
    assert_int_equal(brv_verify(v, NULL), BRV_OK);
    free(one);
    free(all);
    brv_free(v);
    free(buf);
}

static void roundtrip_should_return_same_halves_for_f16(void **state)
{
    (void)state;
    brv_channel_desc ch[1] = {{"extinction", "1/m", BRV_ENCODING_F16}};
    brv_write_desc d = fixture_world(20, 17, 33, ch, 1);
    d.brick_size = 8;
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, fixture_smooth, NULL, &size);
    brv_volume *v = open_or_fail(buf, size);
    size_t n = brv_channel_size(v);
    uint16_t *h = malloc(n * sizeof *h);
    float *f = malloc(n * sizeof *f);
    assert_int_equal(brv_decode_channel_f16(v, 0, h, n), BRV_OK);
    assert_int_equal(brv_decode_channel(v, 0, f, n), BRV_OK);
    assert_int_equal(brv_channel(v, 0)->scale_exp_max, 0);
    for (uint32_t z = 0, i = 0; z < 33; z++)
        for (uint32_t y = 0; y < 17; y++)
            for (uint32_t x = 0; x < 20; x++, i++) {
                uint16_t want = brv_f32_to_f16(fixture_smooth(0, x, y, z, NULL));
                assert_int_equal(h[i], want);
                assert_true(f[i] == brv_f16_to_f32(want));
            }
    free(h);
    free(f);
    brv_free(v);
    free(buf);
}

/* Every finite binary16 value, subnormals and both zeros included, through the writer and the
 * reader's vectorised (rows of 16) and scalar (clipped rows) paths: the same bits come back. */
static float every_half(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    (void)c, (void)user;
    uint32_t i = x + 70 * (y + 30 * z), h = i;
    if (h >= 0x7C00u) h += 0x400u; /* skip infinities and NaNs: 0x7C00–0x7FFF */
    if (h >= 0x10000u || (h & 0x7C00u) == 0x7C00u) h = 0x3C00u;
    return brv_f16_to_f32((uint16_t)h);
}

static void every_finite_half_should_come_back_bit_exact(void **state)
{
    (void)state;
    brv_channel_desc ch[1] = {{"h", "", BRV_ENCODING_F16}};
    brv_write_desc d = fixture_world(70, 30, 32, ch, 1); /* 67200 cells ≥ 63488 finite halves */
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, every_half, NULL, &size);
    brv_volume *v = open_or_fail(buf, size);
    size_t n = brv_channel_size(v);
    uint16_t *h = malloc(n * sizeof *h);
    float *f = malloc(n * sizeof *f);
    assert_int_equal(brv_decode_channel_f16(v, 0, h, n), BRV_OK);
    assert_int_equal(brv_decode_channel(v, 0, f, n), BRV_OK);
    for (uint32_t z = 0, i = 0; z < 32; z++)
        for (uint32_t y = 0; y < 30; y++)
            for (uint32_t x = 0; x < 70; x++, i++) {
                float want = every_half(0, x, y, z, NULL);
                assert_int_equal(h[i], brv_f32_to_f16(want));
                assert_memory_equal(&f[i], &want, sizeof want); /* bits, so −0 is told from +0 */
            }
    free(h);
    free(f);
    brv_free(v);
    free(buf);
}

/* A sun seen through fog: radiance far over binary16's 65504 and rgb9e5's 65408. */
static float bright_field(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    (void)user;
    double r2 = (x - 10.0) * (x - 10.0) + (y - 6.0) * (y - 6.0) + (z - 9.0) * (z - 9.0);
    return (float)(0.02 + 2.5e5 * exp(-r2 / 6.0) * (1.0 + 0.1 * c) + 1e-3 * c * x);
}

static void f16_and_rgb9e5_should_scale_bright_values_within_bound(void **state)
{
    (void)state;
    brv_channel_desc ch[4] = {{"scatter.r", "cd/m2", BRV_ENCODING_RGB9E5},
                              {"scatter.g", "cd/m2", BRV_ENCODING_RGB9E5},
                              {"scatter.b", "cd/m2", BRV_ENCODING_RGB9E5},
                              {"sun", "cd/m2", BRV_ENCODING_F16}};
    brv_write_desc d = fixture_world(24, 13, 19, ch, 4);
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, bright_field, NULL, &size);
    brv_volume *v = open_or_fail(buf, size);
    /* 2.75e5 / 65504 needs 2^3 (65504·4 = 262016 is too small); rgb9e5: 65408·4 < 2.75e5 too. */
    assert_int_equal(brv_channel(v, 3)->scale_exp_max, 3);
    assert_int_equal(brv_channel(v, 2)->scale_exp_max, 3);
    assert_int_equal(brv_channel(v, 0)->encoding, BRV_ENCODING_RGB9E5);
    float *all = malloc(brv_all_size(v) * sizeof(float));
    assert_int_equal(brv_decode_all(v, all, brv_all_size(v)), BRV_OK);
    size_t n = brv_channel_size(v);
    double worst_f16 = 0, worst_rgb = 0;
    for (uint32_t z = 0, i = 0; z < 19; z++)
        for (uint32_t y = 0; y < 13; y++)
            for (uint32_t x = 0; x < 24; x++, i++) {
                /* The per-brick scale is at most the channel's largest. */
                double vs = bright_field(3, x, y, z, NULL);
                double e = fabs(all[3 * n + i] - vs);
                assert_true(e <= f16_bound(vs, 3));
                worst_f16 = fmax(worst_f16, e / f16_bound(vs, 3));
                double m = 0;
                for (uint32_t c = 0; c < 3; c++) m = fmax(m, bright_field(c, x, y, z, NULL));
                for (uint32_t c = 0; c < 3; c++) {
                    double want = bright_field(c, x, y, z, NULL);
                    double bound = fmax(m / 511.0, ldexp(1.0, 3 - 25));
                    assert_true(fabs(all[c * n + i] - want) <= bound);
                    worst_rgb = fmax(worst_rgb, fabs(all[c * n + i] - want) / bound);
                }
            }
    assert_true(brv_channel(v, 3)->max > 2.7e5f);
    print_message("worst error / bound: f16 %.3f, rgb9e5 %.3f\n", worst_f16, worst_rgb);
    free(all);
    brv_free(v);
    free(buf);
}

static float nan_at(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    const float *bad = user;
    return (c == 1 && x == 3 && y == 2 && z == 1) ? bad[0] : 1.0f;
}

static void writer_should_refuse_unrepresentable_values(void **state)
{
    (void)state;
    struct {
        brv_encoding enc;
        float value;
    } cases[] = {{BRV_ENCODING_F16, NAN}, {BRV_ENCODING_F32, INFINITY}, {BRV_ENCODING_RGB9E5, -0.5f}};
    for (size_t k = 0; k < 3; k++) {
        brv_channel_desc ch[3] = {{"a", "", cases[k].enc}, {"b", "", cases[k].enc}, {"c", "", cases[k].enc}};
        brv_write_desc d = fixture_world(5, 4, 3, ch, cases[k].enc == BRV_ENCODING_RGB9E5 ? 3 : 2);
        FILE *f = tmpfile();
        brv_writer *w;
        assert_int_equal(brv_writer_create(f, &d, &w), BRV_OK);
        float data[3 * 60];
        for (uint32_t i = 0; i < 3 * 60; i++) data[i] = nan_at(i / 60, i % 5, i / 5 % 4, i / 20 % 3, &cases[k].value);
        assert_int_equal(brv_writer_put_brick(w, 0, data), BRV_E_UNREPRESENTABLE);
        /* The message names the channel and the cell. */
        assert_non_null(strstr(brv_writer_error(w), "channel 'b'"));
        assert_non_null(strstr(brv_writer_error(w), "(3, 2, 1)"));
        brv_writer_free(w);
        fclose(f);
    }
}

static void writer_should_refuse_bad_descriptions_with_a_reason(void **state)
{
    (void)state;
    char err[256] = "";
    brv_channel_desc ch[2] = {{"r", "", BRV_ENCODING_RGB9E5}, {"g", "", BRV_ENCODING_RGB9E5}};
    brv_write_desc d = fixture_world(4, 4, 4, ch, 2);
    d.error = err;
    d.error_size = sizeof err;
    FILE *f = tmpfile();
    brv_writer *w = NULL;
    assert_int_equal(brv_writer_create(f, &d, &w), BRV_E_ARGUMENT);
    assert_null(w);
    assert_non_null(strstr(err, "triplets"));
    d.channel_count = 1;
    ch[0].encoding = BRV_ENCODING_F16;
    d.compression_level = 25;
    assert_int_equal(brv_writer_create(f, &d, &w), BRV_E_ARGUMENT);
    assert_non_null(strstr(err, "compression level 25"));
    d.compression_level = 0;
    d.cells[1] = 70000;
    assert_int_equal(brv_writer_create(f, &d, &w), BRV_E_LIMIT);
    fclose(f);
}

static void writer_should_insist_on_every_brick_once(void **state)
{
    (void)state;
    brv_channel_desc ch[1] = {{"a", "", BRV_ENCODING_F32}};
    brv_write_desc d = fixture_world(20, 4, 4, ch, 1); /* two bricks */
    FILE *f = tmpfile();
    brv_writer *w;
    assert_int_equal(brv_writer_create(f, &d, &w), BRV_OK);
    float data[16 * 4 * 4] = {0};
    assert_int_equal(brv_writer_put_brick(w, 1, data), BRV_OK);
    assert_int_equal(brv_writer_put_brick(w, 1, data), BRV_E_STATE);
    assert_int_equal(brv_writer_put_brick(w, 2, data), BRV_E_ARGUMENT);
    assert_int_equal(brv_writer_finish(w), BRV_E_STATE);
    assert_non_null(strstr(brv_writer_error(w), "brick 0"));
    assert_int_equal(brv_writer_put_brick(w, 0, data), BRV_OK);
    assert_int_equal(brv_writer_finish(w), BRV_OK);
    assert_int_equal(brv_writer_finish(w), BRV_E_STATE);
    brv_writer_free(w);
    brv_writer_free(NULL);
    brv_free(NULL);
    brv_decoder_free(NULL);
    brv_sampler_free(NULL);
    fclose(f);
}

static float zero_field(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    (void)c, (void)x, (void)y, (void)z, (void)user;
    return 0.0f;
}

static void uniform_bricks_should_cost_bytes_not_kilobytes(void **state)
{
    (void)state;
    brv_channel_desc ch[3] = {{"extinction", "1/m", BRV_ENCODING_F16},
                              {"occupancy", "", BRV_ENCODING_F32},
                              {"t", "", BRV_ENCODING_F16}};
    brv_write_desc d = fixture_world(64, 64, 64, ch, 3);
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, zero_field, NULL, &size);
    brv_volume *v = open_or_fail(buf, size);
    const brv_grid_info *g = brv_grid(v);
    /* 64 bricks of 16³ cells × 3 channels = 640 KiB raw; each brick is a ~30-byte frame. */
    double per_brick = (double)g->brick_bytes / g->brick_count;
    print_message("uniform brick: %.1f bytes stored (raw %u)\n", per_brick, 16 * 16 * 16 * 10);
    assert_true(per_brick < 48.0);
    float *all = malloc(brv_all_size(v) * sizeof(float));
    assert_int_equal(brv_decode_all(v, all, brv_all_size(v)), BRV_OK);
    for (size_t i = 0; i < brv_all_size(v); i++) assert_true(all[i] == 0.0f);
    free(all);
    brv_free(v);
    free(buf);
}

static void smooth_f16_should_compress_over_4x_against_raw_halves(void **state)
{
    (void)state;
    brv_channel_desc ch[1] = {{"extinction", "1/m", BRV_ENCODING_F16}};
    brv_write_desc d = fixture_world(64, 64, 64, ch, 1);
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, fixture_smooth, NULL, &size);
    double ratio = (64.0 * 64 * 64 * 2) / (double)size;
    print_message("smooth f16: %zu bytes, %.2fx smaller than raw halves\n", size, ratio);
    assert_true(ratio >= 4.0);
    free(buf);
}

/* ---- determinism ----------------------------------------------------------------------- */

static void writer_should_give_the_same_bytes_for_the_same_input(void **state)
{
    (void)state;
    brv_channel_desc ch[2] = {{"a", "", BRV_ENCODING_F16}, {"b", "", BRV_ENCODING_F32}};
    brv_write_desc d = fixture_world(30, 9, 20, ch, 2);
    d.metadata = "{\"scene\":\"x\"}";
    d.metadata_len = strlen(d.metadata);
    size_t s1 = 0, s2 = 0;
    uint8_t *a = write_or_fail(&d, fixture_smooth, NULL, &s1);
    uint8_t *b = write_or_fail(&d, fixture_smooth, NULL, &s2);
    assert_int_equal(s1, s2);
    assert_memory_equal(a, b, s1);
    brv_volume *v = open_or_fail(a, s1);
    size_t len = 0;
    assert_string_equal(brv_metadata(v, &len), "{\"scene\":\"x\"}");
    assert_int_equal(len, 13);
    brv_free(v);
    free(a);
    free(b);
}

/* ---- hostile files ---------------------------------------------------------------------- */

typedef struct counting {
    size_t live, peak, largest, calls;
} counting;

static void *count_alloc(void *user, size_t size)
{
    counting *c = user;
    size_t *p = malloc(size + 16);
    if (!p) return NULL;
    p[0] = size;
    c->live += size;
    c->calls++;
    if (c->live > c->peak) c->peak = c->live;
    if (size > c->largest) c->largest = size;
    return (uint8_t *)p + 16;
}

static void count_free(void *user, void *ptr)
{
    counting *c = user;
    if (!ptr) return;
    size_t *p = (size_t *)((uint8_t *)ptr - 16);
    c->live -= p[0];
    free(p);
}

static uint8_t *small_file(size_t *size)
{
    static const brv_channel_desc ch[4] = {{"extinction", "1/m", BRV_ENCODING_F16},
                                           {"inscatter.r", "cd/m2/m", BRV_ENCODING_RGB9E5},
                                           {"inscatter.g", "cd/m2/m", BRV_ENCODING_RGB9E5},
                                           {"inscatter.b", "cd/m2/m", BRV_ENCODING_RGB9E5}};
    brv_write_desc d = fixture_world(9, 5, 6, ch, 4);
    d.brick_size = 4;
    d.metadata = "{\"tool\":\"brume 0.1.0\"}";
    d.metadata_len = strlen(d.metadata);
    return write_or_fail(&d, fixture_smooth, NULL, size);
}

/* A fault is any named code but BRV_OK. verify must report every damaged file; decoding must
 * fail or give back exactly the original data (a change zstd's content checksum lets through
 * is one that leaves the payload intact), never different data. */
static const float *original_values; /* every channel of the undamaged file */

static brv_result open_and_read(const uint8_t *src, size_t size, counting *cnt)
{
    uint8_t *copy = malloc(size ? size : 1); /* fresh, exact size: overreads are caught */
    if (size) memcpy(copy, src, size);
    brv_allocator a = {count_alloc, count_free, cnt};
    brv_volume *v = NULL;
    brv_result r = brv_open_memory(copy, size, &a, &v);
    if (r == BRV_OK) {
        r = brv_verify(v, NULL);
        float *all = malloc(brv_all_size(v) * sizeof(float));
        brv_result r2 = brv_decode_all(v, all, brv_all_size(v));
        if (r2 == BRV_OK && original_values)
            assert_memory_equal(all, original_values, brv_all_size(v) * sizeof(float));
        if (r == BRV_OK) assert_int_equal(r2, BRV_OK);
        free(all);
        brv_free(v);
    }
    free(copy);
    assert_true(r >= BRV_OK && r < BRV_RESULT_MAX_ENUM);
    return r;
}

static float *decode_small(const uint8_t *buf, size_t size)
{
    brv_volume *v = open_or_fail(buf, size);
    float *all = malloc(brv_all_size(v) * sizeof(float));
    assert_int_equal(brv_decode_all(v, all, brv_all_size(v)), BRV_OK);
    brv_free(v);
    return all;
}

static size_t writer_peak(uint32_t n, counting *cnt)
{
    brv_channel_desc ch[2] = {{"a", "", BRV_ENCODING_F16}, {"b", "", BRV_ENCODING_F32}};
    brv_write_desc d = fixture_world(n, n, n, ch, 2);
    brv_allocator a = {count_alloc, count_free, cnt};
    d.alloc = &a;
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, fixture_smooth, NULL, &size);
    free(buf);
    return cnt->peak;
}

/* Streaming: the writer's memory is one brick's buffers plus 17 bytes of table per brick,
 * whatever the volume's size (the bytes go to the FILE as each brick is put). */
static void writer_memory_should_not_grow_with_the_volume(void **state)
{
    (void)state;
    counting small = {0}, big = {0};
    size_t p32 = writer_peak(32, &small), p128 = writer_peak(128, &big);
    size_t table_growth = (size_t)(512 - 8) * 17; /* 512 against 8 bricks */
    print_message("writer peak: %zu bytes for 32^3, %zu bytes for 128^3 (raw 128^3 f32: %u bytes)\n", p32, p128,
                  128u * 128 * 128 * 4 * 2);
    assert_true(p128 <= p32 + table_growth + 64);
    assert_int_equal(small.live, 0);
    assert_int_equal(big.live, 0);
}

static void open_should_reject_every_truncation(void **state)
{
    (void)state;
    size_t size = 0;
    uint8_t *buf = small_file(&size);
    float *orig = decode_small(buf, size);
    original_values = orig;
    counting cnt = {0};
    assert_int_equal(open_and_read(buf, size, &cnt), BRV_OK);
    int counts[BRV_RESULT_MAX_ENUM] = {0};
    for (size_t len = 0; len < size; len++) {
        brv_result r = open_and_read(buf, len, &cnt);
        assert_int_not_equal(r, BRV_OK);
        counts[r]++;
    }
    assert_int_equal(cnt.live, 0);
    print_message("%zu truncations: %d magic, %d truncated, %d layout\n", size, counts[BRV_E_MAGIC],
                  counts[BRV_E_TRUNCATED], counts[BRV_E_LAYOUT]);
    original_values = NULL;
    free(orig);
    free(buf);
}

static void open_should_reject_random_byte_flips(void **state)
{
    (void)state;
    size_t size = 0;
    uint8_t *buf = small_file(&size);
    uint8_t *mod = malloc(size);
    float *orig = decode_small(buf, size);
    original_values = orig;
    counting cnt = {0};
    srand(12345);
    int counts[BRV_RESULT_MAX_ENUM] = {0};
    for (int k = 0; k < 4000; k++) {
        memcpy(mod, buf, size);
        size_t at = (size_t)rand() % size;
        mod[at] ^= (uint8_t)(1 + rand() % 255);
        if (k % 3 == 0 && at + 1 < size) mod[at + 1] ^= (uint8_t)(1 + rand() % 255);
        brv_result r = open_and_read(mod, size, &cnt);
        if (r == BRV_OK) print_error("flip at byte %zu read as data\n", at);
        assert_int_not_equal(r, BRV_OK);
        counts[r]++;
    }
    print_message("4000 flips: %d header/table CRC, %d brick corrupt, %d magic, %d version, %d other\n",
                  counts[BRV_E_HEADER_CRC], counts[BRV_E_BRICK_CORRUPT], counts[BRV_E_MAGIC], counts[BRV_E_VERSION],
                  4000 - counts[BRV_E_HEADER_CRC] - counts[BRV_E_BRICK_CORRUPT] - counts[BRV_E_MAGIC] -
                      counts[BRV_E_VERSION]);
    original_values = NULL;
    free(orig);
    free(mod);
    free(buf);
}

/* Re-seals a modified file: tables CRC and header CRC, so the checks behind them are reached. */
static void reseal(uint8_t *buf)
{
    uint64_t toff = brv_rd64(buf + 32), tsize = brv_rd64(buf + 40);
    brv_wr32(buf + 48, brv_crc32(0, buf + toff, (size_t)tsize));
    brv_wr32(buf + 60, brv_crc32(0, buf, 60));
}

static brv_result open_counting(const uint8_t *buf, size_t size, counting *cnt)
{
    brv_allocator a = {count_alloc, count_free, cnt};
    brv_volume *v = NULL;
    brv_result r = brv_open_memory(buf, size, &a, &v);
    if (r == BRV_OK) {
        r = brv_verify(v, NULL);
        brv_free(v);
    }
    return r;
}

static void open_should_refuse_hostile_tables_before_allocating(void **state)
{
    (void)state;
    size_t size = 0;
    uint8_t *buf = small_file(&size), *m = malloc(size + 64);
    uint64_t toff = brv_rd64(buf + 32);
    uint8_t *bt = NULL;
    counting cnt;
#define CASE(code, ...)                                                 \
    do {                                                                \
        memcpy(m, buf, size);                                           \
        bt = m + toff + BRV_TABLES_FIXED + 4 * BRV_CHANNEL_ENTRY;       \
        __VA_ARGS__;                                                    \
        reseal(m);                                                      \
        memset(&cnt, 0, sizeof cnt);                                    \
        assert_int_equal(open_counting(m, size, &cnt), code);           \
        if (cnt.largest > 16384) print_error("largest allocation %zu\n", cnt.largest); \
        assert_true(cnt.largest <= 16384);                              \
        assert_int_equal(cnt.live, 0);                                  \
    } while (0)
    (void)bt;
    /* Each case fails before any allocation past the fixed-size volume object (under 16 KiB).
     * A header that claims huge dimensions (valid CRC). */
    CASE(BRV_E_LIMIT, brv_wr32(m + 20, 1u << 20));
    CASE(BRV_E_LIMIT, brv_wr32(m + 20, 65536); brv_wr32(m + 24, 65536); brv_wr32(m + 28, 65536));
    /* 16.7 million bricks whose table is not in the file. */
    CASE(BRV_E_LAYOUT, brv_wr32(m + 20, 4096); brv_wr32(m + 24, 4096); brv_wr32(m + 28, 64));
    CASE(BRV_E_LIMIT, m[17] = 200);
    CASE(BRV_E_LIMIT, brv_wr16(m + 18, 1000));
    CASE(BRV_E_LAYOUT, m[16] = 9);
    /* Tables that do not add up: metadata one byte longer than there is. */
    CASE(BRV_E_LAYOUT, brv_wr32(m + toff + 156, brv_rd32(m + toff + 156) + 1));
    CASE(BRV_E_LAYOUT, brv_wr32(m + toff + 152, 7));
    /* Overlapping bricks: brick 1 starts where brick 0 does. */
    CASE(BRV_E_BRICK_RANGE, brv_wr64(bt + 16, brv_rd64(bt)));
    /* A brick outside the file. */
    CASE(BRV_E_BRICK_RANGE, brv_wr64(bt + 16, 1ull << 40));
    CASE(BRV_E_BRICK_RANGE, brv_wr32(bt + 8, 0));
    /* A compressed size that lies: brick 0 claims one more byte (its CRC made to match) and
     * brick 1 starts one later, so the layout still adds up. */
    {
        memcpy(m, buf, size);
        bt = m + toff + BRV_TABLES_FIXED + 4 * BRV_CHANNEL_ENTRY;
        uint32_t b0 = 0, b1 = 1;
        /* find the brick stored first and the one right after it */
        uint32_t nb = 3 * 2 * 2; /* 9×5×6 cells in bricks of 4 */
        for (uint32_t b = 0; b < nb; b++) {
            if (brv_rd64(bt + 16 * b) == 64) b0 = b;
        }
        uint64_t end0 = brv_rd64(bt + 16 * b0) + brv_rd32(bt + 16 * b0 + 8);
        for (uint32_t b = 0; b < nb; b++)
            if (brv_rd64(bt + 16 * b) == end0) b1 = b;
        brv_wr32(bt + 16 * b0 + 8, brv_rd32(bt + 16 * b0 + 8) + 1);
        brv_wr32(bt + 16 * b0 + 12, brv_crc32(0, m + 64, brv_rd32(bt + 16 * b0 + 8)));
        brv_wr64(bt + 16 * b1, end0 + 1);
        brv_wr32(bt + 16 * b1 + 8, brv_rd32(bt + 16 * b1 + 8) - 1);
        reseal(m);
        memset(&cnt, 0, sizeof cnt);
        assert_int_equal(open_counting(m, size, &cnt), BRV_E_BRICK_CORRUPT);
    }
    /* Not a volume at all; another major version; a bad header CRC. */
    CASE(BRV_E_MAGIC, m[0] = 'X');
    CASE(BRV_E_VERSION, brv_wr16(m + 8, 2));
    memcpy(m, buf, size);
    m[19] ^= 1;
    assert_int_equal(open_counting(m, size, &cnt), BRV_E_HEADER_CRC);
    /* Trailing bytes after the tables. */
    memcpy(m, buf, size);
    m[size] = 0;
    assert_int_equal(open_counting(m, size + 1, &cnt), BRV_E_LAYOUT);
#undef CASE
    free(m);
    free(buf);
}

static void reader_should_skip_a_newer_minors_unknown_encoding(void **state)
{
    (void)state;
    brv_channel_desc ch[2] = {{"future", "", BRV_ENCODING_F32}, {"extinction", "1/m", BRV_ENCODING_F16}};
    brv_write_desc d = fixture_world(18, 5, 4, ch, 2);
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, fixture_smooth, NULL, &size);
    uint64_t toff = brv_rd64(buf + 32);
    buf[toff + BRV_TABLES_FIXED + 48] = 9; /* an encoding this reader does not know */
    reseal(buf);
    brv_volume *v = NULL;
    assert_int_equal(brv_open_memory(buf, size, NULL, &v), BRV_E_LAYOUT); /* not allowed in 1.0 */
    brv_wr16(buf + 10, 1);                                                /* minor 1 */
    reseal(buf);
    v = open_or_fail(buf, size);
    assert_int_equal(brv_channel(v, 0)->encoding, BRV_ENCODING_INVALID);
    assert_int_equal(brv_channel(v, 0)->encoding_code, 9);
    size_t n = brv_channel_size(v);
    float *f = malloc(n * sizeof *f);
    assert_int_equal(brv_decode_channel(v, 0, f, n), BRV_E_VERSION);
    assert_int_equal(brv_decode_channel(v, 1, f, n), BRV_OK);
    assert_true(f[5] == brv_f16_to_f32(brv_f32_to_f16(fixture_smooth(1, 5, 0, 0, NULL))));
    assert_int_equal(brv_verify(v, NULL), BRV_OK);
    free(f);
    brv_free(v);
    free(buf);
}

/* ---- golden bytes ---------------------------------------------------------------------- */

static float golden_field(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    (void)user;
    return (float)(0.25 * (c + 1) + 0.125 * x + 0.0625 * y + 0.5 * z);
}

static uint8_t *golden_bytes(size_t *size)
{
    static const brv_channel_desc ch[5] = {{"extinction", "1/m", BRV_ENCODING_F16},
                                           {"occupancy", "", BRV_ENCODING_F32},
                                           {"inscatter.r", "cd/m2/m", BRV_ENCODING_RGB9E5},
                                           {"inscatter.g", "cd/m2/m", BRV_ENCODING_RGB9E5},
                                           {"inscatter.b", "cd/m2/m", BRV_ENCODING_RGB9E5}};
    brv_write_desc d = fixture_world(5, 3, 2, ch, 5);
    d.brick_size = 4;
    d.compression_level = 3;
    d.metadata = "{\"brume\":1,\"scene_sha256\":\"golden\"}";
    d.metadata_len = strlen(d.metadata);
    return write_or_fail(&d, golden_field, NULL, size);
}

static void golden_file_should_read_and_be_reproduced_byte_for_byte(void **state)
{
    (void)state;
    size_t size = 0;
    uint8_t *mine = golden_bytes(&size);
    const char *regen = getenv("BRV_REGENERATE_GOLDEN");
    if (regen && *regen) { /* BRV_REGENERATE_GOLDEN=path rewrites the file: a format change */
        FILE *f = fopen(regen, "wb");
        assert_non_null(f);
        assert_int_equal(fwrite(mine, 1, size, f), size);
        fclose(f);
    }
    brv_volume *v = NULL;
    assert_int_equal(brv_open_file(golden_path, NULL, &v), BRV_OK);
    const brv_grid_info *g = brv_grid(v);
    /* Pinned layout: the header's fixed fields. */
    static const uint8_t head[20] = {'B', 'R', 'U', 'M', 'E', 'V', 'O', 'L', 1, 0, 0, 0, 64, 0, 0, 0, 1, 4, 5, 0};
    assert_int_equal(g->file_size, size);
    uint8_t *file = malloc(size);
    FILE *f = fopen(golden_path, "rb");
    assert_non_null(f);
    assert_int_equal(fread(file, 1, size, f), size);
    fclose(f);
    assert_memory_equal(file, head, sizeof head);
    assert_memory_equal(file, mine, size);
    /* Its values, within each encoding's bound. */
    assert_int_equal(g->cells[0], 5);
    assert_int_equal(g->brick_count, 2);
    assert_true(g->bounds_min[1] == -2.0 && g->bounds_max[2] == 5.0);
    assert_non_null(strstr(brv_metadata(v, NULL), "golden"));
    float all[5 * 30];
    assert_int_equal(brv_decode_all(v, all, 150), BRV_OK);
    for (uint32_t i = 0; i < 30; i++) {
        uint32_t x = i % 5, y = i / 5 % 3, z = i / 15;
        assert_true(all[i] == brv_f16_to_f32(brv_f32_to_f16(golden_field(0, x, y, z, NULL))));
        assert_true(all[30 + i] == golden_field(1, x, y, z, NULL));
        for (uint32_t c = 2; c < 5; c++) assert_near(all[c * 30 + i], golden_field(c, x, y, z, NULL), 3.0 / 511, 0);
    }
    assert_int_equal(brv_verify(v, NULL), BRV_OK);
    brv_free(v);
    free(file);
    free(mine);
}

/* ---- sampling -------------------------------------------------------------------------- */

/* A linear field in world coordinates: trilinear interpolation reproduces it exactly
 * (interpolation theory: multilinear interpolation is exact on affine functions). */
static double lin_world(uint32_t c, double x, double y, double z) { return 2.0 + 0.5 * x - 0.25 * y + 0.75 * z + c; }

typedef struct lin_grid {
    brv_write_desc d;
} lin_grid;

static float lin_field(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    const brv_write_desc *d = user;
    double p[3], i[3] = {x, y, z};
    for (int a = 0; a < 3; a++) {
        double span = d->bounds_max[a] - d->bounds_min[a];
        p[a] = d->kind == BRV_GRID_WORLD ? d->bounds_min[a] + (i[a] + 0.5) * span / d->cells[a]
                                         : d->bounds_min[a] + i[a] * span / (d->cells[a] - 1);
    }
    return (float)lin_world(c, p[0], p[1], p[2]);
}

static void sampling_should_match_direct_evaluation_within_encoding_bound(void **state)
{
    (void)state;
    brv_channel_desc ch[2] = {{"a", "", BRV_ENCODING_F32}, {"b", "", BRV_ENCODING_F16}};
    for (int kind = BRV_GRID_WORLD; kind <= BRV_GRID_PROBES; kind += 2) {
        brv_write_desc d = fixture_world(23, 19, 35, ch, 2);
        d.kind = (brv_grid_kind)kind;
        size_t size = 0;
        uint8_t *buf = write_or_fail(&d, lin_field, &d, &size);
        brv_volume *v = open_or_fail(buf, size);
        brv_sampler *s;
        assert_int_equal(brv_sampler_create(v, 8, &s), BRV_OK);
        srand(99);
        double worst = 0.0;
        for (int k = 0; k < 20000; k++) {
            double p[3];
            for (int a = 0; a < 3; a++) {
                double span = d.bounds_max[a] - d.bounds_min[a];
                /* stay between the first and last sample positions, where no clamping happens */
                double lo = kind == BRV_GRID_WORLD ? 0.5 * span / d.cells[a] : 0.0;
                p[a] = d.bounds_min[a] + lo + (span - 2 * lo) * rand() / (double)RAND_MAX;
            }
            float out[2];
            assert_int_equal(brv_sample_world(s, p, out), BRV_OK);
            double want0 = lin_world(0, p[0], p[1], p[2]), want1 = lin_world(1, p[0], p[1], p[2]);
            /* f32: float rounding of the stored values and weights only. */
            assert_near(out[0], want0, 1e-5, 1e-5);
            /* f16: the weights sum to one, so the bound of the largest corner applies. */
            double bound = f16_bound(fabs(want1) + 3.0, 0) + 1e-5;
            assert_near(out[1], want1, bound, 0);
            worst = fmax(worst, fabs(out[1] - want1) / bound);
        }
        print_message("%s: worst f16 sample error / bound %.3f\n", kind == BRV_GRID_WORLD ? "world" : "probes", worst);
        /* The batch call gives the same bits as one call per point, with every brick cached
         * (its prefetching path) and with a small cache. */
        enum { NB = 3000 };
        double *pts = malloc(sizeof(double) * 3 * NB);
        float *one = malloc(sizeof(float) * 2 * NB), *many = malloc(sizeof(float) * 2 * NB);
        for (int k = 0; k < 3 * NB; k++) pts[k] = -2.0 + 8.0 * rand() / (double)RAND_MAX;
        for (int k = 0; k < NB; k++) assert_int_equal(brv_sample_world(s, pts + 3 * k, one + 2 * k), BRV_OK);
        brv_sampler *all;
        assert_int_equal(brv_sampler_create(v, brv_grid(v)->brick_count, &all), BRV_OK);
        assert_int_equal(brv_sample_world_batch(all, NB, pts, many), BRV_OK);
        assert_memory_equal(one, many, sizeof(float) * 2 * NB);
        assert_int_equal(brv_sample_world_batch(s, NB, pts, many), BRV_OK);
        assert_memory_equal(one, many, sizeof(float) * 2 * NB);
        /* A non-finite point is the fault; the points before it are sampled (sorted path). */
        memset(many, 0, sizeof(float) * 2 * NB);
        pts[3 * 2000 + 1] = NAN;
        assert_int_equal(brv_sample_world_batch(s, NB, pts, many), BRV_E_ARGUMENT);
        assert_memory_equal(one, many, sizeof(float) * 2 * 2000);
        brv_sampler_free(all);
        free(pts);
        free(one);
        free(many);
        /* Outside: clamp to the edge value. */
        double far[3] = {-100, -100, -100};
        float out[2], corner[2];
        assert_int_equal(brv_sample_world(s, far, out), BRV_OK);
        assert_int_equal(brv_sample_world(s, d.bounds_min, corner), BRV_OK);
        assert_true(out[0] == corner[0]);
        assert_true(out[0] == lin_field(0, 0, 0, 0, &d));
        double nanp[3] = {NAN, 0, 0};
        assert_int_equal(brv_sample_world(s, nanp, out), BRV_E_ARGUMENT);
        assert_int_equal(brv_sample_frustum(s, 1, 1, 1, out), BRV_E_ARGUMENT);
        brv_sampler_free(s);
        brv_free(v);
        free(buf);
    }
}

static float frustum_field(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    const double *depth = user;
    double mid = 0.5 * (depth[z] + depth[z + 1]);
    return (float)(c + 0.5 * (x + 0.5) + 0.25 * (y + 0.5) + 0.1 * mid);
}

static void frustum_sampling_should_interpolate_pixels_and_depth(void **state)
{
    (void)state;
    brv_channel_desc ch[1] = {{"transmittance", "", BRV_ENCODING_F32}};
    double depth[21];
    for (int k = 0; k <= 20; k++) depth[k] = 0.3 * pow(120.0 / 0.3, k / 20.0); /* exponential slices */
    brv_write_desc d = fixture_world(16, 9, 20, ch, 1);
    d.kind = BRV_GRID_FRUSTUM;
    d.slice_depths = depth;
    d.camera = (brv_camera){{0, 1, 0}, {0, 1, -1}, {0, 1, 0}, 60, 16.0 / 9.0, 0.3, 120};
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, frustum_field, depth, &size);
    brv_volume *v = open_or_fail(buf, size);
    const brv_grid_info *g = brv_grid(v);
    assert_non_null(g->slice_depths);
    assert_true(g->slice_depths[20] == 120.0 && g->camera.fov_y_deg == 60.0);
    brv_sampler *s;
    assert_int_equal(brv_sampler_create(v, 0, &s), BRV_OK);
    float out;
    /* At a froxel's centre pixel and middle depth: its own value. */
    assert_int_equal(brv_sample_frustum(s, 3.5, 2.5, 0.5 * (depth[7] + depth[8]), &out), BRV_OK);
    assert_near(out, frustum_field(0, 3, 2, 7, depth), 1e-5, 0);
    /* Linear in pixel and in depth between two middles: exact (affine in every variable). */
    srand(5);
    for (int k = 0; k < 5000; k++) {
        double px = 0.5 + 15.0 * rand() / RAND_MAX, py = 0.5 + 8.0 * rand() / RAND_MAX;
        double dd = 0.5 * (depth[0] + depth[1]) + (0.5 * (depth[19] + depth[20]) - 0.5 * (depth[0] + depth[1])) * rand() / RAND_MAX;
        assert_int_equal(brv_sample_frustum(s, px, py, dd, &out), BRV_OK);
        assert_near(out, 0.5 * px + 0.25 * py + 0.1 * dd, 1e-4, 1e-5);
    }
    brv_sampler_free(s);
    brv_free(v);
    free(buf);
}

/* ---- threads --------------------------------------------------------------------------- */

typedef struct job {
    const brv_volume *v;
    uint32_t first, step;
    float *out;
    brv_result r;
    uint32_t passes;   /* 1: brick b at out + b·brv_brick_size; more: pass p's brick b at
                        * out + p·place[brick_count] + place[b] (bricks packed tight) */
    const size_t *place;
    bool set_mode;     /* call brv_decoder_set_streaming(mode); otherwise the default */
    int mode;
    bool streamed;     /* the last call streamed */
} job;

static void *decode_job(void *arg)
{
    job *j = arg;
    brv_decoder *dec;
    j->r = brv_decoder_create(j->v, &dec);
    if (j->r != BRV_OK) return NULL;
    if (j->set_mode) brv_decoder_set_streaming(dec, j->mode);
    size_t per = brv_brick_size(j->v);
    uint32_t nb = brv_grid(j->v)->brick_count;
    for (uint32_t p = 0; p < j->passes; p++)
        for (uint32_t b = j->first; j->r == BRV_OK && b < nb; b += j->step)
            j->r = brv_decode_brick(j->v, dec, b, j->out + (j->place ? p * j->place[nb] + j->place[b] : b * per), per);
    j->streamed = brv_decoder_streamed(dec);
    brv_decoder_free(dec);
    return NULL;
}

static void distinct_bricks_should_decode_from_two_threads_at_once(void **state)
{
    (void)state;
    brv_channel_desc ch[2] = {{"a", "", BRV_ENCODING_F16}, {"b", "", BRV_ENCODING_F32}};
    brv_write_desc d = fixture_world(48, 40, 33, ch, 2);
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, fixture_smooth, NULL, &size);
    brv_volume *v = open_or_fail(buf, size);
    size_t total = brv_brick_size(v) * brv_grid(v)->brick_count;
    float *one = calloc(total, sizeof(float)), *two = calloc(total, sizeof(float));
    job j0 = {v, 0, 1, one, BRV_OK, 1, NULL, false, 0, false};
    decode_job(&j0);
    job a = {v, 0, 2, two, BRV_OK, 1, NULL, false, 0, false}, b = {v, 1, 2, two, BRV_OK, 1, NULL, false, 0, false};
    pthread_t ta, tb;
    pthread_create(&ta, NULL, decode_job, &a);
    pthread_create(&tb, NULL, decode_job, &b);
    pthread_join(ta, NULL);
    pthread_join(tb, NULL);
    assert_int_equal(j0.r, BRV_OK);
    assert_int_equal(a.r, BRV_OK);
    assert_int_equal(b.r, BRV_OK);
    assert_memory_equal(one, two, total * sizeof(float));
    free(one);
    free(two);
    /* Two threads taking turns over an array large enough that each one's default decoder
     * streams (BRV_STREAM_AUTO: a forward run past 8 MiB): the bits of one thread's ordinary
     * stores. */
    uint32_t nb = brv_grid(v)->brick_count;
    size_t *place = malloc((nb + 1) * sizeof *place);
    assert_non_null(place);
    place[0] = 0;
    for (uint32_t k = 0; k < nb; k++) {
        uint32_t o[3], e[3];
        assert_int_equal(brv_brick_extent(v, k, o, e), BRV_OK);
        place[k + 1] = place[k] + (size_t)e[0] * e[1] * e[2] * 2; /* two channels */
    }
    /* each thread writes about half a pass: past the threshold by two passes */
    uint32_t passes = (uint32_t)(2 * BRV_STREAM_AUTO_BYTES / (place[nb] * sizeof(float))) + 4;
    size_t floats = place[nb] * passes + brv_brick_size(v); /* the last call may be given a whole brick's room */
    one = calloc(floats, sizeof(float));
    two = calloc(floats, sizeof(float));
    assert_non_null(one);
    assert_non_null(two);
    job k0 = {v, 0, 1, one, BRV_OK, passes, place, true, BRV_STREAM_OFF, false};
    job ka = {v, 0, 2, two, BRV_OK, passes, place, false, 0, false};
    job kb = {v, 1, 2, two, BRV_OK, passes, place, false, 0, false};
    decode_job(&k0);
    pthread_create(&ta, NULL, decode_job, &ka);
    pthread_create(&tb, NULL, decode_job, &kb);
    pthread_join(ta, NULL);
    pthread_join(tb, NULL);
    assert_int_equal(k0.r, BRV_OK);
    assert_int_equal(ka.r, BRV_OK);
    assert_int_equal(kb.r, BRV_OK);
    assert_false(k0.streamed);
    assert_true(ka.streamed);
    assert_true(kb.streamed);
    assert_memory_equal(one, two, floats * sizeof(float));
    free(place);
    free(one);
    free(two);
    brv_free(v);
    free(buf);
}

/* The same field in every channel (so every lane of a channel group must agree with the
 * scalar remainder channel, bit for bit). */
static float same_smooth(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    (void)c;
    return fixture_smooth(0, x, y, z, user);
}
static float same_bright(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    (void)c;
    return bright_field(0, x, y, z, user); /* 2.5e5 at the peak: the bricks there are scaled by 2^3 */
}

/* Trilinear interpolation of the decoded floats, in double, clamped to the edge: the
 * reference the sampler is held to (definition of brv.h: cell values at cell centres). */
static double ref_sample(const brv_grid_info *g, const float *all, uint32_t c, const double pos[3])
{
    size_t n = (size_t)g->cells[0] * g->cells[1] * g->cells[2];
    uint32_t i0[3], i1[3];
    double t[3];
    for (int a = 0; a < 3; a++) {
        double u = (pos[a] - g->bounds_min[a]) / (g->bounds_max[a] - g->bounds_min[a]) * g->cells[a] - 0.5;
        u = fmin(fmax(u, 0.0), g->cells[a] - 1.0);
        i0[a] = (uint32_t)u;
        i1[a] = i0[a] + 1 < g->cells[a] ? i0[a] + 1 : i0[a];
        t[a] = u - i0[a];
    }
    double acc = 0.0;
    for (int k = 0; k < 8; k++) {
        uint32_t x = k & 1 ? i1[0] : i0[0], y = k & 2 ? i1[1] : i0[1], z = k & 4 ? i1[2] : i0[2];
        double w = (k & 1 ? t[0] : 1 - t[0]) * (k & 2 ? t[1] : 1 - t[1]) * (k & 4 ? t[2] : 1 - t[2]);
        acc += w * all[c * n + x + (size_t)g->cells[0] * (y + (size_t)g->cells[1] * z)];
    }
    return acc;
}

/* Every sampling path — halves cache (all channels f16, bricks with and without scale) and
 * float cache, four channels at a time and the channel left over, one brick or corners in
 * several, every brick cached or a cache of 3 that evicts — gives the trilinear interpolation
 * of the decoded values to float rounding, and the same bits in every channel for the same
 * data. */
static void sampler_should_interpolate_decoded_values_on_every_path(void **state)
{
    (void)state;
    static const brv_channel_desc f16ch[5] = {{"a", "", BRV_ENCODING_F16}, {"b", "", BRV_ENCODING_F16},
                                              {"c", "", BRV_ENCODING_F16}, {"d", "", BRV_ENCODING_F16},
                                              {"e", "", BRV_ENCODING_F16}};
    static const brv_channel_desc f32ch[5] = {{"a", "", BRV_ENCODING_F32}, {"b", "", BRV_ENCODING_F32},
                                              {"c", "", BRV_ENCODING_F32}, {"d", "", BRV_ENCODING_F32},
                                              {"e", "", BRV_ENCODING_F32}};
    for (int vol = 0; vol < 3; vol++) {
        brv_write_desc d = fixture_world(37, 21, 18, vol == 2 ? f32ch : f16ch, 5);
        d.brick_size = 8;
        size_t size = 0;
        uint8_t *buf = write_or_fail(&d, vol == 1 ? same_bright : same_smooth, NULL, &size);
        brv_volume *v = open_or_fail(buf, size);
        const brv_grid_info *g = brv_grid(v);
        if (vol == 1) assert_true(brv_channel(v, 0)->scale_exp_max > 0); /* some bricks scaled */
        float *all = malloc(brv_all_size(v) * sizeof(float));
        assert_int_equal(brv_decode_all(v, all, brv_all_size(v)), BRV_OK);
        for (int cache = 0; cache < 2; cache++) {
            brv_sampler *s;
            assert_int_equal(brv_sampler_create(v, cache ? 3 : g->brick_count, &s), BRV_OK);
            /* Halves cache: 2 bytes a cell and channel. */
            size_t cells = (size_t)brv_sampler_memory(s);
            size_t data = (size_t)(cache ? 3 : g->brick_count) * brv_brick_size(v) * (vol == 2 ? 4u : 2u);
            assert_true(cells >= data && cells < data + (cache ? 3 : g->brick_count) * 512u);
            srand(4242 + vol);
            double worst = 0.0;
            for (int k = 0; k < 20000; k++) {
                double p[3];
                for (int a = 0; a < 3; a++) {
                    double span = g->bounds_max[a] - g->bounds_min[a];
                    p[a] = g->bounds_min[a] - 0.1 * span + 1.2 * span * rand() / (double)RAND_MAX;
                }
                float out[5];
                assert_int_equal(brv_sample_world(s, p, out), BRV_OK);
                double want = ref_sample(g, all, 0, p); /* values are positive */
                /* Float weights and three float lerps: a few units in the last place. */
                double tol = 8.0 * ldexp(fabs(want) + 1e-3, -24) + 1e-6 * fabs(want);
                for (int c = 0; c < 5; c++) {
                    assert_memory_equal(&out[c], &out[0], sizeof(float));
                    assert_near(out[c], ref_sample(g, all, (uint32_t)c, p), tol, 0);
                }
                worst = fmax(worst, fabs(out[0] - want) / fmax(fabs(want), 1e-30));
            }
            print_message("volume %d, cache %s: worst relative sample error %.2e\n", vol, cache ? "3 bricks" : "all",
                          worst);
            /* Some channels only, reordered and repeated: the same bits as the full sampler's,
             * for a cache that holds just those channels. */
            static const uint32_t pick[3] = {4, 1, 4};
            brv_sampler *part;
            assert_int_equal(brv_sampler_create_channels(v, cache ? 3 : g->brick_count, pick, 3, &part), BRV_OK);
            /* Three fifths of the cells' bytes, plus at most 512 bytes a cached brick of records. */
            size_t cached = cache ? 3 : g->brick_count, cell_bytes = brv_brick_size(v) / 5 * (vol == 2 ? 4u : 2u);
            assert_true(brv_sampler_memory(part) >= cached * 3 * cell_bytes);
            assert_true(brv_sampler_memory(part) < cached * (3 * cell_bytes + 512u));
            for (int k = 0; k < 3000; k++) {
                double p[3];
                for (int a = 0; a < 3; a++) {
                    double span = g->bounds_max[a] - g->bounds_min[a];
                    p[a] = g->bounds_min[a] - 0.1 * span + 1.2 * span * rand() / (double)RAND_MAX;
                }
                float full[5], some[3];
                assert_int_equal(brv_sample_world(s, p, full), BRV_OK);
                assert_int_equal(brv_sample_world(part, p, some), BRV_OK);
                for (int j = 0; j < 3; j++) assert_memory_equal(&some[j], &full[pick[j]], sizeof(float));
            }
            brv_sampler_free(part);
            brv_sampler_free(s);
        }
        brv_sampler *bad;
        static const uint32_t out_of_range[1] = {5};
        assert_int_equal(brv_sampler_create_channels(v, 0, out_of_range, 1, &bad), BRV_E_NOT_FOUND);
        assert_int_equal(brv_sampler_create_channels(v, 0, NULL, 2, &bad), BRV_E_ARGUMENT);
        free(all);
        brv_free(v);
        free(buf);
    }
}

/* Four channels: smooth, constant (every brick's group stored as one word), bright (some
 * bricks scaled), smooth again. */
static float four_kinds(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    if (c == 1) return 0.25f;
    if (c == 2) return bright_field(0, x, y, z, user);
    return fixture_smooth(c == 3 ? 1 : 0, x, y, z, user);
}

/* Every encoding at once: an f16, an f32, an rgb9e5 triplet and a bright f16 channel. */
static const brv_channel_desc MIXED_CHANNELS[6] = {{"extinction", "1/m", BRV_ENCODING_F16},
                                                   {"occupancy", "", BRV_ENCODING_F32},
                                                   {"inscatter.r", "", BRV_ENCODING_RGB9E5},
                                                   {"inscatter.g", "", BRV_ENCODING_RGB9E5},
                                                   {"inscatter.b", "", BRV_ENCODING_RGB9E5},
                                                   {"sun", "cd/m2", BRV_ENCODING_F16}};

/* A volume of exactly four f16 channels in bricks of 16 decodes whole-row bricks straight into
 * the sampler's slots (brv_decode_brick_cells16) and the short bricks at the x edge the other
 * way: both give the trilinear interpolation of the decoded values to float rounding, and the
 * same bits as a sampler of the same channels in another order (which never takes the direct
 * path), with every brick cached and with a cache of 3 that evicts. */
static void sampler_should_fill_four_f16_channels_directly(void **state)
{
    (void)state;
    static const brv_channel_desc ch[4] = {{"a", "", BRV_ENCODING_F16}, {"b", "", BRV_ENCODING_F16},
                                           {"c", "", BRV_ENCODING_F16}, {"d", "", BRV_ENCODING_F16}};
    brv_write_desc d = fixture_world(40, 20, 18, ch, 4); /* x: bricks of 16, 16 and 8 cells */
    d.brick_size = 16;
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, four_kinds, NULL, &size);
    brv_volume *v = open_or_fail(buf, size);
    const brv_grid_info *g = brv_grid(v);
    assert_true(brv_channel(v, 2)->scale_exp_max > 0);
    float *all = malloc(brv_all_size(v) * sizeof(float));
    assert_int_equal(brv_decode_all(v, all, brv_all_size(v)), BRV_OK);
    static const uint32_t rev[4] = {3, 2, 1, 0};
    for (int cache = 0; cache < 2; cache++) {
        brv_sampler *s, *r;
        assert_int_equal(brv_sampler_create(v, cache ? 3 : g->brick_count, &s), BRV_OK);
        assert_int_equal(brv_sampler_create_channels(v, cache ? 3 : g->brick_count, rev, 4, &r), BRV_OK);
        srand(99 + cache);
        for (int k = 0; k < 20000; k++) {
            double p[3];
            for (int a = 0; a < 3; a++) {
                double span = g->bounds_max[a] - g->bounds_min[a];
                p[a] = g->bounds_min[a] - 0.1 * span + 1.2 * span * rand() / (double)RAND_MAX;
            }
            float out[4], back[4];
            assert_int_equal(brv_sample_world(s, p, out), BRV_OK);
            assert_int_equal(brv_sample_world(r, p, back), BRV_OK);
            for (int c = 0; c < 4; c++) {
                double want = ref_sample(g, all, (uint32_t)c, p);
                assert_near(out[c], want, 8.0 * ldexp(fabs(want) + 1e-3, -24) + 1e-6 * fabs(want), 0);
                assert_memory_equal(&out[c], &back[3 - c], sizeof(float));
            }
            assert_true(out[1] == 0.25f); /* constant channel: exactly its value */
        }
        brv_sampler_free(r);
        brv_sampler_free(s);
    }
    free(all);
    brv_free(v);
    free(buf);
}

/* The default store mode (BRV_STREAM_AUTO, brv.h) streams exactly once a forward run of
 * outputs has passed BRV_STREAM_AUTO_BYTES, begins a new run at an output that starts before
 * the previous one's end (a reused buffer, a new pass) and on brv_decoder_set_streaming, and
 * gives the bits of ordinary stores: floats and halves, every encoding, the same brick
 * decoded into successive places of one large array as a whole-volume decode would. */
static void auto_streaming_should_begin_after_a_forward_run_with_the_same_values(void **state)
{
    (void)state;
    brv_write_desc d = fixture_world(32, 32, 32, MIXED_CHANNELS, 6); /* 8 full bricks */
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, bright_field, NULL, &size);
    brv_volume *v = open_or_fail(buf, size);
    size_t per = brv_brick_size(v);
    uint32_t nb = brv_grid(v)->brick_count;
    size_t calls = BRV_STREAM_AUTO_BYTES / (per * sizeof(uint16_t)) + 8; /* past the threshold in halves */
    float *fa = aligned_alloc(64, calls * per * sizeof(float)), *fo = aligned_alloc(64, calls * per * sizeof(float));
    uint16_t *ha = aligned_alloc(64, calls * per * 2), *ho = aligned_alloc(64, calls * per * 2);
    assert_non_null(fa);
    assert_non_null(fo);
    assert_non_null(ha);
    assert_non_null(ho);
    brv_decoder *da, *doff;
    assert_int_equal(brv_decoder_create(v, &da), BRV_OK); /* the default: automatic */
    assert_int_equal(brv_decoder_create(v, &doff), BRV_OK);
    brv_decoder_set_streaming(doff, BRV_STREAM_OFF);
    size_t run = 0, streamed = 0;
    for (size_t i = 0; i < calls; i++) {
        uint32_t b = (uint32_t)(i % nb);
        if (i * per * sizeof(float) > BRV_STREAM_AUTO_BYTES + 4 * per * sizeof(float)) break;
        assert_int_equal(brv_decode_brick(v, da, b, fa + i * per, per), BRV_OK);
        run += per * sizeof(float);
        assert_int_equal(brv_decoder_streamed(da), run > BRV_STREAM_AUTO_BYTES);
        streamed += brv_decoder_streamed(da);
        assert_int_equal(brv_decode_brick(v, doff, b, fo + i * per, per), BRV_OK);
        assert_false(brv_decoder_streamed(doff));
        assert_memory_equal(fa + i * per, fo + i * per, per * sizeof(float));
    }
    assert_true(streamed >= 3); /* both store kinds were compared */
    /* a reused buffer (the same place twice) and a new pass (back to the start): new runs */
    assert_int_equal(brv_decode_brick(v, da, 1, fa, per), BRV_OK);
    assert_false(brv_decoder_streamed(da));
    assert_int_equal(brv_decode_brick(v, da, 1, fa, per), BRV_OK);
    assert_false(brv_decoder_streamed(da));
    assert_memory_equal(fa, fo + per, per * sizeof(float));
    /* halves: the run counts bytes, two a value */
    run = 0;
    streamed = 0;
    brv_decoder_set_streaming(da, BRV_STREAM_AUTO);
    for (size_t i = 0; i < calls; i++) {
        uint32_t b = (uint32_t)(i % nb);
        brv_result r = brv_decode_brick_f16(v, da, b, ha + i * per, per);
        run += per * sizeof(uint16_t);
        assert_int_equal(brv_decoder_streamed(da), run > BRV_STREAM_AUTO_BYTES);
        streamed += brv_decoder_streamed(da);
        assert_int_equal(brv_decode_brick_f16(v, doff, b, ho + i * per, per), r);
        assert_memory_equal(ha + i * per, ho + i * per, per * 2);
    }
    assert_true(streamed >= 3);
    /* setting the mode begins a new run; BRV_STREAM_ON streams from the first call */
    brv_decoder_set_streaming(da, BRV_STREAM_AUTO);
    brv_result r0 = brv_decode_brick_f16(v, da, 0, ha + calls * per - per, per);
    assert_true(r0 == BRV_OK || r0 == BRV_E_UNREPRESENTABLE); /* the bright channel does not fit binary16 */
    assert_false(brv_decoder_streamed(da));
    brv_decoder_set_streaming(da, BRV_STREAM_ON);
    assert_int_equal(brv_decode_brick(v, da, 0, fa, per), BRV_OK);
    assert_true(brv_decoder_streamed(da));
    assert_memory_equal(fa, fo, per * sizeof(float));
    brv_decoder_free(da);
    brv_decoder_free(doff);
    free(fa);
    free(fo);
    free(ha);
    free(ho);
    brv_free(v);
    free(buf);
}

/* Streaming stores change where the output goes in the memory system, not what it is: every
 * encoding, aligned and unaligned outputs, floats and halves, bricks and the whole grid, the
 * same as without. */
static void streaming_decoder_should_give_the_same_values(void **state)
{
    (void)state;
    const brv_channel_desc *ch = MIXED_CHANNELS;
    brv_write_desc d = fixture_world(37, 21, 18, ch, 6);
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, bright_field, NULL, &size);
    brv_volume *v = open_or_fail(buf, size);
    size_t per = brv_brick_size(v);
    size_t room = (per + 32 + 31) / 32 * 32; /* aligned_alloc wants a multiple of the alignment */
    float *plain = aligned_alloc(64, room * sizeof(float)), *fast = aligned_alloc(64, room * sizeof(float));
    uint16_t *hplain = aligned_alloc(64, room * 2), *hfast = aligned_alloc(64, room * 2);
    brv_decoder *d0, *d1;
    assert_int_equal(brv_decoder_create(v, &d0), BRV_OK);
    assert_int_equal(brv_decoder_create(v, &d1), BRV_OK);
    brv_decoder_set_streaming(d0, BRV_STREAM_OFF);
    brv_decoder_set_streaming(d1, BRV_STREAM_ON);
    brv_decoder_set_streaming(NULL, BRV_STREAM_ON); /* accepted */
    for (uint32_t b = 0; b < brv_grid(v)->brick_count; b++)
        for (int shift = 0; shift < 2; shift++) { /* 16-byte aligned, and not */
            assert_int_equal(brv_decode_brick(v, d0, b, plain + shift, per), BRV_OK);
            assert_int_equal(brv_decode_brick(v, d1, b, fast + shift, per), BRV_OK);
            assert_memory_equal(plain + shift, fast + shift, per * sizeof(float));
            brv_result r0 = brv_decode_brick_f16(v, d0, b, hplain + shift, per);
            assert_int_equal(brv_decode_brick_f16(v, d1, b, hfast + shift, per), r0);
            assert_memory_equal(hplain + shift, hfast + shift, per * 2);
        }
    brv_decoder_free(d0);
    brv_decoder_free(d1);
    free(plain);
    free(fast);
    free(hplain);
    free(hfast);
    brv_free(v);
    free(buf);
    /* brv_decode_all streams whole 64-byte rows into the grid: rows of 16 floats, 64-byte
     * aligned (all of them) or shifted by one float (none), the same values. */
    d = fixture_world(64, 20, 18, ch, 6);
    buf = write_or_fail(&d, bright_field, NULL, &size);
    v = open_or_fail(buf, size);
    size_t all = brv_all_size(v), room_all = (all + 16 + 15) / 16 * 16;
    float *ga = aligned_alloc(64, room_all * sizeof(float)), *gb = aligned_alloc(64, room_all * sizeof(float));
    assert_int_equal(brv_decode_all(v, ga, all), BRV_OK);
    assert_int_equal(brv_decode_all(v, gb + 1, all), BRV_OK);
    assert_memory_equal(ga, gb + 1, all * sizeof(float));
    size_t n = brv_channel_size(v);
    for (uint32_t c = 0; c < 6; c++) { /* and each channel alone, through the same rows */
        assert_int_equal(brv_decode_channel(v, c, gb, n), BRV_OK);
        assert_memory_equal(gb, ga + c * n, n * sizeof(float));
    }
    free(ga);
    free(gb);
    brv_free(v);
    free(buf);
}

/* ---- halves straight from the stored words ---------------------------------------------- */

/* brv_decode_brick_f16 and brv_decode_channel_f16 give, for every encoding (unscaled f16
 * copied, f32 and rgb9e5 rounded, scaled f16 rescaled), exactly the binary16 rounding of what
 * the float calls give: brv_f32_to_f16 is the reference, checked against IEEE 754 values in
 * test_codec.c. Beyond 65504 the value is BRV_E_UNREPRESENTABLE, never a clamp. */
static void decode_to_halves_should_equal_rounded_floats(void **state)
{
    (void)state;
    const brv_channel_desc *ch = MIXED_CHANNELS;
    for (int bright = 0; bright < 2; bright++) {
        brv_write_desc d = fixture_world(37, 21, 18, ch, 6);
        size_t size = 0;
        uint8_t *buf = write_or_fail(&d, bright ? bright_field : fixture_smooth, NULL, &size);
        brv_volume *v = open_or_fail(buf, size);
        const brv_grid_info *g = brv_grid(v);
        size_t per = brv_brick_size(v), n = brv_channel_size(v);
        float *f = malloc(per * sizeof *f);
        uint16_t *h = malloc(per * sizeof *h);
        brv_decoder *dec;
        assert_int_equal(brv_decoder_create(v, &dec), BRV_OK);
        int over = 0;
        for (uint32_t b = 0; b < g->brick_count; b++) {
            assert_int_equal(brv_decode_brick(v, dec, b, f, per), BRV_OK);
            brv_result r = brv_decode_brick_f16(v, dec, b, h, per);
            uint32_t o[3], e[3];
            brv_brick_extent(v, b, o, e);
            int brick_over = 0;
            for (size_t i = 0; i < 6 * (size_t)e[0] * e[1] * e[2]; i++) {
                uint16_t want = brv_f32_to_f16(f[i]);
                assert_int_equal(h[i], want);
                brick_over |= (want & 0x7C00u) == 0x7C00u;
            }
            assert_int_equal(r, brick_over ? BRV_E_UNREPRESENTABLE : BRV_OK);
            over |= brick_over;
        }
        assert_int_equal(over, bright); /* the sun (2.75e5) is out of range, the smooth field is not */
        if (bright) assert_true(brv_channel(v, 5)->scale_exp_max > 0);
        float *cf = malloc(n * sizeof *cf);
        uint16_t *ch16 = malloc(n * sizeof *ch16);
        for (uint32_t c = 0; c < 6; c++) {
            assert_int_equal(brv_decode_channel(v, c, cf, n), BRV_OK);
            brv_result r = brv_decode_channel_f16(v, c, ch16, n);
            int ch_over = 0;
            for (size_t i = 0; i < n; i++) {
                uint16_t want = brv_f32_to_f16(cf[i]);
                assert_int_equal(ch16[i], want);
                ch_over |= (want & 0x7C00u) == 0x7C00u;
            }
            assert_int_equal(r, ch_over ? BRV_E_UNREPRESENTABLE : BRV_OK);
        }
        brv_decoder_free(dec);
        free(cf);
        free(ch16);
        free(f);
        free(h);
        brv_free(v);
        free(buf);
    }
}

/* ---- files read on demand ----------------------------------------------------------------- */

static char disk_path[64];

static void disk_write(const uint8_t *buf, size_t size)
{
    FILE *f = fopen(disk_path, "wb");
    assert_non_null(f);
    if (size) assert_int_equal(fwrite(buf, 1, size, f), size);
    assert_int_equal(fclose(f), 0);
}

static void disk_make(void)
{
    strcpy(disk_path, "brv_disk_XXXXXX"); /* in the test's working folder */
    int fd = mkstemp(disk_path);
    assert_true(fd >= 0);
    close(fd);
}

/* open_and_read through brv_open_file of the bytes written to disk (src NULL: of the file as
 * it is). */
static brv_result disk_open_and_read(const uint8_t *src, size_t size, counting *cnt)
{
    if (src) disk_write(src, size);
    brv_allocator a = {count_alloc, count_free, cnt};
    brv_volume *v = NULL;
    brv_result r = brv_open_file(disk_path, &a, &v);
    if (r == BRV_OK) {
        r = brv_verify(v, NULL);
        float *all = malloc(brv_all_size(v) * sizeof(float));
        brv_result r2 = brv_decode_all(v, all, brv_all_size(v));
        if (r2 == BRV_OK && original_values)
            assert_memory_equal(all, original_values, brv_all_size(v) * sizeof(float));
        if (r == BRV_OK) assert_int_equal(r2, BRV_OK);
        free(all);
        brv_free(v);
    }
    assert_true(r >= BRV_OK && r < BRV_RESULT_MAX_ENUM);
    return r;
}

/* A file opened from disk holds only its header and tables; its bricks are read when decoded,
 * give what the whole file in memory gives, from two threads at once too. */
static void open_file_should_read_bricks_on_demand(void **state)
{
    (void)state;
    brv_channel_desc ch[2] = {{"a", "", BRV_ENCODING_F16}, {"b", "", BRV_ENCODING_F32}};
    brv_write_desc d = fixture_world(48, 40, 33, ch, 2);
    size_t size = 0;
    uint8_t *buf = write_or_fail(&d, fixture_smooth, NULL, &size);
    disk_make();
    disk_write(buf, size);
    brv_volume *mem = open_or_fail(buf, size), *v = NULL;
    counting cnt = {0};
    brv_allocator a = {count_alloc, count_free, &cnt};
    assert_int_equal(brv_open_file(disk_path, &a, &v), BRV_OK);
    const brv_grid_info *g = brv_grid(v);
    uint64_t tables = brv_rd64(buf + 40);
    print_message("opened from disk: %zu bytes held for a %zu-byte file (tables %llu bytes)\n", cnt.live, size,
                  (unsigned long long)tables);
    /* The tables and the fixed description (about 8 KiB: 64 channel slots); no brick data
     * (the file is 158 KB). */
    assert_true(cnt.live < tables + 9000);
    assert_true(cnt.live < size / 4);
    assert_int_equal(g->file_size, size);
    assert_int_equal(g->brick_bytes, brv_grid(mem)->brick_bytes);
    assert_int_equal(brv_verify(v, NULL), BRV_OK);
    size_t all = brv_all_size(v);
    float *x = malloc(all * sizeof *x), *y = malloc(all * sizeof *y);
    assert_int_equal(brv_decode_all(v, x, all), BRV_OK);
    assert_int_equal(brv_decode_all(mem, y, all), BRV_OK);
    assert_memory_equal(x, y, all * sizeof *x);
    size_t total = brv_brick_size(v) * g->brick_count;
    float *one = calloc(total, sizeof(float)), *two = calloc(total, sizeof(float));
    job j0 = {mem, 0, 1, one, BRV_OK, 1, NULL, false, 0, false};
    decode_job(&j0);
    job ja = {v, 0, 2, two, BRV_OK, 1, NULL, false, 0, false}, jb = {v, 1, 2, two, BRV_OK, 1, NULL, false, 0, false};
    pthread_t ta, tb;
    pthread_create(&ta, NULL, decode_job, &ja);
    pthread_create(&tb, NULL, decode_job, &jb);
    pthread_join(ta, NULL);
    pthread_join(tb, NULL);
    assert_int_equal(ja.r, BRV_OK);
    assert_int_equal(jb.r, BRV_OK);
    assert_memory_equal(one, two, total * sizeof(float));
    brv_free(v);
    assert_int_equal(cnt.live, 0);
    /* A folder is not a volume file. */
    assert_int_equal(brv_open_file(".", NULL, &v), BRV_E_IO);
    assert_int_equal(brv_open_file("no such file.brv", NULL, &v), BRV_E_IO);
    free(one);
    free(two);
    free(x);
    free(y);
    brv_free(mem);
    free(buf);
    remove(disk_path);
}

/* Every truncation length and 300 byte flips of a real file on disk are faults, with
 * the same code as the same bytes in memory get. */
static void open_file_should_reject_every_truncation_and_flip_on_disk(void **state)
{
    (void)state;
    size_t size = 0;
    uint8_t *buf = small_file(&size);
    float *orig = decode_small(buf, size);
    original_values = orig;
    disk_make();
    counting cnt = {0};
    assert_int_equal(disk_open_and_read(buf, size, &cnt), BRV_OK);
    for (size_t len = size; len-- > 0;) { /* shortened in place, longest first */
        assert_int_equal(truncate(disk_path, (off_t)len), 0);
        brv_result r = disk_open_and_read(NULL, len, &cnt);
        assert_int_not_equal(r, BRV_OK);
        assert_int_equal(r, open_and_read(buf, len, &cnt));
    }
    uint8_t *mod = malloc(size);
    srand(777);
    for (int k = 0; k < 300; k++) {
        memcpy(mod, buf, size);
        size_t at = (size_t)rand() % size;
        mod[at] ^= (uint8_t)(1 + rand() % 255);
        brv_result r = disk_open_and_read(mod, size, &cnt);
        assert_int_not_equal(r, BRV_OK);
        assert_int_equal(r, open_and_read(mod, size, &cnt));
    }
    assert_int_equal(cnt.live, 0);
    original_values = NULL;
    free(mod);
    free(orig);
    free(buf);
    remove(disk_path);
}

/* A file shortened or changed on disk after open: the bricks that are gone are BRV_E_TRUNCATED,
 * a changed brick BRV_E_BRICK_CORRUPT, and the bricks still intact decode. */
static void file_changed_after_open_should_be_a_named_fault(void **state)
{
    (void)state;
    size_t size = 0;
    uint8_t *buf = small_file(&size);
    disk_make();
    disk_write(buf, size);
    brv_volume *v = NULL;
    assert_int_equal(brv_open_file(disk_path, NULL, &v), BRV_OK);
    const brv_grid_info *g = brv_grid(v);
    const uint8_t *bt = buf + brv_rd64(buf + 32) + BRV_TABLES_FIXED + 4 * BRV_CHANNEL_ENTRY;
    uint32_t last = g->brick_count - 1;
    uint64_t last_off = brv_rd64(bt + 16 * (size_t)last);
    size_t per = brv_brick_size(v), all = brv_all_size(v);
    float *brick = malloc(per * sizeof *brick), *grid = malloc(all * sizeof *grid);
    /* Cut inside the last brick (the bricks are written in order). */
    assert_int_equal(truncate(disk_path, (off_t)last_off + 3), 0);
    assert_int_equal(brv_decode_brick(v, NULL, last, brick, per), BRV_E_TRUNCATED);
    assert_int_equal(brv_decode_brick(v, NULL, 0, brick, per), BRV_OK);
    assert_int_equal(brv_decode_all(v, grid, all), BRV_E_TRUNCATED);
    uint32_t bad = 0;
    assert_int_equal(brv_verify(v, &bad), BRV_E_TRUNCATED);
    assert_int_equal(bad, last);
    /* Same length, one byte of brick 0 changed. */
    uint8_t *mod = malloc(size);
    memcpy(mod, buf, size);
    mod[BRV_HEADER_SIZE + 5] ^= 0x40;
    FILE *f = fopen(disk_path, "r+b");
    assert_non_null(f);
    assert_int_equal(fwrite(mod, 1, size, f), size);
    assert_int_equal(fclose(f), 0);
    assert_int_equal(brv_verify(v, &bad), BRV_E_BRICK_CORRUPT);
    assert_int_equal(bad, 0);
    assert_int_equal(brv_decode_brick(v, NULL, last, brick, per), BRV_OK);
    brv_free(v);
    free(mod);
    free(brick);
    free(grid);
    free(buf);
    remove(disk_path);
}

static void result_texts_should_come_from_one_list(void **state)
{
    (void)state;
    for (int r = 0; r < BRV_RESULT_MAX_ENUM; r++) {
        const char *t = brv_result_text((brv_result)r);
        assert_true(t && *t);
        for (int q = 0; q < r; q++) assert_string_not_equal(t, brv_result_text((brv_result)q));
    }
    assert_string_equal(brv_result_text(BRV_E_BRICK_CORRUPT), "brick data corrupt (zstd or checksum)");
    assert_string_equal(brv_result_text((brv_result)999), "unknown result");
}

/* The sampler and its decoder allocate through the volume's callbacks, and give it all back. */
static void sampler_should_allocate_through_the_volume_allocator(void **state)
{
    (void)state;
    size_t size = 0;
    uint8_t *buf = small_file(&size);
    counting cnt = {0};
    brv_allocator a = {count_alloc, count_free, &cnt};
    brv_volume *v = NULL;
    assert_int_equal(brv_open_memory(buf, size, &a, &v), BRV_OK);
    size_t calls_open = cnt.calls, live_open = cnt.live;
    brv_sampler *smp = NULL;
    assert_int_equal(brv_sampler_create(v, 4, &smp), BRV_OK);
    assert_true(cnt.calls > calls_open);
    assert_true(cnt.live > live_open);
    float values[BRV_MAX_CHANNELS];
    const brv_grid_info *g = brv_grid(v);
    double c[3] = {0.5 * (g->bounds_min[0] + g->bounds_max[0]), 0.5 * (g->bounds_min[1] + g->bounds_max[1]),
                   0.5 * (g->bounds_min[2] + g->bounds_max[2])};
    assert_int_equal(brv_sample_world(smp, c, values), BRV_OK);
    brv_sampler_free(smp);
    assert_int_equal(cnt.live, live_open);
    brv_free(v);
    assert_int_equal(cnt.live, 0);
    free(buf);
}

int main(int argc, char **argv)
{
    golden_path = argc > 1 ? argv[1] : "golden_v1.brv";
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(roundtrip_should_return_same_floats_for_f32),
        cmocka_unit_test(roundtrip_should_return_same_halves_for_f16),
        cmocka_unit_test(every_finite_half_should_come_back_bit_exact),
        cmocka_unit_test(f16_and_rgb9e5_should_scale_bright_values_within_bound),
        cmocka_unit_test(writer_should_refuse_unrepresentable_values),
        cmocka_unit_test(writer_should_refuse_bad_descriptions_with_a_reason),
        cmocka_unit_test(writer_should_insist_on_every_brick_once),
        cmocka_unit_test(uniform_bricks_should_cost_bytes_not_kilobytes),
        cmocka_unit_test(smooth_f16_should_compress_over_4x_against_raw_halves),
        cmocka_unit_test(writer_memory_should_not_grow_with_the_volume),
        cmocka_unit_test(sampler_should_allocate_through_the_volume_allocator),
        cmocka_unit_test(writer_should_give_the_same_bytes_for_the_same_input),
        cmocka_unit_test(open_should_reject_every_truncation),
        cmocka_unit_test(open_should_reject_random_byte_flips),
        cmocka_unit_test(open_should_refuse_hostile_tables_before_allocating),
        cmocka_unit_test(reader_should_skip_a_newer_minors_unknown_encoding),
        cmocka_unit_test(golden_file_should_read_and_be_reproduced_byte_for_byte),
        cmocka_unit_test(sampling_should_match_direct_evaluation_within_encoding_bound),
        cmocka_unit_test(frustum_sampling_should_interpolate_pixels_and_depth),
        cmocka_unit_test(distinct_bricks_should_decode_from_two_threads_at_once),
        cmocka_unit_test(result_texts_should_come_from_one_list),
        cmocka_unit_test(decode_to_halves_should_equal_rounded_floats),
        cmocka_unit_test(streaming_decoder_should_give_the_same_values),
        cmocka_unit_test(auto_streaming_should_begin_after_a_forward_run_with_the_same_values),
        cmocka_unit_test(sampler_should_interpolate_decoded_values_on_every_path),
        cmocka_unit_test(sampler_should_fill_four_f16_channels_directly),
        cmocka_unit_test(open_file_should_read_bricks_on_demand),
        cmocka_unit_test(open_file_should_reject_every_truncation_and_flip_on_disk),
        cmocka_unit_test(file_changed_after_open_should_be_a_named_fault),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
