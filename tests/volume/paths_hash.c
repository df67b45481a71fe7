/* Prints hashes of everything the reader computes with vector code — decoded floats and
 * halves of every encoding, and trilinear samples (every channel, subsets of one, two, four
 * and eight channels — the SSE2 build's shorter paths — and the batch call) —
 * so that the test volume_scalar_paths can hold the SSE2 build and the portable scalar build
 * (-U__SSE2__) of the same sources to the same bits. Invented smooth data, for tests only. */
#include <stdio.h>

#include "fixture.h"

static unsigned long long fnv(unsigned long long h, const void *p, size_t n)
{
    const unsigned char *b = p;
    for (size_t i = 0; i < n; i++) h = (h ^ b[i]) * 1099511628211ull;
    return h;
}

/* Bright spots (scaled f16 and rgb9e5 bricks) over a smooth background. */
static float field(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    (void)user;
    double r2 = (x - 12.0) * (x - 12.0) + (y - 7.0) * (y - 7.0) + (z - 9.0) * (z - 9.0);
    return (float)(fixture_smooth(c, x, y, z, NULL) + 2.0e5 * exp(-r2 / 5.0) * (1.0 + 0.1 * c));
}

int main(void)
{
    static const brv_channel_desc sets[3][5] = {
        {{"a", "", BRV_ENCODING_F16}, {"b", "", BRV_ENCODING_F16}, {"c", "", BRV_ENCODING_F16},
         {"d", "", BRV_ENCODING_F16}, {"e", "", BRV_ENCODING_F16}},
        {{"a", "", BRV_ENCODING_F32}, {"b", "", BRV_ENCODING_F32}, {"c", "", BRV_ENCODING_F32},
         {"d", "", BRV_ENCODING_F32}, {"e", "", BRV_ENCODING_F32}},
        {{"a", "", BRV_ENCODING_F16}, {"r", "", BRV_ENCODING_RGB9E5}, {"g", "", BRV_ENCODING_RGB9E5},
         {"b", "", BRV_ENCODING_RGB9E5}, {"e", "", BRV_ENCODING_F32}}};
    for (int k = 0; k < 3; k++) {
        brv_write_desc d = fixture_world(40, 26, 19, sets[k], 5);
        size_t size;
        brv_result r;
        uint8_t *buf = fixture_write(&d, field, NULL, &size, &r);
        brv_volume *v = NULL;
        if (!buf || brv_open_memory(buf, size, NULL, &v) != BRV_OK) return 1;
        const brv_grid_info *g = brv_grid(v);
        size_t all = brv_all_size(v), n = brv_channel_size(v);
        float *f = malloc(all * sizeof *f);
        uint16_t *h = malloc(n * sizeof *h);
        if (!f || !h || brv_decode_all(v, f, all) != BRV_OK) return 1;
        unsigned long long hd = fnv(1469598103934665603ull, f, all * sizeof *f), hh = 1469598103934665603ull;
        for (uint32_t c = 0; c < 5; c++) {
            (void)brv_decode_channel_f16(v, c, h, n); /* bright values may be out of f16 range */
            hh = fnv(hh, h, n * sizeof *h);
        }
        /* Every brick through a streaming decoder (a no-op without SSE2). */
        brv_decoder *dec;
        size_t per = brv_brick_size(v);
        float *bf = malloc(per * sizeof *bf);
        if (!bf || brv_decoder_create(v, &dec) != BRV_OK) return 1;
        brv_decoder_set_streaming(dec, 1);
        for (uint32_t b = 0; b < g->brick_count; b++) {
            if (brv_decode_brick(v, dec, b, bf, per) != BRV_OK) return 1;
            hd = fnv(hd, bf, per * sizeof *bf);
        }
        brv_decoder_free(dec);
        free(bf);
        brv_sampler *s, *part, *four, *eight, *single;
        static const uint32_t pick[2] = {3, 0}, pick4[4] = {4, 0, 2, 1}, pick8[8] = {0, 1, 2, 3, 4, 3, 1, 2};
        static const uint32_t pick1[1] = {2};
        if (brv_sampler_create(v, 4, &s) != BRV_OK || brv_sampler_create_channels(v, 0, pick, 2, &part) != BRV_OK ||
            brv_sampler_create_channels(v, 6, pick4, 4, &four) != BRV_OK ||
            brv_sampler_create_channels(v, 0, pick8, 8, &eight) != BRV_OK ||
            brv_sampler_create_channels(v, 6, pick1, 1, &single) != BRV_OK)
            return 1;
        enum { M = 5000 };
        double *pts = malloc(sizeof(double) * 3 * M);
        float *out = malloc(sizeof(float) * 5 * M), *out4 = malloc(sizeof(float) * 4 * M);
        srand(31);
        for (int i = 0; i < 3 * M; i++) pts[i] = -2.0 + 8.0 * rand() / (double)RAND_MAX;
        unsigned long long hs = 1469598103934665603ull;
        for (int i = 0; i < M; i++) {
            float o[5], q[2], q4[4], q8[8], q1[1];
            if (brv_sample_world(s, pts + 3 * i, o) != BRV_OK || brv_sample_world(part, pts + 3 * i, q) != BRV_OK ||
                brv_sample_world(four, pts + 3 * i, q4) != BRV_OK || brv_sample_world(eight, pts + 3 * i, q8) != BRV_OK ||
                brv_sample_world(single, pts + 3 * i, q1) != BRV_OK)
                return 1;
            hs = fnv(fnv(fnv(fnv(fnv(hs, o, sizeof o), q, sizeof q), q4, sizeof q4), q8, sizeof q8), q1, sizeof q1);
        }
        if (brv_sample_world_batch(s, M, pts, out) != BRV_OK) return 1;
        if (brv_sample_world_batch(four, M, pts, out4) != BRV_OK) return 1;
        unsigned long long hb = fnv(fnv(1469598103934665603ull, out, sizeof(float) * 5 * M), out4, sizeof(float) * 4 * M);
        printf("volume %d (%u bricks): decoded %016llx halves %016llx samples %016llx batch %016llx\n", k,
               g->brick_count, hd, hh, hs, hb);
        brv_sampler_free(s);
        brv_sampler_free(part);
        brv_sampler_free(four);
        brv_sampler_free(eight);
        brv_sampler_free(single);
        free(pts);
        free(out);
        free(out4);
        free(f);
        free(h);
        brv_free(v);
        free(buf);
    }
    return 0;
}
