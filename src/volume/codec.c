/* Word-level codecs of the .brv format: CRC-32, IEEE 754 binary16, RGB9E5, and the lossless
 * delta/shuffle filters that run before zstd. */
#include <math.h>
#include <stdlib.h>

#include "brv_internal.h"

/* CRC-32, slice-by-8, with the polynomial and conventions of ISO 3309 / IEEE 802.3 (zlib's
 * crc32): reflected 0xEDB88320, initial value and final xor 0xFFFFFFFF. Constant tables keep
 * it free of initialisation and so safe from any thread. */
#include "crc_tables.h"

uint32_t brv_crc32(uint32_t crc, const void *data, size_t len)
{
    const uint8_t *p = data;
    crc = ~crc;
    while (len >= 8) {
        uint32_t a = crc ^ brv_rd32(p), b = brv_rd32(p + 4);
        crc = crc_tables[7][a & 0xFF] ^ crc_tables[6][(a >> 8) & 0xFF] ^ crc_tables[5][(a >> 16) & 0xFF] ^
              crc_tables[4][a >> 24] ^ crc_tables[3][b & 0xFF] ^ crc_tables[2][(b >> 8) & 0xFF] ^
              crc_tables[1][(b >> 16) & 0xFF] ^ crc_tables[0][b >> 24];
        p += 8;
        len -= 8;
    }
    while (len--) crc = crc_tables[0][(crc ^ *p++) & 0xFF] ^ (crc >> 8);
    return ~crc;
}

/* IEEE 754-2008 binary16: 1 sign, 5 exponent bits (bias 15), 10 fraction bits; round to
 * nearest, ties to even, on the exact binary32 value (one rounding). */
uint16_t brv_f32_to_f16(float f)
{
    uint32_t x = brv_f32_bits(f);
    uint16_t sign = (uint16_t)((x >> 16) & 0x8000u);
    uint32_t ax = x & 0x7FFFFFFFu;
    if (ax >= 0x7F800000u) return (uint16_t)(sign | (ax > 0x7F800000u ? 0x7E00u : 0x7C00u));
    if (ax >= 0x477FF000u) return (uint16_t)(sign | 0x7C00u); /* ≥ 65520 rounds to infinity */
    if (ax < 0x38800000u) {                                   /* below 2^-14: subnormal or 0 */
        if (ax <= 0x33000000u) return sign;                   /* ≤ 2^-25: 0 (the tie goes to even 0) */
        uint32_t e = ax >> 23, mant = (ax & 0x7FFFFFu) | 0x800000u;
        uint32_t shift = 126u - e; /* value / 2^-24 = mant · 2^(e − 126) */
        uint32_t q = mant >> shift, rem = mant & ((1u << shift) - 1u), half = 1u << (shift - 1u);
        if (rem > half || (rem == half && (q & 1u))) q++;
        return (uint16_t)(sign | q);
    }
    uint32_t r = ax - 0x38000000u; /* rebias the exponent from 127 to 15 */
    uint32_t q = r >> 13, rem = r & 0x1FFFu;
    if (rem > 0x1000u || (rem == 0x1000u && (q & 1u))) q++; /* a carry moves into the exponent */
    return (uint16_t)(sign | q);
}

float brv_exp2i(int e) { return ldexpf(1.0f, e); }

/* EXT_texture_shared_exponent, "RGB to shared exponent conversion": N = 9 mantissa bits,
 * B = 15, Emax = 31, sharedexp_max = (2^N − 1)/2^N · 2^(Emax − B) = 65408. The floor of
 * log2 comes from the float's exponent bits, exactly; the rounding is done in double, where
 * x/2^k + 0.5 is exact. */
static double clamp_rgb9e5(float x)
{
    if (!(x > 0.0f)) return 0.0; /* NaN and negatives become 0, as the specification says */
    return x > BRV_RGB9E5_MAX ? (double)BRV_RGB9E5_MAX : (double)x;
}

uint32_t brv_rgb9e5_pack(float r, float g, float b)
{
    double rc = clamp_rgb9e5(r), gc = clamp_rgb9e5(g), bc = clamp_rgb9e5(b);
    double maxc = rc > gc ? rc : gc;
    if (bc > maxc) maxc = bc;
    int fl = -16; /* max(−B − 1, floor(log2(max_c))) */
    if (maxc > 0.0) {
        int e = (int)((brv_f32_bits((float)maxc) >> 23) & 0xFFu) - 127;
        if (e > fl) fl = e;
    }
    int exp_p = fl + 1 + 15;
    double denom = ldexp(1.0, exp_p - 15 - 9);
    double max_s = floor(maxc / denom + 0.5);
    int exp = exp_p;
    if (max_s == 512.0) {
        exp = exp_p + 1;
        denom *= 2.0;
    }
    uint32_t rs = (uint32_t)floor(rc / denom + 0.5), gs = (uint32_t)floor(gc / denom + 0.5),
             bs = (uint32_t)floor(bc / denom + 0.5);
    return ((uint32_t)exp << 27) | (bs << 18) | (gs << 9) | rs;
}

void brv_delta_encode(uint8_t *w, size_t n, unsigned wb, uint32_t nx)
{
    for (size_t row = 0; row + nx <= n; row += nx) {
        if (wb == 2) {
            for (size_t x = nx - 1; x > 0; x--) {
                uint8_t *p = w + 2 * (row + x);
                brv_wr16(p, (uint16_t)(brv_rd16(p) - brv_rd16(p - 2)));
            }
        } else {
            for (size_t x = nx - 1; x > 0; x--) {
                uint8_t *p = w + 4 * (row + x);
                brv_wr32(p, brv_rd32(p) - brv_rd32(p - 4));
            }
        }
    }
}

void brv_delta_decode(uint8_t *w, size_t n, unsigned wb, uint32_t nx)
{
    for (size_t row = 0; row + nx <= n; row += nx) {
        if (wb == 2) {
            for (size_t x = 1; x < nx; x++) {
                uint8_t *p = w + 2 * (row + x);
                brv_wr16(p, (uint16_t)(brv_rd16(p) + brv_rd16(p - 2)));
            }
        } else {
            for (size_t x = 1; x < nx; x++) {
                uint8_t *p = w + 4 * (row + x);
                brv_wr32(p, brv_rd32(p) + brv_rd32(p - 4));
            }
        }
    }
}

void brv_shuffle(const uint8_t *src, uint8_t *dst, size_t n, unsigned wb)
{
    for (unsigned p = 0; p < wb; p++)
        for (size_t i = 0; i < n; i++) dst[p * n + i] = src[i * wb + p];
}

void brv_unshuffle(const uint8_t *src, uint8_t *dst, size_t n, unsigned wb)
{
    for (unsigned p = 0; p < wb; p++)
        for (size_t i = 0; i < n; i++) dst[i * wb + p] = src[p * n + i];
}

void *brv_alloc(const brv_allocator *a, size_t size)
{
    if (size == 0) size = 1;
    if (a && a->alloc) return a->alloc(a->user, size);
    return malloc(size);
}

void brv_dealloc(const brv_allocator *a, void *p)
{
    if (!p) return;
    if (a && a->alloc) {
        if (a->free) a->free(a->user, p);
        return;
    }
    free(p);
}
