/* The probes' surface irradiance cache: its grids, its interpolation and its determinism, with
 * fields whose interpolation is known exactly. */
#include <math.h>
#include <stdatomic.h>

#include "check.h"
#include "base/threads.h"
#include "bake/surface_cache.h"
#include "../voxel/fixture.h"

typedef struct field {
    brm_vec3 grad;          /* E = base + grad·p per channel (scaled 1, 2, 3) */
    double base;
    const brm_scene *s;     /* when set: check every node lies on some triangle */
    double eps;
    double worst_off;       /* largest distance of a node (minus eps·n) from every triangle */
} field;

/* Distance of p from triangle v (for the check only: by projection onto the plane and the
 * three edges). */
static double dist_to_triangle(brm_vec3 p, const brm_vec3 v[3])
{
    brm_vec3 n = brm_norm(brm_cross(brm_sub(v[1], v[0]), brm_sub(v[2], v[0])));
    double h = brm_dot(brm_sub(p, v[0]), n);
    brm_vec3 q = brm_madd(p, n, -h);
    int inside = 1;
    double best = HUGE_VAL;
    for (int e = 0; e < 3; e++) {
        brm_vec3 a = v[e], b = v[(e + 1) % 3];
        if (brm_dot(brm_cross(brm_sub(b, a), brm_sub(q, a)), n) < 0) inside = 0;
        brm_vec3 ab = brm_sub(b, a);
        double t = brm_clamp(brm_dot(brm_sub(p, a), ab) / brm_dot(ab, ab), 0, 1);
        double d = brm_len(brm_sub(p, brm_madd(a, ab, t)));
        if (d < best) best = d;
    }
    return inside ? fabs(h) : best;
}

static void linear_eval(const void *ctx, brm_vec3 p, brm_vec3 n, uint32_t index, double *E)
{
    (void)index;
    field *f = (field *)(uintptr_t)ctx;   /* the test's own mutable context */
    if (f->s) {
        brm_vec3 q = brm_madd(p, n, -f->eps);
        double best = HUGE_VAL;
        for (uint32_t i = 0; i < f->s->tri_count; i++) {
            double d = dist_to_triangle(q, f->s->tris[i].v);
            if (d < best) best = d;
        }
        if (best > f->worst_off) f->worst_off = best;
    }
    double e = f->base + brm_dot(f->grad, p);
    for (int c = 0; c < BRM_SURFACE_VALUES; c++) E[c] = e * (c + 1);
}

/* A point of triangle t from two uniform numbers (uniform over its area). */
static brm_vec3 on_triangle(const brm_tri *t, double r1, double r2)
{
    double s = sqrt(r1);
    double a = 1 - s, b = s * (1 - r2), c = s * r2;
    return brm_add(brm_add(brm_scale(t->v[0], a), brm_scale(t->v[1], b)), brm_scale(t->v[2], c));
}

static double edge_distance(const brm_tri *t, brm_vec3 p)
{
    double best = HUGE_VAL;
    for (int e = 0; e < 3; e++) {
        brm_vec3 a = t->v[e], ab = brm_sub(t->v[(e + 1) % 3], a);
        double u = brm_clamp(brm_dot(brm_sub(p, a), ab) / brm_dot(ab, ab), 0, 1);
        double d = brm_len(brm_sub(p, brm_madd(a, ab, u)));
        if (d < best) best = d;
    }
    return best;
}

static void build_scene(fx_scene *f)
{
    fx_init(f);
    fx_box(f, brm_v3(-10, -1, -10), brm_v3(10, 0, 10));
    fx_box(f, brm_v3(2, 0, 2), brm_v3(2.3, 6, 9));          /* a thin wall: long thin faces */
    fx_uv_sphere(f, brm_v3(-4, 2, 3), 1.5, 16);             /* small triangles */
    fx_object(f, BRM_SHAPE_MESH);
    fx_tri(f, f->s.object_count - 1, brm_v3(-8, 3, -8), brm_v3(7, 5, -6), brm_v3(-3, 9, -7)); /* tilted */
}

static void grid_should_count_nodes_along_the_longest_edge_and_across_it(void **state)
{
    (void)state;
    fx_scene f;
    fx_init(&f);
    fx_object(&f, BRM_SHAPE_MESH);
    /* Legs 3 and 4: longest edge 5 m, height over it 3·4/5 = 2.4 m. At h = 1 m: ceil(5)+1 = 6
     * nodes along, ceil(2.4)+1 = 4 across. */
    fx_tri(&f, 0, brm_v3(0, 0, 0), brm_v3(4, 0, 0), brm_v3(0, 3, 0));
    assert_int_equal(brm_surface_cache_nodes(&f.s, 1.0), 24);
    /* Each extra value costs one float per node. */
    assert_int_equal(brm_surface_cache_memory(&f.s, 24, 5) - brm_surface_cache_memory(&f.s, 24, 0), 24 * 5 * sizeof(float));
    /* A sliver 10 m long and 1 cm wide: 21 × 2 at h = 0.5 m, not 21 × 21. */
    fx_tri(&f, 0, brm_v3(0, 0, 5), brm_v3(10, 0, 5), brm_v3(5, 0.01, 5));
    assert_int_equal(brm_surface_cache_nodes(&f.s, 0.5), 11 * 6 + 21 * 2);
    fx_free(&f);
}

static void cache_should_reproduce_a_linear_field_away_from_edges_and_a_constant_one_everywhere(void **state)
{
    (void)state;
    fx_scene f;
    build_scene(&f);
    const double h = 0.25, eps = 1e-3;
    field lin = {brm_v3(0.3, -0.7, 0.2), 50.0, &f.s, eps, 0.0};
    brm_surface_cache *sc = NULL;
    assert_int_equal(brm_surface_cache_build(&f.s, h, eps, 1e300, 0, 2, linear_eval, &lin, &sc, NULL), BRM_OK);
    /* Every node sits on its triangle (lifted by eps along the normal): nothing off the surface
     * is ever evaluated. */
    assert_true(lin.worst_off < 1e-9);
    uint64_t rng = 77;
    int checked = 0;
    for (uint32_t t = 0; t < f.s.tri_count; t++) {
        for (int k = 0; k < 20; k++) {
            brm_vec3 p = on_triangle(&f.s.tris[t], fx_unif(&rng), fx_unif(&rng));
            /* A bilinear cell spans at most h × h, so a point more than √2·h from every edge has
             * its four nodes on the triangle, where they hold the field itself: bilinear
             * interpolation of a linear field is exact there (up to the floats stored). */
            if (edge_distance(&f.s.tris[t], p) <= 1.5 * h) continue;
            double E[BRM_SURFACE_VALUES];
            assert_int_equal(brm_surface_cache_lookup(sc, t, p, E, NULL), 1);
            brm_vec3 q = brm_madd(p, brm_norm(brm_cross(brm_sub(f.s.tris[t].v[1], f.s.tris[t].v[0]),
                                                        brm_sub(f.s.tris[t].v[2], f.s.tris[t].v[0]))), eps);
            double want = lin.base + brm_dot(lin.grad, q);
            for (int c = 0; c < BRM_SURFACE_VALUES; c++) assert_near(E[c], want * (c + 1), 1e-6, 1e-6);
            checked++;
        }
    }
    assert_true(checked > 100);
    /* Anywhere on a triangle, at most one cell diagonal away from a node: the field changes by
     * no more than |grad|·√2·h there. */
    for (uint32_t t = 0; t < f.s.tri_count; t++) {
        for (int k = 0; k < 20; k++) {
            brm_vec3 p = on_triangle(&f.s.tris[t], fx_unif(&rng), fx_unif(&rng));
            double E[BRM_SURFACE_VALUES];
            assert_int_equal(brm_surface_cache_lookup(sc, t, p, E, NULL), 1);
            double want = lin.base + brm_dot(lin.grad, p);
            assert_near(E[0], want, brm_len(lin.grad) * (sqrt(2.0) * h + eps) + 1e-5, 0);
        }
    }
    brm_surface_cache_free(sc);
    field con = {brm_v3(0, 0, 0), 7.0, NULL, eps, 0.0};
    assert_int_equal(brm_surface_cache_build(&f.s, h, eps, 0.0, 0, 1, linear_eval, &con, &sc, NULL), BRM_OK);
    for (uint32_t t = 0; t < f.s.tri_count; t++) {
        double E[BRM_SURFACE_VALUES];
        /* Four equal nodes agree even at a tolerance of 0. */
        assert_int_equal(brm_surface_cache_lookup(sc, t, on_triangle(&f.s.tris[t], fx_unif(&rng), fx_unif(&rng)), E, NULL), 1);
        for (int c = 0; c < BRM_SURFACE_VALUES; c++) assert_near(E[c], 7.0 * (c + 1), 1e-12, 0);
    }
    brm_surface_cache_free(sc);
    fx_free(&f);
}

static void index_eval(const void *ctx, brm_vec3 p, brm_vec3 n, uint32_t index, double *E)
{
    (void)ctx;
    E[0] = sin(index * 0.37) + p.x;
    E[1] = cos(index * 0.11) * p.y;
    E[2] = n.x + 2 * n.y + 3 * n.z;
    E[3] = index;
    E[4] = p.z;
    E[5] = 1.0 / (1.0 + index);
    E[6] = index % 7;           /* two extra values, kept raw per node */
    E[7] = p.y;
}

static void cache_should_not_depend_on_the_thread_count(void **state)
{
    (void)state;
    fx_scene f;
    build_scene(&f);
    brm_surface_cache *a = NULL, *b = NULL;
    assert_int_equal(brm_surface_cache_build(&f.s, 0.3, 1e-3, 1e300, 2, 1, index_eval, NULL, &a, NULL), BRM_OK);
    assert_int_equal(brm_surface_cache_build(&f.s, 0.3, 1e-3, 1e300, 2, 2, index_eval, NULL, &b, NULL), BRM_OK);
    uint64_t rng = 5;
    for (uint32_t t = 0; t < f.s.tri_count; t++) {
        brm_vec3 p = on_triangle(&f.s.tris[t], fx_unif(&rng), fx_unif(&rng));
        double ea[BRM_SURFACE_VALUES], eb[BRM_SURFACE_VALUES];
        brm_surface_cell ca, cb;
        assert_int_equal(brm_surface_cache_lookup(a, t, p, ea, &ca), 1);
        assert_int_equal(brm_surface_cache_lookup(b, t, p, eb, &cb), 1);
        for (int c = 0; c < BRM_SURFACE_VALUES; c++) assert_true(ea[c] == eb[c]);
        /* The extra values come back raw and the same; the weights are bilinear (sum 1) and
         * interpolate the extra p.y to the point's own height (the nodes lie 1e-3 off the
         * surface along its normal). */
        double wsum = 0, y = 0;
        for (int k = 0; k < 4; k++) {
            assert_true(ca.extra[k][0] == cb.extra[k][0] && ca.extra[k][1] == cb.extra[k][1]);
            assert_true(ca.extra[k][0] == floorf(ca.extra[k][0]) && ca.extra[k][0] >= 0 && ca.extra[k][0] < 7);
            assert_true(ca.w[k] >= 0 && ca.w[k] == cb.w[k]);
            wsum += ca.w[k];
            y += ca.w[k] * ca.extra[k][1];
        }
        assert_near(wsum, 1.0, 1e-12, 0);
        if (edge_distance(&f.s.tris[t], p) > 0.5) assert_near(y, p.y, 1.1e-3 + 1e-5, 0);
    }
    brm_surface_cache_free(a);
    brm_surface_cache_free(b);
    fx_free(&f);
}

/* index_eval, counting its calls. */
static void counting_eval(const void *ctx, brm_vec3 p, brm_vec3 n, uint32_t index, double *E)
{
    atomic_fetch_add((atomic_uint *)(uintptr_t)ctx, 1u);
    index_eval(NULL, p, n, index, E);
}

enum { LAZY_ITEMS = 64, LAZY_PER_ITEM = 50 };

typedef struct lazy_job {
    const brm_scene *s;
    const brm_surface_cache *sc;
    uint32_t tris;          /* lookups on triangles [0, tris) only */
    double E[LAZY_ITEMS * LAZY_PER_ITEM][BRM_SURFACE_VALUES];
    float extra[LAZY_ITEMS * LAZY_PER_ITEM][4][2];
    int agree[LAZY_ITEMS * LAZY_PER_ITEM];
} lazy_job;

static void lazy_point(const lazy_job *j, uint32_t k, uint32_t *t, brm_vec3 *p)
{
    uint64_t rng = 1000 + k;
    *t = (uint32_t)(fx_unif(&rng) * j->tris) % j->tris;
    *p = on_triangle(&j->s->tris[*t], fx_unif(&rng), fx_unif(&rng));
}

static void lazy_item(void *ctx, uint32_t item, int worker)
{
    (void)worker;
    lazy_job *j = ctx;
    for (uint32_t q = 0; q < LAZY_PER_ITEM; q++) {
        uint32_t k = item * LAZY_PER_ITEM + q, t;
        brm_vec3 p;
        lazy_point(j, k, &t, &p);
        brm_surface_cell cell;
        j->agree[k] = brm_surface_cache_lookup(j->sc, t, p, j->E[k], &cell);
        for (int c = 0; c < 4; c++) j->extra[k][c][0] = cell.extra[c][0], j->extra[k][c][1] = cell.extra[c][1];
    }
}

static void lazy_cache_should_read_the_same_bits_and_evaluate_each_node_it_reads_once(void **state)
{
    (void)state;
    fx_scene f;
    build_scene(&f);
    const double h = 0.3;
    brm_surface_cache *eager = NULL, *lazy = NULL;
    assert_int_equal(brm_surface_cache_build(&f.s, h, 1e-3, 0.5, 2, 2, index_eval, NULL, &eager, NULL), BRM_OK);
    atomic_uint calls = 0;
    assert_int_equal(brm_surface_cache_build_lazy(&f.s, h, 1e-3, 0.5, 2, counting_eval, &calls, &lazy, NULL), BRM_OK);
    assert_int_equal(atomic_load(&calls), 0);
    static lazy_job j;
    j.s = &f.s;
    j.sc = lazy;
    j.tris = f.s.tri_count / 2;
    /* Two threads reading at once, racing for the same nodes. */
    assert_int_equal(brm_parallel_for(LAZY_ITEMS, 2, lazy_item, &j, NULL), LAZY_ITEMS);
    unsigned after = atomic_load(&calls);
    uint64_t total = brm_surface_cache_nodes(&f.s, h);
    /* Only the nodes around the points read, on half the triangles, were evaluated. */
    assert_true(after > 0 && after < total);
    int refused = 0;
    for (uint32_t k = 0; k < LAZY_ITEMS * LAZY_PER_ITEM; k++) {
        uint32_t t;
        brm_vec3 p;
        lazy_point(&j, k, &t, &p);
        double E[BRM_SURFACE_VALUES];
        brm_surface_cell cell;
        int agree = brm_surface_cache_lookup(eager, t, p, E, &cell);
        refused += !agree;
        assert_int_equal(agree, j.agree[k]);
        for (int c = 0; c < BRM_SURFACE_VALUES; c++) assert_true(E[c] == j.E[k][c]);
        for (int c = 0; c < 4; c++) assert_true(cell.extra[c][0] == j.extra[k][c][0] && cell.extra[c][1] == j.extra[k][c][1]);
    }
    /* index_eval's tested values jump from node to node: some cells refuse, as they must. */
    assert_true(refused > 0);
    /* Reading the same points again evaluates nothing more: each node once. */
    assert_int_equal(brm_parallel_for(LAZY_ITEMS, 1, lazy_item, &j, NULL), LAZY_ITEMS);
    assert_int_equal(atomic_load(&calls), after);
    brm_surface_cache_free(eager);
    brm_surface_cache_free(lazy);
    fx_free(&f);
}

static void step_eval(const void *ctx, brm_vec3 p, brm_vec3 n, uint32_t index, double *E)
{
    (void)ctx, (void)n, (void)index;
    for (int c = 0; c < BRM_SURFACE_TESTED; c++) E[c] = p.x < 1.05 ? 0.2 : 1.0;
    for (int c = BRM_SURFACE_TESTED; c < BRM_SURFACE_VALUES; c++) E[c] = 3.0 + p.x + c * p.z;
}

static void cache_should_refuse_cells_a_shadow_edge_crosses(void **state)
{
    (void)state;
    /* A step from 0.2 to 1 across x = 1.05 in the tested values on a 20 m floor (a shadow's
     * edge), a linear field in the others: at a tolerance of 0.1, cells on one side
     * interpolate to that side's value exactly, cells the step crosses refuse, and only those
     * within a cell diagonal of the step can refuse. */
    fx_scene f;
    fx_init(&f);
    fx_box(&f, brm_v3(-10, -1, -10), brm_v3(10, 0, 10));
    const double h = 0.25;
    brm_surface_cache *sc = NULL;
    assert_int_equal(brm_surface_cache_build(&f.s, h, 1e-3, 0.1, 0, 2, step_eval, NULL, &sc, NULL), BRM_OK);
    uint64_t rng = 9;
    int refused = 0, far = 0;
    for (int k = 0; k < 4000; k++) {
        uint32_t t = 6 + (uint32_t)(k & 1);    /* the two triangles of the top face (+y) */
        brm_vec3 p = on_triangle(&f.s.tris[t], fx_unif(&rng), fx_unif(&rng));
        if (edge_distance(&f.s.tris[t], p) <= 1.5 * h) continue;
        double E[BRM_SURFACE_VALUES];
        if (!brm_surface_cache_lookup(sc, t, p, E, NULL)) {
            refused++;
            assert_true(fabs(p.x - 1.05) <= sqrt(2.0) * h);
            continue;
        }
        if (fabs(p.x - 1.05) > sqrt(2.0) * h) far++;
        for (int c = 0; c < BRM_SURFACE_TESTED; c++) assert_near(E[c], p.x < 1.05 ? 0.2 : 1.0, 1e-7, 0);
        /* The surface sits at y = 0 and nodes 1e-3 above it: the lookup's point is on it. */
        for (int c = BRM_SURFACE_TESTED; c < BRM_SURFACE_VALUES; c++)
            assert_near(E[c], 3.0 + p.x + c * p.z, 1e-5, 1e-6);
    }
    assert_true(refused > 10);
    assert_true(far > 3000);
    brm_surface_cache_free(sc);
    fx_free(&f);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(grid_should_count_nodes_along_the_longest_edge_and_across_it),
        cmocka_unit_test(cache_should_reproduce_a_linear_field_away_from_edges_and_a_constant_one_everywhere),
        cmocka_unit_test(cache_should_refuse_cells_a_shadow_edge_crosses),
        cmocka_unit_test(cache_should_not_depend_on_the_thread_count),
        cmocka_unit_test(lazy_cache_should_read_the_same_bits_and_evaluate_each_node_it_reads_once),
    };
    return cmocka_run_group_tests_name("bake-surface-cache", tests, NULL, NULL);
}
