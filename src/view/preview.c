/* Preview pictures: the scene from a camera, lit, with the baked fog over it (view/preview.h). */
#include "view/preview.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "base/lds.h"
#include "base/sh.h"
#include "base/threads.h"
#include "scene/light.h"
#include "scene/media.h"
#include "scene/phase.h"
#include "shadow/shadow.h"
#include "view/image.h"
#include "view/tone.h"
#include "voxel/bvh.h"
#include "voxel/grid.h"

/* Shadow maps of the preview: texels of about 1/1024 of the largest extent of what the camera
 * can see lit (the scene's geometry and the target), unless a light sets its resolution.
 * Common practice, no source: fine enough for a picture, 4 MiB per map face. (1/512 saved
 * only about 12 % of the demo hall's setup, which is mostly the optical-depth grids.) */
#define PREVIEW_SHADOW_TEXELS 1024.0
/* The world march stops once the transmittance is below this: what lies behind adds less
 * than this fraction of its own radiance. */
#define MARCH_T_MIN 1e-6

/* Process CPU seconds, every thread (benches: wall time on a shared machine says little). */
static double cpu_now(void)
{
    struct timespec ts;
    if (clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &ts) != 0) return 0.0;
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

/* ---- camera ---------------------------------------------------------------------------- */

typedef struct cam {
    brm_vec3 pos, fwd, right, up;
    double tan_x, tan_y;
    uint32_t w, h;
} cam;

/* Unit ray through pixel (x, y) (y down) and its view-space depth per unit length. */
static brm_vec3 cam_ray(const cam *c, uint32_t x, uint32_t y, double *u, double *v)
{
    *u = ((double)x + 0.5) / (double)c->w;
    *v = 1.0 - ((double)y + 0.5) / (double)c->h;
    double sx = (2.0 * *u - 1.0) * c->tan_x, sy = (2.0 * *v - 1.0) * c->tan_y;
    return brm_norm(brm_add(c->fwd, brm_add(brm_scale(c->right, sx), brm_scale(c->up, sy))));
}

/* ---- fog from a frustum volume ------------------------------------------------------------ */

typedef struct frustum_fog {
    uint32_t n[3];
    double *bound;      /* n[2] + 1 depths: 0 (the camera), then slice_depths[1..n[2]] */
    float *st;          /* per froxel: S.r, S.g, S.b, T, up to the froxel's far boundary */
} frustum_fog;

/* S and T of column (i, j) at depth fraction f between boundaries a = k and b = k + 1 (the
 * closed form of a slab with constant extinction and source, view/preview.h). */
static void column_at(const frustum_fog *ff, uint32_t i, uint32_t j, uint32_t k, double f, double out[4])
{
    const size_t col = (size_t)i + (size_t)ff->n[0] * j, layer = (size_t)ff->n[0] * ff->n[1];
    double Sa[3] = {0, 0, 0}, Ta = 1.0;
    if (k > 0) {
        const float *a = ff->st + 4 * (col + layer * (k - 1));
        Sa[0] = a[0], Sa[1] = a[1], Sa[2] = a[2], Ta = a[3];
    }
    const float *b = ff->st + 4 * (col + layer * k);
    double Tb = b[3];
    if (f >= 1.0) {
        out[0] = b[0], out[1] = b[1], out[2] = b[2], out[3] = Tb;
        return;
    }
    double q = Ta > 0.0 ? brm_clamp(Tb / Ta, 0.0, 1.0) : 1.0;
    double qf = pow(q, f);
    double w = 1.0 - q > 1e-6 ? (1.0 - qf) / (1.0 - q) : f;
    for (int c = 0; c < 3; c++) out[c] = Sa[c] + ((double)b[c] - Sa[c]) * w;
    out[3] = Ta * qf;
}

/* S (3) and T at image position (u, v) (v up) and view depth z. */
static void frustum_lookup(const frustum_fog *ff, double u, double v, double z, double S[3], double *T)
{
    const uint32_t nz = ff->n[2];
    uint32_t k;
    double f;
    if (!(z < ff->bound[nz])) {
        k = nz - 1;
        f = 1.0;
    } else {
        uint32_t lo = 0, hi = nz; /* bound[lo] <= z < bound[hi] */
        if (z < 0.0) z = 0.0;
        while (hi - lo > 1) {
            uint32_t mid = lo + (hi - lo) / 2;
            if (ff->bound[mid] <= z) lo = mid;
            else hi = mid;
        }
        k = lo;
        f = (z - ff->bound[k]) / (ff->bound[k + 1] - ff->bound[k]);
    }
    /* Bilinear across the column centres, clamped at the edges. */
    double px = u * ff->n[0] - 0.5, py = v * ff->n[1] - 0.5;
    double fx = floor(px), fy = floor(py);
    double wx = px - fx, wy = py - fy;
    int64_t i0 = (int64_t)fx, j0 = (int64_t)fy;
    int64_t i1 = i0 + 1, j1 = j0 + 1;
    const int64_t mx = ff->n[0] - 1, my = ff->n[1] - 1;
    if (i0 < 0) i0 = 0, wx = 0.0;
    if (j0 < 0) j0 = 0, wy = 0.0;
    if (i1 > mx) i1 = mx;
    if (j1 > my) j1 = my;
    if (i0 > mx) i0 = mx;
    if (j0 > my) j0 = my;
    double c00[4], c10[4], c01[4], c11[4];
    column_at(ff, (uint32_t)i0, (uint32_t)j0, k, f, c00);
    column_at(ff, (uint32_t)i1, (uint32_t)j0, k, f, c10);
    column_at(ff, (uint32_t)i0, (uint32_t)j1, k, f, c01);
    column_at(ff, (uint32_t)i1, (uint32_t)j1, k, f, c11);
    double r[4];
    for (int c = 0; c < 4; c++)
        r[c] = (1.0 - wy) * ((1.0 - wx) * c00[c] + wx * c10[c]) + wy * ((1.0 - wx) * c01[c] + wx * c11[c]);
    S[0] = r[0], S[1] = r[1], S[2] = r[2];
    *T = r[3];
}

/* ---- fog from a world volume -------------------------------------------------------------- */

/* A cell's fields, padded to 16 floats (one 64-byte line, four 4-float lanes). */
enum { WF_EXT, WF_FREE, WF_A, WF_FIELDS = WF_A + 12, WF_STRIDE = 16 };

typedef struct world_fog {
    uint32_t n[3];
    brm_aabb box;
    brm_vec3 cell, inv_cell;
    double step;        /* march step: the smallest cell edge */
    float *f;           /* WF_STRIDE per cell (the last two zero): extinction, free fraction, per channel the four
                           coefficients of S(v) = a0 + a1·v.y + a2·v.z + a3·v.x */
} world_fog;

/* Energy-conserving integral of a slab with constant extinction and source (REFERENCES.md §6c,
 * the frustum baker's slab integral): ∫_0^len S·e^(−sigma·t) dt = S·(1 − e^(−sigma·len))/sigma,
 * with the limit S·len as sigma → 0. */
static double slab_integral(double S, double sigma, double len, double T)
{
    double tau = sigma * len;
    if (tau < 1e-7) return S * len * (1.0 - 0.5 * tau);
    return S * (1.0 - T) / sigma;
}

/* Trilinear between cell centres over the free parts: sigma and the S coefficients. Returns 0
 * where no free cell is near. */
static int world_sample(const world_fog *wf, brm_vec3 p, double *sigma, double a[12])
{
    double fc[3] = {(p.x - wf->box.min.x) * wf->inv_cell.x - 0.5, (p.y - wf->box.min.y) * wf->inv_cell.y - 0.5,
                    (p.z - wf->box.min.z) * wf->inv_cell.z - 0.5};
    uint32_t i0[3], i1[3];
    double w1[3];
    for (int ax = 0; ax < 3; ax++) {
        double m = (double)wf->n[ax] - 1.0;
        double c = brm_clamp(fc[ax], 0.0, m);
        double fl = floor(c);
        i0[ax] = (uint32_t)fl;
        i1[ax] = i0[ax] + 1 < wf->n[ax] ? i0[ax] + 1 : i0[ax];
        w1[ax] = c - fl;
    }
    /* Single precision, all 16 floats of a cell at once (the compiler's vector lanes): the
     * weights and the fields are floats already, and eight terms lose nothing a picture shows. */
    typedef float v4f __attribute__((vector_size(16)));
    v4f acc4[WF_STRIDE / 4] = {{0}};
    for (int corner = 0; corner < 8; corner++) {
        uint32_t ix = corner & 1 ? i1[0] : i0[0], iy = corner & 2 ? i1[1] : i0[1], iz = corner & 4 ? i1[2] : i0[2];
        const float w = (float)((corner & 1 ? w1[0] : 1.0 - w1[0]) * (corner & 2 ? w1[1] : 1.0 - w1[1]) *
                                (corner & 4 ? w1[2] : 1.0 - w1[2]));
        if (w == 0.0f) continue;
        const float *f = wf->f + WF_STRIDE * ((size_t)ix + (size_t)wf->n[0] * ((size_t)iy + (size_t)wf->n[1] * iz));
        const v4f wv = {w, w, w, w};
        for (int q = 0; q < WF_STRIDE / 4; q++) {
            v4f fv;
            memcpy(&fv, f + 4 * q, sizeof fv);
            acc4[q] += wv * fv;
        }
    }
    float acc_f[WF_STRIDE];
    memcpy(acc_f, acc4, sizeof acc_f);
    double acc[WF_FIELDS];
    for (int q = 0; q < WF_FIELDS; q++) acc[q] = acc_f[q];
    if (!(acc[WF_FREE] > 1e-9)) return 0;
    double inv = 1.0 / acc[WF_FREE];
    *sigma = acc[WF_EXT] * inv;
    for (int q = 0; q < 12; q++) a[q] = acc[WF_A + q] * inv;
    return 1;
}

/* March o + t·dir for t in [t0, t1] through the world volume: in-scatter S and transmittance T. */
static void world_march(const world_fog *wf, brm_vec3 o, brm_vec3 dir, double t0, double t1, double S[3], double *T)
{
    S[0] = S[1] = S[2] = 0.0;
    *T = 1.0;
    double inv_d = 1.0 / dir.x, inv_e = 1.0 / dir.y, inv_f = 1.0 / dir.z;
    double a0, a1;
    if (!brm_ray_aabb(o, brm_v3(inv_d, inv_e, inv_f), wf->box, t0, t1, &a0, &a1) || !(a1 > a0)) return;
    double len = a1 - a0;
    uint32_t steps = (uint32_t)ceil(len / wf->step);
    if (steps < 1) steps = 1;
    double h = len / steps, Tacc = 1.0;
    for (uint32_t s = 0; s < steps && Tacc >= MARCH_T_MIN; s++) {
        brm_vec3 p = brm_madd(o, dir, a0 + ((double)s + 0.5) * h);
        double sigma, a[12];
        if (!world_sample(wf, p, &sigma, a)) continue;
        const double Ts = exp(-(sigma * h));   /* the step's transmittance, for all three */
        for (int c = 0; c < 3; c++) {
            const double *k = a + 4 * c;
            double src = k[0] + k[1] * dir.y + k[2] * dir.z + k[3] * dir.x;
            if (src < 0.0) src = 0.0; /* a band-limited lobe can ring below zero */
            S[c] += Tacc * slab_integral(src, sigma, h, Ts);
        }
        if (sigma > 0.0) Tacc *= Ts;
    }
    *T = Tacc;
}

/* ---- probes ----------------------------------------------------------------------------- */

typedef struct probe_set {
    uint32_t count;
    double (*sh)[3][9];     /* per probe, per channel: sh.c0..c8 */
    uint8_t *valid;
    brm_bvh *bvh;           /* spheres at the probes */
    double radius;
} probe_set;

/* ---- the job ------------------------------------------------------------------------------ */

/* The sky's occlusion is estimated at every SKY_STRIDE-th pixel of every SKY_STRIDE-th row
 * (SKY_RAYS rays each) and spread to the pixels between by compose_row's filter: occlusion by
 * the scene's geometry varies slowly across a surface except at its edges, which the filter's
 * tests keep. A quarter of the rays: the sky rays were about half the pixel time. */
#define SKY_RAYS 8u     /* sky rays per estimate (sky_blocked) */
#define SKY_STRIDE 2u
#define SKY_FILTER 8u    /* the filter's half width (pixels), compose_row */

typedef struct job {
    const brm_scene *s;
    const brm_bvh *bvh;
    const brm_shadow_set *ss;
    cam c;
    brm_grid_kind kind;
    bool has_fog;
    frustum_fog ff;
    world_fog wf;
    probe_set ps;
    double eps;             /* shading points sit this far off the surface (m) */
    double far;             /* frustum: where misses take their fog */
    float *fog, *plain;
    uint8_t *marker;
    struct gpix *g;         /* first pass, one per pixel */
    struct skyest *se;      /* the sky estimates, one per estimate pixel, row by row */
    uint32_t se_w;          /* estimates per row: ceil(w / sky_stride) */
    uint32_t sky_rays;      /* rays per estimate */
    uint32_t sky_stride;    /* estimates at pixels (x, y) with x, y multiples of this */
    uint32_t sky_radius;    /* the filter's half width (pixels); 0: each pixel its own */
    double (*sky_dir)[2];   /* sky_rays: cos, sin of the rays' base azimuths */
} job;

/* ∫ max(a·ω, 0)·max(b·ω, 0) dω over the sphere for unit a, b at angle theta: the overlap of two
 * clamped cosines, (2/3)·((π − θ)·cos θ + sin θ) (own derivation; 2π/3 at θ = 0, 2/3 at π/2,
 * 0 at π; checked by quadrature in tests/view/test_preview.c). */
static double cosine_overlap(double cos_theta)
{
    double c = brm_clamp(cos_theta, -1.0, 1.0);
    double th = acos(c);
    return (2.0 / 3.0) * ((BRM_PI - th) * c + sin(th));
}

/* Sky irradiance on a surface with normal n open to the whole sky, in closed form (SPEC.md:
 * L = H + (Z − H)·max(y, 0) + (G − H)·max(−y, 0)):
 *   E_open(n) = π·H + (Z − H)·I(n·y) + (G − H)·I(−n·y), I the clamped-cosine overlap above. */
static brm_vec3 sky_open(const brm_sky *sky, brm_vec3 n)
{
    brm_vec3 a = brm_sub(sky->zenith, sky->horizon), b = brm_sub(sky->ground, sky->horizon);
    double iu = cosine_overlap(n.y), id = cosine_overlap(-n.y);
    return brm_add(brm_scale(sky->horizon, BRM_PI), brm_add(brm_scale(a, iu), brm_scale(b, id)));
}

/* What geometry takes from E_open at q (normal n), estimated by j->sky_rays cosine-distributed
 * rays over n's hemisphere. With directions ω_k distributed as cos/π (Malley: uniform on the
 * disk, lifted), each carries π/N of ∫ L·cos dω, so the blocked part is (π/N)·Σ_blocked L(ω_k)
 * and E = E_open − blocked: exact for an open surface and unbiased under occluders. The rays
 * are a stratified set (equal-area rings in the disk, the golden angle apart), rotated per
 * pixel by a hashed offset; the noise left (a room lit through its windows) is averaged away
 * across pixels by compose_row's filter. */
/* Per thread, for each cell of a cube map over directions (a face by its major axis, 8×8
 * cells on it), the BVH leaf that last blocked a sky ray there: the rays of neighbouring
 * pixels mostly end on the same wall or roof. A hint changes no answer
 * (brm_bvh_occluded_hint), only how soon it is found. */
#define HINT_SIDE 8
static _Thread_local uint32_t sky_hint[6 * HINT_SIDE * HINT_SIDE];
static _Thread_local const brm_bvh *sky_hint_bvh;

static uint32_t direction_cell(brm_vec3 w)
{
    double ax = fabs(w.x), ay = fabs(w.y), az = fabs(w.z), m, a, b;
    uint32_t face;
    if (ax >= ay && ax >= az) face = w.x < 0, m = ax, a = w.y, b = w.z;
    else if (ay >= az) face = 2 + (w.y < 0), m = ay, a = w.x, b = w.z;
    else face = 4 + (w.z < 0), m = az, a = w.x, b = w.y;
    int ia = (int)((a / m + 1.0) * 0.5 * HINT_SIDE), ib = (int)((b / m + 1.0) * 0.5 * HINT_SIDE);
    ia = ia < 0 ? 0 : ia >= HINT_SIDE ? HINT_SIDE - 1 : ia;
    ib = ib < 0 ? 0 : ib >= HINT_SIDE ? HINT_SIDE - 1 : ib;
    return (face * HINT_SIDE + (uint32_t)ia) * HINT_SIDE + (uint32_t)ib;
}

static brm_vec3 sky_blocked(const job *j, brm_vec3 q, brm_vec3 n, uint32_t pixel)
{
    if (sky_hint_bvh != j->bvh) {
        for (size_t k = 0; k < sizeof sky_hint / sizeof sky_hint[0]; k++) sky_hint[k] = BRM_BVH_NO_HINT;
        sky_hint_bvh = j->bvh;
    }
    const brm_sky *sky = &j->s->sky;
    brm_vec3 t1 = brm_norm(brm_cross(fabs(n.x) < 0.9 ? brm_v3(1, 0, 0) : brm_v3(0, 1, 0), n));
    brm_vec3 t2 = brm_cross(n, t1);
    /* A hashed offset per pixel: neighbouring pixels decorrelate (white noise, no pattern). */
    uint64_t key = brm_hash64(0x70726576ull /* "prev" */ ^ (uint64_t)pixel * 0x9e3779b97f4a7c15ull);
    double shift[2] = {brm_hash_unit(key), brm_hash_unit(key ^ 0x5851f42d4c957f2dull)};
    /* Azimuths 2π·frac(k·golden) (j->sky_dir) turned by the pixel's offset. */
    double cd = cos(2.0 * BRM_PI * shift[1]), sd = sin(2.0 * BRM_PI * shift[1]);
    brm_vec3 blocked = brm_v3(0, 0, 0);
    const uint32_t nr = j->sky_rays;
    for (uint32_t k = 0; k < nr; k++) {
        double u1 = ((double)k + shift[0]) / (double)nr;
        double ca = j->sky_dir[k][0], sa = j->sky_dir[k][1];
        double cp = ca * cd - sa * sd, sp = sa * cd + ca * sd;
        double r = sqrt(u1);
        brm_vec3 w = brm_add(brm_add(brm_scale(t1, r * cp), brm_scale(t2, r * sp)), brm_scale(n, sqrt(fmax(0.0, 1.0 - u1))));
        w = brm_norm(w);
        if (brm_bvh_occluded_hint(j->bvh, q, w, j->eps, HUGE_VAL, &sky_hint[direction_cell(w)])) blocked = brm_add(blocked, brm_sky_radiance(sky, w));
    }
    return brm_scale(blocked, BRM_PI / (double)nr);
}

/* What the first pass keeps per pixel; the second filters the sky term and composes. */
typedef struct gpix {
    float base[3];      /* radiance without the sky term (direct light; or sky, probe) */
    float eopen[3];     /* surfaces: the open sky's irradiance E_open(n) */
    float alb[3];       /* surfaces: albedo/π */
    float n[3];         /* surfaces: normal */
    float t;            /* surfaces: distance along the ray */
    uint32_t obj;       /* surfaces: object; UINT32_MAX otherwise */
    float S[3], T;      /* fog along the ray */
} gpix;

/* An estimate pixel's blocked sky and what the filter tests, packed (the filter reads up to
 * 81 of them per pixel). */
typedef struct skyest {
    float blk[3];       /* the blocked part's estimate */
    float n[3];
    float t;
    uint32_t obj;       /* UINT32_MAX: no surface (or no estimate) */
} skyest;

/* Direct light at a surface point q (irradiance from every light). */
static void light_surface(const job *j, brm_vec3 q, brm_vec3 n, double e[3])
{
    const brm_scene *s = j->s;
    e[0] = e[1] = e[2] = 0.0;
    for (uint32_t l = 0; l < s->light_count; l++) {
        const brm_light *lt = &s->lights[l];
        brm_vec3 to;
        double dist;
        double E = brm_light_illuminance(lt, q, &to, &dist);
        if (!(E > 0.0)) continue;
        double cs = brm_dot(n, to);
        if (!(cs > 0.0)) continue;
        double v = brm_shadow_visibility_surface(j->ss, l, q, n);
        if (!(v > 0.0)) continue;
        double a = E * cs * v * brm_shadow_transmittance(j->ss, l, q);
        e[0] += a * lt->color.x, e[1] += a * lt->color.y, e[2] += a * lt->color.z;
    }
}

static bool sky_sample_pixel(const job *j, uint32_t x, uint32_t y)
{
    return x % j->sky_stride == 0 && y % j->sky_stride == 0;
}

static void trace_row(void *ctx, uint32_t y, int worker)
{
    (void)worker;
    job *j = ctx;
    const cam *c = &j->c;
    const bool sky = j->s->sky.present;
    for (uint32_t x = 0; x < c->w; x++) {
        size_t px = (size_t)y * c->w + x;
        gpix *g = j->g + px;
        memset(g, 0, sizeof *g);
        g->obj = UINT32_MAX;
        if (sky_sample_pixel(j, x, y)) j->se[(size_t)(y / j->sky_stride) * j->se_w + x / j->sky_stride].obj = UINT32_MAX;
        double u, v;
        brm_vec3 dir = cam_ray(c, x, y, &u, &v);
        brm_hit hit;
        bool hit_any = j->bvh && brm_bvh_intersect(j->bvh, c->pos, dir, 0.0, HUGE_VAL, &hit);
        double t_hit = hit_any ? hit.t : HUGE_VAL;
        brm_vec3 L = brm_v3(0, 0, 0);
        bool marker = false;
        brm_hit ph;
        if (j->ps.bvh && brm_bvh_intersect(j->ps.bvh, c->pos, dir, 0.0, t_hit, &ph)) {
            /* A probe sphere: a white Lambertian sphere lit by the probe's irradiance. */
            uint32_t k = ph.object;
            brm_vec3 n = ph.normal;
            if (j->ps.valid[k]) {
                double rgb[3];
                for (int ch = 0; ch < 3; ch++) rgb[ch] = fmax(0.0, brm_sh9_irradiance(j->ps.sh[k][ch], n)) / BRM_PI;
                L = brm_v3(rgb[0], rgb[1], rgb[2]);
            } else {
                /* Black, with a cross where the normal is near the sphere's vertical or
                 * horizontal great circle as seen from the camera. */
                marker = fabs(brm_dot(n, c->right)) < 0.2 || fabs(brm_dot(n, c->up)) < 0.2;
            }
        } else if (hit_any) {
            brm_vec3 p = brm_madd(c->pos, dir, hit.t), n = hit.normal;
            brm_vec3 q = brm_madd(p, n, j->eps);
            brm_vec3 al = j->s->objects[hit.object].albedo;
            double e[3];
            light_surface(j, q, n, e);
            g->alb[0] = (float)(al.x / BRM_PI), g->alb[1] = (float)(al.y / BRM_PI), g->alb[2] = (float)(al.z / BRM_PI);
            L = brm_v3(al.x / BRM_PI * e[0], al.y / BRM_PI * e[1], al.z / BRM_PI * e[2]);
            if (sky) {
                brm_vec3 eo = sky_open(&j->s->sky, n);
                g->eopen[0] = (float)eo.x, g->eopen[1] = (float)eo.y, g->eopen[2] = (float)eo.z;
                if (j->bvh && sky_sample_pixel(j, x, y)) {
                    brm_vec3 b = sky_blocked(j, q, n, (uint32_t)px);
                    skyest *e = j->se + (size_t)(y / j->sky_stride) * j->se_w + x / j->sky_stride;
                    e->blk[0] = (float)b.x, e->blk[1] = (float)b.y, e->blk[2] = (float)b.z;
                    e->n[0] = (float)n.x, e->n[1] = (float)n.y, e->n[2] = (float)n.z;
                    e->t = (float)hit.t;
                    e->obj = hit.object;
                }
            }
            g->n[0] = (float)n.x, g->n[1] = (float)n.y, g->n[2] = (float)n.z;
            g->t = (float)hit.t;
            g->obj = hit.object;
        } else {
            L = brm_sky_radiance(&j->s->sky, dir);
        }
        g->base[0] = (float)L.x, g->base[1] = (float)L.y, g->base[2] = (float)L.z;
        j->marker[px] = marker;
        g->T = 1.0f;
        if (!j->has_fog) continue;
        double S[3], T;
        if (j->kind == BRM_GRID_FRUSTUM) {
            double z = hit_any ? hit.t * brm_dot(dir, c->fwd) : j->far;
            frustum_lookup(&j->ff, u, v, z, S, &T);
        } else {
            world_march(&j->wf, c->pos, dir, 0.0, t_hit, S, &T);
        }
        g->S[0] = (float)S[0], g->S[1] = (float)S[1], g->S[2] = (float)S[2], g->T = (float)T;
    }
}

/* The blocked-sky estimate is averaged over the estimate pixels within j->sky_radius of this
 * one that show the same object with nearly the same normal (cos > 0.95) and distance (within
 * 3 %): a cross-bilateral box filter, common practice, no source. It keeps shadow-free detail
 * such as corners, since a neighbour across an edge fails the normal or distance test, and
 * leaves an open surface exact (only the blocked part is filtered; each pixel keeps its own
 * E_open). A pixel with no such estimate near (a sliver of an object) traces its own. */
static void compose_row(void *ctx, uint32_t y, int worker)
{
    (void)worker;
    job *j = ctx;
    const uint32_t w = j->c.w, h = j->c.h, R = j->sky_radius, st = j->sky_stride;
    const bool sky = j->s->sky.present;
    for (uint32_t x = 0; x < w; x++) {
        size_t px = (size_t)y * w + x;
        const gpix *g = j->g + px;
        double L[3] = {g->base[0], g->base[1], g->base[2]};
        if (g->obj != UINT32_MAX && sky) {
            double acc[3] = {0, 0, 0};
            uint32_t cnt = 0;
            if (j->bvh) {
                /* The estimate rows and columns within [y − R, y + R] × [x − R, x + R]. */
                uint32_t y0 = y > R ? y - R : 0, y1 = y + R < h ? y + R : h - 1;
                uint32_t x0 = x > R ? x - R : 0, x1 = x + R < w ? x + R : w - 1;
                y0 = (y0 + st - 1) / st, x0 = (x0 + st - 1) / st, y1 /= st, x1 /= st;
                for (uint32_t yy = y0; yy <= y1; yy++)
                    for (uint32_t xx = x0; xx <= x1; xx++) {
                        const skyest *q = j->se + (size_t)yy * j->se_w + xx;
                        if (q->obj != g->obj) continue;
                        if (q->n[0] * g->n[0] + q->n[1] * g->n[1] + q->n[2] * g->n[2] < 0.95f) continue;
                        if (fabsf(q->t - g->t) > 0.03f * g->t) continue;
                        acc[0] += q->blk[0], acc[1] += q->blk[1], acc[2] += q->blk[2];
                        cnt++;
                    }
                if (cnt == 0) {
                    double u, v;
                    brm_vec3 dir = cam_ray(&j->c, x, y, &u, &v), n = brm_v3(g->n[0], g->n[1], g->n[2]);
                    brm_vec3 q = brm_madd(brm_madd(j->c.pos, dir, (double)g->t), n, j->eps);
                    brm_vec3 b = sky_blocked(j, q, n, (uint32_t)px);
                    acc[0] = b.x, acc[1] = b.y, acc[2] = b.z;
                    cnt = 1;
                }
            }
            for (int c = 0; c < 3; c++) {
                double e = (double)g->eopen[c] - (cnt ? acc[c] / cnt : 0.0);
                L[c] += g->alb[c] * (e > 0.0 ? e : 0.0);
            }
        }
        float *pl = j->plain + 3 * px, *fg = j->fog + 3 * px;
        for (int c = 0; c < 3; c++) {
            pl[c] = (float)L[c];
            fg[c] = j->has_fog ? (float)(L[c] * g->T + g->S[c]) : pl[c];
        }
    }
}

/* ---- volume checks ---------------------------------------------------------------------- */

static const char *kind_name(int k)
{
    return k == BRV_GRID_WORLD ? "world" : k == BRV_GRID_FRUSTUM ? "frustum" : k == BRV_GRID_PROBES ? "probes" : "unknown";
}

static bool close_to(double a, double b)
{
    return fabs(a - b) <= 1e-6 * fmax(1.0, fmax(fabs(a), fabs(b)));
}

static bool close_vec(const double a[3], brm_vec3 b)
{
    return close_to(a[0], b.x) && close_to(a[1], b.y) && close_to(a[2], b.z);
}

static const char *const FRUSTUM_CH[] = {"scatter.r", "scatter.g", "scatter.b", "transmittance"};
static const char *const WORLD_CH[] = {"extinction", "occupancy", "dir.r0", "dir.r1", "dir.r2", "dir.r3",
                                       "dir.g0", "dir.g1", "dir.g2", "dir.g3", "dir.b0", "dir.b1", "dir.b2",
                                       "dir.b3"};

static brm_status need_channels(const brv_volume *vol, const char *vol_path, const char *const *names, int n,
                                brm_diag *d)
{
    for (int i = 0; i < n; i++)
        BRM_CHECK(d, brv_channel_find(vol, names[i]) >= 0, BRM_E_INPUT,
                  "%s: no channel \"%s\", which a preview reads; expected a volume written by brume bake", vol_path,
                  names[i]);
    return BRM_OK;
}

brm_status brm_preview_check_volume(const brm_scene *s, uint32_t t, const brv_volume *vol, const char *vol_path,
                                    brm_diag *d)
{
    const brm_target *tg = &s->targets[t];
    const brv_grid_info *gi = brv_grid(vol);
    brm_grid g;
    brm_status st = brm_grid_init(&g, tg, d);
    if (st != BRM_OK) return st;
    char why[256] = "";
    int want = tg->grid == BRM_GRID_WORLD ? BRV_GRID_WORLD : tg->grid == BRM_GRID_FRUSTUM ? BRV_GRID_FRUSTUM : BRV_GRID_PROBES;
    if ((int)gi->kind != want) {
        snprintf(why, sizeof why, "it holds a %s grid, the target is a %s grid", kind_name(gi->kind), kind_name(want));
    } else if (gi->cells[0] != g.n[0] || gi->cells[1] != g.n[1] || gi->cells[2] != g.n[2]) {
        snprintf(why, sizeof why, "it has %u x %u x %u %s, the target %u x %u x %u", gi->cells[0], gi->cells[1],
                 gi->cells[2], want == BRV_GRID_PROBES ? "probes" : "cells", g.n[0], g.n[1], g.n[2]);
    } else if (want != BRV_GRID_FRUSTUM && (!close_vec(gi->bounds_min, g.box.min) || !close_vec(gi->bounds_max, g.box.max))) {
        snprintf(why, sizeof why, "its bounds (%g, %g, %g)..(%g, %g, %g) differ from the target's (%g, %g, %g)..(%g, %g, %g)",
                 gi->bounds_min[0], gi->bounds_min[1], gi->bounds_min[2], gi->bounds_max[0], gi->bounds_max[1],
                 gi->bounds_max[2], g.box.min.x, g.box.min.y, g.box.min.z, g.box.max.x, g.box.max.y, g.box.max.z);
    } else if (want == BRV_GRID_FRUSTUM) {
        const brv_camera *vc = &gi->camera;
        const brm_camera *tc = &tg->camera;
        if (!close_vec(vc->position, tc->position) || !close_vec(vc->look_at, tc->look_at) ||
            !close_vec(vc->up, tc->up) || !close_to(vc->fov_y_deg, tc->fov_y_deg) || !close_to(vc->aspect, tc->aspect) ||
            !close_to(vc->near_m, tc->near) || !close_to(vc->far_m, tc->far)) {
            snprintf(why, sizeof why, "its camera (position, look_at, up, fov_y_deg, aspect, near or far) differs from the target's");
        } else {
            for (uint32_t k = 0; k <= g.n[2]; k++)
                if (!gi->slice_depths || !close_to(gi->slice_depths[k], g.slice_depths[k])) {
                    snprintf(why, sizeof why, "its depth slice boundary %u is %g m, the target's %g m", k,
                             gi->slice_depths ? gi->slice_depths[k] : 0.0, g.slice_depths[k]);
                    break;
                }
        }
    }
    brm_grid_free(&g);
    if (why[0])
        return brm_diag_error(d, BRM_E_INPUT,
                              "%s: the volume does not match %s \"%s\" of %s: %s; bake it again: brume bake %s --target %s",
                              vol_path, tg->json_path, tg->name, s->path[0] ? s->path : s->name, why,
                              s->path[0] ? s->path : "SCENE", tg->name);
    if (want == BRV_GRID_FRUSTUM) return need_channels(vol, vol_path, FRUSTUM_CH, 4, d);
    if (want == BRV_GRID_WORLD) return need_channels(vol, vol_path, WORLD_CH, 14, d);
    for (int c = 0; c < 3; c++)
        for (int i = 0; i < 9; i++) {
            char nm[16];
            snprintf(nm, sizeof nm, "sh.%c%d", "rgb"[c], i);
            BRM_CHECK(d, brv_channel_find(vol, nm) >= 0, BRM_E_INPUT,
                      "%s: no channel \"%s\", which a probe preview reads; expected a volume written by brume bake",
                      vol_path, nm);
        }
    return need_channels(vol, vol_path, (const char *const[]){"validity"}, 1, d);
}

/* ---- decoding the volume ---------------------------------------------------------------- */

static brm_status decode(const brv_volume *vol, const char *vol_path, const char *name, float *out, brm_diag *d)
{
    int ch = brv_channel_find(vol, name);
    BRM_CHECK(d, ch >= 0, BRM_E_INPUT, "%s: no channel \"%s\"", vol_path, name);
    brv_result r = brv_decode_channel(vol, (uint32_t)ch, out, brv_channel_size(vol));
    if (r == BRV_E_NOMEM) return brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory decoding \"%s\"", vol_path, name);
    BRM_CHECK(d, r == BRV_OK, BRM_E_INPUT, "%s: channel \"%s\": %s; run brume verify %s", vol_path, name,
              brv_result_text(r), vol_path);
    return BRM_OK;
}

static brm_status load_frustum(job *j, const brv_volume *vol, const char *vol_path, brm_diag *d)
{
    const brv_grid_info *gi = brv_grid(vol);
    frustum_fog *ff = &j->ff;
    memcpy(ff->n, gi->cells, sizeof ff->n);
    size_t n = brv_channel_size(vol);
    ff->bound = malloc(sizeof(double) * ((size_t)ff->n[2] + 1));
    ff->st = malloc(sizeof(float) * 4 * n);
    float *tmp = malloc(sizeof(float) * n);
    brm_status st = BRM_OK;
    if (!ff->bound || !ff->st || !tmp) {
        st = brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory for the fog (%zu froxels)", vol_path, n);
        goto done;
    }
    ff->bound[0] = 0.0;
    for (uint32_t k = 1; k <= ff->n[2]; k++) ff->bound[k] = gi->slice_depths[k];
    for (int c = 0; c < 4; c++) {
        if ((st = decode(vol, vol_path, FRUSTUM_CH[c], tmp, d)) != BRM_OK) goto done;
        for (size_t i = 0; i < n; i++) ff->st[4 * i + (size_t)c] = tmp[i];
    }
    j->far = gi->slice_depths[ff->n[2]];
done:
    free(tmp);
    return st;
}

typedef struct chi_job {
    const brm_scene *s;
    world_fog *wf;
} chi_job;

/* χ1 per channel at each cell centre, the media blended by their scattering, applied to the
 * band-1 coefficients of one z layer. */
static void chi_layer(void *ctx, uint32_t z, int worker)
{
    (void)worker;
    chi_job *c = ctx;
    world_fog *wf = c->wf;
    for (uint32_t y = 0; y < wf->n[1]; y++)
        for (uint32_t x = 0; x < wf->n[0]; x++) {
            brm_vec3 p = brm_v3(wf->box.min.x + (x + 0.5) * wf->cell.x, wf->box.min.y + (y + 0.5) * wf->cell.y,
                                wf->box.min.z + (z + 0.5) * wf->cell.z);
            brm_media_point mp;
            brm_media_eval(c->s, p, &mp);
            double num[3] = {0, 0, 0}, den[3] = {0, 0, 0};
            for (uint32_t i = 0; i < mp.count; i++) {
                const brm_medium *m = &c->s->media[mp.medium[i]];
                double g1 = brm_phase_moment(&m->phase, 1);
                double ws[3] = {mp.sigma_t_each[i] * m->albedo.x, mp.sigma_t_each[i] * m->albedo.y,
                                mp.sigma_t_each[i] * m->albedo.z};
                for (int ch = 0; ch < 3; ch++) num[ch] += ws[ch] * g1, den[ch] += ws[ch];
            }
            float *f = wf->f + WF_STRIDE * ((size_t)x + (size_t)wf->n[0] * ((size_t)y + (size_t)wf->n[1] * z));
            for (int ch = 0; ch < 3; ch++) {
                double chi = den[ch] > 0.0 ? num[ch] / den[ch] : 0.0;
                for (int m = 1; m < 4; m++) f[WF_A + 4 * ch + m] = (float)(f[WF_A + 4 * ch + m] * chi);
            }
        }
}

static brm_status load_world(job *j, const brv_volume *vol, const char *vol_path, int threads, brm_diag *d)
{
    const brv_grid_info *gi = brv_grid(vol);
    world_fog *wf = &j->wf;
    memcpy(wf->n, gi->cells, sizeof wf->n);
    wf->box.min = brm_v3(gi->bounds_min[0], gi->bounds_min[1], gi->bounds_min[2]);
    wf->box.max = brm_v3(gi->bounds_max[0], gi->bounds_max[1], gi->bounds_max[2]);
    brm_vec3 size = brm_sub(wf->box.max, wf->box.min);
    wf->cell = brm_v3(size.x / wf->n[0], size.y / wf->n[1], size.z / wf->n[2]);
    wf->inv_cell = brm_v3(1.0 / wf->cell.x, 1.0 / wf->cell.y, 1.0 / wf->cell.z);
    /* One step per smallest cell edge: the baked field is trilinear between cell centres, so
     * finer steps only resample the same interpolation (half a cell took 1.3–2× the time for
     * a picture of the demo hall whose 8-bit pixels differed by 0.06 levels on average, 4 at
     * most). */
    wf->step = fmin(wf->cell.x, fmin(wf->cell.y, wf->cell.z));
    size_t n = brv_channel_size(vol), bytes;
    brm_status st = BRM_OK;
    float *tmp = malloc(sizeof(float) * n);
    if (brm_mul_size(n, sizeof(float) * WF_STRIDE, &bytes)) wf->f = calloc(n, sizeof(float) * WF_STRIDE);
    if (!tmp || !wf->f) {
        free(tmp);
        return brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory for the fog (%zu cells)", vol_path, n);
    }
    /* Field q of the packed cell from channel WORLD_CH[q]: extinction, occupancy → free, then the
     * dir.* coefficients with their SH constants folded in (band 1 ordered y, z, x). */
    for (int q = 0; q < 14; q++) {
        if ((st = decode(vol, vol_path, WORLD_CH[q], tmp, d)) != BRM_OK) break;
        double scale = q == 0 ? 1.0 : q == 1 ? -1.0 : ((q - 2) % 4 == 0 ? BRM_SH_C0 : BRM_SH_C1);
        double offset = q == 1 ? 1.0 : 0.0;
        for (size_t i = 0; i < n; i++) {
            double v = offset + scale * (double)tmp[i];
            if (q == 1) v = brm_clamp(v, 0.0, 1.0);
            wf->f[WF_STRIDE * i + (size_t)q] = (float)v;
        }
    }
    free(tmp);
    if (st != BRM_OK) return st;
    /* The phase's first moment: one constant when every scattering medium has the same phase. */
    const brm_scene *s = j->s;
    bool same = true;
    double g1 = 0.0;
    bool first = true;
    for (uint32_t i = 0; i < s->medium_count; i++) {
        if (s->media[i].type == BRM_MEDIUM_NOISE) continue;
        double m = brm_phase_moment(&s->media[i].phase, 1);
        if (first) g1 = m, first = false;
        else if (m != g1) same = false;
    }
    if (same) {
        for (size_t i = 0; i < n; i++)
            for (int ch = 0; ch < 3; ch++)
                for (int m = 1; m < 4; m++) wf->f[WF_STRIDE * i + WF_A + 4 * (size_t)ch + (size_t)m] *= (float)g1;
    } else {
        chi_job c = {s, wf};
        if (brm_parallel_for(wf->n[2], threads, chi_layer, &c, &brm_interrupted) != wf->n[2])
            return brm_diag_error(d, BRM_E_INTERRUPTED, "preview: interrupted");
    }
    return BRM_OK;
}

static brm_status load_probes(job *j, const brv_volume *vol, const char *vol_path, double spacing_m, brm_diag *d)
{
    const brv_grid_info *gi = brv_grid(vol);
    probe_set *ps = &j->ps;
    size_t n = brv_channel_size(vol);
    ps->count = (uint32_t)n;
    ps->sh = malloc(sizeof *ps->sh * n);
    ps->valid = malloc(n);
    float *tmp = malloc(sizeof(float) * n);
    brm_scene *sp = calloc(1, sizeof *sp);
    if (sp) sp->objects = calloc(n, sizeof *sp->objects);
    brm_status st = BRM_OK;
    if (!ps->sh || !ps->valid || !tmp || !sp || !sp->objects) {
        st = brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory for %zu probes", vol_path, n);
        goto done;
    }
    for (int c = 0; c < 3 && st == BRM_OK; c++)
        for (int i = 0; i < 9; i++) {
            char nm[16];
            snprintf(nm, sizeof nm, "sh.%c%d", "rgb"[c], i);
            if ((st = decode(vol, vol_path, nm, tmp, d)) != BRM_OK) break;
            for (size_t k = 0; k < n; k++) ps->sh[k][c][i] = tmp[k];
        }
    if (st != BRM_OK || (st = decode(vol, vol_path, "validity", tmp, d)) != BRM_OK) goto done;
    /* Probe (i, j, k) at bounds_min + (i, j, k)·(max − min)/(cells − 1) (brv.h). */
    double st3[3];
    for (int a = 0; a < 3; a++)
        st3[a] = gi->cells[a] > 1 ? (gi->bounds_max[a] - gi->bounds_min[a]) / (gi->cells[a] - 1) : 0.0;
    brm_vec3 step = brm_v3(st3[0], st3[1], st3[2]);
    ps->radius = BRM_PREVIEW_PROBE_RADIUS * spacing_m;
    sp->object_count = (uint32_t)n;
    for (size_t k = 0; k < n; k++) {
        uint32_t x = (uint32_t)(k % gi->cells[0]), y = (uint32_t)(k / gi->cells[0] % gi->cells[1]),
                 z = (uint32_t)(k / ((size_t)gi->cells[0] * gi->cells[1]));
        brm_object *o = &sp->objects[k];
        o->shape = BRM_SHAPE_SPHERE;
        o->center = brm_v3(gi->bounds_min[0] + x * step.x, gi->bounds_min[1] + y * step.y, gi->bounds_min[2] + z * step.z);
        o->radius = ps->radius;
        o->bounds.min = brm_sub(o->center, brm_v3(ps->radius, ps->radius, ps->radius));
        o->bounds.max = brm_add(o->center, brm_v3(ps->radius, ps->radius, ps->radius));
        o->closed = true;
        ps->valid[k] = tmp[k] >= 0.5f;
    }
    st = brm_bvh_build(sp, &ps->bvh, d);
done:
    if (sp) free(sp->objects);
    free(sp);
    free(tmp);
    return st;
}

/* ---- render --------------------------------------------------------------------------- */

static brm_status set_camera(const brm_target *tg, const brm_preview_opts *o, cam *c, brm_diag *d)
{
    uint32_t w = o->width ? o->width : BRM_PREVIEW_DEFAULT_WIDTH;
    BRM_CHECK(d, w <= BRM_IMAGE_MAX_SIDE, BRM_E_USAGE, "width %u is over %u pixels", w, BRM_IMAGE_MAX_SIDE);
    brm_vec3 pos, look, up;
    double fov, aspect;
    if (tg->grid == BRM_GRID_FRUSTUM) {
        BRM_CHECK(d, !o->camera_set, BRM_E_USAGE,
                  "target \"%s\" is a frustum target and uses its own camera; drop --from, --look-at and --fov",
                  tg->name);
        pos = tg->camera.position, look = tg->camera.look_at, up = tg->camera.up;
        fov = tg->camera.fov_y_deg, aspect = tg->camera.aspect;
    } else {
        BRM_CHECK(d, o->camera_set, BRM_E_USAGE,
                  "target \"%s\" is a %s target: give a camera with --from X,Y,Z --look-at X,Y,Z [--fov DEG]",
                  tg->name, tg->grid == BRM_GRID_WORLD ? "world" : "probe");
        pos = o->from, look = o->look_at;
        up = brm_v3(0, 1, 0);
        fov = o->fov_y_deg > 0.0 ? o->fov_y_deg : BRM_PREVIEW_DEFAULT_FOV;
        aspect = o->aspect > 0.0 ? o->aspect : BRM_PREVIEW_DEFAULT_ASPECT;
        BRM_CHECK(d, fov > 0.0 && fov < 180.0, BRM_E_USAGE, "field of view %g degrees; give an angle between 0 and 180", fov);
    }
    brm_vec3 f = brm_sub(look, pos);
    BRM_CHECK(d, brm_len(f) > 0.0 && isfinite(brm_len(f)), BRM_E_USAGE,
              "the camera looks at the point it stands on; give a --look-at point away from --from");
    c->pos = pos;
    c->fwd = brm_norm(f);
    brm_vec3 r = brm_cross(c->fwd, up);
    if (brm_len(r) < 1e-9) r = brm_cross(c->fwd, brm_v3(0, 0, -1)); /* straight up or down: keep -z up */
    c->right = brm_norm(r);
    c->up = brm_cross(c->right, c->fwd);
    c->tan_y = tan(fov * BRM_PI / 360.0);
    c->tan_x = aspect * c->tan_y;
    double hh = o->height ? (double)o->height : floor((double)w / aspect + 0.5);
    if (hh < 1.0) hh = 1.0;
    BRM_CHECK(d, hh <= BRM_IMAGE_MAX_SIDE, BRM_E_USAGE, "height %.0f is over %u pixels", hh, BRM_IMAGE_MAX_SIDE);
    c->w = w;
    c->h = (uint32_t)hh;
    return BRM_OK;
}

void brm_preview_free(brm_preview *p)
{
    if (!p) return;
    free(p->fog);
    free(p->plain);
    free(p->marker);
    memset(p, 0, sizeof *p);
}

static void exposure_auto(brm_preview *p)
{
    size_t n = (size_t)p->w * p->h;
    float *m = malloc(sizeof(float) * (n ? n : 1));
    if (!m) {
        p->exposure_ev = 0.0;
        return;
    }
    for (size_t i = 0; i < n; i++) {
        const float *c = p->fog + 3 * i;
        m[i] = fmaxf(c[0], fmaxf(c[1], c[2]));
    }
    p->exposure_ev = log2(brm_auto_exposure(m, n));
    free(m);
}

brm_status brm_preview_render(const brm_scene *s, uint32_t t, const brv_volume *vol, const char *vol_path,
                              const brm_preview_opts *o, brm_preview *out, brm_diag *d)
{
    double t_start = brm_now(), c_start = cpu_now();
    memset(out, 0, sizeof *out);
    BRM_CHECK(d, s && t < s->target_count && o, BRM_E_INTERNAL, "preview: no scene, target or options");
    const brm_target *tg = &s->targets[t];
    if (!vol_path) vol_path = "volume";
    brm_status st;
    job j;
    memset(&j, 0, sizeof j);
    j.s = s;
    j.kind = tg->grid;
    if ((st = set_camera(tg, o, &j.c, d)) != BRM_OK) return st;
    if (vol && (st = brm_preview_check_volume(s, t, vol, vol_path, d)) != BRM_OK) return st;
    const int threads = o->threads > 0 ? o->threads : brm_cpu_count();
    brm_bvh *bvh = NULL;
    brm_shadow_set *ss = NULL;
    brm_grid g;
    memset(&g, 0, sizeof g);
    brm_preview p;
    memset(&p, 0, sizeof p);
    p.w = j.c.w, p.h = j.c.h;
    size_t npx = (size_t)p.w * p.h;
    p.fog = malloc(sizeof(float) * 3 * npx);
    p.plain = malloc(sizeof(float) * 3 * npx);
    p.marker = malloc(npx);
    if (!p.fog || !p.plain || !p.marker) {
        st = brm_diag_error(d, BRM_E_NOMEM, "preview: out of memory for a %u x %u picture", p.w, p.h);
        goto fail;
    }
    if ((st = brm_grid_init(&g, tg, d)) != BRM_OK) goto fail;

    /* What the camera can see lit: the geometry and the target. */
    brm_aabb lit = brm_grid_bounds(&g);
    for (uint32_t k = 0; k < s->object_count; k++) brm_aabb_union(&lit, s->objects[k].bounds);
    brm_vec3 ext = brm_sub(lit.max, lit.min);
    double largest = fmax(ext.x, fmax(ext.y, ext.z));
    double scale = brm_len(ext);
    if (!(scale > 0.0) || !isfinite(scale)) scale = 1.0, largest = 1.0;
    j.eps = 1e-6 * scale;
    if (s->object_count > 0 && (st = brm_bvh_build(s, &bvh, d)) != BRM_OK) goto fail;
    /* The preview traces its own sky rays per pixel: no sky cache. Its optical-depth grids get
     * a quarter of a bake's node budget: on the demo's doorway that halves the setup and moves
     * the picture by 0.001 levels on average, 1 at most (8-bit), as more lookups march. */
    brm_shadow_opts so = {lit, largest * BRM_SHADOW_TEXELS_PER_CELL / PREVIEW_SHADOW_TEXELS, threads, o->reference, bvh,
                          true, 0.25};
    if ((st = brm_shadows_build(s, &so, &ss, d)) != BRM_OK) goto fail;
    j.bvh = bvh;
    j.ss = ss;
    if (vol) {
        if (tg->grid == BRM_GRID_FRUSTUM) st = load_frustum(&j, vol, vol_path, d), j.has_fog = true;
        else if (tg->grid == BRM_GRID_WORLD) st = load_world(&j, vol, vol_path, threads, d), j.has_fog = true;
        else st = load_probes(&j, vol, vol_path, tg->spacing_m, d);
        if (st != BRM_OK) goto fail;
    }
    j.fog = p.fog, j.plain = p.plain, j.marker = p.marker;
    p.setup_seconds = brm_now() - t_start;
    p.setup_cpu_seconds = cpu_now() - c_start;
    /* Sky estimates: SKY_RAYS at every SKY_STRIDE-th pixel, filtered over SKY_FILTER; or
     * o->sky_rays at every pixel, each its own. */
    j.sky_rays = o->sky_rays ? o->sky_rays : SKY_RAYS;
    j.sky_stride = o->sky_rays ? 1 : SKY_STRIDE;
    j.sky_radius = o->sky_rays ? 0 : SKY_FILTER;
    j.sky_dir = malloc(sizeof *j.sky_dir * j.sky_rays);
    j.g = malloc(sizeof *j.g * npx);
    j.se_w = (p.w + j.sky_stride - 1) / j.sky_stride;
    j.se = malloc(sizeof *j.se * j.se_w * ((p.h + j.sky_stride - 1) / j.sky_stride));
    if (!j.g || !j.sky_dir || !j.se) {
        st = brm_diag_error(d, BRM_E_NOMEM, "preview: out of memory for a %u x %u picture", p.w, p.h);
        goto fail;
    }
    for (uint32_t k = 0; k < j.sky_rays; k++) {
        double a = 0.61803398874989484820 * (double)k; /* the golden ratio's fraction */
        a = 2.0 * BRM_PI * (a - floor(a));
        j.sky_dir[k][0] = cos(a), j.sky_dir[k][1] = sin(a);
    }
    if (brm_parallel_for(p.h, threads, trace_row, &j, &brm_interrupted) != p.h ||
        brm_parallel_for(p.h, threads, compose_row, &j, &brm_interrupted) != p.h) {
        st = brm_diag_error(d, BRM_E_INTERRUPTED, "preview: interrupted");
        goto fail;
    }
    p.fogged = j.has_fog;
    for (uint32_t k = 0; k < j.ps.count; k++) p.probes_invalid += !j.ps.valid[k];
    if (o->exposure_set) p.exposure_ev = o->exposure_ev;
    else exposure_auto(&p);
    st = BRM_OK;
    p.seconds = brm_now() - t_start;
    p.cpu_seconds = cpu_now() - c_start;
    *out = p;
    memset(&p, 0, sizeof p);
fail:
    brm_preview_free(&p);
    free(j.g);
    free(j.se);
    free(j.sky_dir);
    free(j.ff.bound);
    free(j.ff.st);
    free(j.wf.f);
    free(j.ps.sh);
    free(j.ps.valid);
    brm_bvh_free(j.ps.bvh);
    brm_shadows_free(ss);
    brm_bvh_free(bvh);
    brm_grid_free(&g);
    return st;
}

/* ---- output ----------------------------------------------------------------------------- */

brm_status brm_preview_encode(const brm_preview *p, bool fogged, uint8_t **bytes, size_t *len, brm_diag *d)
{
    static const uint8_t black[3] = {0, 0, 0};
    static const uint8_t mark[3] = {BRM_PREVIEW_MARKER_R, BRM_PREVIEW_MARKER_G, BRM_PREVIEW_MARKER_B};
    brm_image im;
    brm_status st = brm_image_alloc(&im, p->w, p->h, black, d);
    if (st != BRM_OK) return st;
    const float *src = fogged ? p->fog : p->plain;
    double k = exp2(p->exposure_ev);
    for (size_t i = 0; i < (size_t)p->w * p->h; i++) {
        uint8_t *o = im.rgb + 3 * i;
        if (p->marker && p->marker[i]) {
            memcpy(o, mark, 3);
            continue;
        }
        for (int c = 0; c < 3; c++) o[c] = brm_srgb_byte(brm_tone(k * (double)src[3 * i + (size_t)c]));
    }
    st = brm_ppm_encode(&im, bytes, len, d);
    brm_image_free(&im);
    return st;
}

int brm_preview_default_volume(const brm_scene *s, uint32_t t, char *buf, size_t cap)
{
    int n = snprintf(buf, cap, "out/%s/%s.brv", s->name, s->targets[t].name);
    return n > 0 && (size_t)n < cap;
}

int brm_preview_beside_path(const char *out, char *buf, size_t cap)
{
    size_t n = strlen(out);
    size_t stem = n;
    if (n >= 4 && (strcmp(out + n - 4, ".ppm") == 0 || strcmp(out + n - 4, ".PPM") == 0)) stem = n - 4;
    int r = snprintf(buf, cap, "%.*s-nofog%s", (int)stem, out, out + stem);
    return r > 0 && (size_t)r < cap;
}
