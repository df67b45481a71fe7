/* Voxelization: surface cells by exact overlap tests, interior by component classification,
 * occupancy fractions by sub-cell point classification. */
#include "voxel/voxelize.h"

#include <stdlib.h>
#include <string.h>

#include "base/threads.h"
#include "voxel/bvh.h"

/* ---- triangle / box overlap ------------------------------------------------------------ */

/* Whether axis a separates the triangle (vertices relative to the box centre) from the box of
 * half-size h: the triangle's projection [min p, max p] misses [−r, r], r = Σ h_j |a_j|. */
static inline int separates(brm_vec3 a, const brm_vec3 v[3], brm_vec3 h)
{
    double p0 = brm_dot(a, v[0]), p1 = brm_dot(a, v[1]), p2 = brm_dot(a, v[2]);
    double mn = p0 < p1 ? p0 : p1, mx = p0 > p1 ? p0 : p1;
    if (p2 < mn) mn = p2;
    if (p2 > mx) mx = p2;
    double r = h.x * fabs(a.x) + h.y * fabs(a.y) + h.z * fabs(a.z);
    return mn > r || mx < -r;
}

int brm_tri_box_overlap(brm_vec3 c, brm_vec3 h, const brm_vec3 u[3])
{
    /* Akenine-Möller, "Fast 3D Triangle-Box Overlap Testing", Journal of Graphics Tools, 2001:
     * separating-axis test over the 3 box axes, the triangle normal and the 9 cross products of
     * the triangle edges with the box axes. Strict inequalities: touching counts as overlap.
     * A zero axis (degenerate edge or normal) projects everything to 0 and separates nothing. */
    brm_vec3 v[3] = {brm_sub(u[0], c), brm_sub(u[1], c), brm_sub(u[2], c)};
    /* Box axes first: the cheapest rejection, the triangle's bounds against the box. */
    for (int a = 0; a < 3; a++) {
        double p0 = brm_vget(v[0], a), p1 = brm_vget(v[1], a), p2 = brm_vget(v[2], a);
        double mn = fmin(p0, fmin(p1, p2)), mx = fmax(p0, fmax(p1, p2)), r = brm_vget(h, a);
        if (mn > r || mx < -r) return 0;
    }
    brm_vec3 f[3] = {brm_sub(v[1], v[0]), brm_sub(v[2], v[1]), brm_sub(v[0], v[2])};
    if (separates(brm_cross(f[0], f[1]), v, h)) return 0;
    static const brm_vec3 e[3] = {{1, 0, 0}, {0, 1, 0}, {0, 0, 1}};
    for (int i = 0; i < 3; i++)
        for (int j = 0; j < 3; j++)
            if (separates(brm_cross(f[i], e[j]), v, h)) return 0;
    return 1;
}

/* ---- points inside solids -------------------------------------------------------------- */

/* Parity rays go along fixed directions off every axis and diagonal, so rays from lattice
 * points rarely run along the edges of axis-aligned meshes; a hit near an edge or vertex casts
 * again along the next direction (common practice, no source). */
static const brm_vec3 parity_dirs[4] = {
    {0.5773502691896257, 0.6154122094026356, 0.5366563145999494},
    {-0.4082482904638630, 0.7453559924999299, -0.5270462766947299},
    {0.8017837257372732, -0.2672612419124244, 0.5345224838248488},
    {-0.2357022603955158, -0.4714045207910317, -0.8498365855987975},
};

static inline int in_primitive(const brm_object *o, brm_vec3 p)
{
    if (o->shape == BRM_SHAPE_BOX) return brm_aabb_contains(o->bounds, p);
    if (o->shape == BRM_SHAPE_SPHERE) {
        brm_vec3 d = brm_sub(p, o->center);
        return brm_dot(d, d) <= o->radius * o->radius;
    }
    return 0;
}

static inline int is_closed_mesh(const brm_object *o) { return o->shape == BRM_SHAPE_MESH && o->closed; }

int brm_point_in_solid(const brm_scene *s, brm_vec3 p)
{
    for (uint32_t i = 0; i < s->object_count; i++)
        if (in_primitive(&s->objects[i], p)) return 1;
    for (uint32_t i = 0; i < s->object_count; i++) {
        const brm_object *o = &s->objects[i];
        if (!is_closed_mesh(o) || !brm_aabb_contains(o->bounds, p)) continue;
        int parity = 0;
        for (int di = 0; di < 4; di++) {
            int edge = 0;
            parity = 0;
            for (uint32_t t = o->first_tri; t < o->first_tri + o->tri_count; t++) {
                double tt;
                int ne = 0;
                if (brm_ray_triangle(p, parity_dirs[di], s->tris[t].v, 0.0, HUGE_VAL, &tt, &ne)) {
                    parity ^= 1;
                    edge |= ne;
                }
            }
            if (!edge) break;
        }
        if (parity) return 1;
    }
    return 0;
}

struct brm_solid_index {
    const brm_scene *s;
    brm_bvh *bvh;           /* closed meshes only; NULL when there are none */
    brm_aabb mesh_bounds;   /* union of the closed meshes' bounds */
    uint32_t *prims;        /* box and sphere objects */
    uint32_t prim_count;
    uint32_t object_count;
};

brm_status brm_solid_index_build(const brm_scene *s, brm_solid_index **out, brm_diag *d)
{
    brm_solid_index *x = calloc(1, sizeof *x);
    uint8_t *mask = calloc(s->object_count ? s->object_count : 1, 1);
    if (x) x->prims = calloc(s->object_count ? s->object_count : 1, sizeof *x->prims);
    if (!x || !mask || !x->prims) {
        if (x) free(x->prims);
        free(x);
        free(mask);
        return brm_diag_error(d, BRM_E_NOMEM, "solid index: cannot allocate for %u objects", s->object_count);
    }
    x->s = s;
    x->object_count = s->object_count;
    x->mesh_bounds = brm_aabb_empty();
    int meshes = 0;
    for (uint32_t i = 0; i < s->object_count; i++) {
        const brm_object *o = &s->objects[i];
        if (o->shape == BRM_SHAPE_BOX || o->shape == BRM_SHAPE_SPHERE) x->prims[x->prim_count++] = i;
        if (is_closed_mesh(o) && o->tri_count) {
            mask[i] = 1;
            meshes = 1;
            brm_aabb_union(&x->mesh_bounds, o->bounds);
        }
    }
    if (meshes) {
        brm_status st = brm_bvh_build_subset(s, mask, &x->bvh, d);
        if (st != BRM_OK) {
            free(mask);
            brm_solid_index_free(x);
            return st;
        }
    }
    free(mask);
    *out = x;
    return BRM_OK;
}

void brm_solid_index_free(brm_solid_index *x)
{
    if (!x) return;
    brm_bvh_free(x->bvh);
    free(x->prims);
    free(x);
}

typedef struct parity_ctx {
    uint8_t *bits;      /* one parity bit per object */
    int edge;
} parity_ctx;

static void parity_visit(void *ctx, const brm_hit *h, int near_edge)
{
    parity_ctx *c = ctx;
    c->bits[h->object >> 3] ^= (uint8_t)(1u << (h->object & 7));
    c->edge |= near_edge;
}

static int any_bit(const uint8_t *bits, size_t nb)
{
    int inside = 0;
    for (size_t i = 0; i < nb; i++) inside |= bits[i] != 0;
    return inside;
}

/* The per-object parity bits of p (nb bytes) by a ray to infinity; returns whether any is set. */
static int closed_mesh_bits(const brm_solid_index *x, brm_vec3 p, uint8_t *bits, size_t nb)
{
    int inside = 0;
    for (int di = 0; di < 4; di++) {
        memset(bits, 0, nb);
        parity_ctx c = {bits, 0};
        brm_bvh_all_hits(x->bvh, p, parity_dirs[di], 0.0, HUGE_VAL, parity_visit, &c);
        inside = any_bit(bits, nb);
        if (!c.edge) break;
    }
    return inside;
}

/* Whether p is inside any closed mesh: per-object parity of crossings along a ray. */
static int in_closed_mesh(const brm_solid_index *x, brm_vec3 p)
{
    if (!x->bvh || !brm_aabb_contains(x->mesh_bounds, p)) return 0;
    size_t nb = (x->object_count + 7) / 8;
    uint8_t local[256];
    uint8_t *bits = nb <= sizeof local ? local : malloc(nb);
    if (!bits) return 0;
    int inside = closed_mesh_bits(x, p, bits, nb);
    if (bits != local) free(bits);
    return inside;
}

typedef struct chord_hit {
    double t;
    uint32_t object;
} chord_hit;

enum { CHORD_MAX_HITS = 32 };

typedef struct chord_ctx {
    chord_hit hit[CHORD_MAX_HITS];
    int n;
    int doubt;          /* a crossing near an edge, or more than the array holds */
} chord_ctx;

static void chord_visit(void *ctx, const brm_hit *h, int near_edge)
{
    chord_ctx *c = ctx;
    if (near_edge || c->n == CHORD_MAX_HITS) {
        c->doubt = 1;
        return;
    }
    c->hit[c->n++] = (chord_hit){h->t, h->object};
}

/* Whether each of the n points of a row is inside a closed mesh, as in_closed_mesh says, with
 * two rays a row instead of one a point (the points lie on a line, in order: a grid row at
 * fixed j and k, in world and frustum grids alike). The first point's per-object parity bits
 * come from its ray to infinity; a ray along the row then gives every crossing up to the last
 * point, and a later point's bits are the first's flipped once per crossing before it: a ray
 * to infinity from there crosses each closed mesh as often, give or take those. Where that is
 * in doubt (a crossing near an edge, or within a hair of a point: one on a surface, whose
 * parity is what its own ray says) the row starts again at that point with its own ray. */
static void row_in_closed_mesh(const brm_solid_index *x, const brm_vec3 *pt, int n, int *out)
{
    const size_t nb = (x->object_count + 7) / 8;
    uint8_t bits[256];
    int a0 = 0;
    while (a0 < n) {
        const brm_vec3 p0 = pt[a0];
        if (brm_aabb_contains(x->mesh_bounds, p0)) {
            out[a0] = closed_mesh_bits(x, p0, bits, nb);
        } else {
            memset(bits, 0, nb);
            out[a0] = 0;
        }
        if (a0 + 1 == n) return;
        brm_vec3 d = brm_sub(pt[n - 1], p0);
        double len = brm_len(d);
        double tol = 1e-9 * (1.0 + fabs(p0.x) + fabs(p0.y) + fabs(p0.z) + len);
        chord_ctx c;
        c.n = 0;
        c.doubt = !(len > 0.0);
        if (!c.doubt) {
            d = brm_scale(d, 1.0 / len);
            brm_bvh_all_hits(x->bvh, p0, d, -tol, len + tol, chord_visit, &c);
        }
        /* In order along the row (a few hits: insertion sort). */
        for (int q = 1; q < c.n; q++)
            for (int r = q; r > 0 && c.hit[r].t < c.hit[r - 1].t; r--) {
                chord_hit tmp = c.hit[r];
                c.hit[r] = c.hit[r - 1];
                c.hit[r - 1] = tmp;
            }
        if (c.n > 0 && c.hit[0].t < tol) c.doubt = 1;   /* the first point on a surface */
        int a = a0 + 1, h = 0;
        for (; a < n && !c.doubt; a++) {
            double ta = brm_dot(brm_sub(pt[a], p0), d);
            for (; h < c.n && c.hit[h].t < ta + tol; h++) {
                if (c.hit[h].t > ta - tol) c.doubt = 1;
                bits[c.hit[h].object >> 3] ^= (uint8_t)(1u << (c.hit[h].object & 7));
            }
            if (c.doubt) break;
            if (brm_aabb_contains(x->mesh_bounds, pt[a])) {
                out[a] = any_bit(bits, nb);
            } else {
                memset(bits, 0, nb);
                out[a] = 0;
            }
        }
        if (a == n) return;
        a0 = a > a0 + 1 ? a : a0 + 1;
    }
}

int brm_solid_index_query(const brm_solid_index *x, brm_vec3 p)
{
    for (uint32_t i = 0; i < x->prim_count; i++)
        if (in_primitive(&x->s->objects[x->prims[i]], p)) return 1;
    return in_closed_mesh(x, p);
}

void brm_solid_index_query_row(const brm_solid_index *x, const brm_vec3 *pt, int n, int *out)
{
    int mesh[64] = {0};
    const int rows = x->bvh && n <= 64 && (x->object_count + 7) / 8 <= 256;
    if (rows) row_in_closed_mesh(x, pt, n, mesh);
    for (int a = 0; a < n; a++) {
        int in = 0;
        for (uint32_t i = 0; i < x->prim_count && !in; i++) in = in_primitive(&x->s->objects[x->prims[i]], pt[a]);
        out[a] = in || (rows ? mesh[a] : in_closed_mesh(x, pt[a]));
    }
}

/* ---- the voxelizer --------------------------------------------------------------------- */

enum { CELL_DONE_EMPTY = 3 };   /* flood fill: an empty component already classified as free */

typedef struct vox {
    const brm_scene *s;
    const brm_grid *g;
    const brm_solid_index *solid;
    uint8_t *state;
    float *fraction;
    /* per z-slice lists of triangles (CSR) */
    uint32_t *slice_start;
    uint32_t *slice_tris;
    /* frustum: triangles clipped to the near plane, in warped coordinates (see below) */
    brm_vec3 (*wtris)[3];
    uint32_t wtri_count;
} vox;

static brm_aabb cell_box(const brm_grid *g, uint32_t i, uint32_t j, uint32_t k)
{
    return brm_grid_cell_bounds(g, i, j, k);
}

/* Cell index range [lo, hi] on axis a that a world interval [x0, x1] may touch, widened by one
 * so a shape touching a cell boundary reaches the cell on the other side (the exact test
 * decides). Returns 0 when it misses the grid. */
static int axis_range(const brm_grid *g, int a, double x0, double x1, uint32_t *lo, uint32_t *hi)
{
    double m = brm_vget(g->box.min, a), c = brm_vget(g->cell, a);
    double f0 = floor((x0 - m) / c) - 1, f1 = floor((x1 - m) / c) + 1;
    double n = g->n[a];
    if (f1 < 0 || f0 > n - 1 || f0 != f0 || f1 != f1) return 0;
    *lo = f0 < 0 ? 0 : (uint32_t)f0;
    *hi = f1 > n - 1 ? g->n[a] - 1 : (uint32_t)f1;
    return 1;
}

static inline void raise_state(uint8_t *s, uint8_t v)
{
    if (*s < v) *s = v;
}

/* Surface pass for one z-slice: triangles of meshes, then exact boxes and spheres. */
static void surface_slice(void *ctx, uint32_t k, int worker)
{
    (void)worker;
    vox *v = ctx;
    const brm_grid *g = v->g;
    const brm_scene *s = v->s;
    for (uint32_t q = v->slice_start[k]; q < v->slice_start[k + 1]; q++) {
        const brm_tri *t = &s->tris[v->slice_tris[q]];
        /* A local copy: gcc 12 with sanitizers misjudges the size behind t->v (stringop-overread). */
        const brm_vec3 tv[3] = {t->v[0], t->v[1], t->v[2]};
        brm_vec3 lo = brm_vmin(tv[0], brm_vmin(tv[1], tv[2]));
        brm_vec3 hi = brm_vmax(tv[0], brm_vmax(tv[1], tv[2]));
        uint32_t i0, i1, j0, j1;
        if (!axis_range(g, 0, lo.x, hi.x, &i0, &i1) || !axis_range(g, 1, lo.y, hi.y, &j0, &j1)) continue;
        for (uint32_t j = j0; j <= j1; j++) {
            for (uint32_t i = i0; i <= i1; i++) {
                uint8_t *st = &v->state[brm_grid_index(g, i, j, k)];
                if (*st != BRM_CELL_EMPTY) continue;
                brm_aabb b = cell_box(g, i, j, k);
                brm_vec3 c = brm_scale(brm_add(b.min, b.max), 0.5), h = brm_scale(brm_sub(b.max, b.min), 0.5);
                if (brm_tri_box_overlap(c, h, tv)) *st = BRM_CELL_SURFACE;
            }
        }
    }
    for (uint32_t oi = 0; oi < s->object_count; oi++) {
        const brm_object *o = &s->objects[oi];
        if (o->shape != BRM_SHAPE_BOX && o->shape != BRM_SHAPE_SPHERE) continue;
        uint32_t i0, i1, j0, j1, k0, k1;
        if (!axis_range(g, 2, o->bounds.min.z, o->bounds.max.z, &k0, &k1) || k < k0 || k > k1) continue;
        if (!axis_range(g, 0, o->bounds.min.x, o->bounds.max.x, &i0, &i1) ||
            !axis_range(g, 1, o->bounds.min.y, o->bounds.max.y, &j0, &j1))
            continue;
        for (uint32_t j = j0; j <= j1; j++) {
            for (uint32_t i = i0; i <= i1; i++) {
                uint8_t *st = &v->state[brm_grid_index(g, i, j, k)];
                if (*st == BRM_CELL_INTERIOR) continue;
                brm_aabb b = cell_box(g, i, j, k);
                if (o->shape == BRM_SHAPE_BOX) {
                    /* Exact: the boundary crosses the cell iff they share volume and the cell is
                     * not wholly inside. Sharing only a face is no overlap. */
                    brm_aabb x = o->bounds;
                    int overlap = b.min.x < x.max.x && b.max.x > x.min.x && b.min.y < x.max.y &&
                                  b.max.y > x.min.y && b.min.z < x.max.z && b.max.z > x.min.z;
                    if (!overlap) continue;
                    int inside = b.min.x >= x.min.x && b.max.x <= x.max.x && b.min.y >= x.min.y &&
                                 b.max.y <= x.max.y && b.min.z >= x.min.z && b.max.z <= x.max.z;
                    raise_state(st, inside ? BRM_CELL_INTERIOR : BRM_CELL_SURFACE);
                } else {
                    /* Exact: nearest point of the cell inside the ball → they meet; farthest
                     * corner inside → the cell is wholly inside. Touching at one point is no
                     * overlap. */
                    brm_vec3 c = o->center;
                    double r2 = o->radius * o->radius, dn = 0, df = 0;
                    for (int a = 0; a < 3; a++) {
                        double lo_a = brm_vget(b.min, a), hi_a = brm_vget(b.max, a), ca = brm_vget(c, a);
                        double nearest = ca < lo_a ? lo_a - ca : ca > hi_a ? ca - hi_a : 0.0;
                        double farthest = fmax(fabs(ca - lo_a), fabs(ca - hi_a));
                        dn += nearest * nearest;
                        df += farthest * farthest;
                    }
                    if (!(dn < r2)) continue;
                    raise_state(st, df <= r2 ? BRM_CELL_INTERIOR : BRM_CELL_SURFACE);
                }
            }
        }
    }
}

/* Occupancy fraction of the surface cells of one z-slice. */
static void fraction_slice(void *ctx, uint32_t k, int worker)
{
    (void)worker;
    vox *v = ctx;
    const brm_grid *g = v->g;
    const brm_scene *s = v->s;
    const brm_solid_index *x = v->solid;
    uint32_t *near = malloc(sizeof *near * (x->prim_count ? x->prim_count : 1));
    for (uint32_t j = 0; j < g->n[1]; j++) {
        for (uint32_t i = 0; i < g->n[0]; i++) {
            size_t idx = brm_grid_index(g, i, j, k);
            uint8_t st = v->state[idx];
            if (st != BRM_CELL_SURFACE) {
                v->fraction[idx] = st == BRM_CELL_INTERIOR ? 1.0f : 0.0f;
                continue;
            }
            brm_aabb b = cell_box(g, i, j, k);
            /* Only the solids whose bounds meet the cell can hold its points. */
            uint32_t nn = 0;
            if (near)
                for (uint32_t q = 0; q < x->prim_count; q++)
                    if (brm_aabb_overlaps(s->objects[x->prims[q]].bounds, b)) near[nn++] = x->prims[q];
            int meshes = x->bvh && brm_aabb_overlaps(x->mesh_bounds, b);
            if (nn == 0 && !meshes) {
                v->fraction[idx] = 0.0f;
                continue;
            }
            /* Row by row of points: the meshes' answers for a whole row at once
             * (row_in_closed_mesh), then the primitives'. */
            const int rows = meshes && (x->object_count + 7) / 8 <= 256;
            int count = 0;
            for (int c = 0; c < BRM_OCC_SUB; c++)
                for (int bb = 0; bb < BRM_OCC_SUB; bb++) {
                    brm_vec3 pt[BRM_OCC_SUB];
                    int mesh_in[BRM_OCC_SUB] = {0};
                    for (int a = 0; a < BRM_OCC_SUB; a++)
                        pt[a] = brm_grid_point(g, i + (a + 0.5) / BRM_OCC_SUB, j + (bb + 0.5) / BRM_OCC_SUB,
                                               k + (c + 0.5) / BRM_OCC_SUB);
                    if (rows) row_in_closed_mesh(x, pt, BRM_OCC_SUB, mesh_in);
                    for (int a = 0; a < BRM_OCC_SUB; a++) {
                        int in = 0;
                        for (uint32_t q = 0; q < nn && !in; q++) in = in_primitive(&s->objects[near[q]], pt[a]);
                        if (!in && !near && x->prim_count) in = brm_solid_index_query(x, pt[a]);
                        if (rows) in |= mesh_in[a];
                        else if (!in && meshes) in = in_closed_mesh(x, pt[a]);
                        count += in;
                    }
                }
            v->fraction[idx] = (float)count / (BRM_OCC_SUB * BRM_OCC_SUB * BRM_OCC_SUB);
        }
    }
    free(near);
}

/* Labels the 6-connected component of empty cells holding `seed` with `label`; each cell is
 * queued once (it is relabelled when queued). Breadth first, through a ring of cell indices: the ring
 * holds about one shell of cells at a time around the seed (a cross-section of the grid), where a
 * depth-first stack can grow toward one entry per cell: on a 512x128x512 yard it took 61 MiB, and
 * at two threads, where voxelizing overlaps the shadow build, that was on top of the maps. The
 * component, and so the labels, are the same in any order. */
static brm_status fill_component(const brm_grid *g, uint8_t *state, size_t seed, uint8_t label,
                                 uint32_t **ring, size_t *cap, brm_diag *d)
{
    size_t nx = g->n[0], ny = g->n[1], nz = g->n[2], sxy = nx * ny;
    size_t head = 0, count = 0;
    state[seed] = label;
    (*ring)[count++] = (uint32_t)seed;
    while (count) {
        size_t c = (*ring)[head];
        head = head + 1 == *cap ? 0 : head + 1;
        count--;
        size_t i = c % nx, j = (c / nx) % ny, k = c / sxy;
        size_t nb[6];
        int m = 0;
        if (i > 0) nb[m++] = c - 1;
        if (i + 1 < nx) nb[m++] = c + 1;
        if (j > 0) nb[m++] = c - nx;
        if (j + 1 < ny) nb[m++] = c + nx;
        if (k > 0) nb[m++] = c - sxy;
        if (k + 1 < nz) nb[m++] = c + sxy;
        for (int q = 0; q < m; q++) {
            if (state[nb[q]] != BRM_CELL_EMPTY) continue;
            if (count == *cap) { /* full: a ring twice the size, its entries in queue order */
                size_t nc = *cap * 2;
                uint32_t *nr = malloc(nc * sizeof *nr);
                if (!nr) return brm_diag_error(d, BRM_E_NOMEM, "voxelizer: cannot grow the fill queue to %zu", nc);
                for (size_t e = 0; e < count; e++) nr[e] = (*ring)[(head + e) % *cap];
                free(*ring);
                *ring = nr;
                *cap = nc;
                head = 0;
            }
            state[nb[q]] = label;
            size_t tail = head + count;
            (*ring)[tail >= *cap ? tail - *cap : tail] = (uint32_t)nb[q];
            count++;
        }
    }
    return BRM_OK;
}

size_t brm_voxelize_memory(const brm_grid *g)
{
    /* state + fraction per cell, plus the fill queue. It can hold one index per cell at worst,
     * but a breadth-first front is about a cross-section of the grid: count the three faces'
     * areas (an estimate, not a bound; bench/bench_memory.c checks it against the peak). */
    size_t faces = (size_t)g->n[0] * g->n[1] + (size_t)g->n[1] * g->n[2] + (size_t)g->n[0] * g->n[2];
    return brm_grid_cells(g) * (sizeof(uint8_t) + sizeof(float)) + faces * sizeof(uint32_t);
}

void brm_occupancy_free(brm_occupancy *o)
{
    if (!o) return;
    free(o->state);
    free(o->fraction);
    o->state = NULL;
    o->fraction = NULL;
}

/* ---- frustum grids ---------------------------------------------------------------------
 *
 * A froxel is not a box in world space, but the projective map of view space
 *   (X, Y, Z) → (fi, fj, w) = ((X/(Z·tan_x) + 1)·nx/2, (Y/(Z·tan_y) + 1)·ny/2, 1/Z),  Z > 0,
 * sends planes to planes and segments to segments, so a triangle (clipped to Z >= near) stays a
 * triangle, and froxel (i, j, k) becomes the axis-aligned box [i, i+1] × [j, j+1] ×
 * [1/d_{k+1}, 1/d_k]. The separating-axis test is exact there. Boxes are voxelized through
 * their own triangles (their surface is exactly those triangles, so this is exact too);
 * spheres by the exact distance from the centre to the froxel, a convex hexahedron. */

static brm_vec3 to_view(const brm_grid *g, brm_vec3 p)
{
    brm_vec3 d = brm_sub(p, g->cam.position);
    return brm_v3(brm_dot(d, g->right), brm_dot(d, g->up), brm_dot(d, g->fwd));
}

static brm_vec3 warp(const brm_grid *g, brm_vec3 q)
{
    return brm_v3((q.x / (q.z * g->tan_half_x) + 1.0) * 0.5 * g->n[0],
                  (q.y / (q.z * g->tan_half_y) + 1.0) * 0.5 * g->n[1], 1.0 / q.z);
}

/* Slice holding view depth z, clamped to [0, nz − 1]. */
static uint32_t slice_of(const brm_grid *g, double z)
{
    uint32_t lo = 0, hi = g->n[2];
    while (hi - lo > 1) {
        uint32_t mid = lo + (hi - lo) / 2;
        if (g->slice_depths[mid] <= z) lo = mid;
        else hi = mid;
    }
    return lo;
}

/* Clips triangle t (view space) to Z >= near and appends its warped pieces (0, 1 or 2). */
static uint32_t clip_and_warp(const brm_grid *g, const brm_vec3 t[3], brm_vec3 out[2][3])
{
    brm_vec3 poly[4];
    int n = 0;
    double zn = g->cam.near;
    for (int a = 0; a < 3; a++) {
        brm_vec3 p = t[a], q = t[(a + 1) % 3];
        int pin = p.z >= zn, qin = q.z >= zn;
        if (pin) poly[n++] = p;
        if (pin != qin) {
            double u = (zn - p.z) / (q.z - p.z);
            brm_vec3 x = brm_madd(p, brm_sub(q, p), u);
            x.z = zn;
            poly[n++] = x;
        }
    }
    if (n < 3) return 0;
    brm_vec3 w[4];
    for (int a = 0; a < n; a++) w[a] = warp(g, poly[a]);
    out[0][0] = w[0];
    out[0][1] = w[1];
    out[0][2] = w[2];
    if (n == 3) return 1;
    out[1][0] = w[0];
    out[1][1] = w[2];
    out[1][2] = w[3];
    return 2;
}

static const int hex_faces[6][4] = {{0, 2, 6, 4}, {1, 3, 7, 5}, {0, 1, 5, 4}, {2, 3, 7, 6}, {0, 1, 3, 2}, {4, 5, 7, 6}};

static double seg_dist2(brm_vec3 p, brm_vec3 a, brm_vec3 b)
{
    brm_vec3 ab = brm_sub(b, a);
    double l2 = brm_dot(ab, ab);
    double t = l2 > 0 ? brm_clamp(brm_dot(brm_sub(p, a), ab) / l2, 0.0, 1.0) : 0.0;
    brm_vec3 d = brm_sub(p, brm_madd(a, ab, t));
    return brm_dot(d, d);
}

/* Squared distance from p to the convex hexahedron with corners c[8] (bit 0 = i, 1 = j,
 * 2 = k); 0 inside. Outside, the nearest point lies on a face: a face's nearest point is the
 * projection when that falls inside the (planar, convex) quad, else on one of its edges. */
static double hex_dist2(const brm_vec3 c[8], brm_vec3 p)
{
    brm_vec3 centroid = {0, 0, 0};
    for (int q = 0; q < 8; q++) centroid = brm_add(centroid, brm_scale(c[q], 0.125));
    int inside = 1;
    double best = HUGE_VAL;
    for (int f = 0; f < 6; f++) {
        brm_vec3 v[4];
        for (int q = 0; q < 4; q++) v[q] = c[hex_faces[f][q]];
        brm_vec3 n = brm_norm(brm_cross(brm_sub(v[2], v[0]), brm_sub(v[3], v[1])));
        if (brm_dot(n, brm_sub(centroid, v[0])) > 0) n = brm_scale(n, -1.0);   /* outward */
        double sd = brm_dot(n, brm_sub(p, v[0]));
        if (sd > 0) inside = 0;
        brm_vec3 proj = brm_madd(p, n, -sd);
        /* Inside the quad: on the same side of all four edges as the quad's own turn. */
        brm_vec3 turn = brm_cross(brm_sub(v[1], v[0]), brm_sub(v[2], v[0]));
        int in_quad = 1;
        for (int q = 0; q < 4 && in_quad; q++)
            in_quad = brm_dot(brm_cross(brm_sub(v[(q + 1) % 4], v[q]), brm_sub(proj, v[q])), turn) >= 0;
        double d2 = in_quad ? sd * sd : HUGE_VAL;
        if (!in_quad)
            for (int q = 0; q < 4; q++) d2 = fmin(d2, seg_dist2(p, v[q], v[(q + 1) % 4]));
        best = fmin(best, d2);
    }
    return inside ? 0.0 : best;
}

static void surface_slice_frustum(void *ctx, uint32_t k, int worker)
{
    (void)worker;
    vox *v = ctx;
    const brm_grid *g = v->g;
    const brm_scene *s = v->s;
    double w0 = 1.0 / g->slice_depths[k + 1], w1 = 1.0 / g->slice_depths[k];
    for (uint32_t q = v->slice_start[k]; q < v->slice_start[k + 1]; q++) {
        const brm_vec3 *tv = v->wtris[v->slice_tris[q]];
        brm_vec3 lo = brm_vmin(tv[0], brm_vmin(tv[1], tv[2])), hi = brm_vmax(tv[0], brm_vmax(tv[1], tv[2]));
        if (hi.z < w0 || lo.z > w1) continue;
        double fi0 = floor(lo.x) - 1, fi1 = floor(hi.x) + 1, fj0 = floor(lo.y) - 1, fj1 = floor(hi.y) + 1;
        if (fi1 < 0 || fj1 < 0 || fi0 > g->n[0] - 1.0 || fj0 > g->n[1] - 1.0) continue;
        uint32_t i0 = fi0 < 0 ? 0 : (uint32_t)fi0, j0 = fj0 < 0 ? 0 : (uint32_t)fj0;
        uint32_t i1 = fi1 > g->n[0] - 1.0 ? g->n[0] - 1 : (uint32_t)fi1;
        uint32_t j1 = fj1 > g->n[1] - 1.0 ? g->n[1] - 1 : (uint32_t)fj1;
        for (uint32_t j = j0; j <= j1; j++)
            for (uint32_t i = i0; i <= i1; i++) {
                uint8_t *st = &v->state[brm_grid_index(g, i, j, k)];
                if (*st != BRM_CELL_EMPTY) continue;
                brm_vec3 c = brm_v3(i + 0.5, j + 0.5, 0.5 * (w0 + w1)), h = brm_v3(0.5, 0.5, 0.5 * (w1 - w0));
                if (brm_tri_box_overlap(c, h, tv)) *st = BRM_CELL_SURFACE;
            }
    }
    for (uint32_t oi = 0; oi < s->object_count; oi++) {
        const brm_object *o = &s->objects[oi];
        if (o->shape != BRM_SHAPE_SPHERE) continue;
        double r2 = o->radius * o->radius;
        for (uint32_t j = 0; j < g->n[1]; j++)
            for (uint32_t i = 0; i < g->n[0]; i++) {
                uint8_t *st = &v->state[brm_grid_index(g, i, j, k)];
                if (*st == BRM_CELL_INTERIOR) continue;
                brm_vec3 c[8];
                brm_aabb b = brm_aabb_empty();
                for (int q = 0; q < 8; q++) {
                    c[q] = brm_grid_point(g, i + (q & 1), j + (q >> 1 & 1), k + (q >> 2 & 1));
                    brm_aabb_grow(&b, c[q]);
                }
                if (!brm_aabb_overlaps(b, o->bounds)) continue;
                if (!(hex_dist2(c, o->center) < r2)) continue;
                int all_in = 1;
                for (int q = 0; q < 8 && all_in; q++) {
                    brm_vec3 dd = brm_sub(c[q], o->center);
                    all_in = brm_dot(dd, dd) <= r2;
                }
                raise_state(st, all_in ? BRM_CELL_INTERIOR : BRM_CELL_SURFACE);
            }
    }
}

/* Fills v->wtris and the per-slice lists for a frustum grid. */
static brm_status bin_frustum(vox *v, brm_diag *d)
{
    const brm_grid *g = v->g;
    const brm_scene *s = v->s;
    v->wtris = malloc(sizeof *v->wtris * 2 * ((size_t)s->tri_count + 1));
    if (!v->wtris) return brm_diag_error(d, BRM_E_NOMEM, "voxelizer: cannot allocate %u triangles", s->tri_count);
    uint32_t n = 0;
    for (uint32_t t = 0; t < s->tri_count; t++) {
        brm_vec3 q[3];
        for (int a = 0; a < 3; a++) q[a] = to_view(g, s->tris[t].v[a]);
        n += clip_and_warp(g, q, &v->wtris[n]);
    }
    v->wtri_count = n;
    uint64_t total = 0;
    for (int pass = 0; pass < 2; pass++) {
        for (uint32_t t = 0; t < n; t++) {
            const brm_vec3 *w = v->wtris[t];
            double wlo = fmin(w[0].z, fmin(w[1].z, w[2].z)), whi = fmax(w[0].z, fmax(w[1].z, w[2].z));
            if (1.0 / whi > g->cam.far) continue;
            uint32_t k0 = slice_of(g, 1.0 / whi), k1 = slice_of(g, 1.0 / wlo);
            if (k0 > 0) k0--;
            if (k1 + 1 < g->n[2]) k1++;
            for (uint32_t k = k0; k <= k1; k++) {
                if (pass == 0) v->slice_start[k + 1]++;
                else v->slice_tris[v->slice_start[k]++] = t;
            }
            if (pass == 0) total += k1 - k0 + 1;
        }
        if (pass == 0) {
            BRM_CHECK(d, total <= UINT32_MAX, BRM_E_BUDGET, "voxelizer: %llu triangle-slice pairs, too many",
                      (unsigned long long)total);
            for (uint32_t k = 0; k < g->n[2]; k++) v->slice_start[k + 1] += v->slice_start[k];
            v->slice_tris = malloc(sizeof *v->slice_tris * (total ? total : 1));
            if (!v->slice_tris) return brm_diag_error(d, BRM_E_NOMEM, "voxelizer: cannot allocate the slice lists");
        }
    }
    for (uint32_t k = g->n[2]; k > 0; k--) v->slice_start[k] = v->slice_start[k - 1];
    v->slice_start[0] = 0;
    return BRM_OK;
}

static brm_status voxelize_grid(const brm_scene *s, const brm_grid *g, int threads, brm_occupancy *out,
                                 brm_diag *d)
{
    size_t cells = brm_grid_cells(g), fbytes;
    BRM_CHECK(d, cells <= UINT32_MAX && brm_mul_size(cells, sizeof(float), &fbytes), BRM_E_BUDGET,
              "voxelizer: %zu cells, at most %u supported", cells, UINT32_MAX);
    vox v;
    memset(&v, 0, sizeof v);
    v.s = s;
    v.g = g;
    brm_status st = BRM_OK;
    brm_solid_index *solid = NULL;
    uint32_t *queue = NULL;
    v.state = calloc(cells, 1);
    v.fraction = malloc(fbytes);
    v.slice_start = calloc((size_t)g->n[2] + 1, sizeof *v.slice_start);
    if (!v.state || !v.fraction || !v.slice_start) {
        st = brm_diag_error(d, BRM_E_NOMEM, "voxelizer: cannot allocate %zu cells", cells);
        goto fail;
    }
    if ((st = brm_solid_index_build(s, &solid, d)) != BRM_OK) goto fail;
    v.solid = solid;

    if (g->kind == BRM_GRID_FRUSTUM) {
        if ((st = bin_frustum(&v, d)) != BRM_OK) goto fail;
    } else {
        /* Triangles per z-slice (boxes are done analytically: skip their triangles). */
        uint64_t total = 0;
        for (int pass = 0; pass < 2; pass++) {
            for (uint32_t t = 0; t < s->tri_count; t++) {
                const brm_tri *tr = &s->tris[t];
                if (s->objects[tr->object].shape == BRM_SHAPE_BOX) continue;
                double z0 = fmin(tr->v[0].z, fmin(tr->v[1].z, tr->v[2].z));
                double z1 = fmax(tr->v[0].z, fmax(tr->v[1].z, tr->v[2].z));
                uint32_t k0, k1;
                if (!axis_range(g, 2, z0, z1, &k0, &k1)) continue;
                for (uint32_t k = k0; k <= k1; k++) {
                    if (pass == 0) v.slice_start[k + 1]++;
                    else v.slice_tris[v.slice_start[k]++] = t;
                }
                if (pass == 0) total += k1 - k0 + 1;
            }
            if (pass == 0) {
                if (total > UINT32_MAX) {
                    st = brm_diag_error(d, BRM_E_BUDGET, "voxelizer: %llu triangle-slice pairs, too many",
                                        (unsigned long long)total);
                    goto fail;
                }
                for (uint32_t k = 0; k < g->n[2]; k++) v.slice_start[k + 1] += v.slice_start[k];
                v.slice_tris = malloc(sizeof *v.slice_tris * (total ? total : 1));
                if (!v.slice_tris) {
                    st = brm_diag_error(d, BRM_E_NOMEM, "voxelizer: cannot allocate the slice lists");
                    goto fail;
                }
            }
        }
        /* The fill pass advanced each start to the next slice's start: shift back. */
        for (uint32_t k = g->n[2]; k > 0; k--) v.slice_start[k] = v.slice_start[k - 1];
        v.slice_start[0] = 0;
    }

    /* Both parallel passes stop when the bake is interrupted (SIGINT/SIGTERM). */
    if (brm_parallel_for(g->n[2], threads, g->kind == BRM_GRID_FRUSTUM ? surface_slice_frustum : surface_slice, &v,
                         &brm_interrupted) != g->n[2]) {
        st = brm_diag_error(d, BRM_E_INTERRUPTED, "voxelizer: interrupted");
        goto fail;
    }

    /* Empty components: one query at the first cell of each decides the whole component. */
    size_t cap = 1u << 10; /* small, so the ring's growth and wrap-around run in every test bake */
    queue = malloc(cap * sizeof *queue);
    if (!queue) {
        st = brm_diag_error(d, BRM_E_NOMEM, "voxelizer: cannot allocate the fill queue");
        goto fail;
    }
    for (size_t c = 0; c < cells; c++) {
        if (v.state[c] != BRM_CELL_EMPTY) continue;
        uint32_t i = (uint32_t)(c % g->n[0]), j = (uint32_t)((c / g->n[0]) % g->n[1]);
        uint32_t k = (uint32_t)(c / ((size_t)g->n[0] * g->n[1]));
        brm_vec3 centre = brm_grid_point(g, i + 0.5, j + 0.5, k + 0.5);
        uint8_t label = brm_solid_index_query(solid, centre) ? BRM_CELL_INTERIOR : CELL_DONE_EMPTY;
        if ((st = fill_component(g, v.state, c, label, &queue, &cap, d)) != BRM_OK) goto fail;
    }
    for (size_t c = 0; c < cells; c++)
        if (v.state[c] == CELL_DONE_EMPTY) v.state[c] = BRM_CELL_EMPTY;

    if (atomic_load(&brm_interrupted) ||
        brm_parallel_for(g->n[2], threads, fraction_slice, &v, &brm_interrupted) != g->n[2]) {
        st = brm_diag_error(d, BRM_E_INTERRUPTED, "voxelizer: interrupted");
        goto fail;
    }

    free(queue);
    free(v.slice_start);
    free(v.slice_tris);
    free(v.wtris);
    brm_solid_index_free(solid);
    memcpy(out->n, g->n, sizeof out->n);
    out->state = v.state;
    out->fraction = v.fraction;
    return BRM_OK;
fail:
    free(queue);
    free(v.state);
    free(v.fraction);
    free(v.slice_start);
    free(v.slice_tris);
    free(v.wtris);
    brm_solid_index_free(solid);
    return st;
}

brm_status brm_voxelize(const brm_scene *s, const brm_grid *g, int threads, brm_occupancy *out, brm_diag *d)
{
    BRM_CHECK(d, g->kind == BRM_GRID_WORLD || g->kind == BRM_GRID_FRUSTUM, BRM_E_INTERNAL,
              "voxelizer: grid kind %d has no cells to voxelize (world and frustum grids only)", (int)g->kind);
    return voxelize_grid(s, g, threads, out, d);
}
