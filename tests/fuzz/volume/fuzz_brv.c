/* libFuzzer target for the .brv reader: open from memory, read the description, verify, decode
 * every channel, the whole grid and some bricks, and sample. Nothing may crash, leak, overread
 * or hit undefined behaviour; a fault must be a named result code.
 * Each input is read twice: as it is, and "resealed" — a copy whose brick, table and header
 * CRC-32s are recomputed — because almost every mutation breaks a CRC, and without resealing
 * the fuzzer would never get past the header's checksum to the parsing behind it.
 *
 * Recipe (clang, from the repository root):
 *   CC=clang meson setup build-fuzz -Dfuzz=true -Db_sanitize=address,undefined -Db_lundef=false
 *   ninja -C build-fuzz tests/fuzz/volume/fuzz_brv
 *   mkdir -p fuzz-work && cp -r tests/fuzz/volume/corpus/. fuzz-work/
 *   build-fuzz/tests/fuzz/volume/fuzz_brv -dict=tests/fuzz/volume/brv.dict -max_len=65536 \
 *       -max_total_time=600 fuzz-work
 * The test suite replays tests/fuzz/volume/corpus/ through the same function (replay.c). */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "brume/brv.h"
#include "volume/brv_internal.h"

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

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    read_volume(data, size);
    uint8_t *copy = malloc(size ? size : 1); /* exact size, so overreads are still caught */
    if (!copy) return 0;
    if (size) memcpy(copy, data, size);
    reseal(copy, size);
    read_volume(copy, size);
    free(copy);
    return 0;
}

static void read_volume(const uint8_t *data, size_t size)
{
    brv_volume *v = NULL;
    brv_result r = brv_open_memory(data, size, NULL, &v);
    if ((unsigned)r >= BRV_RESULT_MAX_ENUM) abort();
    if (r != BRV_OK) return;
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
            if ((ra == BRV_OK) != (vr == BRV_OK || vr == BRV_E_VERSION)) {
                if (!(ra == BRV_E_VERSION && vr == BRV_OK)) abort(); /* decode and verify must agree */
            }
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
    }
    brv_decoder_free(dec);
    free(brick);
    brv_sampler *s = NULL;
    if (brv_sampler_create(v, 2, &s) == BRV_OK) {
        float out[BRV_MAX_CHANNELS];
        double p[3];
        for (int a = 0; a < 3; a++) p[a] = 0.5 * (g->bounds_min[a] + g->bounds_max[a]);
        (void)brv_sample_world(s, p, out);
        (void)brv_sample_frustum(s, 0.5 * g->cells[0], 0.5 * g->cells[1], g->camera.near_m + 1.0, out);
        brv_sampler_free(s);
    }
    (void)sink;
    brv_free(v);
}
