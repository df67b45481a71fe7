/* Tests of src/scene/light.c and the sky: photometry, inverse square, range window, spot cone. */
#include "check.h"
#include "scene/light.h"

static brm_light point_light(double cd, double range)
{
    brm_light l = {0};
    l.type = BRM_LIGHT_POINT;
    l.position = brm_v3(1.0, 2.0, 3.0);
    l.intensity_cd = cd;
    l.range_m = range;
    l.color = brm_v3(1, 1, 1);
    return l;
}

static brm_light spot_light(double cd, double inner_deg, double outer_deg)
{
    brm_light l = point_light(cd, 0.0);
    l.type = BRM_LIGHT_SPOT;
    l.direction = brm_v3(0.0, -1.0, 0.0);
    l.inner_deg = inner_deg;
    l.outer_deg = outer_deg;
    l.cos_inner = cos(inner_deg * BRM_PI / 180.0);
    l.cos_outer = cos(outer_deg * BRM_PI / 180.0);
    return l;
}

static void flux_should_convert_to_intensity_over_the_solid_angle(void **state)
{
    (void)state;
    /* Source: REFERENCES §7 — point I = Φ/(4π): 1000 lm gives 79.5774715459 cd; a spot spreads
     * Φ over Ω = 2π(1 − cos θ_o): 30° → 1187.94866779 cd, 45° → 543.388965223 cd,
     * 90° → 159.154943092 cd for 1000 lm. */
    assert_near(brm_light_intensity_from_flux(BRM_LIGHT_POINT, 1000.0, 0.0), 79.5774715459, 0.0, 1e-11);
    assert_near(brm_light_intensity_from_flux(BRM_LIGHT_SPOT, 1000.0, cos(30.0 * BRM_PI / 180.0)), 1187.94866779, 0.0, 1e-11);
    assert_near(brm_light_intensity_from_flux(BRM_LIGHT_SPOT, 1000.0, cos(45.0 * BRM_PI / 180.0)), 543.388965223, 0.0, 1e-11);
    assert_near(brm_light_intensity_from_flux(BRM_LIGHT_SPOT, 1000.0, 0.0), 159.154943092, 0.0, 1e-11);
    /* A full sphere (cos θ_o = −1) gives back the point light's 4π. */
    assert_near(brm_light_intensity_from_flux(BRM_LIGHT_SPOT, 1000.0, -1.0), 79.5774715459, 0.0, 1e-11);
}

static void point_light_should_follow_the_inverse_square_law(void **state)
{
    (void)state;
    /* Source: REFERENCES §7 — E = I/d² at normal incidence; 100 cd at 1, 2, 5 m gives 100, 25, 4 lx. */
    brm_light l = point_light(100.0, 0.0);
    double ds[] = {1.0, 2.0, 5.0}, es[] = {100.0, 25.0, 4.0};
    for (int i = 0; i < 3; i++) {
        brm_vec3 dir = brm_norm(brm_v3(0.3, -0.8, 0.52));
        brm_vec3 p = brm_madd(l.position, dir, ds[i]);
        brm_vec3 to;
        double dist;
        assert_near(brm_light_illuminance(&l, p, &to, &dist), es[i], 0.0, 1e-12);
        assert_near(dist, ds[i], 0.0, 1e-12);
        assert_near(brm_dot(to, dir), -1.0, 1e-12, 0.0);
    }
    /* Far away there is no cut-off without a range: 1000 m gives 1e-4 lx. */
    brm_vec3 to;
    double dist;
    assert_near(brm_light_illuminance(&l, brm_add(l.position, brm_v3(0, 0, 1000.0)), &to, &dist), 1e-4, 0.0, 1e-12);
    /* At the light itself: nothing (the law diverges), never inf or NaN. */
    assert_near(brm_light_illuminance(&l, l.position, &to, &dist), 0.0, 0.0, 0.0);
}

static void range_window_should_match_reference_values(void **state)
{
    (void)state;
    /* Source: REFERENCES §7 window max(0, 1 − (d/r)⁴)² (Karis 2013) for r = 10: d = 5 → 0.87890625,
     * d ≥ 10 → 0; SPEC.md multiplies it with the plain inverse square I/d². */
    brm_light l = point_light(100.0, 10.0);
    brm_vec3 to;
    double dist;
    assert_near(brm_light_illuminance(&l, brm_add(l.position, brm_v3(5.0, 0, 0)), &to, &dist), 100.0 / 25.0 * 0.87890625,
                0.0, 1e-14);
    assert_near(brm_light_illuminance(&l, brm_add(l.position, brm_v3(0, 10.0, 0)), &to, &dist), 0.0, 0.0, 0.0);
    assert_near(brm_light_illuminance(&l, brm_add(l.position, brm_v3(0, 0, -12.0)), &to, &dist), 0.0, 0.0, 0.0);
    /* d = 1: (1 − 1e-4)² = 0.99980001 (from the window formula itself). */
    assert_near(brm_light_illuminance(&l, brm_add(l.position, brm_v3(0, 1.0, 0)), &to, &dist), 100.0 * 0.99980001, 0.0,
                1e-14);
    /* d = 9: (1 − 0.6561)² = 0.11826721. */
    assert_near(brm_light_illuminance(&l, brm_add(l.position, brm_v3(0, 0, 9.0)), &to, &dist),
                100.0 / 81.0 * 0.11826721, 0.0, 1e-12);
}

static void spot_should_fade_by_smoothstep_between_its_cones(void **state)
{
    (void)state;
    /* Source: SPEC.md — full inside the inner cone, smoothstep(cos outer, cos inner, cos α)
     * between, 0 outside the outer cone; smoothstep(a,b,x) = t²(3 − 2t). */
    brm_light l = spot_light(500.0, 15.0, 25.0);
    brm_vec3 to;
    double dist;
    double a_deg[] = {0.0, 10.0, 15.0, 20.0, 24.0, 25.0, 26.0, 60.0, 120.0};
    for (size_t i = 0; i < sizeof a_deg / sizeof a_deg[0]; i++) {
        double a = a_deg[i] * BRM_PI / 180.0;
        brm_vec3 dir = brm_v3(sin(a), -cos(a), 0.0);
        brm_vec3 p = brm_madd(l.position, dir, 4.0);
        double t = brm_clamp((cos(a) - l.cos_outer) / (l.cos_inner - l.cos_outer), 0.0, 1.0);
        double expect = 500.0 / 16.0 * t * t * (3.0 - 2.0 * t);
        assert_near(brm_light_illuminance(&l, p, &to, &dist), expect, 1e-12, 1e-12);
        if (a_deg[i] <= 15.0) assert_near(brm_light_illuminance(&l, p, &to, &dist), 500.0 / 16.0, 0.0, 1e-12);
        if (a_deg[i] >= 25.0) assert_near(brm_light_illuminance(&l, p, &to, &dist), 0.0, 0.0, 0.0);
    }
    /* Half-way in cosine gives exactly half. */
    double cm = 0.5 * (l.cos_inner + l.cos_outer), a = acos(cm);
    brm_vec3 p = brm_madd(l.position, brm_v3(0.0, -cos(a), sin(a)), 3.0);
    assert_near(brm_light_illuminance(&l, p, &to, &dist), 500.0 / 9.0 * 0.5, 0.0, 1e-12);
}

static void directional_light_should_give_its_illuminance_everywhere(void **state)
{
    (void)state;
    brm_light l = {0};
    l.type = BRM_LIGHT_DIRECTIONAL;
    l.direction = brm_norm(brm_v3(0.2, -1.0, 0.1));
    l.illuminance_lux = 80000.0;
    brm_vec3 to;
    double dist;
    assert_near(brm_light_illuminance(&l, brm_v3(100, -3, 7), &to, &dist), 80000.0, 0.0, 0.0);
    assert_true(isinf(dist));
    assert_near(brm_dot(to, l.direction), -1.0, 1e-15, 0.0);
}

static void light_reaches_should_cull_by_range_and_cone(void **state)
{
    (void)state;
    brm_light p = point_light(100.0, 10.0);
    brm_aabb near = {{1.5, 2.5, 3.5}, {2, 3, 4}}, far = {{20, 20, 20}, {21, 21, 21}};
    brm_aabb edge = {{1.0 + 9.9, 2.0, 3.0}, {13.0, 3.0, 4.0}}; /* 9.9 m away */
    assert_true(brm_light_reaches(&p, near));
    assert_false(brm_light_reaches(&p, far));
    assert_true(brm_light_reaches(&p, edge));
    brm_light none = point_light(100.0, 0.0);
    assert_true(brm_light_reaches(&none, far));
    brm_light s = spot_light(100.0, 10.0, 20.0);   /* points down from (1,2,3) */
    brm_aabb below = {{0.5, -5, 2.5}, {1.5, -4, 3.5}}, above = {{0.5, 5, 2.5}, {1.5, 6, 3.5}};
    brm_aabb side = {{10, 1.5, 2.5}, {11, 2.5, 3.5}};
    brm_aabb rim = {{1.0 + tan(19.0 * BRM_PI / 180.0) * 10.0, -8.05, 2.95}, {4.7, -7.95, 3.05}};
    assert_true(brm_light_reaches(&s, below));
    assert_false(brm_light_reaches(&s, above));
    assert_false(brm_light_reaches(&s, side));
    assert_true(brm_light_reaches(&s, rim));
    /* Conservative: every point a light can light lies in a box it reaches. */
    brm_vec3 to;
    double dist;
    for (int i = 0; i < 200; i++) {
        brm_vec3 q = brm_v3(-10 + (i % 7) * 3.1, -10 + (i % 11) * 2.0, -8 + (i % 13) * 1.6);
        brm_aabb b = {brm_sub(q, brm_v3(0.01, 0.01, 0.01)), brm_add(q, brm_v3(0.01, 0.01, 0.01))};
        if (brm_light_illuminance(&s, q, &to, &dist) > 0.0) assert_true(brm_light_reaches(&s, b));
    }
}

static void sky_should_vary_linearly_with_height_of_direction(void **state)
{
    (void)state;
    /* Source: SPEC.md "Sky" — linear in dir.y: horizon at 0, zenith at +1, ground at −1. */
    brm_sky sky = {true, {0.2, 0.4, 1.0}, {1.0, 0.9, 0.8}, {0.1, 0.1, 0.05}};
    brm_vec3 z = brm_sky_radiance(&sky, brm_v3(0, 1, 0));
    brm_vec3 h = brm_sky_radiance(&sky, brm_v3(1, 0, 0));
    brm_vec3 g = brm_sky_radiance(&sky, brm_v3(0, -1, 0));
    brm_vec3 m = brm_sky_radiance(&sky, brm_norm(brm_v3(1, 1, 0)));   /* y = 0.7071 */
    brm_vec3 d = brm_sky_radiance(&sky, brm_v3(0, -0.25, sqrt(1 - 0.0625)));
    assert_near(z.z, 1.0, 1e-15, 0.0);
    assert_near(h.x, 1.0, 1e-15, 0.0);
    assert_near(g.z, 0.05, 1e-15, 0.0);
    assert_near(m.y, 0.9 + (0.4 - 0.9) * sqrt(0.5), 1e-15, 0.0);
    assert_near(d.x, 1.0 + (0.1 - 1.0) * 0.25, 1e-15, 0.0);
    brm_sky black = {0};
    brm_vec3 b = brm_sky_radiance(&black, brm_v3(0, 1, 0));
    assert_true(b.x == 0.0 && b.y == 0.0 && b.z == 0.0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(flux_should_convert_to_intensity_over_the_solid_angle),
        cmocka_unit_test(point_light_should_follow_the_inverse_square_law),
        cmocka_unit_test(range_window_should_match_reference_values),
        cmocka_unit_test(spot_should_fade_by_smoothstep_between_its_cones),
        cmocka_unit_test(directional_light_should_give_its_illuminance_everywhere),
        cmocka_unit_test(light_reaches_should_cull_by_range_and_cone),
        cmocka_unit_test(sky_should_vary_linearly_with_height_of_direction),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
