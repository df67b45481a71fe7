/* Internals shared by the .brv reader and writer: little-endian access, CRC-32, the binary16
 * and rgb9e5 codecs, and the brick payload filters. Not installed; tests reach it through
 * brv_internal (the static build of the same sources). */
#ifndef BRV_INTERNAL_H
#define BRV_INTERNAL_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <string.h>

#include "brume/brv.h"

#define BRV_MAGIC "BRUMEVOL"
#define BRV_HEADER_SIZE 64u
#define BRV_HEADER_MAX 4096u
#define BRV_CHANNEL_ENTRY 64u
#define BRV_BRICK_ENTRY 16u
#define BRV_TABLES_FIXED 160u
#define BRV_METADATA_MAX (16u << 20)
#define BRV_BRICK_STORED_MAX (16u << 20)
#define BRV_GROUP_HEADER 4u
#define BRV_SCALE_EXP_MAX 127
#define BRV_F16_MAX 65504.0f
#define BRV_RGB9E5_MAX 65408.0f

enum { BRV_MODE_FILTERED = 0, BRV_MODE_CONSTANT = 1 };

static inline uint16_t brv_rd16(const uint8_t *p) { return (uint16_t)(p[0] | (p[1] << 8)); }
static inline uint32_t brv_rd32(const uint8_t *p)
{
    return (uint32_t)p[0] | ((uint32_t)p[1] << 8) | ((uint32_t)p[2] << 16) | ((uint32_t)p[3] << 24);
}
static inline uint64_t brv_rd64(const uint8_t *p)
{
    return (uint64_t)brv_rd32(p) | ((uint64_t)brv_rd32(p + 4) << 32);
}
static inline double brv_rdf64(const uint8_t *p)
{
    uint64_t u = brv_rd64(p);
    double d;
    memcpy(&d, &u, 8);
    return d;
}
static inline float brv_rdf32(const uint8_t *p)
{
    uint32_t u = brv_rd32(p);
    float f;
    memcpy(&f, &u, 4);
    return f;
}
static inline void brv_wr16(uint8_t *p, uint16_t v)
{
    p[0] = (uint8_t)v;
    p[1] = (uint8_t)(v >> 8);
}
static inline void brv_wr32(uint8_t *p, uint32_t v)
{
    for (int i = 0; i < 4; i++) p[i] = (uint8_t)(v >> (8 * i));
}
static inline void brv_wr64(uint8_t *p, uint64_t v)
{
    for (int i = 0; i < 8; i++) p[i] = (uint8_t)(v >> (8 * i));
}
static inline void brv_wrf64(uint8_t *p, double d)
{
    uint64_t u;
    memcpy(&u, &d, 8);
    brv_wr64(p, u);
}
static inline void brv_wrf32(uint8_t *p, float f)
{
    uint32_t u;
    memcpy(&u, &f, 4);
    brv_wr32(p, u);
}
static inline uint32_t brv_f32_bits(float f)
{
    uint32_t u;
    memcpy(&u, &f, 4);
    return u;
}
static inline float brv_bits_f32(uint32_t u)
{
    float f;
    memcpy(&f, &u, 4);
    return f;
}

/* CRC-32 (ISO-HDLC, reflected 0xEDB88320), continued from crc (0 to start). */
uint32_t brv_crc32(uint32_t crc, const void *data, size_t len);

/* IEEE 754 binary16, round to nearest, ties to even; NaN stays NaN, overflow gives ±inf. */
uint16_t brv_f32_to_f16(float f);

/* The half's exponent and fraction, shifted into a float's fraction field, times 2^112
 * rebias the exponent from 15 to 127 exactly — subnormal halves included (they land on float
 * subnormals, which the multiplication makes normal). Infinity and NaN keep the all-ones
 * exponent. Inline and branch-free so the decoding loops vectorise. */
static inline float brv_f16_to_f32(uint16_t h)
{
    uint32_t sign = (uint32_t)(h & 0x8000u) << 16;
    uint32_t em = (uint32_t)(h & 0x7FFFu) << 13;
    uint32_t special = sign | 0x7F800000u | (em & 0x7FFFFFu);
    uint32_t normal = brv_f32_bits(brv_bits_f32(em) * 5.192296858534828e33f) | sign; /* × 2^112 */
    return brv_bits_f32(em >= (0x7C00u << 13) ? special : normal);
}

/* Shared-exponent RGB9E5 per EXT_texture_shared_exponent (inputs clamped as that text says;
 * the writer checks ranges before calling). */
uint32_t brv_rgb9e5_pack(float r, float g, float b);

/* x = mantissa · 2^(exp − 24); 2^(exp − 24) is always a normal float, built from its bits. */
static inline void brv_rgb9e5_unpack(uint32_t p, float *r, float *g, float *b)
{
    float q = brv_bits_f32(((p >> 27) + 103u) << 23);
    *r = (float)(p & 0x1FFu) * q;
    *g = (float)((p >> 9) & 0x1FFu) * q;
    *b = (float)((p >> 18) & 0x1FFu) * q;
}

/* 2^e as a float for e in −150..127 (exact). */
float brv_exp2i(int e);

/* Payload filters: delta along x rows of nx words (in place), byte-plane shuffle (src → dst). */
void brv_delta_encode(uint8_t *words, size_t n, unsigned word_bytes, uint32_t nx);
void brv_delta_decode(uint8_t *words, size_t n, unsigned word_bytes, uint32_t nx);
void brv_shuffle(const uint8_t *src, uint8_t *dst, size_t n, unsigned word_bytes);
void brv_unshuffle(const uint8_t *src, uint8_t *dst, size_t n, unsigned word_bytes);

/* The inverse filters of one group, fused with the conversion (unfilter.c): n words of a
 * brick with rows of nx cells, byte planes at src, scale 2^ex, floats to out (rgb9e5: three
 * planes of n). simd = 0 forces the scalar reference, which the tests compare against; 3 forces
 * SSE2 (1 and 2 may take AVX2 where the processor has it, for f32 rows of 16 cells); 2 asks
 * for streaming (cache-bypassing) stores, used when out is 16-byte aligned: the same values,
 * ordered for other threads only after brv_store_fence. */
void brv_store_fence(void);
void brv_unfilter_f16(const uint8_t *src, size_t n, uint32_t nx, int ex, float *out, int simd);
void brv_unfilter_w32(const uint8_t *src, size_t n, uint32_t nx, int ex, uint32_t code, float *out, int simd);
/* An f16 group stored without scale (scale_exp 0) kept as halves: the words themselves to out.
 * Returns nonzero when a word is an infinity or NaN (all-ones exponent). */
int brv_unfilter_f16_halves(const uint8_t *src, size_t n, uint32_t nx, uint16_t *out, int simd);

/* Four f16 channels with rows of 16 cells (n a multiple of 16), merged, prefix-summed and
 * interleaved in one pass: out[4·i + c]. lo[c] and hi[c] are channel c's two byte planes, or
 * lo[c] is NULL for a channel whose every word is cval[c]. simd 0: the scalar reference; 3:
 * SSE2 only; otherwise AVX2 where the processor has it.
 * Returns nonzero when a word is an infinity or NaN. */
int brv_unfilter_f16_cells4(const uint8_t *const lo[4], const uint8_t *const hi[4], const uint16_t cval[4], size_t n,
                            uint16_t *out, int simd);

/* For the sampler: brick b of a volume of exactly four channels, all f16, as the stored halves
 * interleaved cell by cell (out[4·i + c], the layout of the sampler's slots) and each channel's
 * scale exponent, the same words as brv_decode_brick_raw16 gives channel-major. *done is false
 * (and nothing is decoded) when the brick's rows are not 16 cells; the caller then takes
 * brv_decode_brick_raw16. */
brv_result brv_decode_brick_cells16(const brv_volume *v, brv_decoder *dec, uint32_t b, uint16_t *out,
                                    size_t out_count, int8_t *scale_exp, bool *special, bool *done);

/* For the sampler: brick b of a volume whose every channel is f16, as the stored halves
 * (channel-major, as brv_decode_brick_f16) and each channel's scale exponent (value = half ·
 * 2^scale_exp[c]); *special tells whether a word is an infinity or NaN. BRV_E_ARGUMENT when a
 * channel is not f16. */
brv_result brv_decode_brick_raw16(const brv_volume *v, brv_decoder *dec, uint32_t b, uint16_t *out, size_t out_count,
                                  int8_t *scale_exp, bool *special);

/* Whether the decoder's last brv_decode_brick or brv_decode_brick_f16 call streamed its
 * output (for the tests of BRV_STREAM_AUTO). */
bool brv_decoder_streamed(const brv_decoder *d);

/* Allocator defaults. */
void *brv_alloc(const brv_allocator *a, size_t size);
/* The allocator the volume was opened with (NULL: malloc/free); its samplers and decoders use it. */
const brv_allocator *brv_volume_allocator(const brv_volume *v);
void brv_dealloc(const brv_allocator *a, void *p);

#endif
