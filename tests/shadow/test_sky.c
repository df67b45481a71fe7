/* Tests of src/shadow/sky.c: the sky's SH bands 0–1 at a point, unoccluded (closed form
 * against GSL quadrature) and blocked by geometry (closed boxes, a wide roof against its
 * analytic solid angle). */
#include <stdio.h>

#include <gsl/gsl_errno.h>
#include <gsl/gsl_integration.h>

#include "base/sh.h"
#include "base/threads.h"
#include "shadow_fixture.h"
#include "shadow/shadow_internal.h"

static brm_sky gradient_sky(void)
{
    brm_sky k;
    k.present = true;
    k.zenith = brm_v3(1.2, 2.5, 6.0);
    k.horizon = brm_v3(3.0, 3.5, 4.0);
    k.ground = brm_v3(0.4, 0.35, 0.3);
    return k;
}

static void no_sky_should_give_zeros(void **state)
{
    (void)state;
    brm_scene *s = sf_scene((brm_aabb){{-10, -10, -10}, {10, 10, 10}});
    sf_box(s, brm_v3(-1, 5, -1), brm_v3(1, 6, 1), false);
    sf_ready(s);
    brm_shadow_set *ss = sf_build(s, (brm_aabb){{-2, 0, -2}, {2, 2, 2}}, 0.5, false, NULL, 1);
    double out[3][4];
    memset(out, 0x55, sizeof out);
    brm_sky_incident(ss, brm_v3(0, 1, 0), 3, out);
    for (int c = 0; c < 3; c++)
        for (int m = 0; m < 4; m++) assert_near(out[c][m], 0.0, 0.0, 0.0);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

static void uniform_sky_should_project_to_l_times_sqrt_4pi(void **state)
{
    (void)state;
    brm_scene *s = sf_scene((brm_aabb){{-10, -10, -10}, {10, 10, 10}});
    s->sky.present = true;
    s->sky.zenith = s->sky.horizon = s->sky.ground = brm_v3(2.0, 3.0, 5.0);
    sf_ready(s);
    brm_shadow_set *ss = sf_build(s, (brm_aabb){{-2, 0, -2}, {2, 2, 2}}, 0.5, false, NULL, 1);
    double out[3][4];
    brm_sky_incident(ss, brm_v3(0.5, 1, 0), 0, out);
    const double L[3] = {2.0, 3.0, 5.0};
    for (int c = 0; c < 3; c++) {
        /* Source: REFERENCES §3 worked example — a constant environment L has L00 = L·2√π =
         * L·√(4π) and every other coefficient 0. */
        assert_near(out[c][0], L[c] * sqrt(4.0 * BRM_PI), 0.0, 1e-12);
        for (int m = 1; m < 4; m++) assert_near(out[c][m], 0.0, 1e-12, 0.0);
    }
    brm_shadows_free(ss);
    brm_scene_free(s);
}

typedef struct sky_q {
    const brm_sky *sky;
    int c, m;
    double y;
} sky_q;

static double inner_phi(double phi, void *p)
{
    sky_q *q = p;
    double r = sqrt(fmax(0.0, 1.0 - q->y * q->y));
    brm_vec3 w = brm_v3(r * cos(phi), q->y, r * sin(phi));
    brm_vec3 L = brm_sky_radiance(q->sky, w);
    double Y[4];
    brm_sh4(w, Y);
    return brm_vget(L, q->c) * Y[q->m];
}

static double outer_y(double y, void *p)
{
    sky_q *q = p;
    q->y = y;
    gsl_integration_workspace *w = gsl_integration_workspace_alloc(200);
    gsl_function f = {inner_phi, q};
    double r, err;
    gsl_integration_qag(&f, 0.0, 2.0 * BRM_PI, 1e-13, 1e-12, 200, GSL_INTEG_GAUSS61, w, &r, &err);
    gsl_integration_workspace_free(w);
    return r;
}

static void gradient_sky_should_match_numerical_projection(void **state)
{
    (void)state;
    brm_sky k = gradient_sky();
    double proj[3][4];
    brm_sky_projection(&k, proj);
    gsl_integration_workspace *w = gsl_integration_workspace_alloc(200);
    for (int c = 0; c < 3; c++)
        for (int m = 0; m < 4; m++) {
            /* Source: GSL adaptive Gauss–Kronrod quadrature of ∫ L(ω)·Y_m(ω) dω over the sphere,
             * dω = dy·dφ, split at the horizon where the sky's gradient has its kink. */
            sky_q q = {&k, c, m, 0.0};
            gsl_function f = {outer_y, &q};
            double lo, hi, err;
            gsl_integration_qag(&f, -1.0, 0.0, 1e-12, 1e-11, 200, GSL_INTEG_GAUSS61, w, &lo, &err);
            gsl_integration_qag(&f, 0.0, 1.0, 1e-12, 1e-11, 200, GSL_INTEG_GAUSS61, w, &hi, &err);
            assert_near(proj[c][m], lo + hi, 1e-10, 1e-9);
        }
    gsl_integration_workspace_free(w);
    /* And the call returns it unchanged where nothing blocks the sky. */
    brm_scene *s = sf_scene((brm_aabb){{-10, -10, -10}, {10, 10, 10}});
    s->sky = k;
    sf_box(s, brm_v3(5, -1, 5), brm_v3(6, 0, 6), false); /* geometry nowhere near the rays' way */
    sf_ready(s);
    brm_shadow_set *ss = sf_build(s, (brm_aabb){{-2, 0, -2}, {2, 2, 2}}, 0.5, false, NULL, 1);
    double out[3][4];
    brm_sky_incident(ss, brm_v3(-8, 8, -8), 17, out);
    for (int c = 0; c < 3; c++)
        for (int m = 0; m < 4; m++) assert_near(out[c][m], proj[c][m], 0.0, 0.0);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

static void closed_box_around_point_should_give_zero(void **state)
{
    (void)state;
    brm_scene *s = sf_scene((brm_aabb){{-10, -10, -10}, {10, 10, 10}});
    s->sky = gradient_sky();
    sf_box(s, brm_v3(-3, 0, -3), brm_v3(3, 3, 3), true); /* a room of zero-thickness walls */
    sf_ready(s);
    brm_shadow_set *ss = sf_build(s, (brm_aabb){{-2, 0, -2}, {2, 2, 2}}, 0.5, false, NULL, 1);
    uint64_t rng = 4;
    for (uint32_t i = 0; i < 500; i++) {
        double out[3][4];
        brm_sky_incident(ss, sf_in_box(&rng, (brm_aabb){{-2.9, 0.1, -2.9}, {2.9, 2.9, 2.9}}), i, out);
        for (int c = 0; c < 3; c++)
            for (int m = 0; m < 4; m++) assert_near(out[c][m], 0.0, 0.0, 0.0);
    }
    brm_shadows_free(ss);
    brm_scene_free(s);
}

/* Solid angle and ∫ y dω of the horizontal rectangle [−a, a]² at height h over the origin:
 * dω = h·dA/r³ and y = h/r (GSL nested quadrature). */
typedef struct roof_q {
    double a, h, x;
    int moment;
} roof_q;

static double roof_inner(double z, void *p)
{
    roof_q *q = p;
    double r2 = q->x * q->x + z * z + q->h * q->h, r = sqrt(r2);
    return q->moment ? q->h * q->h / (r2 * r2) : q->h / (r2 * r);
}

static double roof_outer(double x, void *p)
{
    roof_q *q = p;
    q->x = x;
    gsl_integration_workspace *w = gsl_integration_workspace_alloc(200);
    gsl_function f = {roof_inner, q};
    double r, err;
    gsl_integration_qag(&f, -q->a, q->a, 1e-13, 1e-12, 200, GSL_INTEG_GAUSS61, w, &r, &err);
    gsl_integration_workspace_free(w);
    return r;
}

static double roof_integral(double a, double h, int moment)
{
    roof_q q = {a, h, 0.0, moment};
    gsl_integration_workspace *w = gsl_integration_workspace_alloc(200);
    gsl_function f = {roof_outer, &q};
    double r, err;
    gsl_integration_qag(&f, -a, a, 1e-12, 1e-11, 200, GSL_INTEG_GAUSS61, w, &r, &err);
    gsl_integration_workspace_free(w);
    return r;
}

static void wide_roof_outside_target_should_block_its_solid_angle(void **state)
{
    (void)state;
    /* A square roof of half-side a at height h over p, far outside the target. Source (from
     * memory, checked here by GSL quadrature): the solid angle of a 2a × 2b rectangle seen from
     * a point on its axis at distance h is Ω = 4·arcsin(ab / √((a² + h²)(b² + h²))). With
     * a = 1.5538·h it is π: half of the upper hemisphere. */
    double h = 20.0, a = 1.5538 * h;
    double omega = 4.0 * asin(a * a / (a * a + h * h));
    assert_near(omega, roof_integral(a, h, 0), 0.0, 1e-9);
    assert_near(omega, BRM_PI, 0.0, 1e-4);
    double ymom = roof_integral(a, h, 1);

    brm_scene *s = sf_scene((brm_aabb){{-50, -50, -50}, {50, 50, 50}});
    s->sky.present = true;
    s->sky.zenith = s->sky.horizon = s->sky.ground = brm_v3(1, 1, 1);
    uint32_t o = sf_object(s, BRM_SHAPE_MESH);
    s->objects[o].closed = false;
    sf_tri(s, o, brm_v3(-a, h, -a), brm_v3(a, h, -a), brm_v3(a, h, a));
    sf_tri(s, o, brm_v3(-a, h, -a), brm_v3(a, h, a), brm_v3(-a, h, a));
    sf_ready(s);
    brm_shadow_set *ss = sf_build(s, (brm_aabb){{-1, -1, -1}, {1, 1, 1}}, 0.25, false, NULL, 1);
    /* The cache: BRM_SKY_CACHE_RAYS rays per node, interpolated; within 2 % of the solid angle. */
    {
        double c[3][4];
        brm_sky_incident(ss, brm_v3(0.1, 0.2, -0.3), 0, c);
        printf("roof, cached: band0 %.5f (want %.5f)\n", c[1][0], BRM_SH_C0 * (4.0 * BRM_PI - omega));
        assert_near(c[1][0], BRM_SH_C0 * (4.0 * BRM_PI - omega), 0.0, 0.02);
        assert_near(c[1][1], -BRM_SH_C1 * ymom, 0.0, 0.05);
    }
    /* The traced estimator itself, per call. */
    brm_shadows_drop_sky_cache(ss);
    double mean[4] = {0, 0, 0, 0};
    const uint32_t K = 2048;
    for (uint32_t i = 0; i < K; i++) {
        double out[3][4];
        brm_sky_incident(ss, brm_v3(0, 0, 0), i, out);
        for (int m = 0; m < 4; m++) mean[m] += out[1][m] / K;
    }
    /* Unit sky minus the roof: band 0 = C0·(4π − Ω), band y = −C1·∫_roof y dω, x and z = 0. */
    printf("roof: band0 %.5f (want %.5f), band y %.5f (want %.5f), x %.2e, z %.2e\n", mean[0],
           BRM_SH_C0 * (4.0 * BRM_PI - omega), mean[1], -BRM_SH_C1 * ymom, mean[3], mean[2]);
    assert_near(mean[0], BRM_SH_C0 * (4.0 * BRM_PI - omega), 0.0, 0.01);
    assert_near(mean[1], -BRM_SH_C1 * ymom, 0.0, 0.03);
    assert_near(mean[2], 0.0, 0.01, 0.0);
    assert_near(mean[3], 0.0, 0.01, 0.0);
    /* Deterministic per sample index, and the index changes the ray set. */
    double a1[3][4], a2[3][4], b1[3][4];
    brm_sky_incident(ss, brm_v3(0.3, 0, 0.1), 41, a1);
    brm_sky_incident(ss, brm_v3(0.3, 0, 0.1), 41, a2);
    assert_memory_equal(a1, a2, sizeof a1);
    int differs = 0;
    for (uint32_t i = 42; i < 60 && !differs; i++) {
        brm_sky_incident(ss, brm_v3(0.3, 0, 0.1), i, b1);
        differs = memcmp(a1, b1, sizeof a1) != 0;
    }
    assert_true(differs);
    brm_shadows_free(ss);
    /* More rays per call: the same mean, with less spread between calls. */
    ss = sf_build(s, (brm_aabb){{-1, -1, -1}, {1, 1, 1}}, 0.25, false, NULL, 1);
    brm_shadows_drop_sky_cache(ss);
    brm_shadows_set_sky_rays(ss, 32);
    assert_int_equal(ss->sky_rays, 32);
    double m32 = 0.0;
    for (uint32_t i = 0; i < K / 4; i++) {
        double out[3][4];
        brm_sky_incident(ss, brm_v3(0, 0, 0), i, out);
        m32 += out[1][0] / (K / 4);
    }
    assert_near(m32, BRM_SH_C0 * (4.0 * BRM_PI - omega), 0.0, 0.01);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

/* The sky cache traces a node when a lookup first needs it: two threads reading at once get
 * the bits one thread gets, and a node holds what the traced estimator gives at its point with
 * the cache's ray count and the node's index as sample index. */
enum { LAZY_POINTS = 400 };
typedef struct lazy_sky {
    const brm_shadow_set *ss;
    double out[LAZY_POINTS][3][4];
} lazy_sky;

static brm_vec3 lazy_point(uint32_t k)
{
    uint64_t x = 0x9e3779b97f4a7c15ull * (k + 1);
    double u[3];
    for (int a = 0; a < 3; a++) {
        x ^= x >> 29, x *= 0xbf58476d1ce4e5b9ull, x ^= x >> 32;
        u[a] = (double)(x >> 11) / 9007199254740992.0;
    }
    return brm_v3(-0.9 + 1.8 * u[0], -0.9 + 1.8 * u[1], -0.9 + 1.8 * u[2]);
}

static void lazy_item(void *ctx, uint32_t item, int worker)
{
    (void)worker;
    lazy_sky *j = ctx;
    brm_sky_incident(j->ss, lazy_point(item), item, j->out[item]);
}

static void sky_cache_should_trace_nodes_on_first_use_the_same_from_any_thread(void **state)
{
    (void)state;
    brm_scene *s = sf_scene((brm_aabb){{-50, -50, -50}, {50, 50, 50}});
    s->sky = gradient_sky();
    uint32_t o = sf_object(s, BRM_SHAPE_MESH);
    s->objects[o].closed = false;
    /* A slanted roof over part of the cache, so nodes differ. */
    sf_tri(s, o, brm_v3(-3, 1.5, -3), brm_v3(3, 2.5, -3), brm_v3(3, 2.5, 3));
    sf_tri(s, o, brm_v3(-3, 1.5, -3), brm_v3(3, 2.5, 3), brm_v3(-3, 1.5, 3));
    sf_ready(s);
    const brm_aabb box = {{-1, -1, -1}, {1, 1, 1}};
    brm_shadow_set *a = sf_build(s, box, 0.25, false, NULL, 1);
    brm_shadow_set *b = sf_build(s, box, 0.25, false, NULL, 1);
    const sky_cache *c = &a->sky_grid;
    size_t nodes = (size_t)c->n[0] * c->n[1] * c->n[2];
    assert_true(nodes >= 8);
    size_t traced = 0;
    for (size_t i = 0; i < nodes; i++) traced += atomic_load(&c->state[i]) == 2;
    assert_int_equal(traced, 0);
    /* One lookup inside a cell: its eight corners and nothing else. */
    double one[3][4];
    brm_sky_incident(a, brm_v3(0.1, 0.2, -0.3), 0, one);
    for (size_t i = 0; i < nodes; i++) traced += atomic_load(&c->state[i]) == 2;
    assert_int_equal(traced, 8);
    /* Two threads on a, one thread in the reverse order on b: the same bits. */
    static lazy_sky ja, jb;
    ja.ss = a;
    assert_int_equal(brm_parallel_for(LAZY_POINTS, 2, lazy_item, &ja, NULL), LAZY_POINTS);
    jb.ss = b;
    for (uint32_t k = LAZY_POINTS; k-- > 0;) lazy_item(&jb, k, 0);
    assert_memory_equal(ja.out, jb.out, sizeof ja.out);
    /* A node holds the estimator's value at its point (to the float it is stored in). */
    brm_shadow_set *t = sf_build(s, box, 0.25, false, NULL, 1);
    brm_shadows_drop_sky_cache(t);
    brm_shadows_set_sky_rays(t, BRM_SKY_CACHE_RAYS);
    int checked = 0;
    for (uint32_t k = 0; k < c->n[2]; k++)
        for (uint32_t j = 0; j < c->n[1]; j++)
            for (uint32_t i = 0; i < c->n[0]; i++) {
                size_t node = i + (size_t)c->n[0] * (j + (size_t)c->n[1] * k);
                if (atomic_load(&c->state[node]) != 2 || !c->ok[node]) continue;
                brm_vec3 p = brm_add(c->lo, brm_mul(c->step, brm_v3(i, j, k)));
                double want[3][4];
                brm_sky_incident(t, p, (uint32_t)node, want);
                for (int q = 0; q < 12; q++) assert_true(c->sh[node * 12 + (size_t)q] == (float)want[q / 4][q % 4]);
                checked++;
            }
    assert_true(checked >= 8);
    brm_shadows_free(t);
    brm_shadows_free(a);
    brm_shadows_free(b);
    brm_scene_free(s);
}

int main(void)
{
    gsl_set_error_handler_off();
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(no_sky_should_give_zeros),
        cmocka_unit_test(uniform_sky_should_project_to_l_times_sqrt_4pi),
        cmocka_unit_test(gradient_sky_should_match_numerical_projection),
        cmocka_unit_test(closed_box_around_point_should_give_zero),
        cmocka_unit_test(wide_roof_outside_target_should_block_its_solid_angle),
        cmocka_unit_test(sky_cache_should_trace_nodes_on_first_use_the_same_from_any_thread),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
