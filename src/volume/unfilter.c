/* The inverse of the brick filters, fused with the word conversion: one pass over a group's
 * byte planes merges them, takes the x-row prefix sums (undoing the delta) and writes floats,
 * with nothing staged in between. The scalar code is the reference (and the path for rows
 * whose length is not a multiple of 8); with SSE2 (every x86-64) rows go 8 or 16 cells at a
 * time. The tests check both paths give the same bits for every 16-bit word and every scale.
 *
 * Half to float without F16C and without a table: the half's bits are placed where a float's
 * sign, exponent and fraction go (sign to bit 31, exponent and fraction shifted left by 13),
 * which is the float value h·2^−112 exactly for every finite half (subnormal halves land on
 * float subnormals); one multiplication by 2^112·2^scale_exp then rebiases the exponent and
 * applies the brick's scale at once, exactly (a power of two, no rounding). Infinities and
 * NaNs (all-ones exponent, which the writer never stores but a hostile file can hold) are
 * noticed by a running mask, and such a group is redone by the scalar reference. */
#include <math.h>

#include "brv_internal.h"

#if defined(__SSE2__)
#include <emmintrin.h>
#endif

/* ---- scalar reference ------------------------------------------------------------------ */

static void f16_scalar(const uint8_t *restrict src, size_t n, uint32_t nx, float sc, float *restrict out)
{
    const uint8_t *lo = src, *hi = src + n;
    for (size_t row = 0; row < n; row += nx) {
        uint16_t prev = 0;
        for (size_t i = row; i < row + nx; i++) {
            prev = (uint16_t)(prev + (uint16_t)(lo[i] | (hi[i] << 8)));
            out[i] = brv_f16_to_f32(prev) * sc;
        }
    }
}

/* Halves kept as halves (a group stored without scale): merge and prefix sum only. Returns
 * nonzero when a word has the all-ones exponent (infinity or NaN). */
static int f16h_scalar(const uint8_t *restrict src, size_t n, uint32_t nx, uint16_t *restrict out)
{
    const uint8_t *lo = src, *hi = src + n;
    unsigned special = 0;
    for (size_t row = 0; row < n; row += nx) {
        uint16_t prev = 0;
        for (size_t i = row; i < row + nx; i++) {
            prev = (uint16_t)(prev + (uint16_t)(lo[i] | (hi[i] << 8)));
            special |= (prev & 0x7C00u) == 0x7C00u;
            out[i] = prev;
        }
    }
    return special != 0;
}

static void w32_scalar(const uint8_t *restrict src, size_t n, uint32_t nx, float sc, uint32_t code,
                       float *restrict out)
{
    const uint8_t *b0 = src, *b1 = src + n, *b2 = src + 2 * n, *b3 = src + 3 * n;
    for (size_t row = 0; row < n; row += nx) {
        uint32_t prev = 0;
        for (size_t i = row; i < row + nx; i++) {
            prev += (uint32_t)b0[i] | ((uint32_t)b1[i] << 8) | ((uint32_t)b2[i] << 16) | ((uint32_t)b3[i] << 24);
            if (code == BRV_ENCODING_F32) {
                out[i] = brv_bits_f32(prev);
            } else {
                float r, g, b;
                brv_rgb9e5_unpack(prev, &r, &g, &b);
                out[i] = r * sc;
                out[n + i] = g * sc;
                out[2 * n + i] = b * sc;
            }
        }
    }
}

/* ---- SSE2 ------------------------------------------------------------------------------ */
#if defined(__SSE2__)

/* Stores 4 floats or 16 bytes at a 16-byte aligned address: nt (streaming) bypasses the
 * caches, for output that will not be read again soon; otherwise unaligned stores. */
static inline void put_ps(float *p, __m128 v, int nt)
{
    if (nt) _mm_stream_ps(p, v);
    else _mm_storeu_ps(p, v);
}
static inline void put_si(void *p, __m128i v, int nt)
{
    if (nt) _mm_stream_si128((__m128i *)p, v);
    else _mm_storeu_si128((__m128i *)p, v);
}

/* Prefix sum of 8 u16 lanes. */
static inline __m128i prefix16(__m128i v)
{
    v = _mm_add_epi16(v, _mm_slli_si128(v, 2));
    v = _mm_add_epi16(v, _mm_slli_si128(v, 4));
    return _mm_add_epi16(v, _mm_slli_si128(v, 8));
}

/* Prefix sum of 4 u32 lanes: a 64-bit shift adds lane 0 to 1 and lane 2 to 3 (no shuffle),
 * then lane 1, copied to lanes 2 and 3 by one unpack and a mask, is added there. */
static inline __m128i prefix32(__m128i v)
{
    const __m128i hi = _mm_set_epi32(-1, -1, 0, 0);
    v = _mm_add_epi32(v, _mm_slli_epi64(v, 32));
    return _mm_add_epi32(v, _mm_and_si128(_mm_unpacklo_epi32(v, v), hi));
}

/* Lane 7 of 8 u16 lanes, everywhere. */
static inline __m128i last16(__m128i v) { return _mm_shuffle_epi32(_mm_shufflehi_epi16(v, 0xFF), 0xFF); }

/* 8 halves to 8 floats times k (k = 2^112·scale), stored at out. (h << 16) >> 3 arithmetic
 * puts the sign at bit 31 (and copies of it at 28–30, masked off) and the exponent and
 * fraction at bits 13–27. */
static inline void halves8(__m128i h, __m128 k, __m128 k2, int two, float *out, int nt)
{
    const __m128i keep = _mm_set1_epi32((int)0x8FFFE000u), zero = _mm_setzero_si128();
    __m128 a = _mm_castsi128_ps(_mm_and_si128(_mm_srai_epi32(_mm_unpacklo_epi16(zero, h), 3), keep));
    __m128 b = _mm_castsi128_ps(_mm_and_si128(_mm_srai_epi32(_mm_unpackhi_epi16(zero, h), 3), keep));
    a = _mm_mul_ps(a, k);
    b = _mm_mul_ps(b, k);
    if (two) {
        a = _mm_mul_ps(a, k2);
        b = _mm_mul_ps(b, k2);
    }
    put_ps(out, a, nt);
    put_ps(out + 4, b, nt);
}

static int f16_sse2(const uint8_t *restrict src, size_t n, uint32_t nx, int ex, float *restrict out, int nt)
{
    const uint8_t *lo = src, *hi = src + n;
    const __m128i expm = _mm_set1_epi16(0x7C00);
    __m128i special = _mm_setzero_si128();
    /* 2^(112 + ex) is a float up to ex = 15; beyond, a second multiplication by 2^ex. */
    int two = ex > 15;
    const __m128 k = _mm_set1_ps(ldexpf(1.0f, two ? 112 : 112 + ex)), k2 = _mm_set1_ps(ldexpf(1.0f, ex));
    if (nx == 16) {
        for (size_t row = 0; row < n; row += 16) {
            __m128i l = _mm_loadu_si128((const __m128i *)(const void *)(lo + row));
            __m128i h = _mm_loadu_si128((const __m128i *)(const void *)(hi + row));
            __m128i v0 = prefix16(_mm_unpacklo_epi8(l, h));
            __m128i v1 = _mm_add_epi16(prefix16(_mm_unpackhi_epi8(l, h)), last16(v0));
            special = _mm_or_si128(special, _mm_cmpeq_epi16(_mm_and_si128(v0, expm), expm));
            special = _mm_or_si128(special, _mm_cmpeq_epi16(_mm_and_si128(v1, expm), expm));
            halves8(v0, k, k2, two, out + row, nt);
            halves8(v1, k, k2, two, out + row + 8, nt);
        }
    } else {
        for (size_t row = 0; row < n; row += nx) {
            __m128i carry = _mm_setzero_si128();
            for (size_t i = row; i < row + nx; i += 8) {
                __m128i l = _mm_loadl_epi64((const __m128i *)(const void *)(lo + i));
                __m128i h = _mm_loadl_epi64((const __m128i *)(const void *)(hi + i));
                __m128i v = _mm_add_epi16(prefix16(_mm_unpacklo_epi8(l, h)), carry);
                carry = last16(v);
                special = _mm_or_si128(special, _mm_cmpeq_epi16(_mm_and_si128(v, expm), expm));
                halves8(v, k, k2, two, out + i, nt);
            }
        }
    }
    return _mm_movemask_epi8(special) != 0;
}

static int f16h_sse2(const uint8_t *restrict src, size_t n, uint32_t nx, uint16_t *restrict out, int nt)
{
    const uint8_t *lo = src, *hi = src + n;
    const __m128i expm = _mm_set1_epi16(0x7C00);
    __m128i special = _mm_setzero_si128();
    if (nx == 16) {
        for (size_t row = 0; row < n; row += 16) {
            __m128i l = _mm_loadu_si128((const __m128i *)(const void *)(lo + row));
            __m128i h = _mm_loadu_si128((const __m128i *)(const void *)(hi + row));
            __m128i v0 = prefix16(_mm_unpacklo_epi8(l, h));
            __m128i v1 = _mm_add_epi16(prefix16(_mm_unpackhi_epi8(l, h)), last16(v0));
            special = _mm_or_si128(special, _mm_cmpeq_epi16(_mm_and_si128(v0, expm), expm));
            special = _mm_or_si128(special, _mm_cmpeq_epi16(_mm_and_si128(v1, expm), expm));
            put_si(out + row, v0, nt);
            put_si(out + row + 8, v1, nt);
        }
    } else {
        for (size_t row = 0; row < n; row += nx) {
            __m128i carry = _mm_setzero_si128();
            for (size_t i = row; i < row + nx; i += 8) {
                __m128i l = _mm_loadl_epi64((const __m128i *)(const void *)(lo + i));
                __m128i h = _mm_loadl_epi64((const __m128i *)(const void *)(hi + i));
                __m128i v = _mm_add_epi16(prefix16(_mm_unpacklo_epi8(l, h)), carry);
                carry = last16(v);
                special = _mm_or_si128(special, _mm_cmpeq_epi16(_mm_and_si128(v, expm), expm));
                put_si(out + i, v, nt);
            }
        }
    }
    return _mm_movemask_epi8(special) != 0;
}

/* Four f16 channels of rows of 16 cells, merged, prefix-summed and interleaved (out[4·i + c])
 * in one pass, from cell `from` (a multiple of 16) on: lo[c], hi[c] the channel's byte planes,
 * or lo[c] NULL for a constant channel of value cval[c]. Returns nonzero when a word is an
 * infinity or NaN. */
static int cells4_sse2(const uint8_t *const lo[4], const uint8_t *const hi[4], const uint16_t cval[4], size_t n,
                       uint16_t *restrict out, size_t from)
{
    const __m128i expm = _mm_set1_epi16(0x7C00);
    __m128i special = _mm_setzero_si128();
    __m128i k[4];
    for (int c = 0; c < 4; c++) {
        k[c] = _mm_set1_epi16((short)cval[c]);
        if (!lo[c]) special = _mm_or_si128(special, _mm_cmpeq_epi16(_mm_and_si128(k[c], expm), expm));
    }
    /* The slot is read ahead 2 KiB (hints, as addresses: a prefetch never faults), so the
     * stores find their lines owned. */
    uintptr_t at = (uintptr_t)out;
    if (from == 0)
        for (size_t k = 0; k < 2048; k += 64) __builtin_prefetch((const void *)(at + k));
    for (size_t row = from; row < n; row += 16) {
        __builtin_prefetch((const void *)(at + 8 * row + 2048));
        __builtin_prefetch((const void *)(at + 8 * row + 2048 + 64));
        __m128i v[4][2];
        for (int c = 0; c < 4; c++) {
            if (!lo[c]) {
                v[c][0] = v[c][1] = k[c];
                continue;
            }
            __m128i l = _mm_loadu_si128((const __m128i *)(const void *)(lo[c] + row));
            __m128i h = _mm_loadu_si128((const __m128i *)(const void *)(hi[c] + row));
            __m128i v0 = prefix16(_mm_unpacklo_epi8(l, h));
            __m128i v1 = _mm_add_epi16(prefix16(_mm_unpackhi_epi8(l, h)), last16(v0));
            special = _mm_or_si128(special, _mm_cmpeq_epi16(_mm_and_si128(v0, expm), expm));
            special = _mm_or_si128(special, _mm_cmpeq_epi16(_mm_and_si128(v1, expm), expm));
            v[c][0] = v0;
            v[c][1] = v1;
        }
        for (int q = 0; q < 2; q++) {
            __m128i ablo = _mm_unpacklo_epi16(v[0][q], v[1][q]), abhi = _mm_unpackhi_epi16(v[0][q], v[1][q]);
            __m128i cdlo = _mm_unpacklo_epi16(v[2][q], v[3][q]), cdhi = _mm_unpackhi_epi16(v[2][q], v[3][q]);
            __m128i *o = (__m128i *)(void *)(out + 4 * (row + 8 * (size_t)q));
            _mm_storeu_si128(o, _mm_unpacklo_epi32(ablo, cdlo));
            _mm_storeu_si128(o + 1, _mm_unpackhi_epi32(ablo, cdlo));
            _mm_storeu_si128(o + 2, _mm_unpacklo_epi32(abhi, cdhi));
            _mm_storeu_si128(o + 3, _mm_unpackhi_epi32(abhi, cdhi));
        }
    }
    return _mm_movemask_epi8(special) != 0;
}

/* 16 words from 4 byte planes at index i: four vectors of 4 words each, in order. */
static inline void words16(const uint8_t *b0, const uint8_t *b1, const uint8_t *b2, const uint8_t *b3, size_t i,
                           __m128i w[4])
{
    __m128i x0 = _mm_loadu_si128((const __m128i *)(const void *)(b0 + i));
    __m128i x1 = _mm_loadu_si128((const __m128i *)(const void *)(b1 + i));
    __m128i x2 = _mm_loadu_si128((const __m128i *)(const void *)(b2 + i));
    __m128i x3 = _mm_loadu_si128((const __m128i *)(const void *)(b3 + i));
    __m128i lo0 = _mm_unpacklo_epi8(x0, x1), lo1 = _mm_unpackhi_epi8(x0, x1);
    __m128i hi0 = _mm_unpacklo_epi8(x2, x3), hi1 = _mm_unpackhi_epi8(x2, x3);
    w[0] = _mm_unpacklo_epi16(lo0, hi0);
    w[1] = _mm_unpackhi_epi16(lo0, hi0);
    w[2] = _mm_unpacklo_epi16(lo1, hi1);
    w[3] = _mm_unpackhi_epi16(lo1, hi1);
}

/* 4 words from 4 byte planes at index i. */
static inline __m128i words4(const uint8_t *b0, const uint8_t *b1, const uint8_t *b2, const uint8_t *b3, size_t i)
{
    int32_t x0, x1, x2, x3;
    memcpy(&x0, b0 + i, 4);
    memcpy(&x1, b1 + i, 4);
    memcpy(&x2, b2 + i, 4);
    memcpy(&x3, b3 + i, 4);
    __m128i lo = _mm_unpacklo_epi8(_mm_cvtsi32_si128(x0), _mm_cvtsi32_si128(x1));
    __m128i hi = _mm_unpacklo_epi8(_mm_cvtsi32_si128(x2), _mm_cvtsi32_si128(x3));
    return _mm_unpacklo_epi16(lo, hi);
}

static inline void rgb4(__m128i v, __m128 s4, size_t n, float *out, int nt)
{
    const __m128i m9 = _mm_set1_epi32(0x1FF), bias = _mm_set1_epi32(103);
    __m128 q = _mm_mul_ps(_mm_castsi128_ps(_mm_slli_epi32(_mm_add_epi32(_mm_srli_epi32(v, 27), bias), 23)), s4);
    put_ps(out, _mm_mul_ps(_mm_cvtepi32_ps(_mm_and_si128(v, m9)), q), nt);
    put_ps(out + n, _mm_mul_ps(_mm_cvtepi32_ps(_mm_and_si128(_mm_srli_epi32(v, 9), m9)), q), nt);
    put_ps(out + 2 * n, _mm_mul_ps(_mm_cvtepi32_ps(_mm_and_si128(_mm_srli_epi32(v, 18), m9)), q), nt);
}

static void w32_sse2(const uint8_t *restrict src, size_t n, uint32_t nx, float sc, uint32_t code,
                     float *restrict out, int nt)
{
    const uint8_t *b0 = src, *b1 = src + n, *b2 = src + 2 * n, *b3 = src + 3 * n;
    const __m128 s4 = _mm_set1_ps(sc);
    int f32 = code == BRV_ENCODING_F32;
    if (nx % 16 == 0) {
        for (size_t row = 0; row < n; row += nx) {
            __m128i carry = _mm_setzero_si128();
            for (size_t i = row; i < row + nx; i += 16) {
                __m128i w[4];
                words16(b0, b1, b2, b3, i, w);
                for (int q = 0; q < 4; q++) {
                    w[q] = _mm_add_epi32(prefix32(w[q]), carry);
                    carry = _mm_shuffle_epi32(w[q], 0xFF);
                    if (f32) put_ps(out + i + 4 * q, _mm_castsi128_ps(w[q]), nt);
                    else rgb4(w[q], s4, n, out + i + 4 * q, nt);
                }
            }
        }
        return;
    }
    for (size_t row = 0; row < n; row += nx) {
        __m128i carry = _mm_setzero_si128();
        for (size_t i = row; i < row + nx; i += 4) {
            __m128i v = _mm_add_epi32(prefix32(words4(b0, b1, b2, b3, i)), carry);
            carry = _mm_shuffle_epi32(v, 0xFF);
            if (f32) put_ps(out + i, _mm_castsi128_ps(v), nt);
            else rgb4(v, s4, n, out + i, nt);
        }
    }
}

/* AVX2 (chosen at run time, the build assuming SSE2 only): f32 groups with rows of 16 cells,
 * two rows at a time — row r in each vector's low 128-bit lane, row r + 1 in its high lane, so
 * every in-lane unpack, shift and prefix step is the SSE2 code's on two rows at once; the
 * lanes are put back in row order by 128-bit permutes on the way out. Same arithmetic (sums
 * modulo 2^32 of the same words), so the same bits; rows left over go through SSE2. */
#if (defined(__GNUC__) || defined(__clang__)) && defined(__x86_64__)
#define BRV_HAVE_AVX2 1
#include <immintrin.h>

/* One pair of rows: 16 words of each from the planes at b0..b3 + row, un-delta'd, to
 * o0..o3 (row r words 0–7, 8–15, row r + 1 words 0–7, 8–15). Written out step by step (no
 * arrays, no loops) so the compiler keeps everything in registers. */
#define BRV_AVX2_PAIR(b0, b1, b2, b3, row, hi, o0, o1, o2, o3)                                                \
    do {                                                                                                     \
        __m256i x0_ = _mm256_loadu_si256((const __m256i *)(const void *)((b0) + (row)));                      \
        __m256i x1_ = _mm256_loadu_si256((const __m256i *)(const void *)((b1) + (row)));                      \
        __m256i x2_ = _mm256_loadu_si256((const __m256i *)(const void *)((b2) + (row)));                      \
        __m256i x3_ = _mm256_loadu_si256((const __m256i *)(const void *)((b3) + (row)));                      \
        __m256i l0_ = _mm256_unpacklo_epi8(x0_, x1_), l1_ = _mm256_unpackhi_epi8(x0_, x1_);                  \
        __m256i h0_ = _mm256_unpacklo_epi8(x2_, x3_), h1_ = _mm256_unpackhi_epi8(x2_, x3_);                  \
        __m256i w0_ = _mm256_unpacklo_epi16(l0_, h0_), w1_ = _mm256_unpackhi_epi16(l0_, h0_);                \
        __m256i w2_ = _mm256_unpacklo_epi16(l1_, h1_), w3_ = _mm256_unpackhi_epi16(l1_, h1_);                \
        w0_ = _mm256_add_epi32(w0_, _mm256_slli_epi64(w0_, 32));                                             \
        w1_ = _mm256_add_epi32(w1_, _mm256_slli_epi64(w1_, 32));                                             \
        w2_ = _mm256_add_epi32(w2_, _mm256_slli_epi64(w2_, 32));                                             \
        w3_ = _mm256_add_epi32(w3_, _mm256_slli_epi64(w3_, 32));                                             \
        w0_ = _mm256_add_epi32(w0_, _mm256_and_si256(_mm256_unpacklo_epi32(w0_, w0_), hi));                 \
        w1_ = _mm256_add_epi32(w1_, _mm256_and_si256(_mm256_unpacklo_epi32(w1_, w1_), hi));                 \
        w2_ = _mm256_add_epi32(w2_, _mm256_and_si256(_mm256_unpacklo_epi32(w2_, w2_), hi));                 \
        w3_ = _mm256_add_epi32(w3_, _mm256_and_si256(_mm256_unpacklo_epi32(w3_, w3_), hi));                 \
        w1_ = _mm256_add_epi32(w1_, _mm256_shuffle_epi32(w0_, 0xFF));                                         \
        w2_ = _mm256_add_epi32(w2_, _mm256_shuffle_epi32(w1_, 0xFF));                                         \
        w3_ = _mm256_add_epi32(w3_, _mm256_shuffle_epi32(w2_, 0xFF));                                         \
        o0 = _mm256_permute2x128_si256(w0_, w1_, 0x20);                                                       \
        o1 = _mm256_permute2x128_si256(w2_, w3_, 0x20);                                                       \
        o2 = _mm256_permute2x128_si256(w0_, w1_, 0x31);                                                       \
        o3 = _mm256_permute2x128_si256(w2_, w3_, 0x31);                                                       \
    } while (0)

enum { PF_AHEAD = 512 }; /* floats */

/* Rows from `row` on (a multiple of 16) in pairs; returns where it stopped. */
__attribute__((target("avx2"))) static size_t f32_avx2_rows16(const uint8_t *restrict src, size_t n,
                                                              float *restrict out, int nt, size_t row)
{
    const uint8_t *b0 = src, *b1 = src + n, *b2 = src + 2 * n, *b3 = src + 3 * n;
    const __m256i hi = _mm256_set_epi32(-1, -1, 0, 0, -1, -1, 0, 0);
    __m256i o0, o1, o2, o3;
    if (!nt) {
        /* The output is read ahead 2 KiB (hints; a prefetch never faults, so past the end of
         * this group's output too, computed as an address): the lines arrive owned before the
         * stores reach them, so the stores do not wait on memory one by one (256 MiB of floats
         * into a volume far larger than the caches: 42 -> 27 ms). */
        uintptr_t at = (uintptr_t)out;
        for (size_t k = row; k < row + PF_AHEAD && k < n; k += 16) __builtin_prefetch((const void *)(at + 4 * k));
        for (; row + 32 <= n; row += 32) {
            BRV_AVX2_PAIR(b0, b1, b2, b3, row, hi, o0, o1, o2, o3);
            __m256i *p = (__m256i *)(void *)(out + row);
            __builtin_prefetch((const void *)(at + 4 * (row + PF_AHEAD)));
            __builtin_prefetch((const void *)(at + 4 * (row + PF_AHEAD + 16)));
            _mm256_storeu_si256(p, o0);
            _mm256_storeu_si256(p + 1, o1);
            _mm256_storeu_si256(p + 2, o2);
            _mm256_storeu_si256(p + 3, o3);
        }
    } else if (((uintptr_t)out & 31) == 0) {
        for (; row + 32 <= n; row += 32) {
            BRV_AVX2_PAIR(b0, b1, b2, b3, row, hi, o0, o1, o2, o3);
            __m256i *p = (__m256i *)(void *)(out + row);
            _mm256_stream_si256(p, o0);
            _mm256_stream_si256(p + 1, o1);
            _mm256_stream_si256(p + 2, o2);
            _mm256_stream_si256(p + 3, o3);
        }
    } else { /* 16-byte aligned: streamed in halves */
        for (; row + 32 <= n; row += 32) {
            BRV_AVX2_PAIR(b0, b1, b2, b3, row, hi, o0, o1, o2, o3);
            __m128i *p = (__m128i *)(void *)(out + row);
            _mm_stream_si128(p, _mm256_castsi256_si128(o0));
            _mm_stream_si128(p + 1, _mm256_extracti128_si256(o0, 1));
            _mm_stream_si128(p + 2, _mm256_castsi256_si128(o1));
            _mm_stream_si128(p + 3, _mm256_extracti128_si256(o1, 1));
            _mm_stream_si128(p + 4, _mm256_castsi256_si128(o2));
            _mm_stream_si128(p + 5, _mm256_extracti128_si256(o2, 1));
            _mm_stream_si128(p + 6, _mm256_castsi256_si128(o3));
            _mm_stream_si128(p + 7, _mm256_extracti128_si256(o3, 1));
        }
    }
    return row;
}

static int have_avx2(void) { return __builtin_cpu_supports("avx2"); }

/* AVX-512 (F and BW, chosen at run time, see have_avx512): four rows of 16 cells at a time.
 * A 64-byte load of a byte plane holds those rows' bytes one row per 128-bit lane, so the
 * in-lane unpacks merge the planes of four rows at once, as the AVX2 code does for two; the
 * prefix sum within each group of four words takes one shift and one masked add of a lane
 * broadcast (no mask and unpack), the carries between the groups three broadcasts; a 4 x 4
 * transpose of 128-bit lanes (eight shuffles) puts the words back in row order. Half the
 * shuffles a word of the AVX2 code (23 for 64 words instead of 32), the same sums modulo 2^32
 * of the same words, so the same bits. Rows left over (fewer than four) are the AVX2 code's. */
__attribute__((target("avx512f,avx512bw"))) static size_t f32_avx512_rows16(const uint8_t *restrict src, size_t n,
                                                                           float *restrict out, int nt)
{
    const uint8_t *b0 = src, *b1 = src + n, *b2 = src + 2 * n, *b3 = src + 3 * n;
    size_t row = 0;
    uintptr_t at = (uintptr_t)out;
    if (!nt)
        for (size_t k = 0; k < PF_AHEAD && k < n; k += 16) __builtin_prefetch((const void *)(at + 4 * k));
    for (; row + 64 <= n; row += 64) {
        __m512i x0 = _mm512_loadu_si512((const void *)(b0 + row)), x1 = _mm512_loadu_si512((const void *)(b1 + row));
        __m512i x2 = _mm512_loadu_si512((const void *)(b2 + row)), x3 = _mm512_loadu_si512((const void *)(b3 + row));
        __m512i l0 = _mm512_unpacklo_epi8(x0, x1), l1 = _mm512_unpackhi_epi8(x0, x1);
        __m512i h0 = _mm512_unpacklo_epi8(x2, x3), h1 = _mm512_unpackhi_epi8(x2, x3);
        /* lane j of w0..w3: row j's words 0-3, 4-7, 8-11, 12-15 */
        __m512i w0 = _mm512_unpacklo_epi16(l0, h0), w1 = _mm512_unpackhi_epi16(l0, h0);
        __m512i w2 = _mm512_unpacklo_epi16(l1, h1), w3 = _mm512_unpackhi_epi16(l1, h1);
        w0 = _mm512_add_epi32(w0, _mm512_slli_epi64(w0, 32));
        w1 = _mm512_add_epi32(w1, _mm512_slli_epi64(w1, 32));
        w2 = _mm512_add_epi32(w2, _mm512_slli_epi64(w2, 32));
        w3 = _mm512_add_epi32(w3, _mm512_slli_epi64(w3, 32));
        /* words 2 and 3 of each four get word 1 (the sum of words 0 and 1) */
        w0 = _mm512_mask_add_epi32(w0, 0xCCCC, w0, _mm512_shuffle_epi32(w0, _MM_PERM_BBBB));
        w1 = _mm512_mask_add_epi32(w1, 0xCCCC, w1, _mm512_shuffle_epi32(w1, _MM_PERM_BBBB));
        w2 = _mm512_mask_add_epi32(w2, 0xCCCC, w2, _mm512_shuffle_epi32(w2, _MM_PERM_BBBB));
        w3 = _mm512_mask_add_epi32(w3, 0xCCCC, w3, _mm512_shuffle_epi32(w3, _MM_PERM_BBBB));
        w1 = _mm512_add_epi32(w1, _mm512_shuffle_epi32(w0, _MM_PERM_DDDD));
        w2 = _mm512_add_epi32(w2, _mm512_shuffle_epi32(w1, _MM_PERM_DDDD));
        w3 = _mm512_add_epi32(w3, _mm512_shuffle_epi32(w2, _MM_PERM_DDDD));
        __m512i t0 = _mm512_shuffle_i32x4(w0, w1, 0x44), t1 = _mm512_shuffle_i32x4(w0, w1, 0xEE);
        __m512i t2 = _mm512_shuffle_i32x4(w2, w3, 0x44), t3 = _mm512_shuffle_i32x4(w2, w3, 0xEE);
        __m512i r0 = _mm512_shuffle_i32x4(t0, t2, 0x88), r1 = _mm512_shuffle_i32x4(t0, t2, 0xDD);
        __m512i r2 = _mm512_shuffle_i32x4(t1, t3, 0x88), r3 = _mm512_shuffle_i32x4(t1, t3, 0xDD);
        float *p = out + row;
        if (nt) {
            _mm512_stream_si512((void *)p, r0);
            _mm512_stream_si512((void *)(p + 16), r1);
            _mm512_stream_si512((void *)(p + 32), r2);
            _mm512_stream_si512((void *)(p + 48), r3);
        } else {
            __builtin_prefetch((const void *)(at + 4 * (row + PF_AHEAD)));
            __builtin_prefetch((const void *)(at + 4 * (row + PF_AHEAD + 16)));
            __builtin_prefetch((const void *)(at + 4 * (row + PF_AHEAD + 32)));
            __builtin_prefetch((const void *)(at + 4 * (row + PF_AHEAD + 48)));
            _mm512_storeu_si512((void *)p, r0);
            _mm512_storeu_si512((void *)(p + 16), r1);
            _mm512_storeu_si512((void *)(p + 32), r2);
            _mm512_storeu_si512((void *)(p + 48), r3);
        }
    }
    return row;
}

/* AVX-512 only where the processor also has VBMI2 (Intel from Ice Lake on, AMD from Zen 4
 * on): older ones lower their clock for a while after 512-bit instructions (from memory), which
 * would slow the zstd work between these short bursts more than the bursts gain. */
static int have_avx512(void)
{
    return __builtin_cpu_supports("avx512f") && __builtin_cpu_supports("avx512bw") &&
           __builtin_cpu_supports("avx512vbmi2");
}

/* cells4_sse2 with AVX2, two rows at a time (row r in each vector's low 128-bit lane, row
 * r + 1 in its high lane, so every in-lane step is the SSE2 code's on two rows); the lanes are
 * put back in row order by 128-bit permutes on the way out. The same words, so the same bits.
 * Returns the flag as cells4_sse2 and, in *done, the cells it did (pairs of rows). */
__attribute__((target("avx2"))) static inline __m256i prefix16_avx2(__m256i v)
{
    v = _mm256_add_epi16(v, _mm256_slli_si256(v, 2));
    v = _mm256_add_epi16(v, _mm256_slli_si256(v, 4));
    return _mm256_add_epi16(v, _mm256_slli_si256(v, 8));
}

__attribute__((target("avx2"))) static int cells4_avx2(const uint8_t *const lo[4], const uint8_t *const hi[4],
                                                       const uint16_t cval[4], size_t n, uint16_t *restrict out,
                                                       size_t *done)
{
    const __m256i expm = _mm256_set1_epi16(0x7C00);
    __m256i special = _mm256_setzero_si256();
    __m256i k[4];
    for (int c = 0; c < 4; c++) {
        k[c] = _mm256_set1_epi16((short)cval[c]);
        if (!lo[c]) special = _mm256_or_si256(special, _mm256_cmpeq_epi16(_mm256_and_si256(k[c], expm), expm));
    }
    uintptr_t at = (uintptr_t)out; /* read ahead 2 KiB, as cells4_sse2 */
    for (size_t q = 0; q < 2048; q += 64) __builtin_prefetch((const void *)(at + q));
    size_t row = 0;
    for (; row + 32 <= n; row += 32) {
        for (size_t q = 0; q < 256; q += 64) __builtin_prefetch((const void *)(at + 8 * row + 2048 + q));
        __m256i v[4][2];
        for (int c = 0; c < 4; c++) {
            if (!lo[c]) {
                v[c][0] = v[c][1] = k[c];
                continue;
            }
            __m256i l = _mm256_loadu_si256((const __m256i *)(const void *)(lo[c] + row));
            __m256i h = _mm256_loadu_si256((const __m256i *)(const void *)(hi[c] + row));
            __m256i v0 = prefix16_avx2(_mm256_unpacklo_epi8(l, h));
            __m256i last = _mm256_shuffle_epi32(_mm256_shufflehi_epi16(v0, 0xFF), 0xFF);
            __m256i v1 = _mm256_add_epi16(prefix16_avx2(_mm256_unpackhi_epi8(l, h)), last);
            special = _mm256_or_si256(special, _mm256_cmpeq_epi16(_mm256_and_si256(v0, expm), expm));
            special = _mm256_or_si256(special, _mm256_cmpeq_epi16(_mm256_and_si256(v1, expm), expm));
            v[c][0] = v0;
            v[c][1] = v1;
        }
        for (int q = 0; q < 2; q++) { /* cells 8q..8q+7 of both rows */
            __m256i ablo = _mm256_unpacklo_epi16(v[0][q], v[1][q]), abhi = _mm256_unpackhi_epi16(v[0][q], v[1][q]);
            __m256i cdlo = _mm256_unpacklo_epi16(v[2][q], v[3][q]), cdhi = _mm256_unpackhi_epi16(v[2][q], v[3][q]);
            __m256i r0 = _mm256_unpacklo_epi32(ablo, cdlo), r1 = _mm256_unpackhi_epi32(ablo, cdlo);
            __m256i r2 = _mm256_unpacklo_epi32(abhi, cdhi), r3 = _mm256_unpackhi_epi32(abhi, cdhi);
            __m256i *o0 = (__m256i *)(void *)(out + 4 * (row + 8 * (size_t)q));
            __m256i *o1 = (__m256i *)(void *)(out + 4 * (row + 16 + 8 * (size_t)q));
            _mm256_storeu_si256(o0, _mm256_permute2x128_si256(r0, r1, 0x20));
            _mm256_storeu_si256(o0 + 1, _mm256_permute2x128_si256(r2, r3, 0x20));
            _mm256_storeu_si256(o1, _mm256_permute2x128_si256(r0, r1, 0x31));
            _mm256_storeu_si256(o1 + 1, _mm256_permute2x128_si256(r2, r3, 0x31));
        }
    }
    *done = row;
    return _mm256_movemask_epi8(special) != 0;
}
#endif
#endif

/* ---- entry points ---------------------------------------------------------------------- */
/* simd: 0 the scalar reference, 1 SSE2 (or AVX2 or AVX-512 where the processor has them), 2
 * the same with streaming stores when out is 16-byte aligned (the caller then issues
 * brv_store_fence before the output is shared), 3 SSE2 only and 4 no AVX-512 (for the tests,
 * on processors that have them). */

void brv_store_fence(void)
{
#if defined(__SSE2__)
    _mm_sfence();
#endif
}


void brv_unfilter_f16(const uint8_t *src, size_t n, uint32_t nx, int ex, float *out, int simd)
{
#if defined(__SSE2__)
    if (simd && nx % 8 == 0) {
        if (!f16_sse2(src, n, nx, ex, out, simd == 2 && ((uintptr_t)out & 15) == 0)) return;
        /* an infinity or NaN: redo the group exactly */
    }
#else
    (void)simd;
#endif
    f16_scalar(src, n, nx, ldexpf(1.0f, ex), out);
}

int brv_unfilter_f16_halves(const uint8_t *src, size_t n, uint32_t nx, uint16_t *out, int simd)
{
#if defined(__SSE2__)
    if (simd && nx % 8 == 0) return f16h_sse2(src, n, nx, out, simd == 2 && ((uintptr_t)out & 15) == 0);
#else
    (void)simd;
#endif
    return f16h_scalar(src, n, nx, out);
}

void brv_unfilter_w32(const uint8_t *src, size_t n, uint32_t nx, int ex, uint32_t code, float *out, int simd)
{
    float sc = ldexpf(1.0f, ex);
#if defined(__SSE2__)
    if (simd && nx % 4 == 0) {
        int nt = simd == 2 && ((uintptr_t)out & 15) == 0;
#if defined(BRV_HAVE_AVX2)
        if (simd != 3 && nx == 16 && code == BRV_ENCODING_F32 && have_avx2()) {
            /* rows in fours by AVX-512 (not for streaming into a destination that is not
             * 64-byte aligned), then in pairs by AVX2, a last odd row by SSE2 on its own
             * planes' tails */
            size_t done = 0;
            if (simd != 4 && (!nt || ((uintptr_t)out & 63) == 0) && have_avx512())
                done = f32_avx512_rows16(src, n, out, nt);
            done = f32_avx2_rows16(src, n, out, nt, done);
            if (done == n) return;
            uint8_t rest[64];
            for (unsigned b = 0; b < 4; b++) memcpy(rest + 16 * b, src + b * n + done, 16);
            w32_sse2(rest, 16, 16, sc, code, out + done, nt);
            return;
        }
#endif
        w32_sse2(src, n, nx, sc, code, out, nt);
        return;
    }
#else
    (void)simd;
#endif
    w32_scalar(src, n, nx, sc, code, out);
}

int brv_unfilter_f16_cells4(const uint8_t *const lo[4], const uint8_t *const hi[4], const uint16_t cval[4], size_t n,
                            uint16_t *out, int simd)
{
#if defined(__SSE2__)
    if (simd && n % 16 == 0) {
        size_t done = 0;
        int special = 0;
#if defined(BRV_HAVE_AVX2)
        if (simd != 3 && have_avx2()) special = cells4_avx2(lo, hi, cval, n, out, &done);
#endif
        if (done == n) return special;
        return cells4_sse2(lo, hi, cval, n, out, done) | special;
    }
#else
    (void)simd;
#endif
    unsigned special = 0; /* the scalar reference: each channel as f16h_scalar, then interleaved */
    for (int c = 0; c < 4; c++) {
        uint16_t prev = 0;
        for (size_t i = 0; i < n; i++) {
            if (lo[c]) {
                if (i % 16 == 0) prev = 0;
                prev = (uint16_t)(prev + (uint16_t)(lo[c][i] | (hi[c][i] << 8)));
            } else prev = cval[c];
            special |= (prev & 0x7C00u) == 0x7C00u;
            out[4 * i + (size_t)c] = prev;
        }
    }
    return special != 0;
}
