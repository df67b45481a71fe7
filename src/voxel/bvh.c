/* Bounding-volume hierarchy over triangles and spheres.
 *
 * Build: binned surface-area heuristic (16 bins on the centroid bounds per axis, leaves of at
 * most 4 primitives), single-threaded and driven only by the primitive order of the scene, so
 * the same scene always gives the same tree. Nodes are a flat array; the two children of an
 * interior node sit next to each other. Traversal is iterative with a fixed stack, nearer child
 * first. Primitives are copied in leaf order so a leaf reads one contiguous run, triangles as a
 * vertex and two edges. */
#include "voxel/bvh.h"

#include <float.h>
#include <stdlib.h>
#include <string.h>

#if defined(__SSE2__)
#include <emmintrin.h>
#define BVH_SSE2 1
#else
#define BVH_SSE2 0
#endif

#define LEAF_MAX 4
#define BINS 16
#define FORCE_MEDIAN_DEPTH 40   /* past this depth split by count: bounds the tree depth */
#define STACK_MAX 128           /* > FORCE_MEDIAN_DEPTH + log2(UINT32_MAX) */

/* 32 bytes, two to a cache line. The bounds are floats rounded outward from the exact double
 * boxes: a box can only grow, so the traversal may visit a little more but never misses, and
 * every primitive is still tested in double precision. */
typedef struct node {
    float b[6];         /* lo x, y, z, then hi x, y, z */
    uint32_t index;     /* leaf: first primitive; interior: first of the two children */
    uint16_t count;     /* leaf: primitive count (> 0); interior: 0 */
    uint16_t axis;      /* interior: split axis, for the front-to-back order */
} node;

typedef struct prim {
    brm_vec3 v[3];      /* triangle: v[0] and the edges v1 − v0, v2 − v0; sphere: v[0] centre,
                           v[1].x radius */
    uint32_t object;
    uint32_t tri;       /* UINT32_MAX for a sphere */
} prim;

/* The boxes of the two children of an interior node, side by side: b[slab] holds
 * slab (lo x, y, z, hi x, y, z) of the first child then of the second, so one pair of vector
 * lanes tests both children's slabs at once. Interior node n's children n.index and
 * n.index + 1 have their pair at (n.index − 1) / 2 (children are allocated two at a time
 * after the root, so n.index is odd). 48 bytes. */
typedef struct pair {
    float b[6][2];
} pair;

struct brm_bvh {
    node *nodes;
    pair *pairs;        /* (node_count − 1) / 2 of them */
    uint32_t node_count;
    prim *prims;
    uint32_t prim_count;
};

/* ---- primitive tests ---------------------------------------------------------------- */

/* Möller, T. and Trumbore, B., "Fast, Minimum Storage Ray/Triangle Intersection", Journal of
 * Graphics Tools 2(1), 1997: solve o + t·d = (1−u−v)·v0 + u·v1 + v·v2 by Cramer's rule with
 * scalar triple products. The edges come precomputed (the same doubles brm_ray_triangle
 * computes, so both give the same bits). */
static inline int tri_test(brm_vec3 o, brm_vec3 dir, brm_vec3 v0, brm_vec3 e1, brm_vec3 e2, double tmin, double tmax,
                           double *t, int *near_edge)
{
    brm_vec3 p = brm_cross(dir, e2);
    double det = brm_dot(e1, p);
    if (det == 0.0) return 0;   /* ray parallel to the plane */
    double inv = 1.0 / det;
    brm_vec3 s = brm_sub(o, v0);
    double u = brm_dot(s, p) * inv;
    const double eps = BRM_TRI_EDGE_EPS;
    if (u < -eps || u > 1.0 + eps) return 0;
    brm_vec3 q = brm_cross(s, e1);
    double w = brm_dot(dir, q) * inv;
    if (w < -eps || u + w > 1.0 + eps) return 0;
    double tt = brm_dot(e2, q) * inv;
    if (!(tt > tmin && tt < tmax)) return 0;
    *t = tt;
    if (near_edge) {
        /* 1e-7 in barycentric units: far wider than the rounding of u and w, so a recast in
         * another direction is asked for whenever the edge tolerance could have mattered. */
        const double e = 1e-7;
        *near_edge = u < e || w < e || u + w > 1.0 - e;
    }
    return 1;
}

int brm_ray_triangle(brm_vec3 o, brm_vec3 dir, const brm_vec3 v[3], double tmin, double tmax, double *t,
                     int *near_edge)
{
    return tri_test(o, dir, v[0], brm_sub(v[1], v[0]), brm_sub(v[2], v[0]), tmin, tmax, t, near_edge);
}

int brm_ray_sphere(brm_vec3 o, brm_vec3 dir, brm_vec3 c, double r, double tmin, double tmax, double *t,
                   int *near_edge)
{
    /* |o + t·d − c|² = r² with |d| = 1: t² + 2bt + (|oc|² − r²) = 0. */
    brm_vec3 oc = brm_sub(o, c);
    double b = brm_dot(oc, dir);
    double cc = brm_dot(oc, oc) - r * r;
    double disc = b * b - cc;
    if (disc < 0.0) return 0;
    double sq = sqrt(disc);
    double t0 = -b - sq, t1 = -b + sq;
    double tt;
    if (t0 > tmin && t0 < tmax) tt = t0;
    else if (t1 > tmin && t1 < tmax) tt = t1;
    else return 0;
    *t = tt;
    if (near_edge) *near_edge = sq <= 1e-7 * r;   /* grazing: the two roots nearly meet */
    return 1;
}

/* ---- build -------------------------------------------------------------------------- */

/* Bounds of a primitive given as the scene has it (triangle vertices, not edges). */
static brm_aabb prim_bounds(const prim *p)
{
    brm_aabb b;
    if (p->tri == UINT32_MAX) {
        double r = p->v[1].x;
        b.min = brm_sub(p->v[0], brm_v3(r, r, r));
        b.max = brm_add(p->v[0], brm_v3(r, r, r));
    } else {
        b.min = brm_vmin(p->v[0], brm_vmin(p->v[1], p->v[2]));
        b.max = brm_vmax(p->v[0], brm_vmax(p->v[1], p->v[2]));
    }
    return b;
}

/* x rounded to a float no greater (down) or no smaller (up) than x. */
static float float_down(double x)
{
    float f = (float)x;
    return (double)f > x ? nextafterf(f, -HUGE_VALF) : f;
}

static float float_up(double x)
{
    float f = (float)x;
    return (double)f < x ? nextafterf(f, HUGE_VALF) : f;
}

static void node_set_box(node *nd, brm_aabb box)
{
    for (int a = 0; a < 3; a++) {
        double lo = brm_vget(box.min, a), hi = brm_vget(box.max, a);
        /* An empty box (lo > hi: the empty scene's root) stays empty. */
        nd->b[a] = lo <= hi ? float_down(lo) : HUGE_VALF;
        nd->b[3 + a] = lo <= hi ? float_up(hi) : -HUGE_VALF;
    }
}

static double area(brm_aabb b)
{
    brm_vec3 e = brm_sub(b.max, b.min);
    if (e.x < 0 || e.y < 0 || e.z < 0) return 0.0;
    return 2.0 * (e.x * e.y + e.y * e.z + e.z * e.x);
}

typedef struct build_item {
    brm_aabb box;
    brm_vec3 centroid;
} build_item;

typedef struct task {
    uint32_t node, begin, end, depth;
} task;

static void swap_items(build_item *it, prim *pr, uint32_t a, uint32_t b)
{
    build_item ti = it[a];
    it[a] = it[b];
    it[b] = ti;
    prim tp = pr[a];
    pr[a] = pr[b];
    pr[b] = tp;
}

/* Orders [begin, end) by centroid on axis for the median split. Shell sort: deterministic, no
 * recursion, no allocation; it runs only past FORCE_MEDIAN_DEPTH or when SAH finds no split. */
static void median_sort(build_item *it, prim *pr, uint32_t begin, uint32_t end, int axis)
{
    uint32_t n = end - begin;
    for (uint32_t gap = n / 2; gap > 0; gap /= 2) {
        for (uint32_t i = begin + gap; i < end; i++) {
            for (uint32_t j = i; j >= begin + gap; j -= gap) {
                double a = brm_vget(it[j - gap].centroid, axis), b = brm_vget(it[j].centroid, axis);
                if (a <= b) break;
                swap_items(it, pr, j - gap, j);
            }
        }
    }
}

static brm_status build(brm_bvh *b, build_item *it, brm_diag *d)
{
    uint32_t n = b->prim_count;
    uint32_t cap = n ? 2 * n - 1 : 1;
    b->nodes = calloc(cap, sizeof *b->nodes);
    task *stack = calloc(STACK_MAX * 2 + 2, sizeof *stack);
    if (!b->nodes || !stack) {
        free(stack);
        return brm_diag_error(d, BRM_E_NOMEM, "ray caster: cannot allocate %u nodes", cap);
    }
    b->node_count = 1;
    if (n == 0) {
        node *root = &b->nodes[0];
        node_set_box(root, brm_aabb_empty());
        root->count = 0;
        root->index = 0;
        free(stack);
        return BRM_OK;
    }
    int sp = 0;
    stack[sp++] = (task){0, 0, n, 0};
    while (sp > 0) {
        task tk = stack[--sp];
        node *nd = &b->nodes[tk.node];
        brm_aabb box = brm_aabb_empty(), cbox = brm_aabb_empty();
        for (uint32_t i = tk.begin; i < tk.end; i++) {
            brm_aabb_union(&box, it[i].box);
            brm_aabb_grow(&cbox, it[i].centroid);
        }
        node_set_box(nd, box);
        uint32_t cnt = tk.end - tk.begin;
        if (cnt <= LEAF_MAX) {
            nd->index = tk.begin;
            nd->count = (uint16_t)cnt;
            continue;
        }
        int best_axis = -1;
        uint32_t mid = 0;
        if (tk.depth < FORCE_MEDIAN_DEPTH) {
            /* Binned SAH (Wald, "On fast Construction of SAH-based Bounding Volume
             * Hierarchies", 2007): cost of a split = A(L)·N(L) + A(R)·N(R). */
            double best_cost = area(box) * cnt;   /* the cost of not splitting, same units */
            int best_bin = -1;
            for (int a = 0; a < 3; a++) {
                double lo = brm_vget(cbox.min, a), hi = brm_vget(cbox.max, a);
                if (!(hi > lo)) continue;
                double scale = BINS / (hi - lo);
                brm_aabb bb[BINS];
                uint32_t bc[BINS];
                for (int k = 0; k < BINS; k++) { bb[k] = brm_aabb_empty(); bc[k] = 0; }
                for (uint32_t i = tk.begin; i < tk.end; i++) {
                    int k = (int)((brm_vget(it[i].centroid, a) - lo) * scale);
                    if (k >= BINS) k = BINS - 1;
                    if (k < 0) k = 0;
                    bc[k]++;
                    brm_aabb_union(&bb[k], it[i].box);
                }
                double right_area[BINS];
                uint32_t right_count[BINS];
                brm_aabb acc = brm_aabb_empty();
                uint32_t c = 0;
                for (int k = BINS - 1; k > 0; k--) {
                    brm_aabb_union(&acc, bb[k]);
                    c += bc[k];
                    right_area[k] = area(acc);
                    right_count[k] = c;
                }
                acc = brm_aabb_empty();
                c = 0;
                for (int k = 0; k < BINS - 1; k++) {
                    brm_aabb_union(&acc, bb[k]);
                    c += bc[k];
                    if (c == 0 || right_count[k + 1] == 0) continue;
                    double cost = area(acc) * c + right_area[k + 1] * right_count[k + 1];
                    if (cost < best_cost) {
                        best_cost = cost;
                        best_axis = a;
                        best_bin = k;
                    }
                }
            }
            if (best_axis >= 0) {
                double lo = brm_vget(cbox.min, best_axis), hi = brm_vget(cbox.max, best_axis);
                double scale = BINS / (hi - lo);
                uint32_t i = tk.begin, j = tk.end;
                while (i < j) {
                    int k = (int)((brm_vget(it[i].centroid, best_axis) - lo) * scale);
                    if (k >= BINS) k = BINS - 1;
                    if (k <= best_bin) i++;
                    else swap_items(it, b->prims, i, --j);
                }
                mid = i;
                if (mid == tk.begin || mid == tk.end) best_axis = -1;
            } else if (cnt <= 65535 && tk.depth < FORCE_MEDIAN_DEPTH) {
                /* SAH says a leaf is cheapest (or all centroids coincide). */
                nd->index = tk.begin;
                nd->count = (uint16_t)cnt;
                continue;
            }
        }
        if (best_axis < 0) {
            /* Median split on the widest centroid axis: halves the count every level. */
            brm_vec3 e = brm_sub(cbox.max, cbox.min);
            best_axis = e.x >= e.y && e.x >= e.z ? 0 : e.y >= e.z ? 1 : 2;
            median_sort(it, b->prims, tk.begin, tk.end, best_axis);
            mid = tk.begin + cnt / 2;
        }
        uint32_t left = b->node_count;
        b->node_count += 2;
        nd->index = left;
        nd->count = 0;
        nd->axis = (uint16_t)best_axis;
        stack[sp++] = (task){left + 1, mid, tk.end, tk.depth + 1};
        stack[sp++] = (task){left, tk.begin, mid, tk.depth + 1};
    }
    free(stack);
    return BRM_OK;
}

static brm_status build_pairs(brm_bvh *b, brm_diag *d)
{
    uint32_t np = (b->node_count - 1) / 2;
    b->pairs = malloc((np ? np : 1) * sizeof *b->pairs);
    if (!b->pairs) return brm_diag_error(d, BRM_E_NOMEM, "ray caster: cannot allocate %u node pairs", np);
    for (uint32_t i = 0; i < b->node_count; i++) {
        const node *nd = &b->nodes[i];
        if (nd->count || nd->index == 0) continue;   /* a leaf, or the empty scene's root */
        pair *pr = &b->pairs[(nd->index - 1) / 2];
        for (int k = 0; k < 6; k++) {
            pr->b[k][0] = b->nodes[nd->index].b[k];
            pr->b[k][1] = b->nodes[nd->index + 1].b[k];
        }
    }
    return BRM_OK;
}

brm_status brm_bvh_build_subset(const brm_scene *s, const uint8_t *object_mask, brm_bvh **out, brm_diag *d)
{
    uint64_t n = 0;
    for (uint32_t i = 0; i < s->tri_count; i++)
        if (!object_mask || object_mask[s->tris[i].object]) n++;
    for (uint32_t i = 0; i < s->object_count; i++)
        if (s->objects[i].shape == BRM_SHAPE_SPHERE && (!object_mask || object_mask[i])) n++;
    BRM_CHECK(d, n < (1u << 30), BRM_E_BUDGET, "ray caster: %llu primitives, at most %u supported",
              (unsigned long long)n, 1u << 30);
    brm_bvh *b = calloc(1, sizeof *b);
    build_item *it = calloc(n ? n : 1, sizeof *it);
    if (b) b->prims = calloc(n ? n : 1, sizeof *b->prims);
    if (!b || !it || !b->prims) {
        if (b) free(b->prims);
        free(b);
        free(it);
        return brm_diag_error(d, BRM_E_NOMEM, "ray caster: cannot allocate %llu primitives",
                              (unsigned long long)n);
    }
    uint32_t k = 0;
    for (uint32_t i = 0; i < s->tri_count; i++) {
        if (object_mask && !object_mask[s->tris[i].object]) continue;
        prim *p = &b->prims[k];
        memcpy(p->v, s->tris[i].v, sizeof p->v);
        p->object = s->tris[i].object;
        p->tri = i;
        k++;
    }
    for (uint32_t i = 0; i < s->object_count; i++) {
        const brm_object *o = &s->objects[i];
        if (o->shape != BRM_SHAPE_SPHERE || (object_mask && !object_mask[i])) continue;
        prim *p = &b->prims[k];
        p->v[0] = o->center;
        p->v[1] = brm_v3(o->radius, 0, 0);
        p->v[2] = brm_v3(0, 0, 0);
        p->object = i;
        p->tri = UINT32_MAX;
        k++;
    }
    b->prim_count = k;
    for (uint32_t i = 0; i < k; i++) {
        it[i].box = prim_bounds(&b->prims[i]);
        it[i].centroid = brm_scale(brm_add(it[i].box.min, it[i].box.max), 0.5);
    }
    brm_status st = build(b, it, d);
    free(it);
    if (st == BRM_OK) st = build_pairs(b, d);
    /* The tree is built on the vertices; the traversal wants the edges. */
    for (uint32_t i = 0; i < k; i++) {
        prim *p = &b->prims[i];
        if (p->tri == UINT32_MAX) continue;
        p->v[1] = brm_sub(p->v[1], p->v[0]);
        p->v[2] = brm_sub(p->v[2], p->v[0]);
    }
    if (st != BRM_OK) {
        brm_bvh_free(b);
        return st;
    }
    *out = b;
    return BRM_OK;
}

brm_status brm_bvh_build(const brm_scene *s, brm_bvh **out, brm_diag *d)
{
    return brm_bvh_build_subset(s, NULL, out, d);
}

void brm_bvh_free(brm_bvh *b)
{
    if (!b) return;
    free(b->nodes);
    free(b->pairs);
    free(b->prims);
    free(b);
}

size_t brm_bvh_memory(const brm_scene *s)
{
    size_t n = s->tri_count;
    for (uint32_t i = 0; i < s->object_count; i++)
        if (s->objects[i].shape == BRM_SHAPE_SPHERE) n++;
    if (n == 0) n = 1;
    /* Kept: nodes, their pairs' boxes and primitives. Transient during the build: one
     * build_item per primitive. */
    return (2 * n - 1) * sizeof(node) + n * sizeof(pair) + n * sizeof(prim) + n * sizeof(build_item) +
           sizeof(brm_bvh);
}

/* ---- traversal ---------------------------------------------------------------------- */

typedef struct ray {
    double o[3], inv[3];
    int neg[3];
    int near[3], far[3];    /* index into node.b of the slab each axis enters and leaves by */
#if BVH_SSE2
    __m128d o2[3], inv2[3]; /* o and inv broadcast to both lanes */
#endif
} ray;

#if BVH_SSE2
/* Two floats widened to two doubles (exactly). */
static inline __m128d load2(const float *f)
{
    return _mm_cvtps_pd(_mm_castsi128_ps(_mm_loadl_epi64((const __m128i *)(const void *)f)));
}
#endif

static void ray_setup(ray *r, brm_vec3 o, brm_vec3 dir)
{
    for (int a = 0; a < 3; a++) {
        double dv = brm_vget(dir, a);
        r->o[a] = brm_vget(o, a);
        /* A zero component gets a huge finite reciprocal: (slab − o)·inv is then ±huge or 0,
         * never the NaN of 0·inf. */
        r->inv[a] = dv != 0.0 ? 1.0 / dv : (signbit(dv) ? -1e300 : 1e300);
        r->neg[a] = r->inv[a] < 0.0;
        r->near[a] = r->neg[a] ? 3 + a : a;
        r->far[a] = r->neg[a] ? a : 3 + a;
#if BVH_SSE2
        r->o2[a] = _mm_set1_pd(r->o[a]);
        r->inv2[a] = _mm_set1_pd(r->inv[a]);
#endif
    }
}

static inline int slab(const ray *r, const node *n, double tmin, double tmax, double *tnear)
{
    for (int a = 0; a < 3; a++) {
        double t0 = ((double)n->b[r->near[a]] - r->o[a]) * r->inv[a];
        double t1 = ((double)n->b[r->far[a]] - r->o[a]) * r->inv[a];
        tmin = t0 > tmin ? t0 : tmin;
        tmax = t1 < tmax ? t1 : tmax;
    }
    *tnear = tmin;
    return tmin <= tmax;
}

static inline int prim_hit(const prim *p, brm_vec3 o, brm_vec3 dir, double tmin, double tmax, double *t,
                           int *near_edge)
{
    if (p->tri == UINT32_MAX) return brm_ray_sphere(o, dir, p->v[0], p->v[1].x, tmin, tmax, t, near_edge);
    return tri_test(o, dir, p->v[0], p->v[1], p->v[2], tmin, tmax, t, near_edge);
}

static void fill_hit(const prim *p, brm_vec3 o, brm_vec3 dir, double t, brm_hit *hit)
{
    brm_vec3 n;
    if (p->tri == UINT32_MAX) {
        n = brm_norm(brm_sub(brm_madd(o, dir, t), p->v[0]));
    } else {
        n = brm_norm(brm_cross(p->v[1], p->v[2]));
    }
    hit->t = t;
    hit->object = p->object;
    hit->tri = p->tri;
    hit->back_face = brm_dot(dir, n) > 0.0;
    hit->normal = hit->back_face ? brm_scale(n, -1.0) : n;
}

/* Primitive order key for ties at equal t: triangles by index, then spheres by object. */
static inline uint64_t prim_key(const prim *p)
{
    return p->tri == UINT32_MAX ? ((uint64_t)1 << 32) | p->object : p->tri;
}

/* An inner node n: tests both children's boxes, so that only boxes the ray crosses within
 * [tmin, tmax] are visited, the nearer first (for closest hits the likelier to shorten tmax,
 * for occlusion the likelier blocker of a ray leaving a surface); the farther one goes on the
 * stack. Returns 1 with *ni set to the child to visit next, 0 when the ray misses both. */
static inline int descend_ref(const ray *r, const brm_bvh *b, const node *n, double tmin, double tmax,
                              uint32_t *ni, uint32_t *stack, int *sp)
{
    uint32_t first = n->index, second = n->index + 1;
    if (r->neg[n->axis]) { uint32_t tmp = first; first = second; second = tmp; }
    double t0, t1;
    int h0 = slab(r, &b->nodes[first], tmin, tmax, &t0);
    int h1 = slab(r, &b->nodes[second], tmin, tmax, &t1);
    if (h0 && h1) {
        if (t1 < t0) { uint32_t tmp = first; first = second; second = tmp; }
        stack[(*sp)++] = second;
        *ni = first;
        return 1;
    }
    if (h0) { *ni = first; return 1; }
    if (h1) { *ni = second; return 1; }
    return 0;
}

/* The same decisions as descend_ref (same doubles: each lane runs the scalar slab's
 * operations in its order, maxpd/minpd being exactly `a > b ? a : b` and `a < b ? a : b`,
 * NaN included), with both children's slabs tested at once on the node pair's doubles. */
static inline int descend(const ray *r, const brm_bvh *b, const node *n, double tmin, double tmax, uint32_t *ni,
                          uint32_t *stack, int *sp)
{
    const pair *p = &b->pairs[(n->index - 1) >> 1];
    double tn[2];
    int hit[2];
#if BVH_SSE2
    __m128d lo = _mm_set1_pd(tmin), hi = _mm_set1_pd(tmax);
#define BVH_AXIS(a)                                                                              \
    do {                                                                                         \
        __m128d t0 = _mm_mul_pd(_mm_sub_pd(load2(p->b[r->near[a]]), r->o2[a]), r->inv2[a]); \
        __m128d t1 = _mm_mul_pd(_mm_sub_pd(load2(p->b[r->far[a]]), r->o2[a]), r->inv2[a]);  \
        lo = _mm_max_pd(t0, lo);                                                                 \
        hi = _mm_min_pd(t1, hi);                                                                 \
    } while (0)
    BVH_AXIS(0);
    BVH_AXIS(1);
    BVH_AXIS(2);
#undef BVH_AXIS
    int m = _mm_movemask_pd(_mm_cmple_pd(lo, hi));
    _mm_storeu_pd(tn, lo);
    hit[0] = m & 1;
    hit[1] = m >> 1;
#else
    for (int c = 0; c < 2; c++) {
        double l = tmin, h = tmax;
        for (int a = 0; a < 3; a++) {
            double t0 = ((double)p->b[r->near[a]][c] - r->o[a]) * r->inv[a];
            double t1 = ((double)p->b[r->far[a]][c] - r->o[a]) * r->inv[a];
            l = t0 > l ? t0 : l;
            h = t1 < h ? t1 : h;
        }
        tn[c] = l;
        hit[c] = l <= h;
    }
#endif
    int f = r->neg[n->axis];    /* lane of the child on the ray's side of the split */
    uint32_t first = n->index + (uint32_t)f, second = n->index + (uint32_t)!f;
    int h0 = hit[f], h1 = hit[!f];
    if (h0 && h1) {
        if (tn[!f] < tn[f]) { uint32_t tmp = first; first = second; second = tmp; }
        stack[(*sp)++] = second;
        *ni = first;
        return 1;
    }
    if (h0) { *ni = first; return 1; }
    if (h1) { *ni = second; return 1; }
    return 0;
}

int brm_bvh_intersect(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax, brm_hit *hit)
{
    if (b->prim_count == 0) return 0;
    ray r;
    ray_setup(&r, o, dir);
    uint32_t stack[STACK_MAX];
    int sp = 0;
    uint32_t ni = 0;
    const prim *best = NULL;
    double best_t = tmax, lim = tmax;
    uint64_t best_key = UINT64_MAX;
    double tn;
    if (!slab(&r, &b->nodes[0], tmin, tmax, &tn)) return 0;
    for (;;) {
        const node *n = &b->nodes[ni];
        if (n->count) {
            for (uint32_t i = n->index; i < n->index + n->count; i++) {
                double t;
                /* Accept t == best_t too (lim is just past it), so ties go to the lowest key
                 * whatever the order. */
                if (prim_hit(&b->prims[i], o, dir, tmin, lim, &t, NULL)) {
                    uint64_t key = prim_key(&b->prims[i]);
                    if (t < best_t || key < best_key) {
                        best_t = t;
                        best_key = key;
                        best = &b->prims[i];
                        lim = nextafter(best_t, HUGE_VAL);
                    }
                }
            }
        } else {
            if (descend(&r, b, n, tmin, best_t, &ni, stack, &sp)) continue;
        }
        if (sp == 0) break;
        ni = stack[--sp];
    }
    if (!best) return 0;
    fill_hit(best, o, dir, best_t, hit);
    return 1;
}

/* Any hit: the answer depends only on which leaves the slab tests let through (tmax never
 * shrinks), so it is the reference's whatever the order.
 *
 * With a hint, the leaf that blocked an earlier ray is tried first. Its answer is the
 * traversal's: a node's float box is rounded outward from the union of its children's exact
 * boxes, so it holds theirs, and the slab test is monotone in the bounds (each step a
 * correctly rounded subtraction, a product by the same reciprocal, a max or min), so a ray
 * the leaf's slab lets through is let through by every ancestor, and the traversal reaches
 * that leaf. Any valid leaf index will do, whatever ray or thread recorded it. */
static int occluded(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax, uint32_t *hint)
{
    if (b->prim_count == 0) return 0;
    ray r;
    ray_setup(&r, o, dir);
    double tn;
    if (hint && *hint < b->node_count) {
        const node *n = &b->nodes[*hint];
        if (n->count && slab(&r, n, tmin, tmax, &tn))
            for (uint32_t i = n->index; i < n->index + n->count; i++) {
                double t;
                if (prim_hit(&b->prims[i], o, dir, tmin, tmax, &t, NULL)) return 1;
            }
    }
    uint32_t stack[STACK_MAX];
    int sp = 0;
    uint32_t ni = 0;
    if (!slab(&r, &b->nodes[0], tmin, tmax, &tn)) return 0;
    for (;;) {
        const node *n = &b->nodes[ni];
        if (n->count) {
            for (uint32_t i = n->index; i < n->index + n->count; i++) {
                double t;
                if (prim_hit(&b->prims[i], o, dir, tmin, tmax, &t, NULL)) {
                    if (hint) *hint = ni;
                    return 1;
                }
            }
        } else {
            if (descend(&r, b, n, tmin, tmax, &ni, stack, &sp)) continue;
        }
        if (sp == 0) break;
        ni = stack[--sp];
    }
    return 0;
}

int brm_bvh_occluded(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax)
{
    return occluded(b, o, dir, tmin, tmax, NULL);
}

int brm_bvh_occluded_hint(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax, uint32_t *hint)
{
    return occluded(b, o, dir, tmin, tmax, hint);
}

/* The one-child-at-a-time traversal the tree had first, kept as the reference the above are
 * checked against. */
int brm_bvh_intersect_reference(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax, brm_hit *hit)
{
    if (b->prim_count == 0) return 0;
    ray r;
    ray_setup(&r, o, dir);
    uint32_t stack[STACK_MAX];
    int sp = 0;
    uint32_t ni = 0;
    const prim *best = NULL;
    double best_t = tmax, lim = tmax;
    uint64_t best_key = UINT64_MAX;
    double tn;
    if (!slab(&r, &b->nodes[0], tmin, tmax, &tn)) return 0;
    for (;;) {
        const node *n = &b->nodes[ni];
        if (n->count) {
            for (uint32_t i = n->index; i < n->index + n->count; i++) {
                double t;
                /* Accept t == best_t too (lim is just past it), so ties go to the lowest key
                 * whatever the order. */
                if (prim_hit(&b->prims[i], o, dir, tmin, lim, &t, NULL)) {
                    uint64_t key = prim_key(&b->prims[i]);
                    if (t < best_t || key < best_key) {
                        best_t = t;
                        best_key = key;
                        best = &b->prims[i];
                        lim = nextafter(best_t, HUGE_VAL);
                    }
                }
            }
        } else {
            if (descend_ref(&r, b, n, tmin, best_t, &ni, stack, &sp)) continue;
        }
        if (sp == 0) break;
        ni = stack[--sp];
    }
    if (!best) return 0;
    fill_hit(best, o, dir, best_t, hit);
    return 1;
}

int brm_bvh_occluded_reference(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax)
{
    if (b->prim_count == 0) return 0;
    ray r;
    ray_setup(&r, o, dir);
    uint32_t stack[STACK_MAX];
    int sp = 0;
    uint32_t ni = 0;
    double tn;
    if (!slab(&r, &b->nodes[0], tmin, tmax, &tn)) return 0;
    for (;;) {
        const node *n = &b->nodes[ni];
        if (n->count) {
            for (uint32_t i = n->index; i < n->index + n->count; i++) {
                double t;
                if (prim_hit(&b->prims[i], o, dir, tmin, tmax, &t, NULL)) return 1;
            }
        } else {
            if (descend_ref(&r, b, n, tmin, tmax, &ni, stack, &sp)) continue;
        }
        if (sp == 0) break;
        ni = stack[--sp];
    }
    return 0;
}

void brm_bvh_all_hits(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax,
                      brm_hit_visit visit, void *ctx)
{
    if (b->prim_count == 0) return;
    ray r;
    ray_setup(&r, o, dir);
    uint32_t stack[STACK_MAX];
    int sp = 0;
    stack[sp++] = 0;
    while (sp > 0) {
        const node *n = &b->nodes[stack[--sp]];
        double tn;
        if (!slab(&r, n, tmin, tmax, &tn)) continue;
        if (n->count) {
            for (uint32_t i = n->index; i < n->index + n->count; i++) {
                const prim *p = &b->prims[i];
                double t;
                int ne = 0;
                if (p->tri == UINT32_MAX) {
                    /* A sphere can be crossed twice. */
                    double t2;
                    if (brm_ray_sphere(o, dir, p->v[0], p->v[1].x, tmin, tmax, &t, &ne)) {
                        brm_hit h;
                        fill_hit(p, o, dir, t, &h);
                        visit(ctx, &h, ne);
                        if (brm_ray_sphere(o, dir, p->v[0], p->v[1].x, t, tmax, &t2, &ne)) {
                            fill_hit(p, o, dir, t2, &h);
                            visit(ctx, &h, ne);
                        }
                    }
                } else if (tri_test(o, dir, p->v[0], p->v[1], p->v[2], tmin, tmax, &t, &ne)) {
                    brm_hit h;
                    fill_hit(p, o, dir, t, &h);
                    visit(ctx, &h, ne);
                }
            }
        } else {
            stack[sp++] = n->index + 1;
            stack[sp++] = n->index;
        }
    }
}
