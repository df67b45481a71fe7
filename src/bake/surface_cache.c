/* Surface irradiance cache for bounce hits (see surface_cache.h). */
#include "bake/surface_cache.h"

#include <math.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <string.h>

#include "base/threads.h"

typedef struct surf_tri {
    brm_vec3 o, u, v, n;    /* grid origin, unit in-plane axes, unit winding normal */
    double su, sv;          /* node spacing along u and v, m */
    uint32_t first;         /* index of node (0, 0) in v */
    uint16_t nu, nv;        /* nodes along u and v, each at least 2 */
} surf_tri;

struct brm_surface_cache {
    surf_tri *tris;         /* per scene triangle */
    float *v;               /* stride per node: BRM_SURFACE_VALUES, then the extra values */
    uint32_t nodes, stride;
    double tol;             /* a cell interpolates when its nodes' tested values agree to tol */
    /* Lazy caches (brm_surface_cache_build_lazy): per node 0 = not evaluated, 1 = being
     * evaluated, 2 = done; NULL when every node was evaluated at build. */
    atomic_uchar *state;
    const brm_scene *s;
    double eps;
    brm_surface_eval eval;
    const void *ctx;
};

/* Nearest point of triangle v to p (Ericson, "Real-Time Collision Detection", 2005, §5.1.5:
 * the Voronoi regions of the vertices, edges and face). */
static brm_vec3 closest_on_triangle(brm_vec3 p, const brm_vec3 v[3])
{
    brm_vec3 a = v[0], b = v[1], c = v[2];
    brm_vec3 ab = brm_sub(b, a), ac = brm_sub(c, a), ap = brm_sub(p, a);
    double d1 = brm_dot(ab, ap), d2 = brm_dot(ac, ap);
    if (d1 <= 0 && d2 <= 0) return a;
    brm_vec3 bp = brm_sub(p, b);
    double d3 = brm_dot(ab, bp), d4 = brm_dot(ac, bp);
    if (d3 >= 0 && d4 <= d3) return b;
    double vc = d1 * d4 - d3 * d2;
    if (vc <= 0 && d1 >= 0 && d3 <= 0) return brm_madd(a, ab, d1 / (d1 - d3));
    brm_vec3 cp = brm_sub(p, c);
    double d5 = brm_dot(ab, cp), d6 = brm_dot(ac, cp);
    if (d6 >= 0 && d5 <= d6) return c;
    double vb = d5 * d2 - d1 * d6;
    if (vb <= 0 && d2 >= 0 && d6 <= 0) return brm_madd(a, ac, d2 / (d2 - d6));
    double va = d3 * d6 - d5 * d4;
    if (va <= 0 && (d4 - d3) >= 0 && (d5 - d6) >= 0)
        return brm_madd(b, brm_sub(c, b), (d4 - d3) / ((d4 - d3) + (d5 - d6)));
    double den = 1.0 / (va + vb + vc);
    return brm_add(a, brm_add(brm_scale(ab, vb * den), brm_scale(ac, vc * den)));
}

/* The grid of one triangle; returns its node count. */
static uint32_t layout(const brm_tri *t, double h, surf_tri *st)
{
    int k = 0;
    double L = -1;
    for (int e = 0; e < 3; e++) {
        double l = brm_len(brm_sub(t->v[(e + 1) % 3], t->v[e]));
        if (l > L) L = l, k = e;
    }
    brm_vec3 a = t->v[k], b = t->v[(k + 1) % 3], c = t->v[(k + 2) % 3];
    st->n = brm_norm(brm_cross(brm_sub(t->v[1], t->v[0]), brm_sub(t->v[2], t->v[0])));
    st->u = brm_scale(brm_sub(b, a), 1.0 / L);
    st->v = brm_cross(st->n, st->u);
    double H = brm_dot(brm_sub(c, a), st->v);
    if (H < 0) {
        st->v = brm_scale(st->v, -1.0);
        H = -H;
    }
    /* The apex projects inside the longest edge, so [0, L] × [0, H] holds the triangle. */
    st->o = a;
    double nu = ceil(L / h) + 1, nv = ceil(H / h) + 1;
    st->nu = (uint16_t)(nu < 2 ? 2 : nu > 4096 ? 4096 : nu);
    st->nv = (uint16_t)(nv < 2 ? 2 : nv > 4096 ? 4096 : nv);
    st->su = L / (st->nu - 1);
    st->sv = H / (st->nv - 1);
    return (uint32_t)st->nu * st->nv;
}

uint64_t brm_surface_cache_nodes(const brm_scene *s, double h)
{
    uint64_t n = 0;
    for (uint32_t i = 0; i < s->tri_count; i++) {
        surf_tri st;
        n += layout(&s->tris[i], h, &st);
    }
    return n;
}

uint64_t brm_surface_cache_memory(const brm_scene *s, uint64_t nodes, uint32_t extra)
{
    /* (a lazy cache adds a byte of state per node, counted here either way) */
    return nodes * ((BRM_SURFACE_VALUES + extra) * sizeof(float) + sizeof(atomic_uchar)) +
           (uint64_t)s->tri_count * sizeof(surf_tri) + sizeof(brm_surface_cache);
}

enum { TRIS_PER_ITEM = 64 };

/* Evaluates node (iu, jv) of triangle ti into the cache: the same call whenever and on
 * whichever thread it runs. */
static void fill_node(const brm_surface_cache *sc, uint32_t ti, uint32_t iu, uint32_t jv)
{
    const surf_tri *st = &sc->tris[ti];
    brm_vec3 q = brm_madd(brm_madd(st->o, st->u, iu * st->su), st->v, jv * st->sv);
    q = brm_madd(closest_on_triangle(q, sc->s->tris[ti].v), st->n, sc->eps);
    uint32_t node = st->first + iu + (uint32_t)st->nu * jv;
    double v[BRM_SURFACE_VALUES + BRM_SURFACE_MAX_EXTRA];
    sc->eval(sc->ctx, q, st->n, node, v);
    for (uint32_t k = 0; k < sc->stride; k++) sc->v[sc->stride * (size_t)node + k] = (float)v[k];
}

static void item_fn(void *ctx, uint32_t item, int worker)
{
    (void)worker;
    const brm_surface_cache *sc = ctx;
    uint32_t end = (item + 1) * TRIS_PER_ITEM;
    if (end > sc->s->tri_count) end = sc->s->tri_count;
    for (uint32_t ti = item * TRIS_PER_ITEM; ti < end; ti++) {
        const surf_tri *st = &sc->tris[ti];
        for (uint32_t jv = 0; jv < st->nv; jv++)
            for (uint32_t iu = 0; iu < st->nu; iu++) fill_node(sc, ti, iu, jv);
    }
}

/* A lazy cache's node (iu, jv) of triangle ti, evaluated if no lookup has asked for it yet.
 * The thread that claims it evaluates it; one that finds it being evaluated waits for it (the
 * evaluation runs to its end without taking any lock, so the wait is short and always ends). */
static void ensure_node(const brm_surface_cache *sc, uint32_t ti, uint32_t iu, uint32_t jv)
{
    uint32_t node = sc->tris[ti].first + iu + (uint32_t)sc->tris[ti].nu * jv;
    atomic_uchar *stp = &sc->state[node];
    if (atomic_load_explicit(stp, memory_order_acquire) == 2) return;
    unsigned char expect = 0;
    if (atomic_compare_exchange_strong_explicit(stp, &expect, 1, memory_order_acq_rel, memory_order_acquire)) {
        fill_node(sc, ti, iu, jv);
        atomic_store_explicit(stp, 2, memory_order_release);
        return;
    }
    while (atomic_load_explicit(stp, memory_order_acquire) != 2) {
    }
}

static brm_status setup(const brm_scene *s, double h, double eps, double tol, uint32_t extra, bool lazy,
                        brm_surface_eval eval, const void *ctx, brm_surface_cache **out, brm_diag *d)
{
    *out = NULL;
    BRM_CHECK(d, extra <= BRM_SURFACE_MAX_EXTRA, BRM_E_INTERNAL, "surface cache: %u extra values", extra);
    const uint32_t stride = BRM_SURFACE_VALUES + extra;
    BRM_CHECK(d, h > 0 && isfinite(h), BRM_E_INTERNAL, "surface cache: node spacing %g m", h);
    uint64_t nodes = brm_surface_cache_nodes(s, h);
    BRM_CHECK(d, nodes < ((uint64_t)1 << 31), BRM_E_BUDGET, "surface cache: %llu nodes, at most %u supported",
              (unsigned long long)nodes, 1u << 31);
    brm_surface_cache *sc = calloc(1, sizeof *sc);
    if (sc) {
        sc->tris = malloc((s->tri_count ? s->tri_count : 1) * sizeof *sc->tris);
        sc->v = malloc((nodes ? nodes : 1) * stride * sizeof *sc->v);
        if (lazy) sc->state = malloc((nodes ? nodes : 1) * sizeof *sc->state);
    }
    if (!sc || !sc->tris || !sc->v || (lazy && !sc->state)) {
        brm_surface_cache_free(sc);
        return brm_diag_error(d, BRM_E_NOMEM, "out of memory for the surface cache (%llu nodes)",
                              (unsigned long long)nodes);
    }
    uint32_t first = 0;
    for (uint32_t i = 0; i < s->tri_count; i++) {
        sc->tris[i].first = first;
        first += layout(&s->tris[i], h, &sc->tris[i]);
    }
    sc->nodes = first;
    sc->stride = stride;
    sc->tol = tol;
    sc->s = s;
    sc->eps = eps;
    sc->eval = eval;
    sc->ctx = ctx;
    if (lazy)
        for (uint32_t i = 0; i < first; i++) atomic_init(&sc->state[i], 0);
    *out = sc;
    return BRM_OK;
}

brm_status brm_surface_cache_build(const brm_scene *s, double h, double eps, double tol, uint32_t extra, int threads,
                                   brm_surface_eval eval, const void *ctx, brm_surface_cache **out, brm_diag *d)
{
    brm_surface_cache *sc = NULL;
    brm_status st = setup(s, h, eps, tol, extra, false, eval, ctx, &sc, d);
    if (st != BRM_OK) return st;
    uint32_t items = (s->tri_count + TRIS_PER_ITEM - 1) / TRIS_PER_ITEM;
    if (brm_parallel_for(items, threads, item_fn, sc, &brm_interrupted) != items) {
        brm_surface_cache_free(sc);
        return brm_diag_error(d, BRM_E_INTERRUPTED, "interrupted");
    }
    *out = sc;
    return BRM_OK;
}

brm_status brm_surface_cache_build_lazy(const brm_scene *s, double h, double eps, double tol, uint32_t extra,
                                        brm_surface_eval eval, const void *ctx, brm_surface_cache **out, brm_diag *d)
{
    return setup(s, h, eps, tol, extra, true, eval, ctx, out, d);
}

int brm_surface_cache_lookup(const brm_surface_cache *sc, uint32_t tri, brm_vec3 q, double out[BRM_SURFACE_VALUES],
                             brm_surface_cell *cell)
{
    const surf_tri *st = &sc->tris[tri];
    brm_vec3 r = brm_sub(q, st->o);
    double x = st->su > 0 ? brm_dot(r, st->u) / st->su : 0.0;
    double y = st->sv > 0 ? brm_dot(r, st->v) / st->sv : 0.0;
    x = brm_clamp(x, 0.0, st->nu - 1.0);
    y = brm_clamp(y, 0.0, st->nv - 1.0);
    uint32_t i = (uint32_t)x, jj = (uint32_t)y;
    if (i > (uint32_t)st->nu - 2) i = (uint32_t)st->nu - 2;
    if (jj > (uint32_t)st->nv - 2) jj = (uint32_t)st->nv - 2;
    double fx = x - i, fy = y - jj;
    if (sc->state) {
        ensure_node(sc, tri, i, jj);
        ensure_node(sc, tri, i + 1, jj);
        ensure_node(sc, tri, i, jj + 1);
        ensure_node(sc, tri, i + 1, jj + 1);
    }
    const size_t K = sc->stride;
    const float *e00 = sc->v + K * ((size_t)st->first + i + (size_t)st->nu * jj);
    const float *e01 = e00 + K * (size_t)st->nu;
    if (cell) {
        cell->extra[0] = e00 + BRM_SURFACE_VALUES;
        cell->extra[1] = e00 + K + BRM_SURFACE_VALUES;
        cell->extra[2] = e01 + BRM_SURFACE_VALUES;
        cell->extra[3] = e01 + K + BRM_SURFACE_VALUES;
        cell->w[0] = (1 - fx) * (1 - fy);
        cell->w[1] = fx * (1 - fy);
        cell->w[2] = (1 - fx) * fy;
        cell->w[3] = fx * fy;
    }
    int agree = 1;
    for (int k = 0; k < BRM_SURFACE_VALUES; k++) {
        double a = e00[k], b = e00[K + k], c = e01[k], dd = e01[K + k];
        if (k < BRM_SURFACE_TESTED) {
            double lo = fmin(fmin(a, b), fmin(c, dd)), hi = fmax(fmax(a, b), fmax(c, dd));
            if (hi - lo > sc->tol) agree = 0;
        }
        out[k] = (1 - fy) * ((1 - fx) * a + fx * b) + fy * ((1 - fx) * c + fx * dd);
    }
    return agree;
}

void brm_surface_cache_free(brm_surface_cache *sc)
{
    if (!sc) return;
    free(sc->tris);
    free(sc->v);
    free(sc->state);
    free(sc);
}
