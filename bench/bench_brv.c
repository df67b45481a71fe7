/* Speed and size of the .brv reader and writer (a benchmark program, not a test):
 *   bench_brv [N [random|decode]]   N³ cells (default 256), 4 channels (extinction + in-scatter
 *                            r, g, b); "random" or "decode": only that part
 * 1. decode throughput of the whole volume, f16 and f32, at one and two threads, next to
 *    ZSTD_decompressDCtx alone on the same brick frames: fair (zstd writes each brick's payload
 *    into its place in a whole-volume buffer, the reader decodes to the same encoding into the
 *    same kind of buffer: with a new decoder's default store mode, BRV_STREAM_AUTO, and with
 *    BRV_STREAM_OFF and BRV_STREAM_ON) and strict (zstd into one small reused buffer, which
 *    pays no memory traffic; the reader into the whole volume or into one reused brick buffer);
 * 2. size per encoding on a smooth synthetic field, against raw f16 and against plain zstd of
 *    the raw float32 array;
 * 3. random access: 1 million trilinear samples at random points, one thread, of every
 *    channel and of the extinction alone (a sampler of one channel), the volume in memory
 *    (brv_open_memory) and, for every channel, opened from a file (brv_open_file: each brick
 *    read with pread when the sampler first needs it).
 * Invented data (smooth analytic fields), for measurement only. */
#include <math.h>
#include <pthread.h>
#include <unistd.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <zstd.h>

#include "brume/brv.h"
#include "brume/brv_write.h"
#include "volume/brv_internal.h"

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return t.tv_sec + t.tv_nsec * 1e-9;
}

static double cpu_now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &t);
    return t.tv_sec + t.tv_nsec * 1e-9;
}

static uint32_t N = 256;

/* Smooth fog: exponential height falloff, two soft light pools, channel tints. */
static float field(uint32_t c, uint32_t x, uint32_t y, uint32_t z)
{
    double fx = x / (double)N, fy = y / (double)N, fz = z / (double)N;
    double d1 = (fx - 0.3) * (fx - 0.3) + (fy - 0.2) * (fy - 0.2) + (fz - 0.4) * (fz - 0.4);
    double d2 = (fx - 0.7) * (fx - 0.7) + (fy - 0.5) * (fy - 0.5) + (fz - 0.6) * (fz - 0.6);
    double fog = 0.08 * exp(-fy * 3.0);
    if (c == 0) return (float)fog;
    double light = 40.0 * exp(-d1 * 30.0) + 25.0 * exp(-d2 * 20.0) * (c == 3 ? 1.4 : 1.0) + 0.5;
    return (float)(fog * light * (1.0 + 0.1 * c));
}

typedef struct vol {
    uint8_t *bytes;
    size_t size;
    double write_s;
} vol;

static vol write_volume(brv_encoding main_enc, brv_encoding rgb_enc, int level)
{
    brv_channel_desc ch[4] = {{"extinction", "1/m", main_enc},
                              {"inscatter.r", "cd/m2/m", rgb_enc},
                              {"inscatter.g", "cd/m2/m", rgb_enc},
                              {"inscatter.b", "cd/m2/m", rgb_enc}};
    brv_write_desc d;
    memset(&d, 0, sizeof d);
    d.kind = BRV_GRID_WORLD;
    d.cells[0] = d.cells[1] = d.cells[2] = N;
    for (int a = 0; a < 3; a++) d.bounds_max[a] = 64.0;
    d.channels = ch;
    d.channel_count = 4;
    d.compression_level = level;
    FILE *f = tmpfile();
    brv_writer *w;
    vol out = {0};
    if (!f || brv_writer_create(f, &d, &w) != BRV_OK) exit(1);
    uint32_t nb = N / 16;
    float *buf = malloc(sizeof(float) * 16 * 16 * 16 * 4);
    double t0 = now();
    for (uint32_t b = 0; b < nb * nb * nb; b++) {
        uint32_t o[3] = {b % nb * 16, b / nb % nb * 16, b / (nb * nb) * 16};
        for (uint32_t c = 0; c < 4; c++)
            for (uint32_t i = 0; i < 4096; i++)
                buf[c * 4096 + i] = field(c, o[0] + i % 16, o[1] + i / 16 % 16, o[2] + i / 256);
        if (brv_writer_put_brick(w, b, buf) != BRV_OK) {
            fprintf(stderr, "%s\n", brv_writer_error(w));
            exit(1);
        }
    }
    if (brv_writer_finish(w) != BRV_OK) exit(1);
    out.write_s = now() - t0;
    brv_writer_free(w);
    free(buf);
    out.size = (size_t)ftell(f);
    out.bytes = malloc(out.size);
    rewind(f);
    if (fread(out.bytes, 1, out.size, f) != out.size) exit(1);
    fclose(f);
    return out;
}

/* What a job does with every step-th brick from first. */
enum {
    ZSTD_HOT,      /* ZSTD_decompressDCtx into one reused 32 KiB-class buffer (strict floor) */
    ZSTD_PLACED,   /* ZSTD_decompressDCtx, each payload into its place in a whole-volume buffer */
    READER_F32,    /* brv_decode_brick, floats into a whole-volume array (default store mode) */
    READER_F32_HOT,/* brv_decode_brick into one reused brick buffer */
    READER_F16,    /* brv_decode_brick_f16, halves into a whole-volume array (default store mode) */
    READER_F16_HOT,/* brv_decode_brick_f16 into one reused brick buffer */
    READER_F32_NT, /* READER_F32 with BRV_STREAM_ON */
    READER_F16_NT, /* READER_F16 with BRV_STREAM_ON */
    READER_F32_OFF,/* READER_F32 with BRV_STREAM_OFF */
    READER_F16_OFF,/* READER_F16 with BRV_STREAM_OFF */
    MODES
};
static const char *const mode_name[MODES] = {"zstd alone, into one reused buffer",
                                             "zstd alone, each brick into its place in the volume",
                                             "reader, floats into the whole volume (default)",
                                             "reader, floats into one reused brick buffer",
                                             "reader, halves into the whole volume (default)",
                                             "reader, halves into one reused brick buffer",
                                             "reader, floats into the whole volume, stream on",
                                             "reader, halves into the whole volume, stream on",
                                             "reader, floats into the whole volume, stream off",
                                             "reader, halves into the whole volume, stream off"};
static int is_f16_mode(int m)
{
    return m == READER_F16 || m == READER_F16_HOT || m == READER_F16_NT || m == READER_F16_OFF;
}

typedef struct job {
    const brv_volume *v;
    uint32_t first, step;
    int mode;
    float *out;          /* READER_F32: brick b at out + b·per */
    uint16_t *out16;     /* READER_F16: brick b at out16 + b·per */
    uint8_t *placed;     /* ZSTD_PLACED: brick b's payload at placed + place[b] */
    const size_t *place; /* brick_count + 1 offsets */
    const uint8_t *file;
} job;

static void *run_job(void *arg)
{
    job *j = arg;
    const brv_grid_info *g = brv_grid(j->v);
    size_t per = brv_brick_size(j->v);
    const uint8_t *bt = j->file + brv_rd64(j->file + 32) + BRV_TABLES_FIXED + g->channel_count * BRV_CHANNEL_ENTRY;
    if (j->mode == ZSTD_HOT || j->mode == ZSTD_PLACED) {
        ZSTD_DCtx *dctx = ZSTD_createDCtx();
        size_t cap = per * 4 + 64;
        uint8_t *payload = malloc(cap);
        for (uint32_t b = j->first; b < g->brick_count; b += j->step) {
            uint8_t *dst = j->mode == ZSTD_HOT ? payload : j->placed + j->place[b];
            size_t room = j->mode == ZSTD_HOT ? cap : j->place[b + 1] - j->place[b];
            size_t r = ZSTD_decompressDCtx(dctx, dst, room, j->file + brv_rd64(bt + 16 * b), brv_rd32(bt + 16 * b + 8));
            if (ZSTD_isError(r)) exit(1);
        }
        free(payload);
        ZSTD_freeDCtx(dctx);
        return NULL;
    }
    brv_decoder *dec;
    if (brv_decoder_create(j->v, &dec) != BRV_OK) exit(1);
    if (j->mode == READER_F32_NT || j->mode == READER_F16_NT) brv_decoder_set_streaming(dec, BRV_STREAM_ON);
    if (j->mode == READER_F32_OFF || j->mode == READER_F16_OFF) brv_decoder_set_streaming(dec, BRV_STREAM_OFF);
    float *hot = malloc(per * sizeof(float));
    uint16_t *hot16 = malloc(per * sizeof(uint16_t));
    for (uint32_t b = j->first; b < g->brick_count; b += j->step) {
        brv_result r = BRV_OK;
        if (j->mode == READER_F32 || j->mode == READER_F32_NT || j->mode == READER_F32_OFF)
            r = brv_decode_brick(j->v, dec, b, j->out + (size_t)b * per, per);
        else if (j->mode == READER_F32_HOT) r = brv_decode_brick(j->v, dec, b, hot, per);
        else if (j->mode == READER_F16 || j->mode == READER_F16_NT || j->mode == READER_F16_OFF)
            r = brv_decode_brick_f16(j->v, dec, b, j->out16 + (size_t)b * per, per);
        else r = brv_decode_brick_f16(j->v, dec, b, hot16, per);
        if (r != BRV_OK) exit(1);
    }
    free(hot);
    free(hot16);
    brv_decoder_free(dec);
    return NULL;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y;
}

enum { REPS = 7 };

/* One run of a mode at a thread count: wall and CPU time (all threads). */
static void run_once(job proto, int threads, double *wall, double *cpu)
{
    job j[2];
    pthread_t t[2];
    double c0 = cpu_now(), t0 = now();
    for (int k = 0; k < threads; k++) {
        j[k] = proto;
        j[k].first = (uint32_t)k;
        j[k].step = (uint32_t)threads;
        pthread_create(&t[k], NULL, run_job, &j[k]);
    }
    for (int k = 0; k < threads; k++) pthread_join(t[k], NULL);
    *wall = now() - t0;
    *cpu = cpu_now() - c0;
}

/* Every mode, REPS rounds with the modes interleaved (so a burst of load from other programs
 * falls on all of them alike); medians of wall and of CPU time. The CPU time is what the
 * comparison rests on: other programs sharing the machine stretch the wall clock, not it. */
static void decode_bench(const char *label, const vol *f, int is_f16)
{
    brv_volume *v;
    if (brv_open_memory(f->bytes, f->size, NULL, &v) != BRV_OK) exit(1);
    const brv_grid_info *g = brv_grid(v);
    size_t per = brv_brick_size(v), floats = per * g->brick_count;
    float *out = malloc(floats * sizeof(float));
    uint16_t *out16 = malloc(floats * sizeof(uint16_t));
    size_t *place = malloc((g->brick_count + 1) * sizeof *place);
    const uint8_t *bt = f->bytes + brv_rd64(f->bytes + 32) + BRV_TABLES_FIXED + g->channel_count * BRV_CHANNEL_ENTRY;
    place[0] = 0;
    for (uint32_t b = 0; b < g->brick_count; b++)
        place[b + 1] = place[b] + (size_t)ZSTD_getFrameContentSize(f->bytes + brv_rd64(bt + 16 * b), brv_rd32(bt + 16 * b + 8));
    uint8_t *placed = malloc(place[g->brick_count]);
    /* Touch every destination once, so no run pays the first page faults. */
    memset(out, 0, floats * sizeof(float));
    memset(out16, 0, floats * sizeof(uint16_t));
    memset(placed, 0, place[g->brick_count]);
    printf("  %s: payload %.1f MiB (%s words), floats %.1f MiB; medians of %d interleaved runs\n", label,
           place[g->brick_count] / 1048576.0, is_f16 ? "2-byte" : "4-byte", floats * 4.0 / 1048576.0, REPS);
    for (int th = 1; th <= 2; th++) {
        double wall[MODES][REPS], cpu[MODES][REPS], mw[MODES], mc[MODES];
        for (int rep = 0; rep < REPS; rep++)
            for (int m = 0; m < MODES; m++) {
                if (!is_f16 && is_f16_mode(m)) continue;
                job proto = {v, 0, 1, m, out, out16, placed, place, f->bytes};
                run_once(proto, th, &wall[m][rep], &cpu[m][rep]);
            }
        for (int m = 0; m < MODES; m++) {
            if (!is_f16 && is_f16_mode(m)) continue;
            qsort(wall[m], REPS, sizeof(double), cmp_double);
            qsort(cpu[m], REPS, sizeof(double), cmp_double);
            mw[m] = wall[m][REPS / 2];
            mc[m] = cpu[m][REPS / 2];
            printf("    %d thread%s %-52s %6.3f s wall %6.3f s cpu\n", th, th > 1 ? "s" : " ", mode_name[m], mw[m], mc[m]);
        }
        int same = is_f16 ? READER_F16 : READER_F32, same_hot = is_f16 ? READER_F16_HOT : READER_F32_HOT;
        int same_nt = is_f16 ? READER_F16_NT : READER_F32_NT, same_off = is_f16 ? READER_F16_OFF : READER_F32_OFF;
        printf("    %d thread%s fair   (same encoding, same kind of destination): reader at %5.1f %% of zstd's speed "
               "(cpu; wall %5.1f %%) by default; stream off %5.1f %% (cpu; wall %5.1f %%), stream on %5.1f %% "
               "(cpu; wall %5.1f %%)\n", th, th > 1 ? "s" : " ",
               100.0 * mc[ZSTD_PLACED] / mc[same], 100.0 * mw[ZSTD_PLACED] / mw[same],
               100.0 * mc[ZSTD_PLACED] / mc[same_off], 100.0 * mw[ZSTD_PLACED] / mw[same_off],
               100.0 * mc[ZSTD_PLACED] / mc[same_nt], 100.0 * mw[ZSTD_PLACED] / mw[same_nt]);
        printf("    %d thread%s strict (zstd into one reused buffer): reader floats into the whole volume at %5.1f %% "
               "(stream on %5.1f %%); reader %s into one reused brick buffer at %5.1f %% (cpu)\n", th, th > 1 ? "s" : " ",
               100.0 * mc[ZSTD_HOT] / mc[READER_F32], 100.0 * mc[ZSTD_HOT] / mc[READER_F32_NT],
               is_f16 ? "halves" : "floats", 100.0 * mc[ZSTD_HOT] / mc[same_hot]);
        if (is_f16)
            printf("    %d thread%s strict: reader halves into the whole volume at %5.1f %%, floats into one reused "
                   "brick buffer at %5.1f %% (cpu)\n", th, th > 1 ? "s" : " ", 100.0 * mc[ZSTD_HOT] / mc[READER_F16],
                   100.0 * mc[ZSTD_HOT] / mc[READER_F32_HOT]);
    }
    float *grid = malloc(brv_all_size(v) * sizeof(float));
    memset(grid, 0, brv_all_size(v) * sizeof(float)); /* no first-touch page faults in the timing */
    double t0 = now();
    if (brv_decode_all(v, grid, brv_all_size(v)) != BRV_OK) exit(1);
    double ta = now() - t0;
    printf("    brv_decode_all (grid order, 1 thread), malloc'd grid: %.3f s (%.0f MiB/s of floats)\n", ta,
           floats * 4.0 / 1048576.0 / ta);
    free(grid);
    grid = aligned_alloc(64, (brv_all_size(v) * sizeof(float) + 63) / 64 * 64);
    memset(grid, 0, brv_all_size(v) * sizeof(float));
    t0 = now();
    if (brv_decode_all(v, grid, brv_all_size(v)) != BRV_OK) exit(1);
    ta = now() - t0;
    printf("    brv_decode_all (grid order, 1 thread), 64-byte aligned grid (streamed rows): %.3f s (%.0f MiB/s)\n", ta,
           floats * 4.0 / 1048576.0 / ta);
    free(grid);
    free(placed);
    free(place);
    free(out);
    free(out16);
    brv_free(v);
}

/* 1M trilinear samples, one thread: one call a point (cold: a new sampler; then warm) and the
 * batch call (cold: a new sampler; then warm), REPS_RA rounds, medians of wall and CPU time. */
enum { REPS_RA = 3 };
static void random_access(const vol *f, uint32_t cache, const char *pattern, const uint32_t *pick, uint32_t npick,
                          int from_file)
{
    brv_volume *v;
    char path[4096] = "";
    if (from_file) { /* a temporary file, removed once opened (the open descriptor keeps it) */
        const char *dir = getenv("TMPDIR");
        snprintf(path, sizeof path, "%s/bench_brv_XXXXXX", dir && *dir ? dir : "/tmp");
        int fd = mkstemp(path);
        if (fd < 0 || write(fd, f->bytes, f->size) != (ssize_t)f->size || close(fd) != 0) exit(1);
        if (brv_open_file(path, NULL, &v) != BRV_OK) exit(1);
        unlink(path);
    } else if (brv_open_memory(f->bytes, f->size, NULL, &v) != BRV_OK) exit(1);
    srand(1);
    enum { M = 1000000 };
    double *pts = malloc(sizeof(double) * 3 * M);
    for (int i = 0; i < M; i++) {
        if (pattern[0] == 'r') {
            for (int a = 0; a < 3; a++) pts[3 * i + a] = 64.0 * rand() / RAND_MAX;
        } else { /* a march: 1000 rays of 1000 steps through the volume */
            int ray = i / 1000, step = i % 1000;
            double oy = 64.0 * (ray % 37) / 37.0, oz = 64.0 * (ray / 37) / 28.0;
            pts[3 * i] = 64.0 * step / 1000.0;
            pts[3 * i + 1] = oy;
            pts[3 * i + 2] = oz;
        }
    }
    uint32_t nc = npick ? npick : brv_grid(v)->channel_count;
    float o[BRV_MAX_CHANNELS], *batch = malloc(sizeof(float) * nc * M);
    double wall[4][REPS_RA], cpu[4][REPS_RA], create[2][REPS_RA], sum = 0, bsum = 0;
    size_t mem = 0;
    for (int rep = 0; rep < REPS_RA; rep++) {
        for (int kind = 0; kind < 2; kind++) { /* 0: one call a point, 1: batch */
            brv_sampler *s;
            double cc0 = cpu_now();
            if (brv_sampler_create_channels(v, cache, pick, npick, &s) != BRV_OK) exit(1);
            create[kind][rep] = cpu_now() - cc0;
            mem = brv_sampler_memory(s);
            for (int pass = 0; pass < 2; pass++) { /* cold (empty cache), then warm */
                double c0 = cpu_now(), t0 = now();
                if (kind == 0) {
                    for (int i = 0; i < M; i++) {
                        if (brv_sample_world(s, pts + 3 * i, o) != BRV_OK) exit(1);
                        sum += o[0];
                    }
                } else {
                    if (brv_sample_world_batch(s, M, pts, batch) != BRV_OK) exit(1);
                    for (int i = 0; i < M; i++) bsum += batch[(size_t)nc * i];
                }
                wall[2 * kind + pass][rep] = now() - t0;
                cpu[2 * kind + pass][rep] = cpu_now() - c0;
            }
            brv_sampler_free(s);
        }
    }
    double mw[4], mc[4];
    for (int k = 0; k < 4; k++) {
        qsort(wall[k], REPS_RA, sizeof(double), cmp_double);
        qsort(cpu[k], REPS_RA, sizeof(double), cmp_double);
        mw[k] = wall[k][REPS_RA / 2];
        mc[k] = cpu[k][REPS_RA / 2];
    }
    qsort(create[0], REPS_RA, sizeof(double), cmp_double);
    printf("  1M %-6s samples of %u channel%s, cache %4u bricks (%6.1f MiB), volume %s, medians of %d (cpu s / wall s):\n"
           "     one call a point: cold %.3f / %.3f, warm %.3f / %.3f;  batch: cold %.3f / %.3f, warm %.3f / %.3f"
           "  (checksums %.6g, %.6g)\n     creating the sampler (commits its cache memory): %.3f s cpu\n",
           pattern, nc, nc > 1 ? "s" : "", cache, mem / 1048576.0, from_file ? "from a file" : "in memory", REPS_RA, mc[0], mw[0], mc[1], mw[1], mc[2], mw[2], mc[3], mw[3],
           sum / (2 * REPS_RA), bsum / (2 * REPS_RA), create[0][REPS_RA / 2]);
    free(batch);
    free(pts);
    brv_free(v);
}

int main(int argc, char **argv)
{
    if (argc > 1) N = (uint32_t)atoi(argv[1]);
    if (argc > 2 && strcmp(argv[2], "random") == 0) {
        vol f16 = write_volume(BRV_ENCODING_F16, BRV_ENCODING_F16, 9);
        printf("random access (trilinear, all 4 channels, f16 volume %u^3, 1 thread)\n", N);
        static const uint32_t extinction[1] = {0};
        random_access(&f16, (N / 16) * (N / 16) * (N / 16), "random", NULL, 0, 0);
        random_access(&f16, (N / 16) * (N / 16) * (N / 16), "random", NULL, 0, 1);
        random_access(&f16, (N / 16) * (N / 16) * (N / 16), "random", extinction, 1, 0);
        random_access(&f16, 64, "march", NULL, 0, 0);
        free(f16.bytes);
        return 0;
    }
    if (argc > 2 && strcmp(argv[2], "decode") == 0) {
        vol f32 = write_volume(BRV_ENCODING_F32, BRV_ENCODING_F32, 9);
        vol f16 = write_volume(BRV_ENCODING_F16, BRV_ENCODING_F16, 9);
        printf("decode of the whole volume, %u^3 cells, 4 channels\n", N);
        decode_bench("f32", &f32, 0);
        decode_bench("f16", &f16, 1);
        free(f32.bytes);
        free(f16.bytes);
        return 0;
    }
    if (N < 16 || N % 16) {
        fprintf(stderr, "usage: bench_brv [N], N a multiple of 16\n");
        return 2;
    }
    size_t cells = (size_t)N * N * N;
    printf("bench_brv: %u^3 cells, 4 channels, bricks of 16^3, zstd level 9, smooth synthetic fog\n", N);

    /* Sizes against plain zstd of the raw float32 array (one frame, same level). */
    float *raw = malloc(cells * 4 * sizeof(float));
    for (uint32_t c = 0; c < 4; c++)
        for (size_t i = 0; i < cells; i++) raw[c * cells + i] = field(c, i % N, i / N % N, i / ((size_t)N * N));
    size_t cap = ZSTD_compressBound(cells * 16);
    void *zb = malloc(cap);
    double t0 = now();
    size_t zraw = ZSTD_compress(zb, cap, raw, cells * 16, 9);
    double tz = now() - t0;
    free(zb);
    free(raw);
    double raw_f16 = cells * 4 * 2.0, raw_f32 = cells * 16.0;
    printf("\nsize (raw f32 %.1f MiB, raw f16 %.1f MiB; plain zstd -9 of the raw floats: %.1f MiB = %.2fx, %.1f s)\n",
           raw_f32 / (1 << 20), raw_f16 / (1 << 20), zraw / 1048576.0, raw_f32 / zraw, tz);
    struct {
        const char *name;
        brv_encoding a, rgb;
    } encs[3] = {{"f32", BRV_ENCODING_F32, BRV_ENCODING_F32},
                 {"f16", BRV_ENCODING_F16, BRV_ENCODING_F16},
                 {"compact (f16 + rgb9e5)", BRV_ENCODING_F16, BRV_ENCODING_RGB9E5}};
    vol vols[3];
    for (int e = 0; e < 3; e++) {
        vols[e] = write_volume(encs[e].a, encs[e].rgb, 9);
        printf("  %-24s %8.2f MiB  %6.2fx smaller than raw f16, %6.2fx than raw f32, %5.2fx than zstd of raw f32;"
               " written in %.2f s\n",
               encs[e].name, vols[e].size / 1048576.0, raw_f16 / vols[e].size, raw_f32 / vols[e].size,
               (double)zraw / vols[e].size, vols[e].write_s);
    }
    printf("\ndecode of the whole volume ('zstd alone' = ZSTD_decompressDCtx on the same frames)\n");
    decode_bench("f32", &vols[0], 0);
    decode_bench("f16", &vols[1], 1);
    decode_bench("cmp", &vols[2], 0);
    printf("\nrandom access (trilinear, all 4 channels, f16 volume, 1 thread)\n");
    uint32_t all = (N / 16) * (N / 16) * (N / 16);
    random_access(&vols[1], all, "random", NULL, 0, 0);
    random_access(&vols[1], all, "random", NULL, 0, 1);
    static const uint32_t extinction[1] = {0};
    random_access(&vols[1], all, "random", extinction, 1, 0);
    random_access(&vols[1], 64, "march", NULL, 0, 0);
    if (N <= 128) random_access(&vols[1], 512, "random", NULL, 0, 0);
    for (int e = 0; e < 3; e++) free(vols[e].bytes);
    return 0;
}
