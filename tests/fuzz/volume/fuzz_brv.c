/* libFuzzer target for the .brv reader: open from memory, read the description, verify, decode
 * every channel, the whole grid and some bricks, and sample. Nothing may crash, leak, overread
 * or hit undefined behaviour; a fault must be a named result code.
 * Each input is read twice: as it is, and "resealed" — a copy whose brick, table and header
 * CRC-32s are recomputed — because almost every mutation breaks a CRC, and without resealing
 * the fuzzer would never get past the header's checksum to the parsing behind it.
 * The resealed copy is also written to a temporary file and opened with brv_open_file, whose
 * bricks are read from the file on demand (pread) rather than from memory.
 * A third pass reaches the brick payload parser behind zstd's own content checksum: the input
 * itself becomes the payload of the single brick of a small template volume (5 x 3 x 2 cells,
 * channels f16, f32 and an rgb9e5 triplet), compressed as a proper frame and sealed.
 *
 * Recipe (clang, from the repository root):
 *   CC=clang meson setup build-fuzz -Dfuzz=true -Db_sanitize=address,undefined -Db_lundef=false
 *   ninja -C build-fuzz tests/fuzz/volume/fuzz_brv
 *   mkdir -p fuzz-work && cp -r tests/fuzz/volume/corpus/. fuzz-work/
 *   build-fuzz/tests/fuzz/volume/fuzz_brv -dict=tests/fuzz/volume/brv.dict -max_len=65536 \
 *       -max_total_time=600 fuzz-work
 * The test suite replays tests/fuzz/volume/corpus/ through the same function (replay.c). */
#define _POSIX_C_SOURCE 200809L /* mkstemp */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "brume/brv.h"
#include "volume/brv_internal.h"
#include "brume/brv_write.h"

#include <stdio.h>
#include <zstd.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static void reseal(uint8_t *d, size_t size)
{
    if (size < BRV_HEADER_SIZE) return;
    uint64_t hs = brv_rd32(d + 12), toff = brv_rd64(d + 32), tsize = brv_rd64(d + 40);
    if (hs < BRV_HEADER_SIZE || hs > size) return;
    if (toff <= size && tsize <= size - toff && tsize >= BRV_TABLES_FIXED) {
        const uint8_t *t = d + toff;
        uint64_t bt = toff + BRV_TABLES_FIXED + 8ull * brv_rd32(t + 152) + (uint64_t)brv_rd16(d + 52) * brv_rd16(d + 18);
        uint64_t bes = brv_rd16(d + 54);
        for (uint64_t e = bt; bes >= BRV_BRICK_ENTRY && e + bes <= toff + tsize; e += bes) {
            uint64_t off = brv_rd64(d + e), cs = brv_rd32(d + e + 8);
            if (off <= size && cs <= size - off) brv_wr32(d + e + 12, brv_crc32(0, d + off, (size_t)cs));
        }
        brv_wr32(d + 48, brv_crc32(0, t, (size_t)tsize));
    }
    brv_wr32(d + hs - 4, brv_crc32(0, d, (size_t)hs - 4));
}

static void read_volume(const uint8_t *data, size_t size);
static void read_opened(brv_volume *v);

static char disk_path[32];
static void remove_disk_file(void) { remove(disk_path); }

/* The bytes as a file on disk, opened with brv_open_file (one temporary file, rewritten). */
static void read_from_disk(const uint8_t *data, size_t size)
{
    char *path = disk_path;
    if (!path[0]) {
        strcpy(path, "fuzz_brv_XXXXXX"); /* in the working folder, removed at exit */
        int fd = mkstemp(path);
        if (fd < 0) abort();
        close(fd);
        atexit(remove_disk_file);
    }
    FILE *f = fopen(path, "wb");
    if (!f) abort();
    if (size && fwrite(data, 1, size, f) != size) abort();
    if (fclose(f) != 0) abort();
    brv_volume *v = NULL;
    brv_result r = brv_open_file(path, NULL, &v);
    if ((unsigned)r >= BRV_RESULT_MAX_ENUM) abort();
    /* The same bytes in memory open the same way. */
    brv_volume *m = NULL;
    brv_result rm = brv_open_memory(data, size, NULL, &m);
    brv_free(m);
    if (rm != r) abort();
    if (r == BRV_OK) read_opened(v);
}

static uint8_t *template_file;
static size_t template_size;

/* A valid one-brick volume whose brick is replaced by each input. */
static void make_template(void)
{
    static const brv_channel_desc ch[5] = {{"extinction", "1/m", BRV_ENCODING_F16},
                                           {"occupancy", "", BRV_ENCODING_F32},
                                           {"inscatter.r", "", BRV_ENCODING_RGB9E5},
                                           {"inscatter.g", "", BRV_ENCODING_RGB9E5},
                                           {"inscatter.b", "", BRV_ENCODING_RGB9E5}};
    brv_write_desc d;
    memset(&d, 0, sizeof d);
    d.kind = BRV_GRID_WORLD;
    d.cells[0] = 5, d.cells[1] = 3, d.cells[2] = 2;
    d.bounds_max[0] = d.bounds_max[1] = d.bounds_max[2] = 1.0;
    d.channels = ch;
    d.channel_count = 5;
    float data[5 * 30];
    for (int i = 0; i < 150; i++) data[i] = (float)(i % 7) * 0.25f;
    FILE *f = tmpfile();
    brv_writer *w;
    if (!f || brv_writer_create(f, &d, &w) != BRV_OK) abort();
    if (brv_writer_put_brick(w, 0, data) != BRV_OK || brv_writer_finish(w) != BRV_OK) abort();
    brv_writer_free(w);
    template_size = (size_t)ftell(f);
    template_file = malloc(template_size);
    rewind(f);
    if (!template_file || fread(template_file, 1, template_size, f) != template_size) abort();
    fclose(f);
}

static void read_as_payload(const uint8_t *data, size_t size)
{
    if (!template_file) make_template();
    uint64_t toff = brv_rd64(template_file + 32), tsize = brv_rd64(template_file + 40);
    size_t cap = ZSTD_compressBound(size);
    size_t total_cap = BRV_HEADER_SIZE + cap + (size_t)tsize;
    uint8_t *f = malloc(total_cap);
    if (!f) return;
    /* A frame with the content checksum, as the reader requires (one context, kept). */
    static ZSTD_CCtx *cc;
    if (!cc) {
        cc = ZSTD_createCCtx();
        if (!cc) abort();
        ZSTD_CCtx_setParameter(cc, ZSTD_c_checksumFlag, 1);
        ZSTD_CCtx_setParameter(cc, ZSTD_c_compressionLevel, 1);
    }
    size_t cs = ZSTD_compress2(cc, f + BRV_HEADER_SIZE, cap, data, size);
    if (ZSTD_isError(cs)) {
        free(f);
        return;
    }
    memcpy(f, template_file, BRV_HEADER_SIZE);
    uint64_t nt = BRV_HEADER_SIZE + cs;
    memcpy(f + nt, template_file + toff, (size_t)tsize);
    brv_wr64(f + 32, nt);
    uint8_t *entry = f + nt + BRV_TABLES_FIXED + 5 * BRV_CHANNEL_ENTRY;
    brv_wr64(entry, BRV_HEADER_SIZE);
    brv_wr32(entry + 8, (uint32_t)cs);
    size_t n = (size_t)nt + (size_t)tsize;
    reseal(f, n);
    uint8_t *exact = malloc(n); /* exact size for overread detection */
    if (exact) {
        memcpy(exact, f, n);
        read_volume(exact, n);
        free(exact);
    }
    free(f);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    read_volume(data, size);
    uint8_t *copy = malloc(size ? size : 1); /* exact size, so overreads are still caught */
    if (!copy) return 0;
    if (size) memcpy(copy, data, size);
    reseal(copy, size);
    read_volume(copy, size);
    read_from_disk(copy, size);
    free(copy);
    if (size <= (1u << 16)) read_as_payload(data, size);
    return 0;
}

static void read_volume(const uint8_t *data, size_t size)
{
    brv_volume *v = NULL;
    brv_result r = brv_open_memory(data, size, NULL, &v);
    if ((unsigned)r >= BRV_RESULT_MAX_ENUM) abort();
    if (r != BRV_OK) return;
    read_opened(v);
}

/* Everything a reader does with an open volume; frees it. */
static void read_opened(brv_volume *v)
{
    const brv_grid_info *g = brv_grid(v);
    volatile size_t sink = 0;
    for (uint32_t c = 0; c < g->channel_count; c++) {
        const brv_channel_info *ci = brv_channel(v, c);
        sink += strlen(ci->name) + strlen(ci->units);
        if (brv_channel_find(v, ci->name) != (int)c) abort();
    }
    sink += strlen(brv_metadata(v, NULL));
    uint32_t bad;
    brv_result vr = brv_verify(v, &bad);
    if ((unsigned)vr >= BRV_RESULT_MAX_ENUM) abort();
    size_t n = brv_channel_size(v);
    /* Keep each input's work bounded: the whole grid only when it is small. */
    if (n <= (1u << 16) && brv_all_size(v) <= (1u << 18)) {
        float *all = malloc(brv_all_size(v) * sizeof(float));
        uint16_t *h = malloc(n * sizeof *h);
        if (all && h) {
            brv_result ra = brv_decode_all(v, all, brv_all_size(v));
            /* A file verify accepts decodes (a newer minor's encoding aside). */
            if (vr == BRV_OK && ra != BRV_OK && ra != BRV_E_VERSION) abort();
            for (uint32_t c = 0; c < g->channel_count; c++) {
                (void)brv_decode_channel(v, c, all, n);
                (void)brv_decode_channel_f16(v, c, h, n);
            }
        }
        free(all);
        free(h);
    }
    float *brick = malloc(brv_brick_size(v) * sizeof(float));
    brv_decoder *dec = NULL;
    if (brick && brv_decoder_create(v, &dec) == BRV_OK) {
        for (uint32_t b = 0; b < g->brick_count && b < 4; b++) (void)brv_decode_brick(v, dec, b, brick, brv_brick_size(v));
        uint16_t *h = malloc(brv_brick_size(v) * sizeof *h);
        brv_decoder_set_streaming(dec, 1);
        for (uint32_t b = 0; b < g->brick_count && b < 4; b++) (void)brv_decode_brick(v, dec, b, brick, brv_brick_size(v));
        for (uint32_t b = 0; h && b < g->brick_count && b < 4; b++)
            (void)brv_decode_brick_f16(v, dec, b, h, brv_brick_size(v));
        free(h);
    }
    brv_decoder_free(dec);
    free(brick);
    brv_sampler *s = NULL;
    if (brv_sampler_create(v, 2, &s) == BRV_OK) {
        float out[BRV_MAX_CHANNELS];
        double p[3];
        for (int a = 0; a < 3; a++) p[a] = 0.5 * (g->bounds_min[a] + g->bounds_max[a]);
        (void)brv_sample_world(s, p, out);
        double pts[9] = {p[0], p[1], p[2], g->bounds_min[0], g->bounds_min[1], g->bounds_min[2],
                         g->bounds_max[0], g->bounds_max[1], g->bounds_max[2]};
        float outs[3 * BRV_MAX_CHANNELS];
        (void)brv_sample_world_batch(s, 3, pts, outs);
        (void)brv_sample_frustum(s, 0.5 * g->cells[0], 0.5 * g->cells[1], g->camera.near_m + 1.0, out);
        brv_sampler_free(s);
    }
    uint32_t pick[2] = {g->channel_count - 1, 0};
    if (brv_sampler_create_channels(v, 3, pick, 2, &s) == BRV_OK) {
        float out[2];
        for (int k = 0; k < 5; k++) {
            double p[3];
            for (int a = 0; a < 3; a++) p[a] = g->bounds_min[a] + (g->bounds_max[a] - g->bounds_min[a]) * (k / 4.0);
            (void)brv_sample_world(s, p, out);
        }
        brv_sampler_free(s);
    }
    (void)sink;
    brv_free(v);
}
