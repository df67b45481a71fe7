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

/* Prefix sum of 4 u32 lanes. */
static inline __m128i prefix32(__m128i v)
{
    v = _mm_add_epi32(v, _mm_slli_si128(v, 4));
    return _mm_add_epi32(v, _mm_slli_si128(v, 8));
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
#endif

/* ---- entry points ---------------------------------------------------------------------- */
/* simd: 0 the scalar reference, 1 SSE2 where there is, 2 SSE2 with streaming stores when out is
 * 16-byte aligned (the caller then issues brv_store_fence before the output is shared). */

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
        w32_sse2(src, n, nx, sc, code, out, simd == 2 && ((uintptr_t)out & 15) == 0);
        return;
    }
#else
    (void)simd;
#endif
    w32_scalar(src, n, nx, sc, code, out);
}
