/* Probe lattices against closed forms: a uniform sky, a single directional light, a lit wall's
 * bounce, shadowing by a roof and validity inside a closed box. */
#include <math.h>
#include <stdio.h>

#include "bake_util.h"
#include "bake/surface_cache.h"
#include "base/sh.h"


/* The 9 coefficients of one colour channel of probe index c. */
static void probe_sh(const brv_volume *v, char colour, size_t c, double L[9])
{
    for (int m = 0; m < 9; m++) {
        char name[16];
        snprintf(name, sizeof name, "sh.%c%d", colour, m);
        float *ch = read_channel(v, name);
        L[m] = ch[c];
        free(ch);
    }
}

static brv_volume *bake_json(const char *json, const char *name, int threads)
{
    brm_scene *s = load_json(json);
    char p[128];
    snprintf(p, sizeof p, "%s/%s.brv", dir, name);
    brv_volume *v = bake_to(s, 0, threads, false, p);
    brm_scene_free(s);
    return v;
}

static void uniform_sky_should_project_to_band_zero_and_irradiance_pi(void **state)
{
    (void)state;
    const char *json =
        "{\"brume\": 1, \"name\": \"open\", \"sky\": {\"zenith\": [1,1,1], \"horizon\": [1,1,1], \"ground\": [1,1,1]},"
        " \"targets\": [{\"name\": \"p\", \"grid\": \"probes\", \"min\": [0,0,0], \"max\": [2,2,2], \"spacing_m\": 1,"
        "   \"rays\": 256, \"encoding\": \"f32\"}]}";
    brv_volume *v = bake_json(json, "open", 2);
    const brv_grid_info *gi = brv_grid(v);
    assert_int_equal(gi->cells[0], 3);
    size_t n = brv_channel_size(v);
    for (size_t c = 0; c < n; c++) {
        double L[9];
        probe_sh(v, 'g', c, L);
        /* Source: REFERENCES.md §3 — a constant environment L = 1 has L00 = 4π·Y00 = 2√π, every
         * other coefficient 0, and irradiance E(n) = π for every n (Ramamoorthi & Hanrahan 2001). */
        assert_rel(L[0], 2.0 * sqrt(BRM_PI), 0.01);
        for (int m = 1; m < 9; m++) assert_near(L[m], 0.0, 0.01 * L[0], 0);
        const brm_vec3 ns[] = {{1, 0, 0}, {0, 1, 0}, {0, 0, -1}, {0.6, -0.8, 0}};
        for (int k = 0; k < 4; k++) assert_rel(brm_sh9_irradiance(L, ns[k]), BRM_PI, 0.01);
    }
    brv_free(v);
}

static void directional_light_should_project_as_a_delta(void **state)
{
    (void)state;
    const char *json =
        "{\"brume\": 1, \"name\": \"sun\", \"fog_bounds\": {\"min\": [-1,-1,-1], \"max\": [1,1,1]},"
        " \"lights\": [{\"type\": \"directional\", \"direction\": [-0.3,-1,0.4], \"illuminance_lux\": 1000}],"
        " \"targets\": [{\"name\": \"p\", \"grid\": \"probes\", \"min\": [0,0,0], \"max\": [0,0,0], \"spacing_m\": 1,"
        "   \"rays\": 64, \"encoding\": \"f32\"}]}";
    brv_volume *v = bake_json(json, "sun", 1);
    double L[9];
    probe_sh(v, 'r', 0, L);
    const double E = 1000.0;
    /* Source: a delta of irradiance E along d projects to E·Y_lm(d), so band energies
     * sqrt(Σ_m L_lm²) are E·sqrt((2l+1)/(4π)) (SH addition theorem): E·Y00, E·sqrt(3/(4π)),
     * E·sqrt(5/(4π)). */
    double b1 = sqrt(L[1] * L[1] + L[2] * L[2] + L[3] * L[3]);
    double b2 = sqrt(L[4] * L[4] + L[5] * L[5] + L[6] * L[6] + L[7] * L[7] + L[8] * L[8]);
    assert_rel(L[0], E * BRM_SH_C0, 0.01);
    assert_rel(b1, E * sqrt(3.0 / (4 * BRM_PI)), 0.01);
    assert_rel(b2, E * sqrt(5.0 / (4 * BRM_PI)), 0.01);
    /* Source: REFERENCES.md §3 table — toward the light the band-limited irradiance is 17/16·E,
     * at 60° 0.4609375·E. */
    brm_vec3 to = brm_norm(brm_v3(0.3, 1, -0.4));
    assert_rel(brm_sh9_irradiance(L, to), E * 17.0 / 16.0, 0.01);
    brm_vec3 side = brm_norm(brm_cross(to, brm_v3(0, 0, 1)));
    brm_vec3 at60 = brm_add(brm_scale(to, 0.5), brm_scale(side, sqrt(0.75)));
    assert_rel(brm_sh9_irradiance(L, at60), E * 0.4609375, 0.01);
    brv_free(v);
}

static void probe_facing_a_lit_white_wall_should_see_its_exitance(void **state)
{
    (void)state;
    /* A 40 m × 40 m wall of albedo 1 with its face at x = 0, lit head-on by a sun of E lux; the
     * probe 0.5 m in front of it. */
    const char *json =
        "{\"brume\": 1, \"name\": \"wall\", \"fog_bounds\": {\"min\": [-1,-21,-21], \"max\": [6,21,21]},"
        " \"geometry\": [{\"shape\": \"box\", \"min\": [-0.4,-20,-20], \"max\": [0,20,20], \"albedo\": [1,1,1]}],"
        " \"lights\": [{\"type\": \"directional\", \"direction\": [-1,0,0], \"illuminance_lux\": 100}],"
        " \"targets\": [{\"name\": \"p\", \"grid\": \"probes\", \"min\": [0.5,0,0], \"max\": [0.5,0,0], \"spacing_m\": 1,"
        "   \"rays\": 2048, \"encoding\": \"f32\"}]}";
    brv_volume *v = bake_json(json, "wall", 2);
    double L[9];
    probe_sh(v, 'g', 0, L);
    const double E = 100.0;
    /* Source: a Lambertian surface of exitance M = albedo·E has radiance M/π, and a plane filling
     * the hemisphere delivers π·(M/π) = M to a point facing it (radiometry of a uniform
     * hemisphere). Bands 0–2 reproduce a uniform hemisphere's irradiance at its axis exactly.
     * The sun reaching the probe from behind adds its band-limited ringing E/16 at 180°
     * (REFERENCES.md §3 table), which we add to the expectation. The wall's finite size hides
     * (0.5/20)² of the cosine-weighted hemisphere: negligible. */
    double got = brm_sh9_irradiance(L, brm_v3(-1, 0, 0));
    assert_rel(got, E * 1.0 + E / 16.0, 0.05);
    float *valid = read_channel(v, "validity");
    assert_true(valid[0] == 1.0f);
    free(valid);
    brv_free(v);
}

/* The wall above with a 9 × 9 lattice 0.5 m in front of it, enough rays that the bake uses the
 * surface cache for the bounce (nodes at half the 1 m spacing), lit by a sun of 100 lux
 * travelling along `direction`; every probe's irradiance toward the wall must be `expect`,
 * within 1.5 % (when the wall's map lookups let it shadow itself, 60° off its normal was 1.9 %
 * dark). */
static void wall_lattice_through_the_surface_cache(const char *direction, double expect)
{
    char json[1024];
    snprintf(json, sizeof json,
             "{\"brume\": 1, \"name\": \"wall\", \"fog_bounds\": {\"min\": [-1,-21,-21], \"max\": [6,21,21]},"
             " \"geometry\": [{\"shape\": \"box\", \"min\": [-0.4,-20,-20], \"max\": [0,20,20], \"albedo\": [1,1,1]}],"
             " \"lights\": [{\"type\": \"directional\", \"direction\": %s, \"illuminance_lux\": 100}],"
             " \"targets\": [{\"name\": \"p\", \"grid\": \"probes\", \"min\": [0.5,-4,-4], \"max\": [0.5,4,4], \"spacing_m\": 1,"
             "   \"rays\": 2048, \"encoding\": \"f32\"}]}",
             direction);
    brm_scene *s = load_json(json);
    /* The bake caches when the nodes number at most a quarter of the rays. */
    assert_true(brm_surface_cache_nodes(s, 0.5) <= 81 * 2048 / 4);
    /* The cached bounce gives the same bytes at 1 and 2 threads. */
    char a[128], b[128];
    snprintf(a, sizeof a, "%s/wall-lattice-j1.brv", dir);
    snprintf(b, sizeof b, "%s/wall-lattice-j2.brv", dir);
    brv_free(bake_to(s, 0, 1, false, a));
    brv_volume *v = bake_to(s, 0, 2, false, b);
    assert_true(files_equal(a, b));
    brm_scene_free(s);
    assert_int_equal(brv_channel_size(v), 81);
    for (size_t c = 0; c < 81; c++) {
        double L[9];
        probe_sh(v, 'g', c, L);
        assert_rel(brm_sh9_irradiance(L, brm_v3(-1, 0, 0)), expect, 0.015);
    }
    brv_free(v);
}

static void probe_lattice_facing_a_lit_white_wall_should_see_its_exitance_through_the_surface_cache(void **state)
{
    (void)state;
    /* Source: as in the single-probe case above — exitance M = albedo·E from a plane filling
     * the hemisphere, plus the sun's band-limited ringing E/16 from behind (REFERENCES.md §3);
     * the wall's edges, 16 m away or more, hide under 0.1 % of the hemisphere. */
    const double E = 100.0;
    wall_lattice_through_the_surface_cache("[-1,0,0]", E * 1.0 + E / 16.0);
}

static void probe_lattice_facing_an_obliquely_lit_wall_should_see_the_cosine_of_its_exitance(void **state)
{
    (void)state;
    /* The sun 60° off the wall's normal (travelling along (−1/2, −√3/2, 0)): the wall's
     * exitance is albedo·E·cos 60° (Lambert's cosine law), delivered whole by a plane filling
     * the hemisphere; the sun itself, 120° from the probe's normal toward the wall, adds its
     * band-limited value −5/128·E (Ramamoorthi–Hanrahan bands 0–2, REFERENCES.md §3 table).
     * Source: Lambert's cosine law and REFERENCES.md §3. */
    const double E = 100.0;
    wall_lattice_through_the_surface_cache("[-0.5,-0.8660254037844386,0]", E * 0.5 - E * 5.0 / 128.0);
}

static void probe_under_a_roof_should_get_no_sun_and_probe_in_a_box_is_invalid(void **state)
{
    (void)state;
    const char *json =
        "{\"brume\": 1, \"name\": \"roof\", \"fog_bounds\": {\"min\": [-60,-2,-60], \"max\": [60,10,60]},"
        " \"geometry\": [{\"shape\": \"box\", \"min\": [-50,5,-50], \"max\": [50,5.3,50]},"
        "                {\"shape\": \"box\", \"min\": [3,0,-1], \"max\": [5,2,1]}],"
        " \"lights\": [{\"type\": \"directional\", \"direction\": [0.2,-1,0.1], \"illuminance_lux\": 50000}],"
        " \"targets\": [{\"name\": \"p\", \"grid\": \"probes\", \"min\": [0,1,0], \"max\": [4,1,0], \"spacing_m\": 2,"
        "   \"rays\": 128, \"encoding\": \"f32\"}]}";
    brv_volume *v = bake_json(json, "roof", 2);
    assert_int_equal(brv_grid(v)->cells[0], 3);
    double L[9];
    probe_sh(v, 'r', 0, L);
    /* Nothing lights the underside of the roof or the ground here (no sky, no floor): a probe
     * in the roof's shadow sees nothing at all. */
    for (int m = 0; m < 9; m++) assert_near(L[m], 0.0, 1e-6 * 50000, 0);
    float *valid = read_channel(v, "validity");
    assert_true(valid[0] == 1.0f);
    assert_true(valid[2] == 0.0f); /* (4,1,0) lies inside the closed box [3,5]×[0,2]×[−1,1] */
    free(valid);
    brv_free(v);
}

static void probes_should_be_identical_across_thread_counts_and_relocate_out_of_solids(void **state)
{
    (void)state;
    /* Sun, sky, a lamp, fog and boxes the lattice runs through: every part of the probe baker. */
    const char *json =
        "{\"brume\": 1, \"name\": \"lattice\", \"fog_bounds\": {\"min\": [-1,-1,-1], \"max\": [9,5,9]},"
        " \"geometry\": [{\"shape\": \"box\", \"min\": [-1,-1,-1], \"max\": [9,0,9]},"
        "                {\"shape\": \"box\", \"min\": [3.6,0,3.6], \"max\": [4.4,3,4.4]},"
        "                {\"shape\": \"sphere\", \"center\": [2,1,6], \"radius\": 0.3}],"
        " \"lights\": [{\"type\": \"directional\", \"direction\": [0.5,-1,0.3], \"illuminance_lux\": 20000},"
        "              {\"type\": \"point\", \"position\": [6,2,2], \"intensity_cd\": 300, \"range_m\": 8}],"
        " \"media\": [{\"type\": \"height\", \"extinction_per_m\": 0.1, \"base_y\": 0.5, \"scale_height_m\": 1}],"
        " \"sky\": {\"zenith\": [300,400,600], \"horizon\": [500,500,500], \"ground\": [50,50,50]},"
        " \"targets\": [{\"name\": \"p\", \"grid\": \"probes\", \"min\": [0,1,0], \"max\": [8,3,8], \"spacing_m\": 2,"
        "   \"rays\": 64, \"relocate\": true, \"encoding\": \"f32\"}]}";
    brm_scene *s = load_json(json);
    char a[128], b[128];
    snprintf(a, sizeof a, "%s/lattice-j1.brv", dir);
    snprintf(b, sizeof b, "%s/lattice-j2.brv", dir);
    brv_volume *va = bake_to(s, 0, 1, false, a);
    brv_volume *vb = bake_to(s, 0, 2, false, b);
    assert_true(files_equal(a, b));
    /* Probe (4, 1, 4) sits inside the pillar [3.6, 4.4]×[0, 3]×[3.6, 4.4]; within half a spacing
     * (1 m) there is free space, so it moves there and is valid; the file records where. */
    const brv_grid_info *g = brv_grid(va);
    assert_int_equal(g->cells[0], 5);
    size_t c = 2 + 5 * (0 + 2 * 2);
    float *valid = read_channel(va, "validity"), *ox = read_channel(va, "offset.x"), *oz = read_channel(va, "offset.z");
    float *oy = read_channel(va, "offset.y");
    assert_true(valid[c] == 1.0f);
    brm_vec3 moved = {4 + ox[c], 1 + oy[c], 4 + oz[c]};
    assert_true(fabs(moved.x - 4) >= 0.4 || fabs(moved.z - 4) >= 0.4); /* out of the pillar */
    assert_true(brm_len(brm_sub(moved, brm_v3(4, 1, 4))) <= 1.0 + 1e-9);
    /* Probes in free space stay on their lattice point. */
    assert_true(ox[0] == 0.0f && oy[0] == 0.0f && oz[0] == 0.0f && valid[0] == 1.0f);
    free(valid);
    free(ox);
    free(oy);
    free(oz);
    brv_free(va);
    brv_free(vb);
    brm_scene_free(s);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(uniform_sky_should_project_to_band_zero_and_irradiance_pi),
        cmocka_unit_test(directional_light_should_project_as_a_delta),
        cmocka_unit_test(probe_facing_a_lit_white_wall_should_see_its_exitance),
        cmocka_unit_test(probe_lattice_facing_a_lit_white_wall_should_see_its_exitance_through_the_surface_cache),
        cmocka_unit_test(probe_lattice_facing_an_obliquely_lit_wall_should_see_the_cosine_of_its_exitance),
        cmocka_unit_test(probe_under_a_roof_should_get_no_sun_and_probe_in_a_box_is_invalid),
        cmocka_unit_test(probes_should_be_identical_across_thread_counts_and_relocate_out_of_solids),
    };
    return cmocka_run_group_tests_name("bake-probes", tests, setup, teardown);
}
