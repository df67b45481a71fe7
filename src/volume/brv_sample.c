/* Random access: trilinear sampling through a direct-mapped cache of decoded bricks. Built on
 * the public decoding calls only. */
#include <math.h>
#include <stdbool.h>

#include "brv_internal.h"

typedef struct slot {
    uint32_t brick; /* UINT32_MAX: empty */
    uint64_t used;  /* last use, for replacement within a set */
    uint32_t ext[3];
    size_t n;
    float *data; /* interleaved: data[cell·channels + c], so a sample's corners share cache lines */
} slot;

struct brv_sampler {
    const brv_volume *v;
    const brv_grid_info *g;
    bool direct; /* one slot per brick */
    brv_decoder *dec;
    uint32_t count;
    slot *slots;
    float *pool;
    float *scratch; /* one decoded brick, channel-major */
    uint32_t sets;  /* count / 2 sets of two slots (one set of one when count is 1) */
    uint64_t clock;
};

brv_result brv_sampler_create(const brv_volume *v, uint32_t cache_bricks, brv_sampler **out)
{
    if (!v || !out) return BRV_E_ARGUMENT;
    if (cache_bricks == 0) cache_bricks = 64;
    const brv_grid_info *g = brv_grid(v);
    if (cache_bricks > g->brick_count) cache_bricks = g->brick_count;
    size_t per = brv_brick_size(v), total;
    if (per && (size_t)cache_bricks > (size_t)-1 / per / sizeof(float)) return BRV_E_NOMEM;
    total = per * cache_bricks;
    const brv_allocator *a = brv_volume_allocator(v);
    brv_sampler *s = brv_alloc(a, sizeof *s);
    if (!s) return BRV_E_NOMEM;
    memset(s, 0, sizeof *s);
    s->v = v;
    s->g = g;
    s->count = cache_bricks;
    s->direct = cache_bricks == g->brick_count;
    s->slots = brv_alloc(a, cache_bricks * sizeof *s->slots);
    s->pool = brv_alloc(a, total * sizeof(float));
    s->scratch = brv_alloc(a, per * sizeof(float));
    s->sets = cache_bricks >= 2 ? cache_bricks / 2 : 1;
    brv_result r = brv_decoder_create(v, &s->dec);
    if (r == BRV_OK && (!s->slots || !s->pool || !s->scratch)) r = BRV_E_NOMEM;
    if (r != BRV_OK) {
        brv_sampler_free(s);
        return r;
    }
    for (uint32_t i = 0; i < cache_bricks; i++) {
        s->slots[i].brick = UINT32_MAX;
        s->slots[i].data = s->pool + (size_t)i * per;
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
    brv_dealloc(a, s->scratch);
    brv_dealloc(a, s);
}

static brv_result fetch(brv_sampler *s, uint32_t b, const slot **out)
{
    /* Two-way set-associative, least recently used out. The set comes from a multiplicative
     * (Fibonacci) hash of the brick index, so neighbours along y and z — indices a power of
     * two apart — do not all fall into one set as they would with index mod count. */
    slot *a, *sl;
    s->clock++;
    if (s->direct) {
        sl = a = &s->slots[b]; /* room for every brick: one slot each */
    } else {
        uint32_t set = (uint32_t)(((uint64_t)(b * 2654435769u) * s->sets) >> 32);
        sl = a = &s->slots[set * (s->count >= 2 ? 2u : 1u)];
    }
    if (s->count >= 2 && !s->direct && a->brick != b) {
        slot *o = a + 1;
        sl = o->brick == b ? o : (a->used <= o->used ? a : o);
    }
    sl->used = s->clock;
    if (sl->brick != b) {
        uint32_t o[3];
        sl->brick = UINT32_MAX;
        brv_brick_extent(s->v, b, o, sl->ext);
        sl->n = (size_t)sl->ext[0] * sl->ext[1] * sl->ext[2];
        brv_result r = brv_decode_brick(s->v, s->dec, b, s->scratch, brv_brick_size(s->v));
        if (r != BRV_OK) return r;
        uint32_t nc = s->g->channel_count;
        for (uint32_t c = 0; c < nc; c++)
            for (size_t i = 0; i < sl->n; i++) sl->data[i * nc + c] = s->scratch[c * sl->n + i];
        sl->brick = b;
    }
    *out = sl;
    return BRV_OK;
}

/* The slot holding brick b, or NULL; no replacement and no change to the recency. */
static const slot *peek(const brv_sampler *s, uint32_t b)
{
    if (s->direct) return s->slots[b].brick == b ? &s->slots[b] : NULL;
    uint32_t set = (uint32_t)(((uint64_t)(b * 2654435769u) * s->sets) >> 32);
    const slot *a = &s->slots[set * (s->count >= 2 ? 2u : 1u)];
    if (a->brick == b) return a;
    if (s->count >= 2 && a[1].brick == b) return a + 1;
    return NULL;
}

/* Continuous cell coordinate u on an axis of n samples → the two neighbours and the weight. */
static void axis(double u, uint32_t n, uint32_t *i0, uint32_t *i1, double *t)
{
    if (!(u > 0.0)) u = 0.0; /* also catches NaN */
    if (u > (double)(n - 1)) u = (double)(n - 1);
    double f = floor(u);
    *i0 = (uint32_t)f;
    *i1 = *i0 + 1 < n ? *i0 + 1 : *i0;
    *t = u - f;
}

static brv_result trilinear(brv_sampler *s, const double u[3], float *out)
{
    const brv_grid_info *g = s->g;
    uint32_t i[3][2], bc[3][2], lc[3][2];
    double t[3];
    uint32_t bs = g->brick_size;
    for (int a = 0; a < 3; a++) {
        axis(u[a], g->cells[a], &i[a][0], &i[a][1], &t[a]);
        for (int k = 0; k < 2; k++) {
            bc[a][k] = i[a][k] / bs; /* six divisions per sample, not 48 */
            lc[a][k] = i[a][k] - bc[a][k] * bs;
        }
    }
    uint32_t nc = g->channel_count;
    double acc[BRV_MAX_CHANNELS];
    for (uint32_t c = 0; c < nc; c++) acc[c] = 0.0;
    if (bc[0][0] == bc[0][1] && bc[1][0] == bc[1][1] && bc[2][0] == bc[2][1]) {
        /* All eight corners in one brick (most samples): one lookup. */
        const slot *sl;
        brv_result r = fetch(s, bc[0][0] + g->bricks[0] * (bc[1][0] + g->bricks[1] * bc[2][0]), &sl);
        if (r != BRV_OK) return r;
        size_t sx = nc, sy = (size_t)nc * sl->ext[0], sz = sy * sl->ext[1];
        const float *base = sl->data + lc[0][0] * sx + lc[1][0] * sy + lc[2][0] * sz;
        size_t dx = (lc[0][1] - lc[0][0]) * sx, dy = (lc[1][1] - lc[1][0]) * sy, dz = (lc[2][1] - lc[2][0]) * sz;
        double w00 = (1 - t[1]) * (1 - t[2]), w10 = t[1] * (1 - t[2]), w01 = (1 - t[1]) * t[2], w11 = t[1] * t[2];
        for (uint32_t c = 0; c < nc; c++) {
            const float *p = base + c;
            double x00 = p[0] + t[0] * (p[dx] - p[0]);
            double x10 = p[dy] + t[0] * (p[dy + dx] - p[dy]);
            double x01 = p[dz] + t[0] * (p[dz + dx] - p[dz]);
            double x11 = p[dz + dy] + t[0] * (p[dz + dy + dx] - p[dz + dy]);
            acc[c] = w00 * x00 + w10 * x10 + w01 * x01 + w11 * x11;
        }
    } else {
        for (int corner = 0; corner < 8; corner++) {
            int kx = corner & 1, ky = (corner >> 1) & 1, kz = corner >> 2;
            double wgt = (kx ? t[0] : 1.0 - t[0]) * (ky ? t[1] : 1.0 - t[1]) * (kz ? t[2] : 1.0 - t[2]);
            if (wgt == 0.0) continue;
            uint32_t b = bc[0][kx] + g->bricks[0] * (bc[1][ky] + g->bricks[1] * bc[2][kz]);
            const slot *sl;
            brv_result r = fetch(s, b, &sl);
            if (r != BRV_OK) return r;
            const float *p = sl->data + nc * (lc[0][kx] + (size_t)sl->ext[0] * (lc[1][ky] + (size_t)sl->ext[1] * lc[2][kz]));
            for (uint32_t c = 0; c < nc; c++) acc[c] += wgt * p[c];
        }
    }
    for (uint32_t c = 0; c < nc; c++) out[c] = (float)acc[c];
    return BRV_OK;
}

brv_result brv_sample_world(brv_sampler *s, const double pos[3], float *out)
{
    if (!s || !pos || !out) return BRV_E_ARGUMENT;
    const brv_grid_info *g = s->g;
    if (g->kind == BRV_GRID_FRUSTUM) return BRV_E_ARGUMENT;
    double u[3];
    for (int a = 0; a < 3; a++) {
        if (!isfinite(pos[a])) return BRV_E_ARGUMENT;
        double span = g->bounds_max[a] - g->bounds_min[a], rel = pos[a] - g->bounds_min[a];
        if (g->kind == BRV_GRID_WORLD) u[a] = rel / span * g->cells[a] - 0.5;
        else u[a] = g->cells[a] > 1 && span > 0.0 ? rel / span * (g->cells[a] - 1) : 0.0;
    }
    return trilinear(s, u, out);
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

/* Cell coordinates of a world-grid position (as brv_sample_world computes them). */
static void world_coords(const brv_grid_info *g, const double pos[3], double u[3])
{
    for (int a = 0; a < 3; a++) {
        double span = g->bounds_max[a] - g->bounds_min[a], rel = pos[a] - g->bounds_min[a];
        if (g->kind == BRV_GRID_WORLD) u[a] = rel / span * g->cells[a] - 0.5;
        else u[a] = g->cells[a] > 1 && span > 0.0 ? rel / span * (g->cells[a] - 1) : 0.0;
    }
}

/* Samples points first..first+count of pos in order of the brick that holds their lower
 * corner (a counting sort), so each brick is fetched once while its points are sampled, out of
 * the cache's fast levels; every point still gets exactly what brv_sample_world gives it. */
static brv_result batch_sorted(brv_sampler *s, size_t count, const double *pos, float *out, uint32_t *key,
                               uint32_t *order, uint32_t *start)
{
    const brv_grid_info *g = s->g;
    uint32_t nc = g->channel_count, bs = g->brick_size, nb = g->brick_count;
    memset(start, 0, ((size_t)nb + 1) * sizeof *start);
    for (size_t i = 0; i < count; i++) {
        double u[3];
        uint32_t c[3];
        world_coords(g, pos + 3 * i, u);
        for (int a = 0; a < 3; a++) {
            double v = u[a] > 0.0 ? u[a] : 0.0;
            c[a] = v < (double)(g->cells[a] - 1) ? (uint32_t)v : g->cells[a] - 1;
        }
        key[i] = c[0] / bs + g->bricks[0] * (c[1] / bs + g->bricks[1] * (c[2] / bs));
        start[key[i] + 1]++;
    }
    for (uint32_t b = 0; b < nb; b++) start[b + 1] += start[b];
    for (size_t i = 0; i < count; i++) order[start[key[i]]++] = (uint32_t)i;
    enum { AHEAD = 12 };
    for (size_t k = 0; k < count; k++) {
#if defined(__GNUC__)
        /* Random points over a large cached volume are bound by memory latency: prefetch the
         * corner rows of the point AHEAD places on when its brick is cached (a hint only). */
        if (k + AHEAD < count) {
            size_t j = order[k + AHEAD];
            const slot *sl = peek(s, key[j]);
            if (sl) {
                double u[3];
                uint32_t c[3];
                world_coords(g, pos + 3 * j, u);
                for (int a = 0; a < 3; a++) {
                    double v = u[a] > 0.0 ? u[a] : 0.0;
                    c[a] = v < (double)(g->cells[a] - 1) ? (uint32_t)v : g->cells[a] - 1;
                }
                size_t sy = (size_t)nc * sl->ext[0], sz = sy * sl->ext[1];
                const float *base = sl->data + nc * (size_t)(c[0] % bs) + sy * (c[1] % bs) + sz * (c[2] % bs);
                __builtin_prefetch(base);
                __builtin_prefetch(base + sy);
                __builtin_prefetch(base + sz);
                __builtin_prefetch(base + sy + sz);
            }
        }
#endif
        size_t i = order[k];
        brv_result r = brv_sample_world(s, pos + 3 * i, out + (size_t)nc * i);
        if (r != BRV_OK) return r;
    }
    return BRV_OK;
}

brv_result brv_sample_world_batch(brv_sampler *s, size_t count, const double *pos, float *out)
{
    if (!s || (count && (!pos || !out))) return BRV_E_ARGUMENT;
    const brv_grid_info *g = s->g;
    if (g->kind == BRV_GRID_FRUSTUM) return BRV_E_ARGUMENT;
    uint32_t nc = g->channel_count;
    /* Points up to the first non-finite one are sampled; that one is the fault. */
    size_t good = 0;
    while (good < count && isfinite(pos[3 * good]) && isfinite(pos[3 * good + 1]) && isfinite(pos[3 * good + 2]))
        good++;
    enum { CHUNK = 1u << 20, SMALL = 256 };
    size_t chunk = good < CHUNK ? good : CHUNK;
    const brv_allocator *a = brv_volume_allocator(s->v);
    uint32_t *key = NULL, *order = NULL, *start = NULL;
    if (good >= SMALL && g->brick_count > 1) {
        key = brv_alloc(a, chunk * sizeof *key);
        order = brv_alloc(a, chunk * sizeof *order);
        start = brv_alloc(a, ((size_t)g->brick_count + 1) * sizeof *start);
    }
    brv_result r = BRV_OK;
    if (key && order && start) {
        for (size_t at = 0; at < good && r == BRV_OK; at += chunk) {
            size_t m = good - at < chunk ? good - at : chunk;
            r = batch_sorted(s, m, pos + 3 * at, out + (size_t)nc * at, key, order, start);
        }
    } else {
        /* Few points, one brick, or no memory for the sort: in order. */
        for (size_t i = 0; i < good && r == BRV_OK; i++) r = brv_sample_world(s, pos + 3 * i, out + (size_t)nc * i);
    }
    brv_dealloc(a, key);
    brv_dealloc(a, order);
    brv_dealloc(a, start);
    if (r == BRV_OK && good < count) r = BRV_E_ARGUMENT;
    return r;
}
