/* Frustum (froxel) bakes against closed forms and an independent quadrature. */
#include <gsl/gsl_integration.h>
#include <math.h>
#include <stdio.h>

#include "bake_util.h"
#include "bake/kernel.h"
#include "base/lds.h"
#include "scene/light.h"
#include "voxel/grid.h"


/* The direction (not normalised: unit depth along fwd) of column (i, j)'s centre ray. */
static brm_vec3 centre_ray(const brm_grid *g, uint32_t i, uint32_t j)
{
    double x = 2.0 * (i + 0.5) / g->n[0] - 1.0, y = 2.0 * (j + 0.5) / g->n[1] - 1.0;
    return brm_add(g->fwd, brm_add(brm_scale(g->right, x * g->tan_half_x), brm_scale(g->up, y * g->tan_half_y)));
}

static void frustum_under_uniform_sky_should_match_beer_lambert(void **state)
{
    (void)state;
    const char *json =
        "{\"brume\": 1, \"name\": \"haze\", \"fog_bounds\": {\"min\": [-100,-100,-100], \"max\": [100,100,100]},"
        " \"media\": [{\"type\": \"uniform\", \"extinction_per_m\": 0.04, \"albedo\": [0.9,0.7,0.5],"
        "              \"phase\": {\"model\": \"henyey-greenstein\", \"g\": 0.4}}],"
        " \"sky\": {\"zenith\": [2,2,2], \"horizon\": [2,2,2], \"ground\": [2,2,2]},"
        " \"targets\": [{\"name\": \"cam\", \"grid\": \"frustum\", \"camera\": {\"position\": [0,1,0], \"look_at\": [3,1.5,10],"
        "   \"up\": [0,1,0], \"fov_y_deg\": 50, \"aspect\": 1.5, \"near\": 0.5, \"far\": 60}, \"cells\": [12,8,24],"
        "   \"samples\": 4, \"encoding\": \"f32\"}]}";
    brm_scene *s = load_json(json);
    char p[128];
    snprintf(p, sizeof p, "%s/haze.brv", dir);
    brv_volume *v = bake_to(s, 0, 2, false, p);
    brm_grid g;
    assert_int_equal(brm_grid_init(&g, &s->targets[0], NULL), BRM_OK);
    float *T = read_channel(v, "transmittance"), *sr = read_channel(v, "scatter.r"), *sb = read_channel(v, "scatter.b");
    const double sigma = 0.04, L = 2.0;
    for (uint32_t k = 0; k < g.n[2]; k++)
        for (uint32_t j = 0; j < g.n[1]; j++)
            for (uint32_t i = 0; i < g.n[0]; i++) {
                size_t c = brm_grid_index(&g, i, j, k);
                double t = g.slice_depths[k + 1] * brm_len(centre_ray(&g, i, j));
                /* Source: Beer–Lambert, T = exp(−sigma_t·t), and for a constant source the closed
                 * form sigma_s·L·(1 − T)/sigma_t (REFERENCES.md §1, §6a); a uniform sky scatters
                 * sigma_s·L into every direction whatever the phase (it integrates to 1). */
                double want_T = exp(-sigma * t);
                assert_rel(T[c], want_T, 1e-3);
                assert_rel(sr[c], 0.9 * sigma * L * (1 - want_T) / sigma, 5e-3);
                assert_rel(sb[c], 0.5 * sigma * L * (1 - want_T) / sigma, 5e-3);
            }
    free(T);
    free(sr);
    free(sb);
    brm_grid_free(&g);
    brv_free(v);
    brm_scene_free(s);
}

typedef struct airlight {
    brm_vec3 cam, dir, light;
    double sigma_t, sigma_s, I, g;
} airlight;

/* Single-scattering airlight integrand at distance x along the view ray: sigma_s·p_HG(θ)·I/d²
 * ·exp(−sigma_t·d)·exp(−sigma_t·x), θ between the view direction and the direction to the light. */
static double airlight_integrand(double x, void *params)
{
    const airlight *a = params;
    brm_vec3 p = brm_madd(a->cam, a->dir, x);
    brm_vec3 to = brm_sub(a->light, p);
    double d = brm_len(to);
    double cos_t = brm_dot(a->dir, to) / d;
    double g = a->g;
    double hg = (1 - g * g) / (4 * M_PI * pow(1 + g * g - 2 * g * cos_t, 1.5));
    return a->sigma_s * hg * a->I / (d * d) * exp(-a->sigma_t * d) * exp(-a->sigma_t * x);
}

static void frustum_scatter_should_match_airlight_quadrature_past_a_point_light(void **state)
{
    (void)state;
    const char *json =
        "{\"brume\": 1, \"name\": \"lamp\", \"fog_bounds\": {\"min\": [-100,-100,-100], \"max\": [100,100,100]},"
        " \"lights\": [{\"type\": \"point\", \"position\": [2.5,0.5,8], \"intensity_cd\": 200, \"shadow\": false}],"
        " \"media\": [{\"type\": \"uniform\", \"extinction_per_m\": 0.05, \"albedo\": [0.8,0.8,0.8],"
        "              \"phase\": {\"model\": \"henyey-greenstein\", \"g\": 0.3}}],"
        " \"targets\": [{\"name\": \"cam\", \"grid\": \"frustum\", \"camera\": {\"position\": [0,0,0], \"look_at\": [0,0,10],"
        "   \"up\": [0,1,0], \"fov_y_deg\": 40, \"aspect\": 1.0, \"near\": 0.2, \"far\": 30}, \"cells\": [32,32,128],"
        "   \"samples\": 8, \"encoding\": \"f32\"}]}";
    brm_scene *s = load_json(json);
    char p[128];
    snprintf(p, sizeof p, "%s/lamp.brv", dir);
    brv_volume *v = bake_to(s, 0, 2, false, p);
    brm_grid g;
    assert_int_equal(brm_grid_init(&g, &s->targets[0], NULL), BRM_OK);
    float *sr = read_channel(v, "scatter.r");
    gsl_integration_workspace *ws = gsl_integration_workspace_alloc(1000);
    const uint32_t cols[][2] = {{4, 16}, {16, 4}, {10, 25}, {27, 27}, {20, 10}, {2, 2}};
    int checked = 0;
    for (size_t ci = 0; ci < sizeof cols / sizeof cols[0]; ci++) {
        uint32_t i = cols[ci][0], j = cols[ci][1];
        brm_vec3 r = centre_ray(&g, i, j);
        airlight a = {g.cam.position, brm_norm(r), {2.5, 0.5, 8}, 0.05, 0.04, 200.0, 0.3};
        for (uint32_t k = 31; k < g.n[2]; k += 32) {
            double tmax = g.slice_depths[k + 1] * brm_len(r);
            gsl_function f = {airlight_integrand, &a};
            double want, err;
            /* Source: GSL's adaptive Gauss–Kronrod integrator (gsl_integration_qag, GNU Scientific
             * Library) of the single-scattering airlight integral (REFERENCES.md §6b, brute-force
             * oracle, here with a Henyey–Greenstein phase). */
            gsl_integration_qag(&f, 0.0, tmax, 1e-12, 1e-9, 1000, GSL_INTEG_GAUSS41, ws, &want, &err);
            assert_rel(sr[brm_grid_index(&g, i, j, k)], want, 0.01);
            checked++;
        }
    }
    assert_int_equal(checked, 24);
    gsl_integration_workspace_free(ws);
    free(sr);
    brm_grid_free(&g);
    brv_free(v);
    brm_scene_free(s);
}

static void frustum_bakes_should_be_identical_across_thread_counts(void **state)
{
    (void)state;
    const char *json =
        "{\"brume\": 1, \"name\": \"door\", \"fog_bounds\": {\"min\": [-10,-1,-10], \"max\": [10,8,30]},"
        " \"geometry\": [{\"shape\": \"box\", \"min\": [-2,0,8], \"max\": [2,4,8.5]},"
        "                {\"shape\": \"sphere\", \"center\": [1,1,4], \"radius\": 0.8}],"
        " \"lights\": [{\"type\": \"directional\", \"direction\": [0.3,-1,0.6], \"illuminance_lux\": 10000},"
        "              {\"type\": \"spot\", \"position\": [-2,5,5], \"direction\": [0.3,-1,0.2], \"inner_deg\": 10,"
        "               \"outer_deg\": 25, \"flux_lm\": 2000, \"range_m\": 10}],"
        " \"media\": [{\"type\": \"uniform\", \"visibility_m\": 40},"
        "            {\"type\": \"noise\", \"scale_m\": 2, \"octaves\": 3, \"seed\": 3, \"strength\": 0.5}],"
        " \"sky\": {\"zenith\": [100,150,300], \"horizon\": [200,200,200], \"ground\": [20,20,20]},"
        " \"targets\": [{\"name\": \"cam\", \"grid\": \"frustum\", \"camera\": {\"position\": [0,1.6,-2], \"look_at\": [0,2,10],"
        "   \"up\": [0,1,0], \"fov_y_deg\": 60, \"aspect\": 1.5, \"near\": 0.3, \"far\": 25}, \"cells\": [40,24,40],"
        "   \"samples\": 2, \"keep_froxel_terms\": true}]}";
    brm_scene *s = load_json(json);
    char a[128], b[128];
    snprintf(a, sizeof a, "%s/door-j1.brv", dir);
    snprintf(b, sizeof b, "%s/door-j2.brv", dir);
    brv_free(bake_to(s, 0, 1, false, a));
    brv_free(bake_to(s, 0, 2, false, b));
    assert_true(files_equal(a, b));
    brm_scene_free(s);
}

/* The frustum baker runs a tile's samples through brm_kernel_eval_view_batch, light by light;
 * every field must carry the bits brm_kernel_eval_view gives one sample at a time (shadowed
 * and lit lights, a spot's cone, noise, sky), so the bake does not depend on the order. */
static void view_batch_should_give_the_bits_of_one_sample_at_a_time(void **state)
{
    (void)state;
    const char *json =
        "{\"brume\": 1, \"name\": \"door\", \"fog_bounds\": {\"min\": [-10,-1,-10], \"max\": [10,8,30]},"
        " \"geometry\": [{\"shape\": \"box\", \"min\": [-2,0,8], \"max\": [2,4,8.5]},"
        "                {\"shape\": \"sphere\", \"center\": [1,1,4], \"radius\": 0.8}],"
        " \"lights\": [{\"type\": \"directional\", \"direction\": [0.3,-1,0.6], \"illuminance_lux\": 10000},"
        "              {\"type\": \"spot\", \"position\": [-2,5,5], \"direction\": [0.3,-1,0.2], \"inner_deg\": 10,"
        "               \"outer_deg\": 25, \"flux_lm\": 2000, \"range_m\": 10},"
        "              {\"type\": \"point\", \"position\": [1,2,6], \"intensity_cd\": 300, \"range_m\": 6}],"
        " \"media\": [{\"type\": \"uniform\", \"visibility_m\": 40},"
        "            {\"type\": \"height\", \"extinction_per_m\": 0.05, \"base_y\": 0.5, \"scale_height_m\": 2,"
        "             \"phase\": {\"model\": \"henyey-greenstein\", \"g\": 0.5}},"
        "            {\"type\": \"noise\", \"scale_m\": 2, \"octaves\": 3, \"seed\": 3, \"strength\": 0.5}],"
        " \"sky\": {\"zenith\": [100,150,300], \"horizon\": [200,200,200], \"ground\": [20,20,20]},"
        " \"targets\": [{\"name\": \"cam\", \"grid\": \"frustum\", \"camera\": {\"position\": [0,1.6,-2], \"look_at\": [0,2,10],"
        "   \"up\": [0,1,0], \"fov_y_deg\": 60, \"aspect\": 1.5, \"near\": 0.3, \"far\": 25}, \"cells\": [8,6,8]}]}";
    brm_scene *s = load_json(json);
    brm_diag d;
    brm_diag_init(&d);
    brm_shadow_opts so = {{{-10, -1, -10}, {10, 8, 30}}, 0.5, 1, false, NULL, false, 1.0};
    brm_shadow_set *ss = NULL;
    assert_int_equal(brm_shadows_build(s, &so, &ss, &d), BRM_OK);
    brm_kernel k = {s, ss};
    const brm_vec3 cam = brm_v3(0, 1.6, -2);
    enum { N = 200 };
    brm_kernel_view_sample smp[N];
    brm_media_point mp[N];
    uint32_t lights[3], nl = 0, lit = 0, dark = 0, shadowed = 0;
    /* All lights, the sun marked lit (as culling marks a light the maps call unshadowed over a
     * box): the batch must skip its lookup exactly as the single evaluation does. */
    lights[nl++] = 0 | BRM_KERNEL_LIT;
    lights[nl++] = 1;
    lights[nl++] = 2;
    for (uint32_t i = 0; i < N; i++) {
        brm_vec3 p = brm_v3(-12 + 24 * brm_hash_unit(3 * i), -0.5 + 7 * brm_hash_unit(3 * i + 1), 0 + 14 * brm_hash_unit(3 * i + 2));
        smp[i].p = p;
        smp[i].view = brm_norm(brm_sub(p, cam));
        smp[i].sample_index = 7 * i;
    }
    brm_kernel_eval_view_batch(&k, smp, N, lights, nl, mp);
    for (uint32_t i = 0; i < N; i++) {
        brm_kernel_out ko;
        brm_kernel_eval_view(&k, smp[i].p, lights, nl, smp[i].sample_index, smp[i].view, &ko);
        assert_true(smp[i].sigma_t == ko.sigma_t);
        assert_int_equal(smp[i].light_evals, ko.light_evals);
        for (int c = 0; c < 3; c++) assert_true(smp[i].toward_view[c] == ko.toward_view[c]);
        if (ko.light_evals == 0) dark++;
        else lit++;
        if (brm_shadow_visibility(ss, 1, smp[i].p) < 1.0 || brm_shadow_visibility(ss, 2, smp[i].p) < 1.0) shadowed++;
    }
    /* The points cover lit fog, shadowed fog and points without scattering (outside the fog). */
    assert_true(lit > N / 2 && dark > 0 && shadowed > 0);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

/* More samples per froxel than a batch holds, and froxel counts that split a tile into
 * several batches: still Beer–Lambert under a uniform sky (the closed form as above). */
static void frustum_with_many_samples_should_still_match_beer_lambert(void **state)
{
    (void)state;
    const uint32_t counts[2] = {300, 12};
    for (int r = 0; r < 2; r++) {
        char json[1024];
        snprintf(json, sizeof json,
                 "{\"brume\": 1, \"name\": \"haze\", \"fog_bounds\": {\"min\": [-100,-100,-100], \"max\": [100,100,100]},"
                 " \"media\": [{\"type\": \"uniform\", \"extinction_per_m\": 0.04, \"albedo\": [0.9,0.7,0.5]}],"
                 " \"sky\": {\"zenith\": [2,2,2], \"horizon\": [2,2,2], \"ground\": [2,2,2]},"
                 " \"targets\": [{\"name\": \"cam\", \"grid\": \"frustum\", \"camera\": {\"position\": [0,1,0], \"look_at\": [3,1.5,10],"
                 "   \"up\": [0,1,0], \"fov_y_deg\": 50, \"aspect\": 1.5, \"near\": 0.5, \"far\": 60}, \"cells\": [5,3,6],"
                 "   \"samples\": %u, \"encoding\": \"f32\"}]}",
                 counts[r]);
        brm_scene *s = load_json(json);
        char p[128];
        snprintf(p, sizeof p, "%s/haze-many.brv", dir);
        brv_volume *v = bake_to(s, 0, 1, false, p);
        brm_grid g;
        assert_int_equal(brm_grid_init(&g, &s->targets[0], NULL), BRM_OK);
        float *T = read_channel(v, "transmittance"), *sr = read_channel(v, "scatter.r");
        for (uint32_t k = 0; k < g.n[2]; k++)
            for (uint32_t j = 0; j < g.n[1]; j++)
                for (uint32_t i = 0; i < g.n[0]; i++) {
                    size_t c = brm_grid_index(&g, i, j, k);
                    /* Source: Beer–Lambert and the constant-source closed form (REFERENCES.md §1, §6a). */
                    double want_T = exp(-0.04 * g.slice_depths[k + 1] * brm_len(centre_ray(&g, i, j)));
                    assert_rel(T[c], want_T, 1e-3);
                    assert_rel(sr[c], 0.9 * 2.0 * (1 - want_T), 5e-3);
                }
        free(T);
        free(sr);
        brm_grid_free(&g);
        brv_free(v);
        brm_scene_free(s);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(frustum_under_uniform_sky_should_match_beer_lambert),
        cmocka_unit_test(frustum_scatter_should_match_airlight_quadrature_past_a_point_light),
        cmocka_unit_test(frustum_bakes_should_be_identical_across_thread_counts),
        cmocka_unit_test(view_batch_should_give_the_bits_of_one_sample_at_a_time),
        cmocka_unit_test(frustum_with_many_samples_should_still_match_beer_lambert),
    };
    return cmocka_run_group_tests_name("bake-frustum", tests, setup, teardown);
}
