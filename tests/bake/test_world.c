/* World-grid bakes checked against closed forms: Beer–Lambert attenuation, the inverse-square
 * law, the SH form of the directional channels, and the cell average of height fog. */
#include <math.h>
#include <stdio.h>

#include "bake_util.h"
#include "base/sh.h"


static void path_for(char *buf, size_t n, const char *name) { snprintf(buf, n, "%s/%s.brv", dir, name); }

/* A 4 m fog cube lit from straight above, no occluders, no sky. */
static const char *slab_json =
    "{\"brume\": 1, \"name\": \"slab\", \"fog_bounds\": {\"min\": [0,0,0], \"max\": [4,4,4]},"
    " \"lights\": [{\"type\": \"directional\", \"direction\": [0,-1,0], \"illuminance_lux\": 1000, \"shadow\": false}],"
    " \"media\": [{\"type\": \"uniform\", \"extinction_per_m\": 0.1, \"albedo\": [0.8,0.6,0.4]}],"
    " \"targets\": [{\"name\": \"t\", \"grid\": \"world\", \"min\": [0,0,0], \"max\": [4,4,4], \"cells\": [8,8,8],"
    "   \"samples\": 16, \"encoding\": \"f32\"}]}";

static void world_inscatter_should_follow_beer_lambert_from_the_top(void **state)
{
    (void)state;
    brm_scene *s = load_json(slab_json);
    char p[128];
    path_for(p, sizeof p, "slab");
    brv_volume *v = bake_to(s, 0, 2, false, p);
    float *r = read_channel(v, "inscatter.r"), *b = read_channel(v, "inscatter.b");
    float *ext = read_channel(v, "extinction");
    const double sigma = 0.1, E = 1000.0, h = 0.5;
    for (int k = 0; k < 8; k++)
        for (int j = 0; j < 8; j++)
            for (int i = 0; i < 8; i++) {
                size_t c = (size_t)i + 8 * ((size_t)j + 8 * (size_t)k);
                double y0 = j * h, y1 = y0 + h;
                /* Source: Beer–Lambert law, T = exp(−sigma_t·s) (REFERENCES.md §1), s = 4 − y the path
                 * to the top of the fog; its cell average in closed form:
                 * (1/h)∫ exp(−sigma(4 − y)) dy = (exp(−sigma(4 − y1)) − exp(−sigma(4 − y0)))/(sigma·h). */
                double tavg = (exp(-sigma * (4 - y1)) - exp(-sigma * (4 - y0))) / (sigma * h);
                double want_r = 0.08 * E * tavg / (4 * BRM_PI), want_b = 0.04 * E * tavg / (4 * BRM_PI);
                assert_rel(r[c], want_r, 0.01);
                assert_rel(b[c], want_b, 0.01);
                assert_rel(ext[c], sigma, 1e-6);
            }
    free(r);
    free(b);
    free(ext);
    brv_free(v);
    brm_scene_free(s);
}

static void world_inscatter_should_follow_inverse_square_around_a_point_light(void **state)
{
    (void)state;
    const char *json =
        "{\"brume\": 1, \"name\": \"lamp\", \"fog_bounds\": {\"min\": [-30,-30,-30], \"max\": [30,30,30]},"
        " \"lights\": [{\"type\": \"point\", \"position\": [0.1,0.2,0.3], \"intensity_cd\": 100, \"shadow\": false}],"
        " \"media\": [{\"type\": \"uniform\", \"extinction_per_m\": 0.05, \"albedo\": [0.9,0.9,0.9]}],"
        " \"targets\": [{\"name\": \"t\", \"grid\": \"world\", \"min\": [-4,-4,-4], \"max\": [4,4,4], \"cells\": [16,16,16],"
        "   \"samples\": 64, \"encoding\": \"f32\"}]}";
    brm_scene *s = load_json(json);
    char p[128];
    path_for(p, sizeof p, "lamp");
    brv_volume *v = bake_to(s, 0, 2, false, p);
    float *g = read_channel(v, "inscatter.g");
    const brm_vec3 L = {0.1, 0.2, 0.3};
    int checked = 0;
    for (int k = 0; k < 16; k++)
        for (int j = 0; j < 16; j++)
            for (int i = 0; i < 16; i++) {
                brm_vec3 c0 = {-4 + 0.5 * i, -4 + 0.5 * j, -4 + 0.5 * k};
                brm_vec3 mid = brm_add(c0, brm_v3(0.25, 0.25, 0.25));
                if (brm_len(brm_sub(mid, L)) <= 3 * 0.5) continue;
                /* Source: inverse-square law E = I/d² and Beer–Lambert T = exp(−sigma_t·d)
                 * (REFERENCES.md §1, §7); cell average by an 8³ midpoint rule. */
                double acc = 0;
                for (int a = 0; a < 8; a++)
                    for (int bb = 0; bb < 8; bb++)
                        for (int cc = 0; cc < 8; cc++) {
                            brm_vec3 q = brm_add(c0, brm_v3((a + 0.5) / 16, (bb + 0.5) / 16, (cc + 0.5) / 16));
                            double d = brm_len(brm_sub(q, L));
                            acc += 0.045 / (4 * BRM_PI) * 100.0 / (d * d) * exp(-0.05 * d);
                        }
                acc /= 512.0;
                assert_rel(g[(size_t)i + 16 * ((size_t)j + 16 * (size_t)k)], acc, 0.02);
                checked++;
            }
    assert_true(checked > 3500);
    free(g);
    brv_free(v);
    brm_scene_free(s);
}

static void dir_channels_should_apply_henyey_greenstein_to_band_one(void **state)
{
    (void)state;
    const char *json =
        "{\"brume\": 1, \"name\": \"oblique\", \"fog_bounds\": {\"min\": [0,0,0], \"max\": [4,4,4]},"
        " \"lights\": [{\"type\": \"directional\", \"direction\": [0.3,-1,0.2], \"illuminance_lux\": 500, \"shadow\": false}],"
        " \"media\": [{\"type\": \"uniform\", \"extinction_per_m\": 0.2, \"albedo\": [0.9,0.9,0.9]}],"
        " \"targets\": [{\"name\": \"t\", \"grid\": \"world\", \"min\": [0,0,0], \"max\": [4,4,4], \"cells\": [4,4,4],"
        "   \"samples\": 8, \"encoding\": \"f32\"}]}";
    brm_scene *s = load_json(json);
    char p[128];
    path_for(p, sizeof p, "oblique");
    brv_volume *v = bake_to(s, 0, 1, false, p);
    float *ins = read_channel(v, "inscatter.r");
    float *d[4] = {read_channel(v, "dir.r0"), read_channel(v, "dir.r1"), read_channel(v, "dir.r2"),
                   read_channel(v, "dir.r3")};
    brm_vec3 to_light = brm_norm(brm_v3(-0.3, 1, -0.2));
    const double gs[] = {-0.5, 0.0, 0.3, 0.76};
    const brm_vec3 views[] = {{1, 0, 0}, {0, 0, -1}, {0.6, 0.8, 0}, {-0.48, 0.6, 0.64}};
    for (size_t c = 0; c < 64; c++)
        for (size_t gi = 0; gi < 4; gi++)
            for (size_t vi = 0; vi < 4; vi++) {
                double y[4];
                brm_sh4(views[vi], y);
                double g = gs[gi];
                double runtime = d[0][c] * y[0] + g * (d[1][c] * y[1] + d[2][c] * y[2] + d[3][c] * y[3]);
                /* Source: Legendre expansion of Henyey–Greenstein, 4π·p = Σ (2l+1) g^l P_l(cos θ)
                 * (Henyey & Greenstein 1941; REFERENCES.md §2), truncated after band 1:
                 * sigma_s·E·T·(1 + 3g·cos θ)/(4π), and sigma_s·E·T/(4π) is the cell's inscatter. */
                double cos_t = brm_dot(views[vi], to_light);
                double want = ins[c] * (1.0 + 3.0 * g * cos_t);
                assert_near(runtime, want, 1e-9, 1e-3);
            }
    free(ins);
    for (int m = 0; m < 4; m++) free(d[m]);
    brv_free(v);
    brm_scene_free(s);
}

static void extinction_should_average_height_fog_in_closed_form(void **state)
{
    (void)state;
    const char *json =
        "{\"brume\": 1, \"name\": \"ground\", \"fog_bounds\": {\"min\": [0,0,0], \"max\": [2,8,2]},"
        " \"media\": [{\"type\": \"height\", \"extinction_per_m\": 0.2, \"base_y\": 1.1, \"scale_height_m\": 2}],"
        " \"targets\": [{\"name\": \"t\", \"grid\": \"world\", \"min\": [0,0,0], \"max\": [2,8,2], \"cells\": [2,16,2],"
        "   \"samples\": 8, \"encoding\": \"f32\"}]}";
    brm_scene *s = load_json(json);
    char p[128];
    path_for(p, sizeof p, "ground");
    brv_volume *v = bake_to(s, 0, 2, false, p);
    float *ext = read_channel(v, "extinction");
    const double s0 = 0.2, b = 1.1, H = 2.0, h = 0.5;
    for (int j = 0; j < 16; j++) {
        double y0 = j * h, y1 = y0 + h;
        /* Source: SPEC.md height fog, sigma = s0 below base_y and s0·exp(−(y − base_y)/H) above;
         * its cell average integrates in closed form (REFERENCES.md §1, exponential height fog). */
        double flat = y1 <= b ? h : y0 >= b ? 0.0 : b - y0;
        double lo = y0 > b ? y0 : b;
        double expo = y1 > b ? H * (exp(-(lo - b) / H) - exp(-(y1 - b) / H)) : 0.0;
        double want = s0 * (flat + expo) / h;
        for (int k = 0; k < 2; k++)
            for (int i = 0; i < 2; i++) assert_rel(ext[i + 2 * (j + 16 * k)], want, 0.005);
    }
    free(ext);
    brv_free(v);
    brm_scene_free(s);
}

static void bakes_should_be_identical_across_thread_counts_and_runs(void **state)
{
    (void)state;
    const char *json =
        "{\"brume\": 1, \"name\": \"det\", \"fog_bounds\": {\"min\": [-6,0,-6], \"max\": [6,6,6]},"
        " \"geometry\": [{\"shape\": \"box\", \"min\": [-1,2,-1], \"max\": [1,2.5,1]},"
        "                {\"shape\": \"sphere\", \"center\": [2,1,2], \"radius\": 0.7}],"
        " \"lights\": [{\"type\": \"directional\", \"direction\": [0.4,-1,0.1], \"illuminance_lux\": 800},"
        "              {\"type\": \"spot\", \"position\": [-3,5,-3], \"direction\": [0.5,-1,0.5], \"inner_deg\": 15,"
        "               \"outer_deg\": 30, \"flux_lm\": 1500, \"range_m\": 12}],"
        " \"media\": [{\"type\": \"uniform\", \"visibility_m\": 60},"
        "            {\"type\": \"noise\", \"scale_m\": 3, \"octaves\": 3, \"seed\": 5, \"strength\": 0.5}],"
        " \"sky\": {\"zenith\": [0.2,0.3,0.6], \"horizon\": [0.5,0.5,0.5], \"ground\": [0.1,0.1,0.1]},"
        " \"targets\": [{\"name\": \"t\", \"grid\": \"world\", \"min\": [-5,0,-5], \"max\": [5,5,5], \"cells\": [40,20,40],"
        "   \"samples\": 4}]}";
    brm_scene *s = load_json(json);
    char a[128], b[128], c[128];
    path_for(a, sizeof a, "det-j1");
    path_for(b, sizeof b, "det-j2");
    path_for(c, sizeof c, "det-j2-again");
    brv_free(bake_to(s, 0, 1, false, a));
    brv_free(bake_to(s, 0, 2, false, b));
    brv_free(bake_to(s, 0, 2, false, c));
    assert_true(files_equal(a, b));
    assert_true(files_equal(b, c));
    brm_scene_free(s);
}

static void over_budget_target_should_fail_before_baking_with_the_cells_that_fit(void **state)
{
    (void)state;
    brm_scene *s = load_json(slab_json);
    char p[128];
    path_for(p, sizeof p, "budget");
    brm_bake_opts o;
    memset(&o, 0, sizeof o);
    o.max_memory = 1 << 20;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_bake_target(s, 0, &o, p, NULL, &d), BRM_E_BUDGET);
    assert_non_null(strstr(d.message, "cells would fit"));
    assert_non_null(strstr(d.message, "targets[0]"));
    assert_int_not_equal(access(p, F_OK), 0);
    brm_scene_free(s);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(world_inscatter_should_follow_beer_lambert_from_the_top),
        cmocka_unit_test(world_inscatter_should_follow_inverse_square_around_a_point_light),
        cmocka_unit_test(dir_channels_should_apply_henyey_greenstein_to_band_one),
        cmocka_unit_test(extinction_should_average_height_fog_in_closed_form),
        cmocka_unit_test(bakes_should_be_identical_across_thread_counts_and_runs),
        cmocka_unit_test(over_budget_target_should_fail_before_baking_with_the_cells_that_fit),
    };
    return cmocka_run_group_tests_name("bake-world", tests, setup, teardown);
}
