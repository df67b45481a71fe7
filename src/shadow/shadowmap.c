/* CPU depth maps: view planning, conservative triangle rasterization, analytic spheres, and
 * percentage-closer filtered lookups.
 *
 * A view maps a point to texel coordinates (X, Y) and a depth. Orthographic (directional
 * lights): X, Y from the light-space position, depth = f·p − z_near, linear in X and Y over a
 * triangle. Perspective (spots, cube faces): X, Y from the tan coordinates (u·d/f·d, v·d/f·d)
 * and depth = f·d; over a triangle 1/depth is linear in X and Y (perspective-correct
 * interpolation), so that is the quantity the rasterizer interpolates. */
#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "base/cpu.h"
#include "scene/light.h"
#include "shadow/shadow_internal.h"
#include "shadow/shadowmap.h"

/* Depth bias, in texels (the world size of a texel at the occluder): 0.05 for rounding plus
 * half a texel per unit of tan(angle between the surface normal and the light ray) — the
 * depth change across half a texel, so fog just in front of a lit surface is not shadowed by
 * the texel's centre depth — with tan capped at 2, so the bias never exceeds about a texel:
 * fog samples are points in free space, and a larger receiver bias would only let light
 * through walls thinner than it (a 0.4 m wall under 0.8 m texels with a bias of a few texels
 * leaked on the demo scene). Common practice, no source: the slope-scaled depth offset, sized
 * here for fog against the BVH reference. */
#define BIAS_CONST 0.05
#define BIAS_SLOPE 0.5
#define BIAS_TAN_MAX 2.0
/* Triangles thinner than this (inradius in texels) are rasterized conservatively — every
 * texel they touch — so slivers never vanish between texel centres; the others cover the
 * texels whose centres they contain, which keeps shadow edges unbiased (conservative
 * coverage of every triangle pushed each shadow out by half a texel and narrowed the light
 * shafts through the demo scene's skylights by 13 %). */
#define THIN_TEXELS 0.1
/* Perspective views clip geometry closer to the light than this (m). */
#define PERSP_NEAR 1e-4

static void basis_from(brm_vec3 f, brm_vec3 *u, brm_vec3 *v)
{
    brm_vec3 a = fabs(f.y) < 0.9 ? brm_v3(0, 1, 0) : brm_v3(1, 0, 0);
    *u = brm_norm(brm_cross(a, f));
    *v = brm_cross(f, *u); /* u × v = f */
}

static void box_corners(brm_aabb b, brm_vec3 c[8])
{
    for (int i = 0; i < 8; i++)
        c[i] = brm_v3(i & 1 ? b.max.x : b.min.x, i & 2 ? b.max.y : b.min.y, i & 4 ? b.max.z : b.min.z);
}

static double max_corner_distance(brm_aabb b, brm_vec3 o)
{
    brm_vec3 c[8];
    box_corners(b, c);
    double r = 0.0;
    for (int i = 0; i < 8; i++) {
        double d = brm_len(brm_sub(c[i], o));
        if (d > r) r = d;
    }
    return r;
}

static uint32_t pad_texels(double softness)
{
    return (uint32_t)ceil(softness > 0.5 ? softness : 0.5) + 2u;
}

static uint32_t clamp_res(double want, uint32_t hi)
{
    if (!(want >= BRM_SHADOW_MIN_RES)) return BRM_SHADOW_MIN_RES;
    if (want > hi) return hi;
    return (uint32_t)want;
}

/* Resolution of a map of `extent` (m, or tan units × r at the far end) at texel ≤ cell. */
static uint32_t pick_res(const brm_light *l, double extent_world, double cell, uint32_t pad, uint32_t cap)
{
    if (l->shadow_resolution) {
        uint32_t r = l->shadow_resolution;
        if (r < BRM_SHADOW_MIN_RES) r = BRM_SHADOW_MIN_RES;
        if (r > BRM_SHADOW_MAX_RES) r = BRM_SHADOW_MAX_RES;
        return r;
    }
    if (!(cell > 0.0)) cell = extent_world / 256.0;
    return clamp_res(ceil(extent_world * BRM_SHADOW_TEXELS_PER_CELL / cell) + 2.0 * pad, cap);
}

static void plan_persp(shadow_view *v, brm_vec3 origin, brm_vec3 f, double tan_half, uint32_t res, uint32_t pad)
{
    v->kind = BRM_VIEW_PERSP;
    v->origin = origin;
    v->f = brm_norm(f);
    basis_from(v->f, &v->u, &v->v);
    if (pad > res / 4) pad = res / 4;
    v->res = res;
    v->texel = 2.0 * tan_half / (double)(res - 2 * pad);
    v->lo[0] = v->lo[1] = -v->texel * (double)res * 0.5;
    v->z_near = PERSP_NEAR;
}

void brm_shadowmap_plan(const brm_scene *s, const brm_shadow_opts *o, light_shadow *ls, const brm_light *l)
{
    memset(ls, 0, sizeof *ls);
    ls->active = brm_light_reaches(l, o->bounds);
    ls->softness = l->softness_texels > 0.5 ? l->softness_texels : 0.5;
    ls->has_map = ls->active && l->shadow && s->object_count > 0;
    uint32_t pad = pad_texels(ls->softness);
    brm_vec3 c[8];
    box_corners(o->bounds, c);

    if (l->type == BRM_LIGHT_DIRECTIONAL) {
        shadow_view *v = &ls->views[0];
        ls->view_count = 1;
        v->kind = BRM_VIEW_ORTHO;
        v->origin = brm_v3(0, 0, 0);
        v->f = brm_norm(l->direction);
        basis_from(v->f, &v->u, &v->v);
        double lo[2] = {HUGE_VAL, HUGE_VAL}, hi[2] = {-HUGE_VAL, -HUGE_VAL}, zn = HUGE_VAL;
        for (int i = 0; i < 8; i++) {
            double x = brm_dot(c[i], v->u), y = brm_dot(c[i], v->v), z = brm_dot(c[i], v->f);
            lo[0] = fmin(lo[0], x), hi[0] = fmax(hi[0], x);
            lo[1] = fmin(lo[1], y), hi[1] = fmax(hi[1], y);
            zn = fmin(zn, z);
        }
        /* Reach toward the light past every occluder: the near plane in front of all geometry. */
        for (uint32_t k = 0; k < s->object_count; k++) {
            brm_vec3 g[8];
            box_corners(s->objects[k].bounds, g);
            for (int i = 0; i < 8; i++) zn = fmin(zn, brm_dot(g[i], v->f));
        }
        double ext = fmax(fmax(hi[0] - lo[0], hi[1] - lo[1]), 1e-6);
        uint32_t res = pick_res(l, ext, o->cell_size, pad, BRM_SHADOW_AUTO_MAX);
        if (pad > res / 4) pad = res / 4;
        v->res = res;
        v->texel = ext / (double)(res - 2 * pad);
        for (int a = 0; a < 2; a++) v->lo[a] = 0.5 * (lo[a] + hi[a]) - v->texel * (double)res * 0.5;
        v->z_near = zn - v->texel;
        ls->texel_size = v->texel;
        return;
    }

    double rmax = fmax(max_corner_distance(o->bounds, l->position), 1e-3);
    if (l->range_m > 0.0 && l->range_m < rmax) rmax = l->range_m;
    bool cube = l->type == BRM_LIGHT_POINT || l->outer_deg > BRM_SPOT_CUBE_DEG;
    double tan_half = cube ? 1.0 : tan(l->outer_deg * BRM_PI / 180.0);
    uint32_t res = pick_res(l, 2.0 * tan_half * rmax, o->cell_size, pad, cube ? BRM_SHADOW_AUTO_MAX_CUBE : BRM_SHADOW_AUTO_MAX);
    ls->cube = cube;
    if (cube) {
        static const brm_vec3 axes[6] = {{1, 0, 0}, {-1, 0, 0}, {0, 1, 0}, {0, -1, 0}, {0, 0, 1}, {0, 0, -1}};
        ls->view_count = 6;
        for (int k = 0; k < 6; k++) plan_persp(&ls->views[k], l->position, axes[k], tan_half, res, pad);
    } else {
        ls->view_count = 1;
        plan_persp(&ls->views[0], l->position, l->direction, tan_half, res, pad);
    }
    ls->texel_size = ls->views[0].texel * rmax;
}

const shadow_view *brm_shadow_pick_view(const light_shadow *ls, brm_vec3 p)
{
    if (!ls->cube) return &ls->views[0];
    brm_vec3 d = brm_sub(p, ls->views[0].origin);
    double ax = fabs(d.x), ay = fabs(d.y), az = fabs(d.z);
    if (ax >= ay && ax >= az) return &ls->views[d.x >= 0 ? 0 : 1];
    if (ay >= az) return &ls->views[d.y >= 0 ? 2 : 3];
    return &ls->views[d.z >= 0 ? 4 : 5];
}

/* ---- rasterization ----------------------------------------------------------------- */

typedef struct rvert {
    double x, y, q; /* texel coordinates and the interpolated quantity (depth or 1/depth) */
} rvert;

static double bias_texels(brm_vec3 n, brm_vec3 ray)
{
    double c = fabs(brm_dot(n, ray));
    double s = sqrt(fmax(0.0, 1.0 - c * c));
    double tn = c * BIAS_TAN_MAX >= s ? s / c : BIAS_TAN_MAX;
    return BIAS_CONST + BIAS_SLOPE * tn;
}

static inline void store(shadow_view *v, uint32_t i, uint32_t j, double depth)
{
    float *t = &v->depth[(size_t)j * v->res + i];
    float d = (float)depth;
    if (d < *t) *t = d;
}

#if defined(__x86_64__) && defined(__GNUC__)
#include <immintrin.h>
#define SHADOWMAP_AVX2 1
/* Texels [lo, hi] of one row of a triangle's run, four at a time with AVX: the per-texel
 * depth of raster_tri2d (plane value at the texel centre, clamped to the triangle's range,
 * then the bias: q + b for ortho, (1/q)·(1 + b) for persp, b = bias·texel) rounded to float
 * and kept where it is nearer — the same IEEE operations in the same order, so the same
 * bits. Returns the first texel left for the scalar loop. */
__attribute__((target("avx2"))) static int64_t fill_run_avx2(float *row, int64_t lo, int64_t hi, const rvert *t0,
                                                              double gx, double gy, double cy, double qlo, double qhi,
                                                              bool persp, double bt)
{
    const __m256d vx0 = _mm256_set1_pd(t0->x), vq0 = _mm256_set1_pd(t0->q), vgx = _mm256_set1_pd(gx);
    const __m256d ygy = _mm256_set1_pd(gy * (cy - t0->y));
    const __m256d vlo = _mm256_set1_pd(qlo), vhi = _mm256_set1_pd(qhi);
    const __m256d one = _mm256_set1_pd(1.0), vb = _mm256_set1_pd(persp ? 1.0 + bt : bt);
    const __m256d step = _mm256_set_pd(3.5, 2.5, 1.5, 0.5);
    int64_t i = lo;
    for (; i + 3 <= hi; i += 4) {
        __m256d cx = _mm256_add_pd(_mm256_set1_pd((double)i), step);
        __m256d q = _mm256_add_pd(_mm256_add_pd(vq0, _mm256_mul_pd(vgx, _mm256_sub_pd(cx, vx0))), ygy);
        /* brm_clamp(q, qlo, qhi): x < lo ? lo : x > hi ? hi : x */
        q = _mm256_blendv_pd(q, vhi, _mm256_cmp_pd(q, vhi, _CMP_GT_OQ));
        q = _mm256_blendv_pd(q, vlo, _mm256_cmp_pd(q, vlo, _CMP_LT_OQ));
        __m256d depth = persp ? _mm256_mul_pd(_mm256_div_pd(one, q), vb) : _mm256_add_pd(q, vb);
        __m128 d = _mm256_cvtpd_ps(depth);
        __m128 old = _mm_loadu_ps(row + i);
        /* if (d < old) old = d: minps gives its second operand unless the first is less */
        _mm_storeu_ps(row + i, _mm_min_ps(d, old));
    }
    return i;
}

/* The depth range of one full 16 × 16 tile at t (rows `stride` floats apart), eight texels a
 * lane-group: minps/maxps keep their second operand unless the first is below/above it, which
 * is the scalar loop's "if (x < lo) lo = x" (a NaN texel never enters); the lanes are then
 * reduced the same way. The extremes of a set do not depend on the order they are taken in,
 * so the values are the scalar loop's (up to the sign of a zero, which compares equal and is
 * all the ranges are used for). */
__attribute__((target("avx2"))) static void tile_range_avx2(const float *t, uint32_t stride, float *lo_out,
                                                             float *hi_out)
{
    __m256 lo = _mm256_set1_ps(INFINITY), hi = _mm256_set1_ps(-INFINITY);
    for (uint32_t j = 0; j < 16; j++) {
        const float *row = t + (size_t)j * stride;
        __m256 a = _mm256_loadu_ps(row), b = _mm256_loadu_ps(row + 8);
        lo = _mm256_min_ps(a, lo), lo = _mm256_min_ps(b, lo);
        hi = _mm256_max_ps(a, hi), hi = _mm256_max_ps(b, hi);
    }
    float l[8], h[8];
    _mm256_storeu_ps(l, lo);
    _mm256_storeu_ps(h, hi);
    float rl = l[0], rh = h[0];
    for (int k = 1; k < 8; k++) {
        if (l[k] < rl) rl = l[k];
        if (h[k] > rh) rh = h[k];
    }
    *lo_out = rl, *hi_out = rh;
}
#else
#define SHADOWMAP_AVX2 0
#endif

/* The edge test of raster_tri2d at texel centre cx, written once so the run search and
 * the original per-texel form agree bit for bit: A·cx + (B·cy) + C not below tol. */
static inline bool edge_ok(double a, double bc, double c, double tol, double cx) { return !(a * cx + bc + c < tol); }

/* Coverage: the texels whose centres the triangle's 2-D projection contains (edges count
 * for both sides, so shared edges leave no cracks); for thin triangles every texel it
 * touches, by edge functions shifted by the texel's half-extent along each edge normal.
 * Depth at the texel centre from the plane, clamped to the triangle's own range, plus the
 * bias. */
static void raster_tri2d(shadow_view *v, uint32_t row0, uint32_t row1, const rvert t[3], double bias)
{
    double minx = fmin(t[0].x, fmin(t[1].x, t[2].x)), maxx = fmax(t[0].x, fmax(t[1].x, t[2].x));
    double miny = fmin(t[0].y, fmin(t[1].y, t[2].y)), maxy = fmax(t[0].y, fmax(t[1].y, t[2].y));
    if (maxx < 0.0 || maxy < (double)row0 || minx >= (double)v->res || miny >= (double)row1) return;
    int64_t i0 = (int64_t)floor(fmax(minx, 0.0)), i1 = (int64_t)floor(fmin(maxx, (double)v->res - 0.5));
    int64_t j0 = (int64_t)floor(fmax(miny, (double)row0)), j1 = (int64_t)floor(fmin(maxy, (double)row1 - 0.5));
    if (i0 > i1 || j0 > j1) return;

    double area2 = (t[1].x - t[0].x) * (t[2].y - t[0].y) - (t[2].x - t[0].x) * (t[1].y - t[0].y);
    double sign = area2 < 0.0 ? -1.0 : 1.0;
    double perim = 0.0;
    for (int k = 0; k < 3; k++) perim += hypot(t[(k + 1) % 3].x - t[k].x, t[(k + 1) % 3].y - t[k].y);
    double slack = fabs(area2) < THIN_TEXELS * perim ? 0.5 : 0.0; /* inradius = |area2| / perimeter */
    double A[3], B[3], C[3];
    for (int k = 0; k < 3; k++) {
        const rvert *a = &t[k], *b = &t[(k + 1) % 3];
        A[k] = -(b->y - a->y) * sign;
        B[k] = (b->x - a->x) * sign;
        C[k] = -(A[k] * a->x + B[k] * a->y) + slack * (fabs(A[k]) + fabs(B[k]));
    }
    bool persp = v->kind == BRM_VIEW_PERSP;
#if SHADOWMAP_AVX2
    const bool have_avx2 = brm_cpu_avx2();
#endif
    double qlo = fmin(t[0].q, fmin(t[1].q, t[2].q)), qhi = fmax(t[0].q, fmax(t[1].q, t[2].q));
    bool flat = fabs(area2) < 1e-9;
    double gx = 0.0, gy = 0.0;
    if (!flat) {
        gx = ((t[1].q - t[0].q) * (t[2].y - t[0].y) - (t[2].q - t[0].q) * (t[1].y - t[0].y)) / area2;
        gy = ((t[2].q - t[0].q) * (t[1].x - t[0].x) - (t[1].q - t[0].q) * (t[2].x - t[0].x)) / area2;
    }
    /* Flat (edge-on) triangles: their nearest point for every texel they touch. */
    double qflat = persp ? qhi : qlo;
    double tol = -1e-9 * (1.0 + fabs(area2));
    /* Per row, the texels that pass all three edge tests form one run: each computed edge
     * value A·cx + B·cy + C is monotone in cx (rounded products and sums are monotone), so
     * each test passes on a prefix or a suffix of the row. Each edge's end of the run is
     * guessed from its crossing and confirmed with the very test at the texels either side
     * (or found by bisection with it when the guess is off), so the run holds exactly the
     * texels the test passes, and only those are visited. */
    for (int64_t j = j0; j <= j1; j++) {
        double cy = (double)j + 0.5;
        int64_t lo = i0, hi = i1;
        for (int k = 0; k < 3 && lo <= hi; k++) {
            double bc = B[k] * cy;
            if (A[k] == 0.0) {
                if (!edge_ok(A[k], bc, C[k], tol, (double)lo)) hi = lo - 1;
                continue;
            }
            bool rising = A[k] > 0.0; /* passes on a suffix; else on a prefix */
            double x = (tol - bc - C[k]) / A[k] - 0.5; /* the crossing, in texel indices */
            /* g: the first texel of the suffix (rising) or one past the prefix */
            double gd = rising ? ceil(x) : floor(x) + 1.0;
            int64_t g = gd == gd ? (int64_t)fmin(fmax(gd, (double)i0), (double)i1 + 1.0) : i0;
            bool below = g == i0 || edge_ok(A[k], bc, C[k], tol, (double)(g - 1) + 0.5) != rising;
            bool at = g == i1 + 1 || edge_ok(A[k], bc, C[k], tol, (double)g + 0.5) == rising;
            if (!(below && at)) { /* bisect: the first texel whose test says "rising" */
                int64_t a = i0, b = i1 + 1;
                while (a < b) {
                    int64_t m = a + (b - a) / 2;
                    if (edge_ok(A[k], bc, C[k], tol, (double)m + 0.5) == rising) b = m;
                    else a = m + 1;
                }
                g = a;
            }
            if (rising) lo = g > lo ? g : lo;
            else hi = g - 1 < hi ? g - 1 : hi;
        }
        if (lo > hi) continue;
        int64_t i = lo;
#if SHADOWMAP_AVX2
        if (!flat && have_avx2)
            i = fill_run_avx2(v->depth + (size_t)j * v->res, lo, hi, &t[0], gx, gy, cy, qlo, qhi, persp, bias * v->texel);
#endif
        for (; i <= hi; i++) {
            double cx = (double)i + 0.5;
            double q = flat ? qflat : brm_clamp(t[0].q + gx * (cx - t[0].x) + gy * (cy - t[0].y), qlo, qhi);
            double depth = persp ? (1.0 / q) * (1.0 + bias * v->texel) : q + bias * v->texel;
            store(v, (uint32_t)i, (uint32_t)j, depth);
        }
    }
}

static rvert to_raster(const shadow_view *v, brm_vec3 d /* view space: (u, v, f) */)
{
    rvert r;
    if (v->kind == BRM_VIEW_ORTHO) {
        r.x = (d.x - v->lo[0]) / v->texel;
        r.y = (d.y - v->lo[1]) / v->texel;
        r.q = d.z - v->z_near;
    } else {
        r.x = (d.x / d.z - v->lo[0]) / v->texel;
        r.y = (d.y / d.z - v->lo[1]) / v->texel;
        r.q = 1.0 / d.z;
    }
    return r;
}

static brm_vec3 to_view(const shadow_view *v, brm_vec3 p)
{
    brm_vec3 d = brm_sub(p, v->origin);
    return brm_v3(brm_dot(d, v->u), brm_dot(d, v->v), brm_dot(d, v->f));
}

static void raster_tri(shadow_view *v, uint32_t row0, uint32_t row1, const brm_tri *tri)
{
    brm_vec3 vs[3];
    for (int k = 0; k < 3; k++) vs[k] = to_view(v, tri->v[k]);
    /* A triangle wholly in front of the view whose projection misses rows [row0, row1) or the
     * map: raster_tri2d's own first test would return on these very vertices, so return before
     * working out its normal and bias (every band of a view sees every triangle). */
    if (v->kind == BRM_VIEW_ORTHO || (vs[0].z >= v->z_near && vs[1].z >= v->z_near && vs[2].z >= v->z_near)) {
        rvert t[3];
        for (int k = 0; k < 3; k++) t[k] = to_raster(v, vs[k]);
        double minx = fmin(t[0].x, fmin(t[1].x, t[2].x)), maxx = fmax(t[0].x, fmax(t[1].x, t[2].x));
        double miny = fmin(t[0].y, fmin(t[1].y, t[2].y)), maxy = fmax(t[0].y, fmax(t[1].y, t[2].y));
        if (maxx < 0.0 || maxy < (double)row0 || minx >= (double)v->res || miny >= (double)row1) return;
    }
    brm_vec3 n = brm_cross(brm_sub(tri->v[1], tri->v[0]), brm_sub(tri->v[2], tri->v[0]));
    double nl = brm_len(n);
    if (!(nl > 0.0)) return;
    n = brm_scale(n, 1.0 / nl);
    if (v->kind == BRM_VIEW_ORTHO) {
        rvert t[3];
        for (int k = 0; k < 3; k++) t[k] = to_raster(v, vs[k]);
        raster_tri2d(v, row0, row1, t, bias_texels(n, v->f));
        return;
    }
    /* Perspective: clip to the near plane (Sutherland–Hodgman on one plane: at most 4 vertices). */
    double zn = v->z_near;
    if (vs[0].z < zn && vs[1].z < zn && vs[2].z < zn) return;
    brm_vec3 cen = brm_scale(brm_add(tri->v[0], brm_add(tri->v[1], tri->v[2])), 1.0 / 3.0);
    double bias = bias_texels(n, brm_norm(brm_sub(cen, v->origin)));
    brm_vec3 poly[4];
    int np = 0;
    for (int k = 0; k < 3; k++) {
        brm_vec3 a = vs[k], b = vs[(k + 1) % 3];
        bool ain = a.z >= zn, bin = b.z >= zn;
        if (ain) poly[np++] = a;
        if (ain != bin) {
            double s = (zn - a.z) / (b.z - a.z);
            poly[np++] = brm_v3(a.x + s * (b.x - a.x), a.y + s * (b.y - a.y), zn);
        }
    }
    rvert t[4];
    for (int k = 0; k < np; k++) t[k] = to_raster(v, poly[k]);
    for (int k = 1; k + 1 < np; k++) {
        rvert f3[3] = {t[0], t[k], t[k + 1]};
        raster_tri2d(v, row0, row1, f3, bias);
    }
}

/* Spheres analytically: the ray through each texel centre meets the sphere or not (exact
 * silhouette); depth at the entry point. */
static void raster_sphere(shadow_view *v, uint32_t row0, uint32_t row1, const brm_object *ob)
{
    double r = ob->radius;
    brm_vec3 c = to_view(v, ob->center);
    double x0, x1, y0, y1;
    if (v->kind == BRM_VIEW_ORTHO) {
        x0 = (c.x - r - v->lo[0]) / v->texel, x1 = (c.x + r - v->lo[0]) / v->texel;
        y0 = (c.y - r - v->lo[1]) / v->texel, y1 = (c.y + r - v->lo[1]) / v->texel;
    } else if (c.z - r * 1.7320508075688772 > v->z_near) {
        /* Bounds of the projected bounding cube (all in front of the light). */
        x0 = y0 = HUGE_VAL, x1 = y1 = -HUGE_VAL;
        for (int k = 0; k < 8; k++) {
            brm_vec3 q = brm_v3(c.x + (k & 1 ? r : -r), c.y + (k & 2 ? r : -r), c.z + (k & 4 ? r : -r));
            rvert t = to_raster(v, q);
            x0 = fmin(x0, t.x), x1 = fmax(x1, t.x), y0 = fmin(y0, t.y), y1 = fmax(y1, t.y);
        }
    } else if (c.z + r <= 0.0) {
        return;
    } else {
        x0 = y0 = 0.0, x1 = y1 = (double)v->res;
    }
    int64_t i0 = (int64_t)floor(fmax(x0, 0.0)), i1 = (int64_t)floor(fmin(x1, (double)v->res - 0.5));
    int64_t j0 = (int64_t)floor(fmax(y0, (double)row0)), j1 = (int64_t)floor(fmin(y1, (double)row1 - 0.5));
    double cc = brm_dot(c, c) - r * r;
    for (int64_t j = j0; j <= j1; j++) {
        double ly = v->lo[1] + ((double)j + 0.5) * v->texel;
        for (int64_t i = i0; i <= i1; i++) {
            double lx = v->lo[0] + ((double)i + 0.5) * v->texel;
            double depth;
            if (v->kind == BRM_VIEW_ORTHO) {
                double rho2 = (lx - c.x) * (lx - c.x) + (ly - c.y) * (ly - c.y);
                if (rho2 > r * r) continue;
                double h = sqrt(r * r - rho2);
                double tn = h * BIAS_TAN_MAX >= sqrt(rho2) ? sqrt(rho2) / h : BIAS_TAN_MAX; /* ρ/h */
                depth = c.z - h - v->z_near + (BIAS_CONST + BIAS_SLOPE * tn) * v->texel;
            } else {
                double inv = 1.0 / sqrt(1.0 + lx * lx + ly * ly);
                brm_vec3 dir = brm_v3(lx * inv, ly * inv, inv);
                double b = brm_dot(dir, c), disc = b * b - cc;
                if (disc < 0.0) continue;
                double sq = sqrt(disc), t0 = b - sq;
                if (b + sq <= 0.0) continue;
                if (t0 < 0.0) t0 = 0.0; /* the light is inside the sphere */
                brm_vec3 hit = brm_scale(dir, t0);
                brm_vec3 nrm = brm_scale(brm_sub(hit, c), 1.0 / r);
                double cs = fabs(brm_dot(nrm, dir)), sn = sqrt(fmax(0.0, 1.0 - cs * cs));
                double tn = cs * BIAS_TAN_MAX >= sn ? sn / cs : BIAS_TAN_MAX;
                depth = t0 * inv * (1.0 + (BIAS_CONST + BIAS_SLOPE * tn) * v->texel);
            }
            store(v, (uint32_t)i, (uint32_t)j, depth);
        }
    }
}

void brm_shadowmap_raster_rows(const brm_scene *s, shadow_view *v, uint32_t row0, uint32_t row1)
{
    for (size_t k = (size_t)row0 * v->res; k < (size_t)row1 * v->res; k++) v->depth[k] = INFINITY;
    for (uint32_t k = 0; k < s->tri_count; k++) raster_tri(v, row0, row1, &s->tris[k]);
    for (uint32_t k = 0; k < s->object_count; k++)
        if (s->objects[k].shape == BRM_SHAPE_SPHERE) raster_sphere(v, row0, row1, &s->objects[k]);
}

/* ---- lookup ------------------------------------------------------------------------ */

/* Percentage-closer filtering: the fraction of the square of half-width r texels around p's
 * texel position whose texels do not hide p, each texel weighted by its overlap with the
 * square (a box filter over nearest-texel comparisons: bilinear weights at r = 0.5, and
 * continuous in p for any r). Texels outside the map count as lit.
 * In three steps, so a batch can run each over all its points before the next (below): where
 * p falls and its footprint; the tile ranges; the texels themselves. */
typedef struct pcf_at {
    double z, x0, x1, y0, y1;       /* depth compared, footprint square in texels */
    int64_t i0, i1, j0, j1;         /* its texels, clipped to the map */
} pcf_at;

/* 1 with *val the lookup's answer when p lies behind the view's near plane or its footprint
 * off the map; else 0 with *a set. */
static inline int pcf_prepare(const shadow_view *v, brm_vec3 p, double r, pcf_at *a, double *val)
{
    brm_vec3 d = to_view(v, p);
    double z;
    if (v->kind == BRM_VIEW_ORTHO) {
        z = d.z - v->z_near;
    } else {
        if (d.z <= v->z_near) return *val = 1.0, 1;
        z = d.z;
        d.x /= d.z, d.y /= d.z;
    }
    double X = (d.x - v->lo[0]) / v->texel, Y = (d.y - v->lo[1]) / v->texel;
    double x0 = X - r, x1 = X + r, y0 = Y - r, y1 = Y + r;
    double res = (double)v->res;
    if (x1 <= 0.0 || y1 <= 0.0 || x0 >= res || y0 >= res) return *val = 1.0, 1;
    /* floor(max(x0, 0)) and ceil(min(x1, res)) − 1 without library calls: here x0 < res and
     * x1 > 0, so both arguments lie in [0, res], where truncation is floor and one more where
     * it falls short is ceil (a NaN coordinate takes the same ends as fmax and fmin give). */
    const double cx0 = x0 > 0.0 ? x0 : 0.0, cy0 = y0 > 0.0 ? y0 : 0.0;
    const double cx1 = x1 < res ? x1 : res, cy1 = y1 < res ? y1 : res;
    int64_t i0 = (int64_t)cx0, j0 = (int64_t)cy0;
    int64_t i1 = (int64_t)cx1, j1 = (int64_t)cy1;
    i1 += (double)i1 < cx1, j1 += (double)j1 < cy1;
    a->z = z, a->x0 = x0, a->x1 = x1, a->y0 = y0, a->y1 = y1;
    a->i0 = i0, a->i1 = i1 - 1, a->j0 = j0, a->j1 = j1 - 1;
    return 0;
}

/* The smallest and largest depth over tiles [ti0, ti1] × [tj0, tj1] (fminf and fmaxf: lo and hi
 * are never NaN; a NaN entry leaves them). */
static inline void tile_extremes(const shadow_view *v, uint32_t ti0, uint32_t ti1, uint32_t tj0, uint32_t tj1,
                                 float *lo_out, float *hi_out)
{
    float lo = INFINITY, hi = -INFINITY;
    for (uint32_t tj = tj0; tj <= tj1; tj++)
        for (uint32_t ti = ti0; ti <= ti1; ti++) {
            const float ta = v->tile_min[tj * v->tiles + ti], tb = v->tile_max[tj * v->tiles + ti];
            if (ta < lo) lo = ta;
            if (tb > hi) hi = tb;
        }
    *lo_out = lo, *hi_out = hi;
}

/* The depth ranges of the tiles under the footprint (a small table that stays in cache, where
 * the map itself mostly does not): no texel of theirs hides p, or every one does, decides the
 * lookup without reading the map — the same answer the comparisons of pcf_texels would give,
 * so the same bits. 1 with *val when decided. */
static inline int pcf_tiles(const shadow_view *v, const pcf_at *a, double *val)
{
    if (!v->tile_min) return 0;
    const uint32_t T = BRM_SHADOW_TILE;
    float lo, hi;
    tile_extremes(v, (uint32_t)a->i0 / T, (uint32_t)a->i1 / T, (uint32_t)a->j0 / T, (uint32_t)a->j1 / T, &lo, &hi);
    const double res = (double)v->res;
    if (a->z <= (double)lo) return *val = 1.0, 1;
    if (a->z > (double)hi && a->x0 >= 0.0 && a->y0 >= 0.0 && a->x1 <= res && a->y1 <= res) return *val = 0.0, 1;
    return 0;
}

static double pcf_texels(const shadow_view *v, const pcf_at *a, double r)
{
    const double z = a->z, x0 = a->x0, x1 = a->x1, y0 = a->y0, y1 = a->y1, res = (double)v->res;
    const int64_t i0 = a->i0, i1 = a->i1, j0 = a->j0, j1 = a->j1;
    /* First the comparisons alone: a footprint all lit (the common case) or all shadowed
     * inside the map needs no weights, and gives what the weighted sum would (exactly 1;
     * 0 after the snap below). */
    int64_t nx = i1 - i0 + 1, hidden = 0, count = nx * (j1 - j0 + 1);
    for (int64_t j = j0; j <= j1; j++) {
        const float *row = v->depth + (size_t)j * v->res + i0;
        for (int64_t i = 0; i < nx; i++) hidden += z > (double)row[i];
    }
    if (hidden == 0) return 1.0;
    if (hidden == count && x0 >= 0.0 && y0 >= 0.0 && x1 <= res && y1 <= res) return 0.0;
    /* The columns' overlaps with the square, once for every row. */
    double wxs[32];
    bool have_w = nx <= 32;
    if (have_w)
        for (int64_t i = 0; i < nx; i++) wxs[i] = fmin((double)(i0 + i) + 1.0, x1) - fmax((double)(i0 + i), x0);
    double shadowed = 0.0;
    for (int64_t j = j0; j <= j1; j++) {
        double wy = fmin((double)j + 1.0, y1) - fmax((double)j, y0);
        const float *row = v->depth + (size_t)j * v->res;
        double sx = 0.0;
        for (int64_t i = i0; i <= i1; i++) {
            if (z > (double)row[i]) sx += have_w ? wxs[i - i0] : fmin((double)i + 1.0, x1) - fmax((double)i, x0);
        }
        shadowed += sx * wy;
    }
    /* The overlaps sum to the square's area up to rounding: snap the ends to exact 0 and 1. */
    double lit = 1.0 - shadowed / (4.0 * r * r);
    return lit < 1e-12 ? 0.0 : lit > 1.0 - 1e-12 ? 1.0 : lit;
}

double brm_shadowmap_pcf(const shadow_view *v, brm_vec3 p, double r)
{
    pcf_at a;
    double val;
    if (pcf_prepare(v, p, r, &a, &val) || pcf_tiles(v, &a, &val)) return val;
    return pcf_texels(v, &a, r);
}

void brm_shadow_visibility_batch(const brm_shadow_set *ss, uint32_t l, const brm_vec3 *p, uint32_t n, double *out)
{
    const light_shadow *ls = &ss->lights[l];
    if (!ss->scene->lights[l].shadow || ss->scene->object_count == 0 || ss->opts.reference || !ls->has_map) {
        for (uint32_t i = 0; i < n; i++) out[i] = brm_shadow_visibility(ss, l, p[i]);
        return;
    }
    /* brm_shadow_visibility's own path, step by step over a chunk of points: their divisions
     * and tile reads overlap instead of waiting on each other. */
    enum { CHUNK = 64 };
    const double r = ls->softness;
    pcf_at at[CHUNK];
    const shadow_view *view[CHUNK];
    uint32_t left[CHUNK];
    for (uint32_t c0 = 0; c0 < n; c0 += CHUNK) {
        const uint32_t m = n - c0 < CHUNK ? n - c0 : CHUNK;
        uint32_t k = 0;
        for (uint32_t i = 0; i < m; i++) {
            view[i] = brm_shadow_pick_view(ls, p[c0 + i]);
            left[k] = i;
            k += !pcf_prepare(view[i], p[c0 + i], r, &at[i], &out[c0 + i]);
        }
        uint32_t k2 = 0;
        for (uint32_t t = 0; t < k; t++) {
            const uint32_t i = left[t];
            left[k2] = i;
            k2 += !pcf_tiles(view[i], &at[i], &out[c0 + i]);
        }
        for (uint32_t t = 0; t < k2; t++) out[c0 + left[t]] = pcf_texels(view[left[t]], &at[left[t]], r);
    }
}

/* ---- whole boxes at once -------------------------------------------------------------------- */

int brm_shadowmap_tiles(shadow_view *v)
{
    if (!v->depth || v->res == 0) return 1;
    uint32_t T = BRM_SHADOW_TILE, n = (v->res + T - 1) / T;
    v->tile_min = malloc((size_t)n * n * sizeof(float));
    v->tile_max = malloc((size_t)n * n * sizeof(float));
    if (!v->tile_min || !v->tile_max) return 0;
    v->tiles = n;
#if SHADOWMAP_AVX2
    const bool avx2 = T == 16 && brm_cpu_avx2();
#endif
    for (uint32_t tj = 0; tj < n; tj++)
        for (uint32_t ti = 0; ti < n; ti++) {
#if SHADOWMAP_AVX2
            if (avx2 && (tj + 1) * T <= v->res && (ti + 1) * T <= v->res) {
                tile_range_avx2(v->depth + (size_t)tj * T * v->res + (size_t)ti * T, v->res, &v->tile_min[tj * n + ti],
                                &v->tile_max[tj * n + ti]);
                continue;
            }
#endif
            float lo = INFINITY, hi = -INFINITY;
            for (uint32_t j = tj * T; j < (tj + 1) * T && j < v->res; j++) {
                const float *row = v->depth + (size_t)j * v->res;
                for (uint32_t i = ti * T; i < (ti + 1) * T && i < v->res; i++) {
                    if (row[i] < lo) lo = row[i];
                    if (row[i] > hi) hi = row[i];
                }
            }
            v->tile_min[tj * n + ti] = lo;
            v->tile_max[tj * n + ti] = hi;
        }
    return 1;
}

/* The box's eight corners in the view: its depth range and the texel rectangle every point of
 * it projects into (extremes at corners: depth is linear, and x/z, y/z are linear-fractional
 * over a box in front of the view). Then the tiles under the rectangle grown by the filter
 * radius: if none can hide the box's farthest point, PCF reads only "lit" everywhere; if all
 * hide its nearest point and the rectangle lies inside the map, only "shadowed". */
int brm_shadowmap_classify(const shadow_view *v, brm_aabb b, double r)
{
    if (!v->tile_min) return -1;
    double x0 = HUGE_VAL, x1 = -HUGE_VAL, y0 = HUGE_VAL, y1 = -HUGE_VAL, z0 = HUGE_VAL, z1 = -HUGE_VAL;
    for (int c = 0; c < 8; c++) {
        brm_vec3 p = brm_v3(c & 1 ? b.max.x : b.min.x, c & 2 ? b.max.y : b.min.y, c & 4 ? b.max.z : b.min.z);
        brm_vec3 d = to_view(v, p);
        double z;
        if (v->kind == BRM_VIEW_ORTHO) {
            z = d.z - v->z_near;
        } else {
            if (d.z <= v->z_near) return -1;
            z = d.z;
            d.x /= d.z, d.y /= d.z;
        }
        double X = (d.x - v->lo[0]) / v->texel, Y = (d.y - v->lo[1]) / v->texel;
        x0 = fmin(x0, X), x1 = fmax(x1, X), y0 = fmin(y0, Y), y1 = fmax(y1, Y), z0 = fmin(z0, z), z1 = fmax(z1, z);
    }
    x0 -= r + 1.0, y0 -= r + 1.0, x1 += r + 1.0, y1 += r + 1.0;
    double res = (double)v->res;
    bool inside = x0 >= 0.0 && y0 >= 0.0 && x1 <= res && y1 <= res;
    if (x1 <= 0.0 || y1 <= 0.0 || x0 >= res || y0 >= res) return 1; /* off the map: PCF says lit */
    uint32_t T = BRM_SHADOW_TILE;
    uint32_t i0 = (uint32_t)fmax(0.0, floor(x0)) / T, i1 = (uint32_t)fmin(res - 1.0, floor(x1)) / T;
    uint32_t j0 = (uint32_t)fmax(0.0, floor(y0)) / T, j1 = (uint32_t)fmin(res - 1.0, floor(y1)) / T;
    float lo, hi;
    tile_extremes(v, i0, i1, j0, j1, &lo, &hi);
    if ((double)lo >= z1) return 1;             /* no texel hides even the farthest point */
    if (inside && (double)hi < z0) return 0;    /* every texel hides even the nearest point */
    return -1;
}
