/* Sky light at a point, blocked by geometry, projected on SH bands 0–1.
 *
 * The unoccluded sky's projection is exact (closed form below). Occlusion is estimated with a
 * few rays per call against the scene's BVH: a blocked ray subtracts its share of the
 * projection, so an open point costs nothing in noise and a point with every ray blocked
 * (inside a closed room) gets exactly zero. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "base/cpu.h"
#include "base/lds.h"
#include "base/sh.h"
#include "base/threads.h"
#include "shadow/shadow_internal.h"
#include "shadow/sky.h"
#include "voxel/voxelize.h"

/* SPEC.md: L(ω) = H + (Z − H)·max(y, 0) + (G − H)·max(−y, 0). With a = Z − H, b = G − H and the
 * hemisphere integrals ∫_{y>0} dω = 2π, ∫_{y>0} y dω = π, ∫_{y>0} y² dω = 2π/3 (elementary:
 * dω = dy dφ for y the polar cosine), the projections on Y00 = C0 and Y1,−1 = C1·y are
 *   ∫ L Y00 dω  = C0·(4πH + πa + πb)
 *   ∫ L Y1−1 dω = C1·(2π/3)·(a − b)
 * and those on C1·z, C1·x vanish by symmetry about the y axis. */
void brm_sky_projection(const brm_sky *sky, double out[3][4])
{
    memset(out, 0, sizeof(double) * 12);
    if (!sky->present) return;
    double H[3] = {sky->horizon.x, sky->horizon.y, sky->horizon.z};
    double Z[3] = {sky->zenith.x, sky->zenith.y, sky->zenith.z};
    double G[3] = {sky->ground.x, sky->ground.y, sky->ground.z};
    for (int c = 0; c < 3; c++) {
        double a = Z[c] - H[c], b = G[c] - H[c];
        out[c][0] = BRM_SH_C0 * BRM_PI * (4.0 * H[c] + a + b);
        out[c][1] = BRM_SH_C1 * (2.0 * BRM_PI / 3.0) * (a - b);
    }
}

/* Per thread, for each cell of a grid over the ray directions (equal-area bands in y by
 * sectors in azimuth), the BVH leaf that last blocked a ray in that cell: the rays of
 * neighbouring points in one direction mostly end on the same wall or roof, and a hint changes
 * no answer (brm_bvh_occluded_hint), only how soon it is found. */
#define SKY_HINT_ROWS 16u
#define SKY_HINT_COLS 32u
#define SKY_HINTS (SKY_HINT_ROWS * SKY_HINT_COLS)
static _Thread_local uint32_t sky_hint[SKY_HINTS];
static _Thread_local const brm_bvh *sky_hint_bvh;

/* Ray k of n for one call: a spherical Fibonacci set (one ray per equal-area band in y, the
 * golden angle apart in azimuth), shifted by a per-call Cranley–Patterson offset from the R2
 * sequence so successive sample_index values cover the sphere evenly and deterministically. */
static brm_vec3 sky_dir(uint32_t k, uint32_t n, const double shift[2], uint32_t *bin)
{
    static const double golden = 0.61803398874989484820; /* (√5 − 1)/2 */
    double u = ((double)k + shift[0]) / (double)n;
    double w = shift[1] + golden * (double)k;
    w -= floor(w);
    uint32_t bu = (uint32_t)(u * SKY_HINT_ROWS), bw = (uint32_t)(w * SKY_HINT_COLS);
    *bin = (bu < SKY_HINT_ROWS ? bu : SKY_HINT_ROWS - 1) * SKY_HINT_COLS + (bw < SKY_HINT_COLS ? bw : SKY_HINT_COLS - 1);
    double y = 1.0 - 2.0 * u, r = sqrt(fmax(0.0, 1.0 - y * y)), phi = 2.0 * BRM_PI * w;
    return brm_v3(r * cos(phi), y, r * sin(phi));
}

/* A non-negative radiance has |band 1| ≤ √3·band 0 (|∫L·C1·ω dω| ≤ C1·∫L dω = √3·C0·∫L dω):
 * estimates outside that (a few rays over-subtracting) are pulled back onto it. */
static void sky_constrain(double out[3][4])
{
    for (int c = 0; c < 3; c++) {
        if (out[c][0] <= 0.0) {
            out[c][0] = out[c][1] = out[c][2] = out[c][3] = 0.0;
            continue;
        }
        double b1 = sqrt(out[c][1] * out[c][1] + out[c][2] * out[c][2] + out[c][3] * out[c][3]);
        double lim = 1.7320508075688772 * out[c][0];
        if (b1 > lim)
            for (int m = 1; m < 4; m++) out[c][m] *= lim / b1;
    }
}

/* The traced estimate with n rays. */
static void sky_trace(const brm_shadow_set *ss, brm_vec3 p, uint32_t sample_index, uint32_t n, double out[3][4])
{
    if (sky_hint_bvh != ss->bvh) {
        for (uint32_t k = 0; k < SKY_HINTS; k++) sky_hint[k] = BRM_BVH_NO_HINT;
        sky_hint_bvh = ss->bvh;
    }
    memcpy(out, ss->sky_proj, sizeof(double) * 12);
    const brm_sky *sky = &ss->scene->sky;
    uint32_t blocked = 0;
    double shift[2];
    brm_sample2(0x736b79ull /* "sky" */, sample_index, shift);
    double share = 4.0 * BRM_PI / (double)n;
    for (uint32_t k = 0; k < n; k++) {
        uint32_t bin;
        brm_vec3 d = sky_dir(k, n, shift, &bin);
        if (!brm_bvh_occluded_hint(ss->bvh, p, d, ss->eps, HUGE_VAL, &sky_hint[bin])) continue;
        blocked++;
        brm_vec3 L = brm_sky_radiance(sky, d);
        double y[4];
        brm_sh4(d, y);
        double Lc[3] = {L.x, L.y, L.z};
        for (int c = 0; c < 3; c++)
            for (int m = 0; m < 4; m++) out[c][m] -= share * Lc[c] * y[m];
    }
    if (blocked == n) memset(out, 0, sizeof(double) * 12);
    sky_constrain(out);
}

/* Traces node (i, j, k) into v (12 floats, what the cache stores); returns whether it lies in
 * free space (nodes inside solids take no part in the interpolation). */
static int node_trace(const brm_shadow_set *ss, const sky_cache *c, uint32_t i, uint32_t j, uint32_t k, size_t node,
                      float v[12])
{
    brm_vec3 p = brm_add(c->lo, brm_mul(c->step, brm_v3(i, j, k)));
    double d[3][4] = {{0}};
    int ok = !brm_solid_index_query(c->solid, p);
    if (ok) sky_trace(ss, p, (uint32_t)node, BRM_SKY_CACHE_RAYS, d);
    for (int q = 0; q < 12; q++) v[q] = (float)d[q / 4][q % 4];
    return ok;
}

/* The values of a node, traced the first time any lookup needs them. The thread that claims
 * the node traces it into the cache and publishes it; a thread that finds it being traced
 * traces its own copy into tmp (the same values: they depend on the node alone). Returns NULL
 * for a node inside a solid. */
static const float *node_values(const brm_shadow_set *ss, const sky_cache *c, uint32_t i, uint32_t j, uint32_t k,
                                size_t node, float tmp[12])
{
    unsigned char st = atomic_load_explicit(&c->state[node], memory_order_acquire);
    if (st != 2) {
        unsigned char expect = 0;
        if (st == 0 && atomic_compare_exchange_strong_explicit(&c->state[node], &expect, 1, memory_order_acq_rel,
                                                               memory_order_acquire)) {
            c->ok[node] = (uint8_t)node_trace(ss, c, i, j, k, node, c->sh + node * 12);
            atomic_store_explicit(&c->state[node], 2, memory_order_release);
        } else if (expect != 2) {
            return node_trace(ss, c, i, j, k, node, tmp) ? tmp : NULL;
        }
    }
    return c->ok[node] ? c->sh + node * 12 : NULL;
}

/* Cell of p in the cache and the trilinear fractions; false when p lies outside it. */
static bool cache_locate(const sky_cache *c, brm_vec3 p, int i0[3], double f[3])
{
    for (int a = 0; a < 3; a++) {
        double x = (brm_vget(p, a) - brm_vget(c->lo, a)) / brm_vget(c->step, a);
        double hi = (double)c->n[a] - 1.0;
        if (x < -1e-9 || x > hi + 1e-9) return false;
        if (x < 0) x = 0;
        if (x > hi) x = hi;
        int i = (int)floor(x);
        if (i >= (int)c->n[a] - 1) i = (int)c->n[a] - 2;
        if (i < 0) i = 0;
        i0[a] = i;
        f[a] = c->n[a] > 1 ? x - i : 0.0;
    }
    return true;
}

/* A cursor corner not read yet. */
static const float unread_corner[1];
#define UNREAD (&unread_corner[0])

/* acc[q] = Σ_k w[k]·v[k][q] over the n corners, in corner order, and out = acc / wsum: plain,
 * and with AVX (four coefficients a lane-group, chosen at run time) — the same products and
 * sums in the same order, correctly rounded either way, so the same bits. */
static void interp_sum_plain(uint32_t n, const double *w, const float *const *v, double wsum, double out[3][4])
{
    double acc[12] = {0};
    for (uint32_t k = 0; k < n; k++)
        for (int q = 0; q < 12; q++) acc[q] += w[k] * v[k][q];
    for (int q = 0; q < 12; q++) out[q / 4][q % 4] = acc[q] / wsum;
}

#if defined(__x86_64__) && defined(__GNUC__)
#include <immintrin.h>
#define SKY_AVX2 1
__attribute__((target("avx2"))) static void interp_sum_avx2(uint32_t n, const double *w, const float *const *v,
                                                             double wsum, double out[3][4])
{
    __m256d a0 = _mm256_setzero_pd(), a1 = a0, a2 = a0;
    for (uint32_t k = 0; k < n; k++) {
        __m256d wk = _mm256_set1_pd(w[k]);
        a0 = _mm256_add_pd(a0, _mm256_mul_pd(wk, _mm256_cvtps_pd(_mm_loadu_ps(v[k]))));
        a1 = _mm256_add_pd(a1, _mm256_mul_pd(wk, _mm256_cvtps_pd(_mm_loadu_ps(v[k] + 4))));
        a2 = _mm256_add_pd(a2, _mm256_mul_pd(wk, _mm256_cvtps_pd(_mm_loadu_ps(v[k] + 8))));
    }
    __m256d ws = _mm256_set1_pd(wsum);
    _mm256_storeu_pd(out[0], _mm256_div_pd(a0, ws));
    _mm256_storeu_pd(out[1], _mm256_div_pd(a1, ws));
    _mm256_storeu_pd(out[2], _mm256_div_pd(a2, ws));
}
#else
#define SKY_AVX2 0
#endif

/* The trilinear interpolation over the free-space nodes of cell i0. With a cursor (cur, set
 * to this cell), a corner's node is found once per cell; without, every time. Same bits. */
static bool cache_interp(const brm_shadow_set *ss, const sky_cache *c, const int i0[3], const double f[3],
                         brm_sky_cursor *cur, double out[3][4])
{
    double wk[8], wsum = 0.0;
    const float *vk[8];
    float tmp[8][12];
    uint32_t n = 0;
    for (int corner = 0; corner < 8; corner++) {
        int di = corner & 1, dj = (corner >> 1) & 1, dk = (corner >> 2) & 1;
        uint32_t ii = (uint32_t)(i0[0] + di), jj = (uint32_t)(i0[1] + dj), kk = (uint32_t)(i0[2] + dk);
        if (ii >= c->n[0] || jj >= c->n[1] || kk >= c->n[2]) continue;
        double w = (di ? f[0] : 1 - f[0]) * (dj ? f[1] : 1 - f[1]) * (dk ? f[2] : 1 - f[2]);
        if (w <= 0.0) continue;
        const float *v = cur ? cur->corner[corner] : UNREAD;
        if (v == UNREAD) {
            size_t node = ii + (size_t)c->n[0] * (jj + (size_t)c->n[1] * kk);
            v = node_values(ss, c, ii, jj, kk, node, tmp[corner]);
            /* A node another thread is still tracing comes back in tmp: not remembered. */
            if (cur && v != tmp[corner]) cur->corner[corner] = v;
        }
        if (!v) continue;
        wk[n] = w, vk[n] = v, n++;
        wsum += w;
    }
    if (wsum <= 1e-9) return false;
#if SKY_AVX2
    if (brm_cpu_avx2()) {
        interp_sum_avx2(n, wk, vk, wsum, out);
        return true;
    }
#endif
    interp_sum_plain(n, wk, vk, wsum, out);
    return true;
}

static bool cache_lookup(const brm_shadow_set *ss, const sky_cache *c, brm_vec3 p, double out[3][4])
{
    int i0[3];
    double f[3];
    if (!cache_locate(c, p, i0, f)) return false;
    return cache_interp(ss, c, i0, f, NULL, out);
}

void brm_sky_cursor_init(brm_sky_cursor *cur) { memset(cur, 0, sizeof *cur); }

void brm_sky_incident_cursor(const brm_shadow_set *ss, brm_sky_cursor *cur, brm_vec3 p, uint32_t sample_index,
                             double out[3][4])
{
    if (!ss->sky_present || !ss->sky_trace || !ss->sky_grid.n[0]) {
        brm_sky_incident(ss, p, sample_index, out);
        return;
    }
    const sky_cache *c = &ss->sky_grid;
    int i0[3];
    double f[3];
    if (cache_locate(c, p, i0, f)) {
        if (!cur->valid || cur->cell[0] != i0[0] || cur->cell[1] != i0[1] || cur->cell[2] != i0[2]) {
            cur->valid = 1;
            for (int a = 0; a < 3; a++) cur->cell[a] = i0[a];
            for (int k = 0; k < 8; k++) cur->corner[k] = UNREAD;
        }
        if (cache_interp(ss, c, i0, f, cur, out)) return;
    }
    sky_trace(ss, p, sample_index, ss->sky_rays, out);
}

void brm_sky_incident(const brm_shadow_set *ss, brm_vec3 p, uint32_t sample_index, double out[3][4])
{
    if (!ss->sky_present) {
        memset(out, 0, sizeof(double) * 12);
        return;
    }
    if (!ss->sky_trace) {
        memcpy(out, ss->sky_proj, sizeof(double) * 12);
        return;
    }
    if (ss->sky_grid.n[0] && cache_lookup(ss, &ss->sky_grid, p, out)) return;
    sky_trace(ss, p, sample_index, ss->sky_rays, out);
}

/* ---- the fast path's cache ------------------------------------------------------------ */

/* Where the cache is needed: the target's bounds, clipped to the fog bounds (no fog, nothing
 * scatters the sky; a frustum's far corners often reach well outside the fog). */
static brm_aabb cache_box(const brm_scene *s, const brm_shadow_opts *o)
{
    brm_aabb b = o->bounds;
    if (brm_aabb_overlaps(b, s->fog_bounds)) {
        b.min = brm_vmax(b.min, s->fog_bounds.min);
        b.max = brm_vmin(b.max, s->fog_bounds.max);
    }
    return b;
}

static void cache_dims(const brm_scene *s, const brm_shadow_opts *o, uint32_t n[3], brm_vec3 *lo, brm_vec3 *step)
{
    brm_aabb box = cache_box(s, o);
    brm_vec3 ext = brm_sub(box.max, box.min);
    double largest = fmax(ext.x, fmax(ext.y, ext.z));
    /* Sky occlusion changes over the size of openings (windows, doorways, skylights), not of
     * cells: nodes two cells apart but at most BRM_SKY_CACHE_SPACING_M, and at most
     * BRM_SKY_CACHE_MAX_PER_AXIS per axis. */
    double h = fmin(2.0 * (o->cell_size > 0 ? o->cell_size : largest), BRM_SKY_CACHE_SPACING_M);
    h = fmax(h, largest / (BRM_SKY_CACHE_MAX_PER_AXIS - 1));
    if (!(h > 0) || !isfinite(h)) h = 1.0;
    for (int a = 0; a < 3; a++) {
        double e = brm_vget(ext, a);
        uint32_t k = (uint32_t)ceil(e / h - 1e-9) + 1;
        n[a] = k < 2 ? 2 : k;
    }
    *lo = box.min;
    *step = brm_v3(ext.x / (n[0] - 1), ext.y / (n[1] - 1), ext.z / (n[2] - 1));
    if (!(step->x > 0)) step->x = 1;
    if (!(step->y > 0)) step->y = 1;
    if (!(step->z > 0)) step->z = 1;
}

size_t brm_sky_cache_memory(const brm_scene *s, const brm_shadow_opts *o)
{
    if (!s->sky.present || s->object_count == 0 || o->no_sky_cache) return 0;
    uint32_t n[3];
    brm_vec3 lo, st;
    cache_dims(s, o, n, &lo, &st);
    return (size_t)n[0] * n[1] * n[2] * (12 * sizeof(float) + 1 + sizeof(atomic_uchar));
}

/* Sets the cache up; its nodes are traced as lookups first need them (node_values). */
brm_status brm_sky_cache_build(brm_shadow_set *ss, int threads, brm_diag *d)
{
    (void)threads;
    sky_cache *c = &ss->sky_grid;
    cache_dims(ss->scene, &ss->opts, c->n, &c->lo, &c->step);
    size_t nodes = (size_t)c->n[0] * c->n[1] * c->n[2];
    c->sh = malloc(nodes * 12 * sizeof *c->sh);
    c->ok = malloc(nodes);
    c->state = malloc(nodes * sizeof *c->state);
    if (!c->sh || !c->ok || !c->state) {
        brm_sky_cache_free(c);
        return brm_diag_error(d, BRM_E_NOMEM, "shadows: out of memory for the sky cache");
    }
    for (size_t i = 0; i < nodes; i++) atomic_init(&c->state[i], 0);
    brm_status st = brm_solid_index_build(ss->scene, &c->solid, d);
    if (st != BRM_OK) {
        brm_sky_cache_free(c);
        return st;
    }
    return BRM_OK;
}

void brm_sky_cache_free(sky_cache *c)
{
    free(c->sh);
    free(c->ok);
    free(c->state);
    brm_solid_index_free(c->solid);
    memset(c, 0, sizeof *c);
}
