/* Word codecs of the .brv format against outside references: IEEE 754 binary16, RGB9E5 of
 * EXT_texture_shared_exponent, CRC-32, and the lossless filters. */
#include <stdlib.h>

#include "check.h"
#include "volume/brv_internal.h"

/* Source: IEEE Std 754-2008 binary16 (1 sign, 5 exponent bits bias 15, 10 fraction bits,
 * round to nearest, ties to even); values as Python's struct 'e' format gives them
 * (REFERENCES.md §9 table). */
static void f16_should_match_ieee754_check_values(void **state)
{
    (void)state;
    struct {
        float in;
        uint16_t bits;
    } t[] = {
        {0.0f, 0x0000},          {-0.0f, 0x8000},        {1.0f, 0x3C00},
        {-2.0f, 0xC000},         {0.5f, 0x3800},         {0.1f, 0x2E66},
        {1.0f / 3.0f, 0x3555},   {65504.0f, 0x7BFF},     {65519.0f, 0x7BFF},
        {65520.0f, 0x7C00},      /* 65504 + half an ULP ties to even: infinity */
        {6.103515625e-5f, 0x0400}, /* 2^-14, the smallest normal */
        {5.9604644775390625e-8f, 0x0001}, /* 2^-24, the smallest subnormal */
        {2.98023223876953125e-8f, 0x0000}, /* 2^-25, an exact tie: to even 0 */
        {4.470348358154297e-8f, 0x0001}, /* 3·2^-26: above the half */
        {8.940696716308594e-8f, 0x0002}, /* 3·2^-25 = 1.5·2^-24: tie between 1 and 2 → even 2 */
        {1.00048828125f, 0x3C00}, /* 1 + 2^-11: tie, to even (down) */
        {1.00146484375f, 0x3C02}, /* 1 + 3·2^-11: tie, to even (up) */
        {2049.0f, 0x6800},       {2051.0f, 0x6802},      {INFINITY, 0x7C00},
        {-INFINITY, 0xFC00},
    };
    for (size_t i = 0; i < sizeof t / sizeof t[0]; i++) {
        uint16_t h = brv_f32_to_f16(t[i].in);
        if (h != t[i].bits) print_error("f16(%.9g) = 0x%04X, expected 0x%04X\n", (double)t[i].in, h, t[i].bits);
        assert_int_equal(h, t[i].bits);
    }
    /* Source: the same table's decoded column. */
    assert_true(brv_f16_to_f32(0x2E66) == 0.0999755859375f);
    assert_true(brv_f16_to_f32(0x03FF) == 6.097555160522461e-5f); /* largest subnormal */
    assert_true(brv_f16_to_f32(0x6802) == 2052.0f);
    assert_true(isnan(brv_f16_to_f32(brv_f32_to_f16(NAN))));
}

/* Every binary16 value survives decode → encode (the two are inverse on representable values;
 * a property of any correct implementation of IEEE 754 rounding, no outside value needed). */
static void f16_should_round_trip_every_finite_half(void **state)
{
    (void)state;
    for (uint32_t h = 0; h < 0x10000u; h++) {
        if ((h & 0x7C00u) == 0x7C00u && (h & 0x3FFu)) continue; /* NaN payloads */
        assert_int_equal(brv_f32_to_f16(brv_f16_to_f32((uint16_t)h)), h);
    }
}

/* Source: EXT_texture_shared_exponent conversion (N = 9, B = 15, Emax = 31), worked examples
 * of REFERENCES.md §9 computed by that algorithm. */
static void rgb9e5_should_match_worked_examples(void **state)
{
    (void)state;
    struct {
        float r, g, b;
        uint32_t packed;
        float dr, dg, db;
    } t[] = {
        {1, 1, 1, 0x84020100u, 1, 1, 1},
        {1, 0.5f, 0.25f, 0x81010100u, 1, 0.5f, 0.25f},
        {0.1f, 0.2f, 0.3f, 0x74CD9A66u, 0.099609375f, 0.2001953125f, 0.2998046875f},
        {1.998046875f, 0, 0, 0x88000100u, 2, 0, 0}, /* max rounds to 512: exponent bumps */
        {65408, 0, 0, 0xF80001FFu, 65408, 0, 0},
        {1e9f, 0, 0, 0xF80001FFu, 65408, 0, 0},     /* the codec clamps; the writer scales first */
        {1, 0.001f, 0, 0x80000100u, 1, 0, 0},       /* green flushes to 0 */
        {5.9604644775390625e-8f, 0, 0, 0x00000001u, 5.9604644775390625e-8f, 0, 0},
        {0, 0, 0, 0, 0, 0, 0},
    };
    for (size_t i = 0; i < sizeof t / sizeof t[0]; i++) {
        uint32_t p = brv_rgb9e5_pack(t[i].r, t[i].g, t[i].b);
        if (p != t[i].packed) print_error("row %zu: 0x%08X, expected 0x%08X\n", i, p, t[i].packed);
        assert_int_equal(p, t[i].packed);
        float r, g, b;
        brv_rgb9e5_unpack(p, &r, &g, &b);
        assert_true(r == t[i].dr && g == t[i].dg && b == t[i].db);
    }
}

/* Bound of the rgb9e5 rounding (derived in brv.h from the specification's quantum): each
 * component is within max(m/511, 2^-25) of the input, m the largest component. */
static void rgb9e5_error_should_stay_within_bound(void **state)
{
    (void)state;
    srand(7);
    for (int i = 0; i < 200000; i++) {
        float v[3];
        float mag = ldexpf(1.0f, rand() % 40 - 24);
        for (int k = 0; k < 3; k++) v[k] = mag * (float)rand() / (float)RAND_MAX;
        uint32_t p = brv_rgb9e5_pack(v[0], v[1], v[2]);
        float d[3];
        brv_rgb9e5_unpack(p, &d[0], &d[1], &d[2]);
        float m = fmaxf(v[0], fmaxf(v[1], v[2]));
        double bound = fmax(m / 511.0, ldexp(1.0, -25));
        for (int k = 0; k < 3; k++) assert_true(fabs((double)d[k] - v[k]) <= bound);
    }
}

/* Source: the CRC catalogue's check value for CRC-32/ISO-HDLC (zlib crc32): "123456789" →
 * 0xCBF43926; the empty string → 0. */
static void crc32_should_match_check_value(void **state)
{
    (void)state;
    assert_int_equal(brv_crc32(0, "123456789", 9), 0xCBF43926u);
    assert_int_equal(brv_crc32(0, "", 0), 0);
    /* Continuation: crc(a‖b) = crc32(crc(a), b), for any split (slice-by-8 and byte paths). */
    const char *s = "the quick brown fox jumps over the lazy dog, twice over";
    size_t n = strlen(s);
    uint32_t whole = brv_crc32(0, s, n);
    for (size_t k = 0; k <= n; k++) assert_int_equal(brv_crc32(brv_crc32(0, s, k), s + k, n - k), whole);
}

static void filters_should_be_lossless(void **state)
{
    (void)state;
    enum { NX = 7, N = 7 * 5 };
    uint8_t w[N * 4], orig[N * 4], sh[N * 4], back[N * 4];
    for (unsigned wb = 2; wb <= 4; wb += 2) {
        for (int i = 0; i < N * 4; i++) orig[i] = w[i] = (uint8_t)(i * 37 + 11);
        brv_delta_encode(w, N, wb, NX);
        /* first word of each row is kept */
        for (int row = 0; row < N; row += NX) assert_memory_equal(w + row * wb, orig + row * wb, wb);
        brv_shuffle(w, sh, N, wb);
        assert_int_equal(sh[1], w[wb]); /* plane 0 holds byte 0 of word 1 at index 1 */
        brv_unshuffle(sh, back, N, wb);
        brv_delta_decode(back, N, wb, NX);
        assert_memory_equal(back, orig, N * wb);
    }
}

/* The vectorised inverse filters against the scalar reference, and both against an
 * independent decoding (the word as IEEE 754 binary16 by ldexp, the rgb9e5 triplet by the
 * extension's formula): every 16-bit word, infinities and NaNs included, at scales 2^0, 2^9
 * and 2^40 (one and two multiplications), and 2^20 words of the 4-byte kinds.
 * Source: IEEE Std 754-2008 binary16; EXT_texture_shared_exponent, "shared exponent to RGB". */
static float half_by_formula(uint16_t h)
{
    int e = (h >> 10) & 0x1F, m = h & 0x3FF;
    float v = e == 0 ? ldexpf((float)m, -24) : e == 31 ? (m ? NAN : INFINITY) : ldexpf((float)(m | 0x400), e - 25);
    return (h & 0x8000) ? -v : v;
}

static void shuffle_delta(const uint8_t *words, size_t n, unsigned wb, uint32_t nx, uint8_t *planes)
{
    uint8_t *tmp = malloc(n * wb);
    memcpy(tmp, words, n * wb);
    brv_delta_encode(tmp, n, wb, nx);
    brv_shuffle(tmp, planes, n, wb);
    free(tmp);
}

static void unfilter_should_match_scalar_reference_bit_for_bit(void **state)
{
    (void)state;
    enum { N = 65536 };
    uint8_t *words = malloc(4u * N), *planes = malloc(4u * N);
    float *a = aligned_alloc(64, 3 * sizeof(float) * N), *b = malloc(3 * sizeof(float) * N); /* a: streamable */
    uint32_t seed = 12345;
    for (uint32_t w = 0; w < N; w++) brv_wr16(words + 2 * w, (uint16_t)(w * 40503u)); /* every word, scattered */
    static const uint32_t nxs[] = {16, 8, 32, 5};
    static const int exs[] = {0, 9, 40};
    for (size_t i = 0; i < sizeof nxs / sizeof nxs[0]; i++) {
        size_t n = N - N % nxs[i];
        shuffle_delta(words, n, 2, nxs[i], planes);
        for (size_t k = 0; k < sizeof exs / sizeof exs[0]; k++) {
            brv_unfilter_f16(planes, n, nxs[i], exs[k], a, 2); /* streaming stores: the same values */
            brv_store_fence();
            brv_unfilter_f16(planes, n, nxs[i], exs[k], b, 0);
            assert_memory_equal(a, b, n * sizeof(float));
            brv_unfilter_f16(planes, n, nxs[i], exs[k], a, 1);
            assert_memory_equal(a, b, n * sizeof(float));
            for (size_t j = 0; j < n; j++) {
                float want = half_by_formula(brv_rd16(words + 2 * j)) * ldexpf(1.0f, exs[k]);
                if (isnan(want)) assert_true(isnan(a[j]));
                else assert_true(a[j] == want && signbit(a[j]) == signbit(want));
            }
        }
    }
    for (uint32_t w = 0; w < N; w++) {
        seed = seed * 1664525u + 1013904223u;
        brv_wr32(words + 4 * w, seed);
    }
    /* rows of 16: AVX-512 takes them in fours and AVX2 in pairs where the processor has them,
     * an odd last row by SSE2; n runs through every remainder of rows modulo four; every level
     * (1, 2 streaming, 3 SSE2 only, 4 no AVX-512) gives the scalar reference's bits, into
     * 64-, 32- and 16-byte aligned destinations */
    for (size_t n = 16 * 4095; n <= 16 * 4096; n += 16) {
        shuffle_delta(words, n, 4, 16, planes);
        brv_unfilter_w32(planes, n, 16, 0, BRV_ENCODING_F32, b, 0);
        for (size_t j = 0; j < n; j++) assert_int_equal(brv_f32_bits(b[j]), brv_rd32(words + 4 * j));
        for (int lv = 1; lv <= 4; lv++) {
            for (int shift = 0; shift <= 8; shift += 4) { /* 64-byte aligned, then 16, then 32 */
                memset(a, 0, (n + 8) * sizeof(float));
                brv_unfilter_w32(planes, n, 16, 0, BRV_ENCODING_F32, a + shift, lv);
                brv_store_fence();
                assert_memory_equal(a + shift, b, n * sizeof(float));
            }
        }
    }
    for (size_t i = 0; i < sizeof nxs / sizeof nxs[0]; i++) {
        size_t n = N - N % nxs[i];
        shuffle_delta(words, n, 4, nxs[i], planes);
        brv_unfilter_w32(planes, n, nxs[i], 0, BRV_ENCODING_F32, a, 3);
        brv_unfilter_w32(planes, n, nxs[i], 0, BRV_ENCODING_F32, b, 0);
        assert_memory_equal(a, b, n * sizeof(float));
        brv_unfilter_w32(planes, n, nxs[i], 0, BRV_ENCODING_F32, a, 2);
        brv_store_fence();
        brv_unfilter_w32(planes, n, nxs[i], 0, BRV_ENCODING_F32, b, 0);
        assert_memory_equal(a, b, n * sizeof(float));
        brv_unfilter_w32(planes, n, nxs[i], 0, BRV_ENCODING_F32, a, 1);
        assert_memory_equal(a, b, n * sizeof(float));
        for (size_t j = 0; j < n; j++) assert_int_equal(brv_f32_bits(a[j]), brv_rd32(words + 4 * j));
        brv_unfilter_w32(planes, n, nxs[i], 7, BRV_ENCODING_RGB9E5, a, 2);
        brv_store_fence();
        brv_unfilter_w32(planes, n, nxs[i], 7, BRV_ENCODING_RGB9E5, b, 0);
        assert_memory_equal(a, b, 3 * n * sizeof(float));
        brv_unfilter_w32(planes, n, nxs[i], 7, BRV_ENCODING_RGB9E5, a, 1);
        assert_memory_equal(a, b, 3 * n * sizeof(float));
        for (size_t j = 0; j < n; j += 97) {
            uint32_t p = brv_rd32(words + 4 * j);
            int e = (int)(p >> 27);
            assert_true(a[j] == ldexpf((float)(p & 0x1FF), e - 15 - 9 + 7));
            assert_true(a[n + j] == ldexpf((float)((p >> 9) & 0x1FF), e - 15 - 9 + 7));
            assert_true(a[2 * n + j] == ldexpf((float)((p >> 18) & 0x1FF), e - 15 - 9 + 7));
        }
    }
    free(words);
    free(planes);
    free(a);
    free(b);
}

/* The halves path gives back every stored 16-bit word itself, the same from the SSE2 and the
 * scalar code, and flags exactly the words with the all-ones exponent (infinities and NaNs,
 * IEEE 754-2008 binary16: exponent field 31). Source: IEEE 754-2008, 3.6 (binary16). */
static void halves_unfilter_should_return_the_stored_words(void **state)
{
    (void)state;
    enum { N = 65536 };
    uint8_t *words = malloc(2u * N), *planes = malloc(2u * N);
    uint16_t *a = aligned_alloc(16, 2u * N), *b = malloc(2u * N); /* a: streamable */
    static const uint32_t nxs[] = {16, 8, 32, 5};
    for (size_t i = 0; i < sizeof nxs / sizeof nxs[0]; i++) {
        for (uint32_t w = 0; w < N; w++) brv_wr16(words + 2 * w, (uint16_t)(w * 40503u)); /* every word */
        size_t n = N - N % nxs[i];
        shuffle_delta(words, n, 2, nxs[i], planes);
        assert_int_equal(brv_unfilter_f16_halves(planes, n, nxs[i], a, 2), 1); /* 0x7C00.. are there */
        brv_store_fence();
        assert_int_equal(brv_unfilter_f16_halves(planes, n, nxs[i], b, 0), 1);
        assert_memory_equal(a, b, n * sizeof(uint16_t));
        assert_int_equal(brv_unfilter_f16_halves(planes, n, nxs[i], a, 1), 1);
        assert_memory_equal(a, b, n * sizeof(uint16_t));
        for (size_t j = 0; j < n; j++) assert_int_equal(a[j], brv_rd16(words + 2 * j));
        /* Only finite words: no flag. */
        for (uint32_t w = 0; w < N; w++) brv_wr16(words + 2 * w, (uint16_t)((w * 40503u) % 0x7C00u));
        shuffle_delta(words, n, 2, nxs[i], planes);
        assert_int_equal(brv_unfilter_f16_halves(planes, n, nxs[i], a, 1), 0);
        assert_int_equal(brv_unfilter_f16_halves(planes, n, nxs[i], b, 0), 0);
        assert_memory_equal(a, b, n * sizeof(uint16_t));
        /* One infinity at the end of the last row is noticed by both paths. */
        brv_wr16(words + 2 * (n - 1), 0xFC00u);
        shuffle_delta(words, n, 2, nxs[i], planes);
        assert_int_equal(brv_unfilter_f16_halves(planes, n, nxs[i], a, 1), 1);
        assert_int_equal(brv_unfilter_f16_halves(planes, n, nxs[i], b, 0), 1);
        assert_int_equal(a[n - 1], 0xFC00u);
    }
    free(words);
    free(planes);
    free(a);
    free(b);
}

/* Four f16 channels merged, prefix-summed and interleaved in one pass (the sampler's slots):
 * the stored words of each channel at out[4·i + c], a constant channel's word everywhere, the
 * infinity/NaN flag raised exactly when such a word is present (IEEE 754-2008 binary16:
 * exponent field 31); AVX2 (rows in pairs, a last odd row by SSE2), SSE2 alone and the scalar
 * reference agree, for an even and an odd number of rows. */
static void cells4_unfilter_should_interleave_the_stored_words(void **state)
{
    (void)state;
    enum { N = 4096 };
    uint8_t *words = malloc(2u * N), *planes = malloc(4u * 2u * N);
    uint16_t *a = malloc(4u * 2u * N), *b = malloc(4u * 2u * N);
    for (uint32_t n = N - 16; n <= N; n += 16)
        for (int trial = 0; trial < 4; trial++) {
            const uint8_t *lo[4], *hi[4];
            uint16_t cval[4] = {0x3C00u, 0x2E66u, 0x0001u, trial == 2 ? 0x7C00u : 0x7BFFu};
            /* special word: trial 0 in channel 2's last cell, trial 3 in channel 0's cell 100
             * (a pair of rows); trial 2 a constant infinity; trial 1 none, channel 1 constant */
            uint32_t sc = trial == 0 ? 2 : trial == 3 ? 0 : 9, sw = trial == 0 ? n - 1 : 100;
            for (uint32_t c = 0; c < 4; c++) {
                for (uint32_t w = 0; w < n; w++) brv_wr16(words + 2 * w, (uint16_t)(((w + 977u * c) * 40503u) % 0x7C00u));
                if (c == sc) brv_wr16(words + 2 * sw, 0xFC00u);
                shuffle_delta(words, n, 2, 16, planes + (size_t)c * 2 * N);
                lo[c] = (trial == 1 && c == 1) || (trial == 2 && c == 3) ? NULL : planes + (size_t)c * 2 * N;
                hi[c] = lo[c] ? lo[c] + n : NULL;
            }
            int want_special = trial != 1;
            assert_int_equal(brv_unfilter_f16_cells4(lo, hi, cval, n, b, 0), want_special);
            for (int lv = 1; lv <= 3; lv += 2) { /* 1: AVX2 where the processor has it; 3: SSE2 */
                memset(a, 0, 4u * 2u * N);
                assert_int_equal(brv_unfilter_f16_cells4(lo, hi, cval, n, a, lv), want_special);
                assert_memory_equal(a, b, 4u * 2u * n);
            }
            for (uint32_t c = 0; c < 4; c++) {
                for (uint32_t w = 0; w < n; w++) {
                    uint16_t want = lo[c] ? (uint16_t)(((w + 977u * c) * 40503u) % 0x7C00u) : cval[c];
                    if (c == sc && w == sw) want = 0xFC00u;
                    assert_int_equal(a[4 * w + c], want);
                }
            }
        }
    free(words);
    free(planes);
    free(a);
    free(b);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(f16_should_match_ieee754_check_values),
        cmocka_unit_test(f16_should_round_trip_every_finite_half),
        cmocka_unit_test(rgb9e5_should_match_worked_examples),
        cmocka_unit_test(rgb9e5_error_should_stay_within_bound),
        cmocka_unit_test(crc32_should_match_check_value),
        cmocka_unit_test(filters_should_be_lossless),
        cmocka_unit_test(unfilter_should_match_scalar_reference_bit_for_bit),
        cmocka_unit_test(halves_unfilter_should_return_the_stored_words),
        cmocka_unit_test(cells4_unfilter_should_interleave_the_stored_words),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
