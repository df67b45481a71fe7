/* Random access: trilinear sampling through a cache of decoded bricks. A brick's cells are
 * kept interleaved (every channel of a cell together, so a sample's corners share cache
 * lines); when every channel is f16 they are kept as the stored halves with the brick's
 * per-channel scale apart, which halves the cache's memory and gives the same bits (the scale
 * is a power of two, applied once to the interpolated value). */
#if defined(__linux__) && !defined(_DEFAULT_SOURCE)
#define _DEFAULT_SOURCE /* madvise */
#endif
#include <math.h>
#include <stdbool.h>
#if defined(__linux__)
#include <sys/mman.h>
#endif

#include "brv_internal.h"

#if defined(__SSE2__)
#include <emmintrin.h>
#endif

#if defined(__GNUC__)
#define BRV_NOINLINE __attribute__((noinline))
#else
#define BRV_NOINLINE
#endif

typedef struct slot {
    uint32_t brick; /* UINT32_MAX: empty */
    uint32_t ext[3];
    uint64_t used; /* last use, for replacement within a set */
    size_t sy, sz; /* element strides of y and z (x: the sampled channel count) */
    void *data;    /* float or uint16_t [cell·channels + c] */
    float *scale;  /* halves: each channel's 2^scale_exp for this brick */
    bool special;  /* halves: some word is an infinity or NaN (only a hostile file has them) */
} slot;

struct brv_sampler {
    const brv_volume *v;
    const brv_grid_info *g;
    bool direct; /* one slot per brick */
    bool half;   /* every channel f16: slots hold halves */
    int shift;   /* log2(brick_size) */
    brv_decoder *dec;
    uint32_t count;
    slot *slots;
    void *pool;    /* as allocated */
    uint8_t *cells; /* pool rounded up to 64 bytes: the slots' data, cache-line aligned */
    float *scales;
    void *scratch; /* one decoded brick, channel-major */
    uint32_t sets; /* count / 2 sets of two slots (one set of one when count is 1) */
    uint64_t clock;
    size_t memory;
    double mul[3], add[3]; /* cell coordinate = pos·mul + add */
    uint32_t nc;           /* channels sampled */
    bool ident;            /* they are every channel, in order */
    uint8_t map[BRV_MAX_CHANNELS]; /* sampled channel j is the volume's channel map[j] */
};

size_t brv_sampler_memory(const brv_sampler *s) { return s ? s->memory : 0; }

brv_result brv_sampler_create(const brv_volume *v, uint32_t cache_bricks, brv_sampler **out)
{
    return brv_sampler_create_channels(v, cache_bricks, NULL, 0, out);
}

brv_result brv_sampler_create_channels(const brv_volume *v, uint32_t cache_bricks, const uint32_t *channels,
                                       uint32_t count, brv_sampler **out)
{
    if (!v || !out || (count && !channels) || count > BRV_MAX_CHANNELS) return BRV_E_ARGUMENT;
    const brv_grid_info *g = brv_grid(v);
    for (uint32_t j = 0; j < count; j++)
        if (channels[j] >= g->channel_count) return BRV_E_NOT_FOUND;
    if (cache_bricks == 0) cache_bricks = 64;
    if (cache_bricks > g->brick_count) cache_bricks = g->brick_count;
    uint32_t nc = count ? count : g->channel_count;
    bool half = true;
    for (uint32_t c = 0; c < g->channel_count; c++) half &= brv_channel(v, c)->encoding == BRV_ENCODING_F16;
    size_t es = half ? sizeof(uint16_t) : sizeof(float);
    size_t per = (size_t)g->brick_size * g->brick_size * g->brick_size * nc, total;
    if (per && (size_t)cache_bricks > (size_t)-1 / per / sizeof(float)) return BRV_E_NOMEM;
    total = per * cache_bricks;
    if (total * es > (size_t)-1 - 64) return BRV_E_NOMEM;
    const brv_allocator *a = brv_volume_allocator(v);
    brv_sampler *s = brv_alloc(a, sizeof *s);
    if (!s) return BRV_E_NOMEM;
    memset(s, 0, sizeof *s);
    s->v = v;
    s->g = g;
    s->half = half;
    s->nc = nc;
    s->ident = nc == g->channel_count;
    for (uint32_t j = 0; j < nc; j++) {
        s->map[j] = (uint8_t)(count ? channels[j] : j);
        s->ident &= s->map[j] == j;
    }
    s->count = cache_bricks;
    s->direct = cache_bricks == g->brick_count;
    s->shift = -1;
    for (int k = 0; k <= 5; k++)
        if (g->brick_size == 1u << k) s->shift = k;
    s->slots = brv_alloc(a, cache_bricks * sizeof *s->slots);
    s->pool = brv_alloc(a, total * es + 64);
    s->scratch = brv_alloc(a, brv_brick_size(v) * es);
    if (half) s->scales = brv_alloc(a, (size_t)cache_bricks * nc * sizeof(float));
    s->sets = cache_bricks >= 2 ? cache_bricks / 2 : 1;
    s->memory = total * es + 64 + cache_bricks * (sizeof(slot) + (half ? nc * sizeof(float) : 0));
    brv_result r = brv_decoder_create(v, &s->dec);
    if (r == BRV_OK && (!s->slots || !s->pool || !s->scratch || (half && !s->scales))) r = BRV_E_NOMEM;
    /* Rows of cells start on cache lines, so a sample's x neighbours share a line as often as
     * the brick allows (a row of 16 cells of 4 halves: two lines, not three). */
    if (r == BRV_OK) s->cells = (uint8_t *)s->pool + ((64u - ((uintptr_t)s->pool & 63u)) & 63u);
    if (r != BRV_OK) {
        brv_sampler_free(s);
        return r;
    }
#if defined(__linux__) && defined(MADV_HUGEPAGE)
    /* A large cache is read at random: large pages spare a page walk on most reads (a hint). */
    if (total * es >= (16u << 20)) {
        uintptr_t lo = ((uintptr_t)s->cells + 4095u) & ~(uintptr_t)4095u;
        uintptr_t hi = ((uintptr_t)s->cells + total * es) & ~(uintptr_t)4095u;
        if (hi > lo) (void)madvise((void *)lo, hi - lo, MADV_HUGEPAGE);
    }
#endif
    /* The cache's pages are committed now (one write a page), so sampling pays no page faults:
     * their cost is in this call, whatever the first samples are. */
    for (size_t at = 0; at < total * es; at += 4096) ((volatile uint8_t *)s->cells)[at] = 0;
    for (uint32_t i = 0; i < cache_bricks; i++) {
        s->slots[i].brick = UINT32_MAX;
        s->slots[i].data = s->cells + (size_t)i * per * es;
        s->slots[i].scale = half ? s->scales + (size_t)i * nc : NULL;
    }
    for (int k = 0; k < 3; k++) {
        double span = g->bounds_max[k] - g->bounds_min[k];
        if (g->kind == BRV_GRID_WORLD) {
            s->mul[k] = g->cells[k] / span;
            s->add[k] = -g->bounds_min[k] * s->mul[k] - 0.5;
        } else if (g->kind == BRV_GRID_PROBES && g->cells[k] > 1 && span > 0.0) {
            s->mul[k] = (g->cells[k] - 1) / span;
            s->add[k] = -g->bounds_min[k] * s->mul[k];
        }
    }
    *out = s;
    return BRV_OK;
}

void brv_sampler_free(brv_sampler *s)
{
    if (!s) return;
    const brv_allocator *a = brv_volume_allocator(s->v);
    brv_decoder_free(s->dec);
    brv_dealloc(a, s->slots);
    brv_dealloc(a, s->pool);
    brv_dealloc(a, s->scales);
    brv_dealloc(a, s->scratch);
    brv_dealloc(a, s);
}

/* Decodes brick b into slot sl (interleaving its channels). */
BRV_NOINLINE static brv_result fill(brv_sampler *s, slot *sl, uint32_t b)
{
    uint32_t o[3], nc = s->nc;
    const uint8_t *map = s->map;
    sl->brick = UINT32_MAX;
    brv_brick_extent(s->v, b, o, sl->ext);
    size_t n = (size_t)sl->ext[0] * sl->ext[1] * sl->ext[2];
    sl->sy = (size_t)nc * sl->ext[0];
    sl->sz = sl->sy * sl->ext[1];
    size_t per = brv_brick_size(s->v);
    if (s->half && nc == 4 && s->ident) {
        /* Four f16 channels with rows of 16: decoded straight into the slot, interleaved. */
        int8_t ex[4];
        bool done;
        brv_result r = brv_decode_brick_cells16(s->v, s->dec, b, sl->data, per, ex, &sl->special, &done);
        if (r != BRV_OK) return r;
        if (done) {
            for (uint32_t c = 0; c < 4; c++) sl->scale[c] = ldexpf(1.0f, ex[c]);
            sl->brick = b;
            return BRV_OK;
        }
    }
    if (s->half) {
        int8_t ex[BRV_MAX_CHANNELS];
        uint16_t *src = s->scratch, *dst = sl->data;
        brv_result r = brv_decode_brick_raw16(s->v, s->dec, b, src, per, ex, &sl->special);
        if (r != BRV_OK) return r;
        for (uint32_t c = 0; c < nc; c++) sl->scale[c] = ldexpf(1.0f, ex[map[c]]);
        size_t i0 = 0;
#if defined(__SSE2__)
        if (nc == 4 && s->ident) /* 8 cells of 4 channels at a time */
            for (; i0 + 8 <= n; i0 += 8) {
                __m128i a = _mm_loadu_si128((const __m128i *)(const void *)(src + i0));
                __m128i b = _mm_loadu_si128((const __m128i *)(const void *)(src + n + i0));
                __m128i c = _mm_loadu_si128((const __m128i *)(const void *)(src + 2 * n + i0));
                __m128i d = _mm_loadu_si128((const __m128i *)(const void *)(src + 3 * n + i0));
                __m128i ablo = _mm_unpacklo_epi16(a, b), abhi = _mm_unpackhi_epi16(a, b);
                __m128i cdlo = _mm_unpacklo_epi16(c, d), cdhi = _mm_unpackhi_epi16(c, d);
                __m128i *o = (__m128i *)(void *)(dst + 4 * i0);
                _mm_storeu_si128(o, _mm_unpacklo_epi32(ablo, cdlo));
                _mm_storeu_si128(o + 1, _mm_unpackhi_epi32(ablo, cdlo));
                _mm_storeu_si128(o + 2, _mm_unpacklo_epi32(abhi, cdhi));
                _mm_storeu_si128(o + 3, _mm_unpackhi_epi32(abhi, cdhi));
            }
#endif
        for (uint32_t c = 0; c < nc; c++)
            for (size_t i = i0; i < n; i++) dst[i * nc + c] = src[map[c] * n + i];
    } else {
        float *src = s->scratch, *dst = sl->data;
        brv_result r = brv_decode_brick(s->v, s->dec, b, src, per);
        if (r != BRV_OK) return r;
        size_t i0 = 0;
#if defined(__SSE2__)
        if (nc == 4 && s->ident) /* 4 cells of 4 channels at a time */
            for (; i0 + 4 <= n; i0 += 4) {
                __m128 a = _mm_loadu_ps(src + i0), b4 = _mm_loadu_ps(src + n + i0);
                __m128 c = _mm_loadu_ps(src + 2 * n + i0), d = _mm_loadu_ps(src + 3 * n + i0);
                _MM_TRANSPOSE4_PS(a, b4, c, d);
                _mm_storeu_ps(dst + 4 * i0, a);
                _mm_storeu_ps(dst + 4 * i0 + 4, b4);
                _mm_storeu_ps(dst + 4 * i0 + 8, c);
                _mm_storeu_ps(dst + 4 * i0 + 12, d);
            }
#endif
        for (uint32_t c = 0; c < nc; c++)
            for (size_t i = i0; i < n; i++) dst[i * nc + c] = src[map[c] * n + i];
    }
    sl->brick = b;
    return BRV_OK;
}

static inline uint32_t set_of(const brv_sampler *s, uint32_t b)
{
    /* A multiplicative (Fibonacci) hash of the brick index, so neighbours along y and z —
     * indices a power of two apart — do not all fall into one set as with index mod count. */
    return (uint32_t)(((uint64_t)(b * 2654435769u) * s->sets) >> 32);
}

static inline brv_result fetch(brv_sampler *s, uint32_t b, const slot **out)
{
    slot *sl;
    if (s->direct) {
        sl = &s->slots[b]; /* room for every brick: one slot each, nothing to replace */
        *out = sl;
        return sl->brick == b ? BRV_OK : fill(s, sl, b);
    }
    /* Two-way set-associative, least recently used out. */
    s->clock++;
    slot *a = &s->slots[set_of(s, b) * (s->count >= 2 ? 2u : 1u)];
    sl = a;
    if (s->count >= 2 && a->brick != b) {
        slot *o = a + 1;
        sl = o->brick == b ? o : (a->used <= o->used ? a : o);
    }
    sl->used = s->clock;
    *out = sl;
    return sl->brick == b ? BRV_OK : fill(s, sl, b);
}

/* The slot holding brick b, or NULL; no replacement and no change to the recency. */
static const slot *peek(const brv_sampler *s, uint32_t b)
{
    if (s->direct) return s->slots[b].brick == b ? &s->slots[b] : NULL;
    const slot *a = &s->slots[set_of(s, b) * (s->count >= 2 ? 2u : 1u)];
    if (a->brick == b) return a;
    if (s->count >= 2 && a[1].brick == b) return a + 1;
    return NULL;
}

/* Continuous cell coordinate u on an axis of n samples → the two neighbours and the weight
 * (with weight 0 both are the lower one, so a neighbour that does not count is not read). */
static inline void axis(double u, uint32_t n, uint32_t *i0, uint32_t *i1, float *t)
{
    if (!(u > 0.0)) u = 0.0; /* also catches NaN */
    if (u > (double)(n - 1)) u = (double)(n - 1);
    uint32_t f = (uint32_t)u; /* u ≥ 0: truncation is the floor */
    *t = (float)(u - (double)f);
    *i0 = f;
    *i1 = f + 1 < n && *t > 0.0f ? f + 1 : f;
}

static inline uint32_t brick_of(const brv_sampler *s, uint32_t i)
{
    return s->shift >= 0 ? i >> s->shift : i / s->g->brick_size;
}

/* The interpolation, one formula for every path (float, in this order, so the SSE2 lanes and
 * the scalar code give the same bits): along x, then y, then z, each a + t·(b − a). */
static inline float lerp8(const float p[8], const float t[3])
{
    float x00 = p[0] + t[0] * (p[1] - p[0]), x10 = p[2] + t[0] * (p[3] - p[2]);
    float x01 = p[4] + t[0] * (p[5] - p[4]), x11 = p[6] + t[0] * (p[7] - p[6]);
    float y0 = x00 + t[1] * (x10 - x00), y1 = x01 + t[1] * (x11 - x01);
    return y0 + t[2] * (y1 - y0);
}

#if defined(__SSE2__)
/* 4 halves (the low 8 bytes) to 4 floats, finite halves only (as brv_f16_to_f32). */
static inline __m128 halves4(__m128i h)
{
    const __m128i keep = _mm_set1_epi32((int)0x8FFFE000u);
    __m128 f = _mm_castsi128_ps(_mm_and_si128(_mm_srai_epi32(_mm_unpacklo_epi16(_mm_setzero_si128(), h), 3), keep));
    return _mm_mul_ps(f, _mm_set1_ps(5.192296858534828e33f)); /* × 2^112 */
}

static inline __m128 lerp8_4(const __m128 p[8], __m128 tx, __m128 ty, __m128 tz)
{
    __m128 x00 = _mm_add_ps(p[0], _mm_mul_ps(tx, _mm_sub_ps(p[1], p[0])));
    __m128 x10 = _mm_add_ps(p[2], _mm_mul_ps(tx, _mm_sub_ps(p[3], p[2])));
    __m128 x01 = _mm_add_ps(p[4], _mm_mul_ps(tx, _mm_sub_ps(p[5], p[4])));
    __m128 x11 = _mm_add_ps(p[6], _mm_mul_ps(tx, _mm_sub_ps(p[7], p[6])));
    __m128 y0 = _mm_add_ps(x00, _mm_mul_ps(ty, _mm_sub_ps(x10, x00)));
    __m128 y1 = _mm_add_ps(x01, _mm_mul_ps(ty, _mm_sub_ps(x11, x01)));
    return _mm_add_ps(y0, _mm_mul_ps(tz, _mm_sub_ps(y1, y0)));
}
#endif

/* Element k of a slot as a float, times the slot's scale for channel c. */
static inline float elem(const brv_sampler *s, const slot *sl, size_t k, uint32_t c)
{
    return s->half ? brv_f16_to_f32(((const uint16_t *)sl->data)[k]) * sl->scale[c] : ((const float *)sl->data)[k];
}

static brv_result trilinear(brv_sampler *s, const double u[3], float *out)
{
    const brv_grid_info *g = s->g;
    uint32_t i[3][2], bc[3][2], lc[3][2];
    float t[3];
    uint32_t bs = g->brick_size;
    for (int a = 0; a < 3; a++) {
        axis(u[a], g->cells[a], &i[a][0], &i[a][1], &t[a]);
        for (int k = 0; k < 2; k++) {
            bc[a][k] = brick_of(s, i[a][k]);
            lc[a][k] = i[a][k] - bc[a][k] * bs;
        }
    }
    uint32_t nc = s->nc;
    float vals[8][BRV_MAX_CHANNELS];
    const float *pv[8]; /* each corner's nc values, scaled */
    const slot *sl = NULL;
    size_t ck[8];
    bool one = bc[0][0] == bc[0][1] && bc[1][0] == bc[1][1] && bc[2][0] == bc[2][1];
    if (one) {
        /* All eight corners in one brick (most samples): one lookup, read in place. */
        brv_result r = fetch(s, bc[0][0] + g->bricks[0] * (bc[1][0] + g->bricks[1] * bc[2][0]), &sl);
        if (r != BRV_OK) return r;
        for (int k = 0; k < 8; k++)
            ck[k] = nc * (size_t)lc[0][k & 1] + sl->sy * lc[1][(k >> 1) & 1] + sl->sz * lc[2][k >> 2];
        if (!s->half)
            for (int k = 0; k < 8; k++) pv[k] = (const float *)sl->data + ck[k];
    }
    if (!one || (s->half && sl->special)) {
        /* Corners in several bricks (each may evict another's slot, so their values are copied
         * at once), or halves with an infinity or NaN: through elem. */
        for (int k = 0; k < 8; k++) {
            const slot *cs = sl;
            if (!one) {
                int kx = k & 1, ky = (k >> 1) & 1, kz = k >> 2;
                brv_result r = fetch(s, bc[0][kx] + g->bricks[0] * (bc[1][ky] + g->bricks[1] * bc[2][kz]), &cs);
                if (r != BRV_OK) return r;
                ck[k] = nc * (size_t)lc[0][kx] + cs->sy * lc[1][ky] + cs->sz * lc[2][kz];
            }
            uint32_t c0 = 0;
#if defined(__SSE2__)
            if (s->half && !cs->special) /* 4 channels at a time, the bits of elem (finite halves) */
                for (; c0 + 4 <= nc; c0 += 4) {
                    const uint16_t *h = (const uint16_t *)cs->data + ck[k] + c0;
                    __m128 f = halves4(_mm_loadl_epi64((const __m128i *)(const void *)h));
                    _mm_storeu_ps(vals[k] + c0, _mm_mul_ps(f, _mm_loadu_ps(cs->scale + c0)));
                }
#endif
            for (uint32_t c = c0; c < nc; c++) vals[k][c] = elem(s, cs, ck[k] + c, c);
            pv[k] = vals[k];
        }
        sl = NULL; /* values are in pv */
    }
    uint32_t c = 0;
#if defined(__SSE2__)
    __m128 tx = _mm_set1_ps(t[0]), ty = _mm_set1_ps(t[1]), tz = _mm_set1_ps(t[2]);
    for (; c + 4 <= nc; c += 4) {
        __m128 p[8];
        if (sl && s->half) {
            __m128 sc = _mm_loadu_ps(sl->scale + c);
            for (int k = 0; k < 8; k++) {
                const uint16_t *h = (const uint16_t *)sl->data + ck[k] + c;
                p[k] = _mm_mul_ps(halves4(_mm_loadl_epi64((const __m128i *)(const void *)h)), sc);
            }
        } else {
            for (int k = 0; k < 8; k++) p[k] = _mm_loadu_ps(pv[k] + c);
        }
        _mm_storeu_ps(out + c, lerp8_4(p, tx, ty, tz));
    }
#endif
    for (; c < nc; c++) {
        float p[8];
        for (int k = 0; k < 8; k++) p[k] = sl && s->half ? elem(s, sl, ck[k] + c, c) : pv[k][c];
        out[c] = lerp8(p, t);
    }
    return BRV_OK;
}

#if defined(__SSE2__)
/* lerp8 of one channel with the corners in two vectors, a = (p0, p2, p4, p6) and b = (p1, p3,
 * p5, p7): the same operations lane by lane (x, then y, then z), so the same bits. */
static inline float lerp8_lanes(__m128 a, __m128 b, const float t[3])
{
    __m128 x = _mm_add_ps(a, _mm_mul_ps(_mm_set1_ps(t[0]), _mm_sub_ps(b, a))); /* x00 x10 x01 x11 */
    __m128 lo = _mm_shuffle_ps(x, x, _MM_SHUFFLE(2, 0, 2, 0)), hi = _mm_shuffle_ps(x, x, _MM_SHUFFLE(3, 1, 3, 1));
    __m128 y = _mm_add_ps(lo, _mm_mul_ps(_mm_set1_ps(t[1]), _mm_sub_ps(hi, lo))); /* y0 y1 */
    __m128 y1 = _mm_shuffle_ps(y, y, _MM_SHUFFLE(1, 1, 1, 1));
    return _mm_cvtss_f32(_mm_add_ss(y, _mm_mul_ss(_mm_set_ss(t[2]), _mm_sub_ss(y1, y))));
}

/* The eight corners of a sample in one slot: cell at, neighbours ox, oy, oz elements on (0 for
 * a neighbour of weight 0), every channel: float slots, and halves whose channel count is not
 * a multiple of four (the rest one by one). As trilinear computes them, so the same bits. */
BRV_NOINLINE static void corners_any(const brv_sampler *s, const slot *sl, size_t at, size_t ox, size_t oy, size_t oz,
                                     const float t[3], float *out)
{
    size_t nc = s->nc, c = 0;
    __m128 tx = _mm_set1_ps(t[0]), ty = _mm_set1_ps(t[1]), tz = _mm_set1_ps(t[2]), p[8];
    if (s->half) {
        const uint16_t *h0 = (const uint16_t *)sl->data + at;
        for (; c + 4 <= nc; c += 4) {
            const uint16_t *h = h0 + c;
            __m128 sc = _mm_loadu_ps(sl->scale + c);
            const size_t off[8] = {0, ox, oy, oy + ox, oz, oz + ox, oz + oy, oz + oy + ox};
            for (int k = 0; k < 8; k++)
                p[k] = _mm_mul_ps(halves4(_mm_loadl_epi64((const __m128i *)(const void *)(h + off[k]))), sc);
            _mm_storeu_ps(out + c, lerp8_4(p, tx, ty, tz));
        }
        for (; c < nc; c++) { /* one channel: the eight corners in the lanes of one vector */
            const uint16_t *h = h0 + c;
            __m128i hv = _mm_set_epi16((short)h[oz + oy + ox], (short)h[oz + ox], (short)h[oy + ox], (short)h[ox],
                                       (short)h[oz + oy], (short)h[oz], (short)h[oy], (short)h[0]);
            __m128 sc = _mm_set1_ps(sl->scale[c]);
            out[c] = lerp8_lanes(_mm_mul_ps(halves4(hv), sc), _mm_mul_ps(halves4(_mm_srli_si128(hv, 8)), sc), t);
        }
        return;
    }
    const float *f0 = (const float *)sl->data + at;
    for (; c + 4 <= nc; c += 4) {
        const float *q = f0 + c;
        p[0] = _mm_loadu_ps(q);
        p[1] = _mm_loadu_ps(q + ox);
        p[2] = _mm_loadu_ps(q + oy);
        p[3] = _mm_loadu_ps(q + oy + ox);
        p[4] = _mm_loadu_ps(q + oz);
        p[5] = _mm_loadu_ps(q + oz + ox);
        p[6] = _mm_loadu_ps(q + oz + oy);
        p[7] = _mm_loadu_ps(q + oz + oy + ox);
        _mm_storeu_ps(out + c, lerp8_4(p, tx, ty, tz));
    }
    for (; c < nc; c++) {
        const float *q = f0 + c;
        out[c] = lerp8_lanes(_mm_set_ps(q[oz + oy], q[oz], q[oy], q[0]), _mm_set_ps(q[oz + oy + ox], q[oz + ox], q[oy + ox], q[ox]), t);
    }
}

/* trilinear for the common case in few instructions — brick sides a power of two, all eight
 * corners in one brick (without infinities or NaNs when it holds halves) — else trilinear
 * itself. The same operations on the same values in the same order (four channels at a time,
 * the rest one by one; the corner of weight 0 is the lower one, read twice), so the same
 * bits. A sample whose cells are in memory, not in the caches, waits on them: the fewer
 * instructions a sample takes, the more of the next samples' reads the processor can start
 * while it waits. Halves in fours are inline; float slots and other channel counts go to
 * corners_any. */
static inline brv_result trilinear_fast(brv_sampler *s, const double u[3], float *out)
{
    const brv_grid_info *g = s->g;
    if (s->shift < 0) return trilinear(s, u, out);
    uint32_t f[3], d[3], same = 1;
    float t[3];
    for (int a = 0; a < 3; a++) {
        uint32_t i1;
        axis(u[a], g->cells[a], &f[a], &i1, &t[a]);
        d[a] = i1 - f[a];
        same &= (f[a] >> s->shift) == (i1 >> s->shift);
    }
    uint32_t sh = (uint32_t)s->shift, mask = (1u << sh) - 1u;
    if (!same) {
        /* Corners in several bricks (about one sample in five with bricks of 16): four halves
         * a corner, each converted as soon as its brick is fetched (a later fetch may evict
         * it), in trilinear's order; anything else is trilinear's. */
        if (s->nc == 1) { /* one channel, halves or floats: a value a corner */
            float v[8];
            for (int k = 0; k < 8; k++) {
                uint32_t x = f[0] + (k & 1) * d[0], y = f[1] + ((k >> 1) & 1) * d[1], z = f[2] + (k >> 2) * d[2];
                const slot *cs;
                brv_result r = fetch(s, (x >> sh) + g->bricks[0] * ((y >> sh) + g->bricks[1] * (z >> sh)), &cs);
                if (r != BRV_OK) return r;
                size_t at = (size_t)(x & mask) + cs->sy * (y & mask) + cs->sz * (z & mask);
                if (s->half && cs->special) return trilinear(s, u, out);
                v[k] = s->half ? brv_f16_to_f32(((const uint16_t *)cs->data)[at]) * cs->scale[0]
                               : ((const float *)cs->data)[at];
            }
            out[0] = lerp8(v, t);
            return BRV_OK;
        }
        if (!s->half || s->nc != 4) return trilinear(s, u, out);
        __m128 p[8];
        for (int k = 0; k < 8; k++) {
            uint32_t x = f[0] + (k & 1) * d[0], y = f[1] + ((k >> 1) & 1) * d[1], z = f[2] + (k >> 2) * d[2];
            const slot *cs;
            brv_result r = fetch(s, (x >> sh) + g->bricks[0] * ((y >> sh) + g->bricks[1] * (z >> sh)), &cs);
            if (r != BRV_OK) return r;
            if (cs->special) return trilinear(s, u, out);
            const uint16_t *h = (const uint16_t *)cs->data + 4 * (size_t)(x & mask) + cs->sy * (y & mask) +
                                cs->sz * (z & mask);
            p[k] = _mm_mul_ps(halves4(_mm_loadl_epi64((const __m128i *)(const void *)h)), _mm_loadu_ps(cs->scale));
        }
        _mm_storeu_ps(out, lerp8_4(p, _mm_set1_ps(t[0]), _mm_set1_ps(t[1]), _mm_set1_ps(t[2])));
        return BRV_OK;
    }
    const slot *sl;
    brv_result r = fetch(s, (f[0] >> sh) + g->bricks[0] * ((f[1] >> sh) + g->bricks[1] * (f[2] >> sh)), &sl);
    if (r != BRV_OK) return r;
    if (s->half && sl->special) return trilinear(s, u, out);
    size_t nc = s->nc;
    size_t at = nc * (f[0] & mask) + sl->sy * (f[1] & mask) + sl->sz * (f[2] & mask);
    size_t ox = nc * d[0], oy = sl->sy * d[1], oz = sl->sz * d[2];
    if (!s->half || nc % 4 != 0) {
        corners_any(s, sl, at, ox, oy, oz, t, out);
        return BRV_OK;
    }
    const uint16_t *h0 = (const uint16_t *)sl->data + at;
    __m128 tx = _mm_set1_ps(t[0]), ty = _mm_set1_ps(t[1]), tz = _mm_set1_ps(t[2]);
    for (size_t c = 0; c < nc; c += 4) {
        const uint16_t *h = h0 + c;
        __m128 sc = _mm_loadu_ps(sl->scale + c), p[8];
        p[0] = _mm_mul_ps(halves4(_mm_loadl_epi64((const __m128i *)(const void *)h)), sc);
        p[1] = _mm_mul_ps(halves4(_mm_loadl_epi64((const __m128i *)(const void *)(h + ox))), sc);
        p[2] = _mm_mul_ps(halves4(_mm_loadl_epi64((const __m128i *)(const void *)(h + oy))), sc);
        p[3] = _mm_mul_ps(halves4(_mm_loadl_epi64((const __m128i *)(const void *)(h + oy + ox))), sc);
        p[4] = _mm_mul_ps(halves4(_mm_loadl_epi64((const __m128i *)(const void *)(h + oz))), sc);
        p[5] = _mm_mul_ps(halves4(_mm_loadl_epi64((const __m128i *)(const void *)(h + oz + ox))), sc);
        p[6] = _mm_mul_ps(halves4(_mm_loadl_epi64((const __m128i *)(const void *)(h + oz + oy))), sc);
        p[7] = _mm_mul_ps(halves4(_mm_loadl_epi64((const __m128i *)(const void *)(h + oz + oy + ox))), sc);
        _mm_storeu_ps(out + c, lerp8_4(p, tx, ty, tz));
    }
    return BRV_OK;
}
#else
#define trilinear_fast trilinear
#endif

/* Cell coordinates of a world-grid or probe-grid position. */
static inline void world_coords(const brv_sampler *s, const double pos[3], double u[3])
{
    for (int a = 0; a < 3; a++) u[a] = pos[a] * s->mul[a] + s->add[a];
}

brv_result brv_sample_world(brv_sampler *s, const double pos[3], float *out)
{
    if (!s || !pos || !out) return BRV_E_ARGUMENT;
    if (s->g->kind == BRV_GRID_FRUSTUM) return BRV_E_ARGUMENT;
    if (!isfinite(pos[0]) || !isfinite(pos[1]) || !isfinite(pos[2])) return BRV_E_ARGUMENT;
    double u[3];
    world_coords(s, pos, u);
    return trilinear_fast(s, u, out);
}

brv_result brv_sample_frustum(brv_sampler *s, double px, double py, double depth, float *out)
{
    if (!s || !out) return BRV_E_ARGUMENT;
    const brv_grid_info *g = s->g;
    if (g->kind != BRV_GRID_FRUSTUM || !g->slice_depths) return BRV_E_ARGUMENT;
    if (!isfinite(px) || !isfinite(py) || !isfinite(depth)) return BRV_E_ARGUMENT;
    const double *d = g->slice_depths;
    uint32_t nz = g->cells[2];
    /* Slice k's value sits at its middle depth m_k; find m_k ≤ depth < m_k+1 by bisection. */
    double w;
    double m0 = 0.5 * (d[0] + d[1]), mlast = 0.5 * (d[nz - 1] + d[nz]);
    if (nz == 1 || depth <= m0) w = 0.0;
    else if (depth >= mlast) w = nz - 1;
    else {
        uint32_t lo = 0, hi = nz - 1; /* m_lo ≤ depth < m_hi */
        while (hi - lo > 1) {
            uint32_t mid = lo + (hi - lo) / 2;
            if (0.5 * (d[mid] + d[mid + 1]) <= depth) lo = mid;
            else hi = mid;
        }
        double ml = 0.5 * (d[lo] + d[lo + 1]), mh = 0.5 * (d[hi] + d[hi + 1]);
        w = lo + (depth - ml) / (mh - ml);
    }
    double u[3] = {px - 0.5, py - 0.5, w};
    return trilinear(s, u, out);
}

/* The cell holding the lower corner of position pos's sample, per axis. */
static inline void lower_cell(const brv_sampler *s, const double pos[3], uint32_t c[3])
{
    double u[3];
    world_coords(s, pos, u);
    for (int a = 0; a < 3; a++) {
        double v = u[a] > 0.0 ? u[a] : 0.0;
        c[a] = v < (double)(s->g->cells[a] - 1) ? (uint32_t)v : s->g->cells[a] - 1;
    }
}

/* Samples points first..first+count of pos in order of the brick that holds their lower
 * corner (a counting sort that also copies the positions into that order), so each brick's
 * cells are read from memory once while its points are sampled and the positions are read in
 * sequence; every point still gets exactly what brv_sample_world gives it. The results of the
 * points a few places on and the corner rows of nearer ones are prefetched (random points are
 * otherwise bound by memory latency; hints only). */
static brv_result batch_sorted(brv_sampler *s, size_t count, const double *pos, float *out, uint32_t *key,
                               uint32_t *order, uint32_t *start, double *spos)
{
    const brv_grid_info *g = s->g;
    uint32_t nc = s->nc, bs = g->brick_size, nb = g->brick_count;
    size_t es = s->half ? sizeof(uint16_t) : sizeof(float);
    memset(start, 0, ((size_t)nb + 1) * sizeof *start);
    for (size_t i = 0; i < count; i++) {
        uint32_t c[3];
        lower_cell(s, pos + 3 * i, c);
        key[i] = brick_of(s, c[0]) + g->bricks[0] * (brick_of(s, c[1]) + g->bricks[1] * brick_of(s, c[2]));
        start[key[i] + 1]++;
    }
    for (uint32_t b = 0; b < nb; b++) start[b + 1] += start[b];
    for (size_t i = 0; i < count; i++) {
        uint32_t d = start[key[i]]++;
        order[d] = (uint32_t)i;
        memcpy(spos + 3 * (size_t)d, pos + 3 * i, 3 * sizeof(double));
    }
    enum { NEAR = 6, FAR = 16 };
    uint32_t bnear = 0;
    for (size_t k = 0; k < count; k++) {
#if defined(__GNUC__)
        if (k + FAR < count) __builtin_prefetch(out + (size_t)nc * order[k + FAR], 1);
        if (k + NEAR < count) {
            while (start[bnear] <= k + NEAR) bnear++;
            const slot *sl = peek(s, bnear);
            if (sl) {
                uint32_t c[3];
                lower_cell(s, spos + 3 * (k + NEAR), c);
                const uint8_t *base = (const uint8_t *)sl->data +
                                      es * (nc * (size_t)(c[0] % bs) + sl->sy * (c[1] % bs) + sl->sz * (c[2] % bs));
                __builtin_prefetch(base);
                __builtin_prefetch(base + es * sl->sy);
                __builtin_prefetch(base + es * sl->sz);
                __builtin_prefetch(base + es * (sl->sy + sl->sz));
            }
        }
#endif
        double u[3];
        world_coords(s, spos + 3 * k, u);
        brv_result r = trilinear_fast(s, u, out + (size_t)nc * order[k]);
        if (r != BRV_OK) return r;
    }
    return BRV_OK;
}

brv_result brv_sample_world_batch(brv_sampler *s, size_t count, const double *pos, float *out)
{
    if (!s || (count && (!pos || !out))) return BRV_E_ARGUMENT;
    const brv_grid_info *g = s->g;
    if (g->kind == BRV_GRID_FRUSTUM) return BRV_E_ARGUMENT;
    uint32_t nc = s->nc;
    /* Points up to the first non-finite one are sampled; that one is the fault. */
    size_t good = 0;
    while (good < count && isfinite(pos[3 * good]) && isfinite(pos[3 * good + 1]) && isfinite(pos[3 * good + 2]))
        good++;
    enum { CHUNK = 1u << 20, SMALL = 256 };
    size_t chunk = good < CHUNK ? good : CHUNK;
    const brv_allocator *a = brv_volume_allocator(s->v);
    uint32_t *key = NULL, *order = NULL, *start = NULL;
    double *spos = NULL;
    if (good >= SMALL && g->brick_count > 1) {
        key = brv_alloc(a, chunk * sizeof *key);
        order = brv_alloc(a, chunk * sizeof *order);
        start = brv_alloc(a, ((size_t)g->brick_count + 1) * sizeof *start);
        spos = brv_alloc(a, chunk * 3 * sizeof *spos);
    }
    brv_result r = BRV_OK;
    if (key && order && start && spos) {
        for (size_t at = 0; at < good && r == BRV_OK; at += chunk) {
            size_t m = good - at < chunk ? good - at : chunk;
            r = batch_sorted(s, m, pos + 3 * at, out + (size_t)nc * at, key, order, start, spos);
        }
    } else {
        /* Few points, one brick, or no memory for the sort: in order. */
        for (size_t i = 0; i < good && r == BRV_OK; i++) r = brv_sample_world(s, pos + 3 * i, out + (size_t)nc * i);
    }
    brv_dealloc(a, key);
    brv_dealloc(a, order);
    brv_dealloc(a, start);
    brv_dealloc(a, spos);
    if (r == BRV_OK && good < count) r = BRV_E_ARGUMENT;
    return r;
}
