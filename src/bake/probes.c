/* Probe lattices: spherical-harmonic radiance (bands 0–2) per probe from direct light, the
 * sky, one diffuse bounce and the fog seen along each ray. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "bake/kernel.h"
#include "bake/surface_cache.h"
#include "base/lds.h"
#include "base/sh.h"
#include "base/threads.h"
#include "scene/light.h"
#include "voxel/bvh.h"
#include "voxel/grid.h"
#include "voxel/voxelize.h"

#include "bake/bake_internal.h"

/* ---- the coarse fog grid: in-scatter and extinction, marched along probe rays -------------- */

typedef struct fog_grid {
    uint32_t n[3];
    brm_aabb box;
    brm_vec3 cell;
    float *cell4;   /* 4 per cell, one load for the march: extinction (1/m), then the
                       isotropic in-scatter per channel (cd/m² per m) */
} fog_grid;

typedef struct fog_job {
    const brm_scene *s;
    brm_kernel k;
    fog_grid *f;
    uint32_t *lights;       /* per worker: light_count + 1 */
    uint32_t nb[3];         /* blocks per axis */
} fog_job;

enum { FOG_BLOCK = 8 };     /* cells per block edge: the unit of work and of light culling */

/* One block of the fog grid. Its lights are culled for the block's box as the world bake
 * culls them per brick: lights that cannot reach it (range, cone) or that the maps say are
 * hidden from all of it are left out, lights the maps say light all of it are marked so the
 * kernel skips their lookups. Both leave every result unchanged (brm_shadow_classify). */
static void fog_block(void *ctx, uint32_t item, int worker)
{
    fog_job *j = ctx;
    fog_grid *f = j->f;
    uint32_t lo[3], hi[3];
    uint32_t bi[3] = {item % j->nb[0], (item / j->nb[0]) % j->nb[1], item / (j->nb[0] * j->nb[1])};
    for (int a = 0; a < 3; a++) {
        lo[a] = bi[a] * FOG_BLOCK;
        hi[a] = lo[a] + FOG_BLOCK < f->n[a] ? lo[a] + FOG_BLOCK : f->n[a];
    }
    brm_aabb bb = {brm_add(f->box.min, brm_mul(f->cell, brm_v3(lo[0], lo[1], lo[2]))),
                   brm_add(f->box.min, brm_mul(f->cell, brm_v3(hi[0], hi[1], hi[2])))};
    uint32_t *lights = j->lights + (size_t)worker * (j->s->light_count + 1), nl = 0;
    for (uint32_t l = 0; l < j->s->light_count; l++) {
        if (!brm_light_reaches(&j->s->lights[l], bb)) continue;
        int cls = brm_shadow_classify(j->k.shadows, l, bb);
        if (cls == 0) continue;
        lights[nl++] = cls == 1 ? (l | BRM_KERNEL_LIT) : l;
    }
    double u[4][3];
    for (uint32_t kz = lo[2]; kz < hi[2]; kz++)
        for (uint32_t y = lo[1]; y < hi[1]; y++)
            for (uint32_t x = lo[0]; x < hi[0]; x++) {
                size_t c = (size_t)x + f->n[0] * ((size_t)y + f->n[1] * kz);
                brm_cell_samples(0x51ed2701f3a5c9e1ull ^ (uint64_t)c * 0x9e3779b97f4a7c15ull, 4, u);
                double e = 0, in[3] = {0, 0, 0};
                for (int si = 0; si < 4; si++) {
                    brm_vec3 p = brm_v3(f->box.min.x + (x + u[si][0]) * f->cell.x,
                                        f->box.min.y + (y + u[si][1]) * f->cell.y,
                                        f->box.min.z + (kz + u[si][2]) * f->cell.z);
                    brm_kernel_out ko;
                    brm_kernel_eval(&j->k, p, lights, nl, (uint32_t)(c * 4 + (size_t)si), NULL, &ko);
                    e += ko.sigma_t;
                    for (int ch = 0; ch < 3; ch++) in[ch] += ko.inscatter[ch];
                }
                f->cell4[4 * c] = (float)(e / 4);
                for (int ch = 0; ch < 3; ch++) f->cell4[4 * c + 1 + (size_t)ch] = (float)(in[ch] / 4);
            }
}

static brm_status fog_build(const brm_scene *s, const brm_shadow_set *ss, double spacing, int threads, fog_grid *f,
                            brm_diag *d)
{
    memset(f, 0, sizeof *f);
    if (s->medium_count == 0) return BRM_OK;
    f->box = s->fog_bounds;
    brm_vec3 ext = brm_sub(f->box.max, f->box.min);
    double largest = ext.x > ext.y ? (ext.x > ext.z ? ext.x : ext.z) : (ext.y > ext.z ? ext.y : ext.z);
    /* Cells of half the probe spacing, at most 96 per axis: the fog a probe sees is smooth at
     * that scale and the grid stays small next to the lattice. */
    double h = spacing * 0.5;
    if (largest / h > 96) h = largest / 96;
    for (int a = 0; a < 3; a++) {
        double e = brm_vget(ext, a);
        uint32_t n = (uint32_t)ceil(e / h);
        f->n[a] = n < 1 ? 1 : n;
    }
    f->cell = brm_v3(ext.x / f->n[0], ext.y / f->n[1], ext.z / f->n[2]);
    size_t cells = (size_t)f->n[0] * f->n[1] * f->n[2];
    f->cell4 = malloc(cells * 4 * sizeof *f->cell4);
    uint32_t *lights = malloc((size_t)threads * (s->light_count + 1) * sizeof *lights);
    if (!f->cell4 || !lights) {
        free(lights);
        return brm_diag_error(d, BRM_E_NOMEM, "out of memory for the probes' fog grid");
    }
    fog_job j = {s, {.scene = s, .shadows = ss}, f, lights, {0, 0, 0}};
    for (int a = 0; a < 3; a++) j.nb[a] = (f->n[a] + FOG_BLOCK - 1) / FOG_BLOCK;
    brm_parallel_for(j.nb[0] * j.nb[1] * j.nb[2], threads, fog_block, &j, NULL);
    free(lights);
    return BRM_OK;
}

static void fog_free(fog_grid *f)
{
    free(f->cell4);
}

/* Radiance gathered from the fog along o + t·dir for t in [0, tmax], and the transmittance
 * over that path: the ray walks the grid cell by cell (Amanatides & Woo 1987, "A Fast Voxel
 * Traversal Algorithm for Ray Tracing"), each cell's stretch integrated in closed form with the
 * cell's extinction and in-scatter. */
static void fog_march(const fog_grid *f, brm_vec3 o, brm_vec3 dir, double tmax, double L[3], double *T)
{
    L[0] = L[1] = L[2] = 0.0;
    *T = 1.0;
    if (!f->cell4) return;
    brm_vec3 inv = brm_v3(1.0 / dir.x, 1.0 / dir.y, 1.0 / dir.z);
    double t0, t1;
    if (!brm_ray_aabb(o, inv, f->box, 0.0, tmax, &t0, &t1) || !(t1 > t0)) return;
    brm_vec3 p = brm_madd(o, dir, t0);
    int idx[3], stepi[3];
    double tnext[3], tdelta[3];
    for (int a = 0; a < 3; a++) {
        double cell = brm_vget(f->cell, a), lo = brm_vget(f->box.min, a), d = brm_vget(dir, a);
        int i = (int)floor((brm_vget(p, a) - lo) / cell);
        if (i < 0) i = 0;
        if (i >= (int)f->n[a]) i = (int)f->n[a] - 1;
        idx[a] = i;
        if (d > 0) {
            stepi[a] = 1;
            tnext[a] = t0 + (lo + (i + 1) * cell - brm_vget(p, a)) / d;
            tdelta[a] = cell / d;
        } else if (d < 0) {
            stepi[a] = -1;
            tnext[a] = t0 + (lo + i * cell - brm_vget(p, a)) / d;
            tdelta[a] = -cell / d;
        } else {
            stepi[a] = 0;
            tnext[a] = HUGE_VAL;
            tdelta[a] = HUGE_VAL;
        }
    }
    double t = t0, tr = 1.0;
    while (t < t1) {
        int a = tnext[0] < tnext[1] ? (tnext[0] < tnext[2] ? 0 : 2) : (tnext[1] < tnext[2] ? 1 : 2);
        double te = tnext[a] < t1 ? tnext[a] : t1;
        double len = te - t;
        if (len > 0) {
            size_t c = (size_t)idx[0] + f->n[0] * ((size_t)idx[1] + f->n[1] * (size_t)idx[2]);
            const float *fc = f->cell4 + 4 * c;
            double sigma = fc[0], tau = sigma * len, Ts, w;
            /* ∫ S e^(−σt) dt over the stretch = S·(1 − e^(−τ))/σ (REFERENCES.md §6c). */
            if (tau < 0.1) {
                /* Most stretches of a fog grid are optically thin: Taylor series of e^(−τ) and
                 * of (1 − e^(−τ))/τ to τ⁵, truncation under τ⁶/720 < 1.4e-9 (relative), far
                 * below the grid's float values, and free of the cancellation in 1 − e^(−τ). */
                Ts = 1 - tau * (1 - tau * (1.0 / 2 - tau * (1.0 / 6 - tau * (1.0 / 24 - tau * (1.0 / 120)))));
                w = len * (1 - tau * (1.0 / 2 - tau * (1.0 / 6 - tau * (1.0 / 24 - tau * (1.0 / 120 - tau * (1.0 / 720))))));
            } else {
                Ts = exp(-tau);
                w = (1.0 - Ts) / sigma;
            }
            for (int ch = 0; ch < 3; ch++) L[ch] += tr * fc[1 + ch] * w;
            tr *= Ts;
            if (tr < 1e-6) break;
        }
        t = te;
        idx[a] += stepi[a];
        if (idx[a] < 0 || idx[a] >= (int)f->n[a]) break;
        tnext[a] += tdelta[a];
    }
    *T = tr;
}

/* ---- rays ---------------------------------------------------------------------------------- */

/* Direction i of n on a spherical Fibonacci lattice (equal-area, stratified; Swinbank & Purser
 * 2006), rotated by the unit quaternion q so neighbouring probes do not share directions. */
static brm_vec3 fib_dir(uint32_t i, uint32_t n)
{
    const double golden_angle = 2.39996322972865332; /* π(3 − √5) */
    double z = 1.0 - (2.0 * i + 1.0) / n;
    double r = sqrt(fmax(0.0, 1.0 - z * z));
    double ph = golden_angle * i;
    return brm_v3(r * cos(ph), r * sin(ph), z);
}

/* v rotated by the unit quaternion q. */
static brm_vec3 rotate(brm_vec3 v, const double q[4])
{
    /* v' = v + 2w(q×v) + 2 q×(q×v), q = (x, y, z, w) */
    brm_vec3 qv = brm_v3(q[0], q[1], q[2]);
    brm_vec3 t = brm_scale(brm_cross(qv, v), 2.0);
    return brm_add(brm_add(v, brm_scale(t, q[3])), brm_cross(qv, t));
}

/* Direction i of n (fib_dir), from the table of the target's n directions when it has one. */
static brm_vec3 ray_dir(uint32_t i, uint32_t n, const double q[4], const brm_vec3 *table, uint32_t table_n)
{
    return rotate(n == table_n ? table[i] : fib_dir(i, n), q);
}

/* A uniformly distributed rotation from three uniform numbers (Shoemake 1992). */
static void random_rotation(uint64_t key, double q[4])
{
    double u1 = brm_hash_unit(key), u2 = brm_hash_unit(key + 1), u3 = brm_hash_unit(key + 2);
    double a = sqrt(1 - u1), b = sqrt(u1);
    q[0] = a * sin(2 * BRM_PI * u2);
    q[1] = a * cos(2 * BRM_PI * u2);
    q[2] = b * sin(2 * BRM_PI * u3);
    q[3] = b * cos(2 * BRM_PI * u3);
}

typedef struct probe_ctx {
    const brm_scene *s;
    const brm_target *t;
    const brm_grid *g;
    const brm_bvh *bvh;
    const brm_shadow_set *ss;
    const brm_solid_index *solid;
    fog_grid fog;
    const brm_surface_cache *surf; /* bounce-hit irradiance; NULL: evaluated per hit */
    double surf_h;              /* its node spacing, m */
    bool surf_lights;           /* its nodes also hold each light's visibility and transmittance */
    double eps;                 /* offset of secondary ray origins, m */
    uint32_t channels;
    uint64_t *rays;             /* per worker: rays traced */
    brm_vec3 *dirs;             /* fib_dir(i, t->rays) for every i: the rays before rotation */
    uint64_t *tri_lights;       /* per scene triangle, bit l: light l may light a front-face
                                   hit on it (tri_lights_build); NULL: every light is tried */
} probe_ctx;

/* Per triangle, the lights that can give a front-face bounce hit on it any light: bit l clear
 * when light l lies behind the triangle's plane as seen from all of it (the cosine at every
 * hit is then ≤ 0: for a directional light the very product the hit computes, for others
 * the light is behind the plane through each vertex, and hits lie eps in front of the
 * triangle), or when it cannot reach the triangle's box grown by the hit offset
 * (brm_light_reaches: out of range or outside a spot's cone, so the illuminance is 0). A
 * skipped light is one the loops would have passed over: sums stay the same to the bit. Up
 * to 64 lights. */
static uint64_t *tri_lights_build(const brm_scene *s, double eps)
{
    if (s->light_count > 64 || s->tri_count == 0) return NULL;
    uint64_t *m = malloc((size_t)s->tri_count * sizeof *m);
    if (!m) return NULL;
    for (uint32_t t = 0; t < s->tri_count; t++) {
        const brm_vec3 *v = s->tris[t].v;
        /* The normal exactly as the ray caster computes a hit's (bvh.c fill_hit). */
        brm_vec3 n = brm_norm(brm_cross(brm_sub(v[1], v[0]), brm_sub(v[2], v[0])));
        brm_aabb box = {brm_vmin(v[0], brm_vmin(v[1], v[2])), brm_vmax(v[0], brm_vmax(v[1], v[2]))};
        double g = 2 * eps + 1e-6;
        box.min = brm_sub(box.min, brm_v3(g, g, g));
        box.max = brm_add(box.max, brm_v3(g, g, g));
        uint64_t bits = 0;
        for (uint32_t l = 0; l < s->light_count; l++) {
            const brm_light *lt = &s->lights[l];
            int behind;
            if (lt->type == BRM_LIGHT_DIRECTIONAL) {
                behind = brm_dot(n, brm_scale(lt->direction, -1.0)) <= 0;
            } else {
                behind = brm_dot(n, brm_sub(lt->position, v[0])) <= 0 && brm_dot(n, brm_sub(lt->position, v[1])) <= 0 &&
                         brm_dot(n, brm_sub(lt->position, v[2])) <= 0;
            }
            if (!behind && brm_light_reaches(lt, box)) bits |= (uint64_t)1 << l;
        }
        m[t] = bits;
    }
    return m;
}


/* Direct light at a surface point with normal n: every light's illuminance, cosine, shadow map
 * and fog on the way. */
static void surface_direct(const probe_ctx *c, brm_vec3 p, brm_vec3 n, double E[3])
{
    E[0] = E[1] = E[2] = 0.0;
    for (uint32_t l = 0; l < c->s->light_count; l++) {
        const brm_light *lt = &c->s->lights[l];
        brm_vec3 to;
        double dist;
        double e = brm_light_illuminance(lt, p, &to, &dist);
        double cosi = brm_dot(n, to);
        if (e <= 0 || cosi <= 0) continue;
        /* Bounce light: the sharp lookup (its penumbra matters little there). */
        double v = brm_shadow_visibility_surface_sharp(c->ss, l, p, n);
        if (v <= 0) continue;
        e *= cosi * v * brm_shadow_transmittance(c->ss, l, p);
        E[0] += e * lt->color.x;
        E[1] += e * lt->color.y;
        E[2] += e * lt->color.z;
    }
}

/* Whether light l lights the front face of triangle tri at p (normal n): 1 with its
 * illuminance *e and incidence cosine *cosi, both positive; 0 for a light the triangle's list
 * leaves out, one that does not reach p, or one behind the face. */
static inline int front_light(const probe_ctx *c, uint32_t tri, uint32_t l, brm_vec3 p, brm_vec3 n, double *e,
                              double *cosi)
{
    if (c->tri_lights && !(c->tri_lights[tri] >> l & 1)) return 0;
    brm_vec3 to;
    double dist;
    *e = brm_light_illuminance(&c->s->lights[l], p, &to, &dist);
    *cosi = brm_dot(n, to);
    return *e > 0 && *cosi > 0;
}

/* The direct light's unshadowed part alone (cheap: no map is read) at a front-face hit on
 * triangle tri. */
static void surface_unshadowed(const probe_ctx *c, uint32_t tri, brm_vec3 p, brm_vec3 n, double U[3])
{
    U[0] = U[1] = U[2] = 0.0;
    for (uint32_t l = 0; l < c->s->light_count; l++) {
        const brm_light *lt = &c->s->lights[l];
        double e, cosi;
        if (!front_light(c, tri, l, p, n, &e, &cosi)) continue;
        e *= cosi;
        U[0] += e * lt->color.x;
        U[1] += e * lt->color.y;
        U[2] += e * lt->color.z;
    }
}

/* Sky irradiance at a surface point with normal n, the visible sky band-limited (Ramamoorthi &
 * Hanrahan 2001, bands 0–1). */
static void surface_sky(const probe_ctx *c, brm_vec3 p, brm_vec3 n, uint32_t index, double E[3])
{
    E[0] = E[1] = E[2] = 0.0;
    if (!c->s->sky.present) return;
    double sky[3][4], y[4];
    brm_sky_incident(c->ss, p, index, sky);
    brm_sh4(n, y);
    for (int ch = 0; ch < 3; ch++) {
        double e = BRM_PI * sky[ch][0] * y[0] + (2.0 * BRM_PI / 3.0) * (sky[ch][1] * y[1] + sky[ch][2] * y[2] + sky[ch][3] * y[3]);
        E[ch] = e > 0 ? e : 0;
    }
}

/* Irradiance at a surface point with normal n: direct light and the visible sky. */
static void surface_irradiance(const probe_ctx *c, brm_vec3 p, brm_vec3 n, uint32_t index, double E[3])
{
    double sky[3];
    surface_direct(c, p, n, E);
    surface_sky(c, p, n, index, sky);
    for (int ch = 0; ch < 3; ch++) E[ch] += sky[ch];
}

/* Whether no hit near the surface point p (normal n) can be lit by light lt: the light lies
 * behind the plane (no point of it faces the light), or its range ends more than two node
 * spacings short of p (a hit whose cell holds the node at p lies within a cell diagonal, √2
 * spacings, of it). */
static int light_unused_near(const probe_ctx *c, const brm_light *lt, brm_vec3 p, brm_vec3 n)
{
    if (lt->type == BRM_LIGHT_DIRECTIONAL) return brm_dot(n, lt->direction) >= 0;
    brm_vec3 to = brm_sub(lt->position, p);
    return brm_dot(n, to) <= 0 || (lt->range_m > 0 && brm_len(to) > lt->range_m + 2 * c->surf_h);
}

/* The surface cache's node values (surface_cache.h): per channel, the share of the unshadowed
 * direct light that arrives (tested: it jumps at a shadow's edge; 1 where no light falls), then
 * the sky irradiance (smooth). A hit multiplies the share by its own unshadowed light, so the
 * falloff and cosine of near lights stay exact and only shadows and fog are interpolated.
 * With c->surf_lights, the extra values: per light its visibility and transmittance at the
 * node (0 and 1 for a light no hit nearby can use), for the hits in cells where the shares
 * disagree (surface_fallback). */
static void surf_eval(const void *ctx, brm_vec3 p, brm_vec3 n, uint32_t index, double *v)
{
    const probe_ctx *c = ctx;
    double E[3] = {0, 0, 0}, U[3] = {0, 0, 0}, sky[3];
    for (uint32_t l = 0; l < c->s->light_count; l++) {
        const brm_light *lt = &c->s->lights[l];
        brm_vec3 to;
        double dist;
        double e = brm_light_illuminance(lt, p, &to, &dist);
        double cosi = brm_dot(n, to);
        int lit = e > 0 && cosi > 0;
        double vis = 0.0, tr = 1.0;
        if (lit || (c->surf_lights && !light_unused_near(c, lt, p, n))) {
            vis = brm_shadow_visibility_surface_sharp(c->ss, l, p, n);
            if (vis > 0) tr = brm_shadow_transmittance(c->ss, l, p);
        }
        if (c->surf_lights) {
            v[BRM_SURFACE_VALUES + 2 * l] = vis;
            v[BRM_SURFACE_VALUES + 2 * l + 1] = tr;
        }
        if (!lit) continue;
        e *= cosi;
        U[0] += e * lt->color.x;
        U[1] += e * lt->color.y;
        U[2] += e * lt->color.z;
        if (vis <= 0) continue;
        e *= vis * tr;
        E[0] += e * lt->color.x;
        E[1] += e * lt->color.y;
        E[2] += e * lt->color.z;
    }
    surface_sky(c, p, n, index, sky);
    for (int ch = 0; ch < 3; ch++) {
        v[ch] = U[ch] > 0 ? E[ch] / U[ch] : 1.0;
        v[3 + ch] = sky[ch];
    }
}

/* Direct light at a bounce hit p in a cell whose nodes disagree on the share: per light, the
 * visibility the four nodes agree on exactly (lit or shadowed all over), else the lookup at p;
 * the transmittance interpolated where the nodes agree within 0.02, else looked up at p. */
static void surface_fallback(const probe_ctx *c, uint32_t tri, brm_vec3 p, brm_vec3 n, const brm_surface_cell *cell,
                             double E[3])
{
    E[0] = E[1] = E[2] = 0.0;
    for (uint32_t l = 0; l < c->s->light_count; l++) {
        const brm_light *lt = &c->s->lights[l];
        double e, cosi;
        if (!front_light(c, tri, l, p, n, &e, &cosi)) continue;
        const float *x0 = cell->extra[0] + 2 * l, *x1 = cell->extra[1] + 2 * l;
        const float *x2 = cell->extra[2] + 2 * l, *x3 = cell->extra[3] + 2 * l;
        double vis;
        if (x0[0] == x1[0] && x0[0] == x2[0] && x0[0] == x3[0] && (x0[0] == 0.0f || x0[0] == 1.0f)) vis = x0[0];
        else vis = brm_shadow_visibility_surface_sharp(c->ss, l, p, n);
        if (vis <= 0) continue;
        double tlo = fmin(fmin(x0[1], x1[1]), fmin(x2[1], x3[1])), thi = fmax(fmax(x0[1], x1[1]), fmax(x2[1], x3[1]));
        double tr = x0[0] > 0 && x1[0] > 0 && x2[0] > 0 && x3[0] > 0 && thi - tlo <= 0.02
                        ? cell->w[0] * x0[1] + cell->w[1] * x1[1] + cell->w[2] * x2[1] + cell->w[3] * x3[1]
                        : brm_shadow_transmittance(c->ss, l, p);
        e *= cosi * vis * tr;
        E[0] += e * lt->color.x;
        E[1] += e * lt->color.y;
        E[2] += e * lt->color.z;
    }
}

/* Bakes one probe at p: coefficients L[3][9]; returns the fraction of rays that hit back faces. */
static double bake_probe(const probe_ctx *c, brm_vec3 p, uint64_t key, uint32_t nrays, double L[3][9], int worker)
{
    memset(L, 0, sizeof(double) * 27);
    const brm_scene *s = c->s;
    /* Direct light: a delta in direction, projected as the delta it is. */
    for (uint32_t l = 0; l < s->light_count; l++) {
        const brm_light *lt = &s->lights[l];
        brm_vec3 to;
        double dist;
        double e = brm_light_illuminance(lt, p, &to, &dist);
        if (e <= 0) continue;
        double v = brm_shadow_visibility(c->ss, l, p);
        if (v <= 0) continue;
        e *= v * brm_shadow_transmittance(c->ss, l, p);
        double y[9];
        brm_sh9(to, y);
        const double rgb[3] = {e * lt->color.x, e * lt->color.y, e * lt->color.z};
        for (int ch = 0; ch < 3; ch++)
            for (int i = 0; i < 9; i++) L[ch][i] += rgb[ch] * y[i];
    }
    double q[4];
    random_rotation(key, q);
    const double w = 4.0 * BRM_PI / nrays;
    uint32_t back = 0;
    uint64_t traced = 0;
    for (uint32_t r = 0; r < nrays; r++) {
        brm_vec3 dir = ray_dir(r, nrays, q, c->dirs, c->dirs ? c->t->rays : 0);
        brm_hit hit;
        int h = c->bvh ? brm_bvh_intersect(c->bvh, p, dir, 0.0, HUGE_VAL, &hit) : 0;
        traced++;
        double rad[3] = {0, 0, 0};
        double fogL[3], T;
        fog_march(&c->fog, p, dir, h ? hit.t : HUGE_VAL, fogL, &T);
        if (h && hit.back_face) {
            back++;
        } else if (h) {
            const brm_object *ob = &s->objects[hit.object];
            double E[3], sv[BRM_SURFACE_VALUES];
            brm_vec3 hp = brm_madd(brm_madd(p, dir, hit.t), hit.normal, c->eps);
            brm_surface_cell cell;
            if (c->surf && hit.tri != UINT32_MAX) {
                if (brm_surface_cache_lookup(c->surf, hit.tri, hp, sv, &cell)) {
                    surface_unshadowed(c, hit.tri, hp, hit.normal, E);
                    for (int ch = 0; ch < 3; ch++) E[ch] = E[ch] * sv[ch] + sv[3 + ch];
                } else if (c->surf_lights) {
                    surface_fallback(c, hit.tri, hp, hit.normal, &cell, E);
                    for (int ch = 0; ch < 3; ch++) E[ch] += sv[3 + ch];
                } else {
                    surface_irradiance(c, hp, hit.normal, (uint32_t)(key * 31 + r), E);
                }
            } else {
                surface_irradiance(c, hp, hit.normal, (uint32_t)(key * 31 + r), E);
            }
            /* Lambertian: outgoing radiance = albedo/π × irradiance. */
            rad[0] = ob->albedo.x / BRM_PI * E[0];
            rad[1] = ob->albedo.y / BRM_PI * E[1];
            rad[2] = ob->albedo.z / BRM_PI * E[2];
        } else {
            brm_vec3 sky = brm_sky_radiance(&s->sky, dir);
            rad[0] = sky.x;
            rad[1] = sky.y;
            rad[2] = sky.z;
        }
        double y[9];
        brm_sh9(dir, y);
        for (int ch = 0; ch < 3; ch++) {
            double v = fogL[ch] + T * rad[ch];
            for (int i = 0; i < 9; i++) L[ch][i] += w * v * y[i];
        }
    }
    c->rays[worker] += traced;
    return nrays ? (double)back / nrays : 0.0;
}

static int probe_invalid(const probe_ctx *c, brm_vec3 p, double back_fraction)
{
    /* SPEC.md: invalid inside solid geometry or when more than 25 % of its rays hit back faces. */
    if (back_fraction > 0.25) return 1;
    return c->solid ? brm_solid_index_query(c->solid, p) : brm_point_in_solid(c->s, p);
}

/* Largest difference of the share of direct light arriving between the four nodes of a cell
 * that still interpolates. */
#define SURF_TOL 0.1

/* The most memory the surface cache's values may take (the rest of the bake's estimate does
 * not count it). */
#define SURF_MAX_BYTES ((uint64_t)256 << 20)

enum { P_SH = 0, P_VALID = 27, P_EXT = 28, P_OFF = 29, PROBE_CH_MAX = 32 };

static void probe_unit(void *ctx, uint32_t b, int worker, float *out)
{
    probe_ctx *c = ctx;
    const brm_grid *g = c->g;
    uint32_t lo[3], hi[3];
    brm_grid_brick_range(g, b, lo, hi);
    uint32_t nx = hi[0] - lo[0], ny = hi[1] - lo[1], nz = hi[2] - lo[2];
    size_t nc = (size_t)nx * ny * nz;
    for (uint32_t k = lo[2]; k < hi[2]; k++)
        for (uint32_t j = lo[1]; j < hi[1]; j++)
            for (uint32_t i = lo[0]; i < hi[0]; i++) {
                size_t gi = brm_grid_index(g, i, j, k);
                size_t li = (size_t)(i - lo[0]) + nx * ((size_t)(j - lo[1]) + ny * (size_t)(k - lo[2]));
                brm_vec3 p0 = brm_grid_point(g, i, j, k), p = p0;
                uint64_t key = 0x7f4a7c159e3779b9ull ^ (uint64_t)gi * 0xbf58476d1ce4e5b9ull;
                double L[3][9];
                double bf = bake_probe(c, p, key, c->t->rays, L, worker);
                int invalid = probe_invalid(c, p, bf);
                if (invalid && c->t->relocate) {
                    /* The nearest free point within half a spacing: candidates on a 5³ lattice of
                     * quarter spacings, nearest first; each screened with a quarter of the rays. */
                    double best = HUGE_VAL;
                    brm_vec3 bestp = p0;
                    for (int dz = -2; dz <= 2; dz++)
                        for (int dy = -2; dy <= 2; dy++)
                            for (int dx = -2; dx <= 2; dx++) {
                                double d2 = (double)(dx * dx + dy * dy + dz * dz);
                                if (d2 == 0 || d2 >= best) continue;
                                brm_vec3 q = brm_add(p0, brm_mul(g->cell, brm_v3(dx * 0.25, dy * 0.25, dz * 0.25)));
                                double Lq[3][9];
                                uint32_t few = c->t->rays / 4 > 16 ? c->t->rays / 4 : 16;
                                if (!probe_invalid(c, q, bake_probe(c, q, key + 1, few, Lq, worker))) {
                                    best = d2;
                                    bestp = q;
                                }
                            }
                    if (best < HUGE_VAL) {
                        p = bestp;
                        bf = bake_probe(c, p, key, c->t->rays, L, worker);
                        invalid = probe_invalid(c, p, bf);
                    }
                }
                for (int ch = 0; ch < 3; ch++)
                    for (int m = 0; m < 9; m++) out[(size_t)(P_SH + 9 * ch + m) * nc + li] = (float)L[ch][m];
                out[(size_t)P_VALID * nc + li] = invalid ? 0.0f : 1.0f;
                out[(size_t)P_EXT * nc + li] = (float)brm_media_extinction(c->s, p);
                if (c->channels > P_OFF) {
                    out[(size_t)P_OFF * nc + li] = (float)(p.x - p0.x);
                    out[(size_t)(P_OFF + 1) * nc + li] = (float)(p.y - p0.y);
                    out[(size_t)(P_OFF + 2) * nc + li] = (float)(p.z - p0.z);
                }
            }
}

static const char *const sh_names[27] = {
    "sh.r0", "sh.r1", "sh.r2", "sh.r3", "sh.r4", "sh.r5", "sh.r6", "sh.r7", "sh.r8",
    "sh.g0", "sh.g1", "sh.g2", "sh.g3", "sh.g4", "sh.g5", "sh.g6", "sh.g7", "sh.g8",
    "sh.b0", "sh.b1", "sh.b2", "sh.b3", "sh.b4", "sh.b5", "sh.b6", "sh.b7", "sh.b8"};

/* Whether a probe bake builds the surface cache, and how many per-light values its nodes hold
 * (*extra): nodes half a probe spacing apart, only when it pays — fewer nodes than a quarter of
 * the lattice's rays (most rays of an enclosed lattice hit something) — never in the reference
 * bake, which stays exact, and at most SURF_MAX_BYTES: the per-light values go first, then the
 * cache. */
static bool surf_plan(const brm_scene *s, const brm_target *tg, const brm_grid *g, const brm_bake_opts *o,
                      uint32_t *extra)
{
    *extra = 0;
    uint64_t rays_total = (uint64_t)g->n[0] * g->n[1] * g->n[2] * tg->rays;
    uint64_t nodes = s->tri_count ? brm_surface_cache_nodes(s, 0.5 * tg->spacing_m) : 0;
    if (o->reference || !nodes || nodes > rays_total / 4 || brm_surface_cache_memory(s, nodes, 0) > SURF_MAX_BYTES)
        return false;
    if (s->light_count <= BRM_SURFACE_MAX_EXTRA / 2 &&
        brm_surface_cache_memory(s, nodes, 2 * s->light_count) <= SURF_MAX_BYTES)
        *extra = 2 * s->light_count;
    return true;
}

uint64_t brm_probes_memory(const brm_scene *s, uint32_t t, const brm_grid *g, const brm_bake_opts *o)
{
    const brm_target *tg = &s->targets[t];
    uint32_t extra;
    if (!surf_plan(s, tg, g, o, &extra)) return 0;
    return brm_surface_cache_memory(s, brm_surface_cache_nodes(s, 0.5 * tg->spacing_m), extra);
}

brm_status brm_bake_probes(const brm_scene *s, uint32_t t, const brm_bake_opts *o, const brm_grid *g,
                           const brm_bvh *bvh, const brm_shadow_set *ss, const char *out_path,
                           brm_bake_stats *stats, brm_diag *d)
{
    const brm_target *tg = &s->targets[t];
    const int threads = o->threads > 0 ? o->threads : brm_cpu_count();
    probe_ctx c;
    memset(&c, 0, sizeof c);
    c.s = s;
    c.t = tg;
    c.g = g;
    c.bvh = bvh;
    c.ss = ss;
    brm_vec3 ext = brm_sub(s->fog_bounds.max, s->fog_bounds.min);
    c.eps = 1e-4 * (ext.x + ext.y + ext.z) + 1e-4;
    c.rays = calloc((size_t)threads, sizeof *c.rays);
    c.dirs = malloc((tg->rays ? tg->rays : 1) * sizeof *c.dirs);
    brm_solid_index *solid = NULL;
    brm_surface_cache *surf = NULL;
    brm_status st = BRM_OK;
    if (!c.rays || !c.dirs) {
        free(c.rays);
        free(c.dirs);
        return brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory", tg->json_path);
    }
    for (uint32_t i = 0; i < tg->rays; i++) c.dirs[i] = fib_dir(i, tg->rays);
    c.tri_lights = tri_lights_build(s, c.eps);   /* NULL (out of memory, many lights): all tried */
    if ((st = brm_solid_index_build(s, &solid, d)) != BRM_OK) goto done;
    c.solid = solid;
    if ((st = fog_build(s, ss, tg->spacing_m, threads, &c.fog, d)) != BRM_OK) goto done;
    /* Bounce hits read their shadows and sky from the surface cache (surface_cache.h, surf_eval),
     * nodes half a probe spacing apart, where the four nodes around the hit agree on the share
     * of light arriving within SURF_TOL (elsewhere, at shadow edges, the hit is evaluated as
     * without the cache); surf_plan says when it is built. */
    double surf_h = 0.5 * tg->spacing_m;
    c.surf_h = surf_h;
    uint32_t surf_extra = 0;
    if (surf_plan(s, tg, g, o, &surf_extra)) {
        c.surf_lights = surf_extra > 0;
        /* Lazy: the probes' rays reach a fraction of the surfaces (about 30 % of the nodes on
         * the demo's geometry with the bench lattice), and only those nodes are evaluated. */
        if ((st = brm_surface_cache_build_lazy(s, surf_h, c.eps, SURF_TOL, surf_extra, surf_eval, &c, &surf, d)) !=
            BRM_OK)
            goto done;
        c.surf = surf;
    }

    brm_plan pl;
    memset(&pl, 0, sizeof pl);
    for (int i = 0; i < 27; i++) brm_plan_channel(&pl, sh_names[i], "cd/m2", tg->encoding == BRM_ENCODING_F32 ? BRV_ENCODING_F32 : BRV_ENCODING_F16);
    brm_plan_channel(&pl, "validity", "1", tg->encoding == BRM_ENCODING_F32 ? BRV_ENCODING_F32 : BRV_ENCODING_F16);
    brm_plan_channel(&pl, "extinction", "1/m", tg->encoding == BRM_ENCODING_F32 ? BRV_ENCODING_F32 : BRV_ENCODING_F16);
    if (tg->relocate) {
        /* Where relocated probes moved, in metres from their lattice point (f32: exact). */
        brm_plan_channel(&pl, "offset.x", "m", BRV_ENCODING_F32);
        brm_plan_channel(&pl, "offset.y", "m", BRV_ENCODING_F32);
        brm_plan_channel(&pl, "offset.z", "m", BRV_ENCODING_F32);
    }
    c.channels = pl.channel_count;
    pl.ctx = &c;
    pl.unit_count = brm_grid_brick_count(g);
    pl.bricks_per_unit = 1;
    pl.compute = probe_unit;
    pl.brick_of = brm_plan_brick_is_unit;
    st = brm_run_plan(s, t, o, g, &pl, out_path, stats, d);
    for (int i = 0; i < threads; i++) stats->rays += c.rays[i];
done:
    brm_surface_cache_free(surf);
    fog_free(&c.fog);
    brm_solid_index_free(solid);
    free(c.rays);
    free(c.dirs);
    free(c.tri_lights);
    return st;
}
