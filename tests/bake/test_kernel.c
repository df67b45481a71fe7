/* The kernel's fast pieces against the plain calls they stand in for: prepared phase
 * functions, the inline point-light falloff, the sky cursor, the tile-range test in front of
 * the PCF lookup, and the staged batch over clustered samples. Each must give the plain
 * call's bits (the bakes' bytes do not change with them), and the physics they carry is
 * checked against its closed form where one exists. */
#include <math.h>
#include <stdio.h>

#include "bake_util.h"
#include "bake/kernel.h"
#include "base/lds.h"
#include "scene/light.h"
#include "scene/phase.h"
#include "shadow/shadow_internal.h"
#include "shadow/shadowmap.h"
#include "shadow/sky.h"

static void phase_prepared_should_give_the_bits_of_phase_eval(void **state)
{
    (void)state;
    const brm_phase_model models[6] = {BRM_PHASE_ISOTROPIC, BRM_PHASE_HENYEY_GREENSTEIN, BRM_PHASE_SCHLICK,
                                       BRM_PHASE_RAYLEIGH, BRM_PHASE_CORNETTE_SHANKS, BRM_PHASE_TWO_LOBE};
    const double gs[5] = {-0.7, -0.1, 0.0, 0.35, 0.9};
    for (int mi = 0; mi < 6; mi++)
        for (int gi = 0; gi < 5; gi++) {
            brm_phase ph = {models[mi], gs[gi], -0.3, 0.7};
            brm_phase_prepared pp;
            brm_phase_prepare(&ph, &pp);
            double integral = 0.0;
            const int N = 20000;
            for (int i = 0; i <= N + 200; i++) {
                /* Past both ends too: the clamp of cos θ into [−1, 1] is part of the call. */
                double c = -1.01 + 2.02 * (double)i / (double)(N + 200);
                assert_true(brm_phase_eval_prepared(&pp, c) == brm_phase_eval(&ph, c));
            }
            for (int i = 0; i < N; i++) {
                double mu = -1.0 + (i + 0.5) * (2.0 / N);
                integral += 2.0 * BRM_PI * brm_phase_eval_prepared(&pp, mu) * (2.0 / N);
            }
            /* Source: every phase function is normalised, ∫ p dω = 1 over the sphere
             * (Henyey & Greenstein 1941 for HG; SPEC.md for the others). Midpoint rule with
             * 20000 panels; g = 0.9 peaks sharply, hence 1e-4. */
            assert_near(integral, 1.0, 1e-4, 0.0);
        }
}

static void local_falloff_should_give_the_bits_of_the_light_call(void **state)
{
    (void)state;
    brm_light l;
    memset(&l, 0, sizeof l);
    l.position = brm_v3(1.0, 2.0, -0.5);
    l.intensity_cd = 250.0;
    l.color = brm_v3(1, 1, 1);
    l.direction = brm_norm(brm_v3(0.2, -1.0, 0.1));
    l.cos_outer = cos(40.0 * BRM_PI / 180.0);
    l.cos_inner = cos(25.0 * BRM_PI / 180.0);
    l.outer_deg = 40.0;
    for (int variant = 0; variant < 4; variant++) {
        l.type = variant & 1 ? BRM_LIGHT_SPOT : BRM_LIGHT_POINT;
        l.range_m = variant & 2 ? 6.0 : 0.0;
        for (uint32_t i = 0; i < 4000; i++) {
            brm_vec3 p = brm_v3(-6 + 14 * brm_hash_unit(3 * i), -6 + 14 * brm_hash_unit(3 * i + 1),
                                -7 + 14 * brm_hash_unit(3 * i + 2));
            if (i == 0) p = l.position; /* at the light itself: 0, direction undefined */
            brm_vec3 u0, u1;
            double d0, d1;
            double e0 = brm_light_illuminance(&l, p, &u0, &d0);
            double e1 = brm_light_illuminance_local(&l, p, &u1, &d1);
            assert_true(e0 == e1 && d0 == d1);
            assert_true(u0.x == u1.x && u0.y == u1.y && u0.z == u1.z);
            if (variant == 0 && i > 0) {
                /* Source: inverse-square law, E = I/d² (REFERENCES.md §1). */
                brm_vec3 v = brm_sub(l.position, p);
                assert_rel(e1, 250.0 / brm_dot(v, v), 1e-12);
            }
        }
    }
}

/* A room with an open roof under a sky: sky light varies from cell to cell of the cache. */
static const char *room_json =
    "{\"brume\": 1, \"name\": \"room\", \"fog_bounds\": {\"min\": [-6,-1,-6], \"max\": [6,6,6]},"
    " \"geometry\": [{\"shape\": \"box\", \"min\": [-4,0,-4], \"max\": [4,0.2,4]},"
    "                {\"shape\": \"box\", \"min\": [-4,0,-4], \"max\": [-3.8,4,4]},"
    "                {\"shape\": \"box\", \"min\": [3.8,0,-4], \"max\": [4,4,4]},"
    "                {\"shape\": \"box\", \"min\": [-4,3.8,-4], \"max\": [1,4,4]},"
    "                {\"shape\": \"sphere\", \"center\": [1,1.5,0], \"radius\": 0.7}],"
    " \"lights\": [{\"type\": \"directional\", \"direction\": [0.4,-1,0.2], \"illuminance_lux\": 10000},"
    "              {\"type\": \"point\", \"position\": [-1,2,1], \"intensity_cd\": 300, \"range_m\": 8,"
    "               \"shadow\": {\"softness_texels\": 2.5}},"
    "              {\"type\": \"spot\", \"position\": [2,3.5,-2], \"direction\": [-0.3,-1,0.2], \"inner_deg\": 15,"
    "               \"outer_deg\": 35, \"flux_lm\": 3000}],"
    " \"media\": [{\"type\": \"uniform\", \"visibility_m\": 30},"
    "            {\"type\": \"height\", \"extinction_per_m\": 0.08, \"base_y\": 0.5, \"scale_height_m\": 1.5,"
    "             \"phase\": {\"model\": \"henyey-greenstein\", \"g\": 0.4}},"
    "            {\"type\": \"box\", \"min\": [-2,0,-2], \"max\": [2,2,2], \"extinction_per_m\": 0.2,"
    "             \"phase\": {\"model\": \"two-lobe\", \"g_forward\": 0.6, \"g_back\": -0.3, \"forward_weight\": 0.8}}],"
    " \"sky\": {\"zenith\": [100,150,300], \"horizon\": [200,200,200], \"ground\": [20,20,20]},"
    " \"targets\": [{\"name\": \"cam\", \"grid\": \"frustum\", \"camera\": {\"position\": [0,1.6,-5.5], \"look_at\": [0,1.5,3],"
    "   \"up\": [0,1,0], \"fov_y_deg\": 60, \"aspect\": 1.5, \"near\": 0.3, \"far\": 12}, \"cells\": [8,6,8]}]}";

static brm_shadow_set *room_shadows(const brm_scene *s)
{
    brm_diag d;
    brm_diag_init(&d);
    brm_shadow_opts so = {{{-6, -1, -6}, {6, 6, 6}}, 0.25, 1, false, NULL, false, 1.0};
    brm_shadow_set *ss = NULL;
    assert_int_equal(brm_shadows_build(s, &so, &ss, &d), BRM_OK);
    return ss;
}

/* Clusters of 32 points a few centimetres apart (as a tile's samples are): lookups after the
 * first in a cluster mostly fall in the cursor's cell. */
static brm_vec3 cluster_point(uint32_t i)
{
    uint32_t c = i / 32;
    brm_vec3 centre = brm_v3(-5 + 10 * brm_hash_unit(7 * c), -0.5 + 6 * brm_hash_unit(7 * c + 1),
                             -5 + 10 * brm_hash_unit(7 * c + 2));
    return brm_add(centre, brm_v3(0.3 * brm_hash_unit(5 * i + 3), 0.3 * brm_hash_unit(5 * i + 4),
                                  0.3 * brm_hash_unit(5 * i + 5)));
}

static void sky_cursor_should_give_the_bits_of_single_lookups(void **state)
{
    (void)state;
    brm_scene *s = load_json(room_json);
    brm_shadow_set *ss = room_shadows(s);
    assert_true(ss->sky_grid.n[0] > 0); /* the cache is what the cursor speeds up */
    brm_sky_cursor cur;
    brm_sky_cursor_init(&cur);
    uint32_t differ = 0, dark = 0, open = 0;
    for (uint32_t i = 0; i < 3200; i++) {
        brm_vec3 p = cluster_point(i);
        double a[3][4], b[3][4];
        /* The cursor first: nodes it is the first to need get traced through it. */
        brm_sky_incident_cursor(ss, &cur, p, i, b);
        brm_sky_incident(ss, p, i, a);
        for (int q = 0; q < 12; q++) differ += a[q / 4][q % 4] != b[q / 4][q % 4];
        if (a[2][0] < 0.2 * ss->sky_proj[2][0]) dark++;
        if (a[2][0] > 0.8 * ss->sky_proj[2][0]) open++;
    }
    assert_int_equal(differ, 0);
    /* The points see both the shaded room and the open sky. */
    assert_true(dark > 100 && open > 100);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

static void pcf_tile_ranges_and_batches_should_not_change_a_lookup(void **state)
{
    (void)state;
    brm_scene *s = load_json(room_json);
    brm_shadow_set *ss = room_shadows(s);
    uint32_t lit = 0, hidden = 0, partial = 0, views = 0;
    for (uint32_t l = 0; l < s->light_count; l++) {
        const light_shadow *ls = &ss->lights[l];
        if (!ls->has_map) continue;
        for (uint32_t vi = 0; vi < ls->view_count; vi++) {
            const shadow_view *v = &ls->views[vi];
            assert_non_null(v->tile_min);
            shadow_view plain = *v; /* the same map without its tile ranges: every texel read */
            plain.tile_min = plain.tile_max = NULL;
            views++;
            const double radii[3] = {0.5, ls->softness, 3.0};
            for (uint32_t i = 0; i < 3000; i++) {
                brm_vec3 p = cluster_point(i);
                for (int r = 0; r < 3; r++) {
                    double a = brm_shadowmap_pcf(&plain, p, radii[r]), b = brm_shadowmap_pcf(v, p, radii[r]);
                    assert_true(a == b);
                    if (a == 1.0) lit++;
                    else if (a == 0.0) hidden++;
                    else partial++;
                }
            }
        }
    }
    assert_int_equal(views, 1 + 6 + 1);
    assert_true(lit > 1000 && hidden > 1000 && partial > 50);
    /* The batch call: brm_shadow_visibility's values point by point (chunks of 64 and a tail). */
    enum { NB = 3000 + 37 };
    static brm_vec3 pts[NB];
    static double vb[NB];
    for (uint32_t i = 0; i < NB; i++) pts[i] = cluster_point(i);
    for (uint32_t l = 0; l < s->light_count; l++) {
        brm_shadow_visibility_batch(ss, l, pts, NB, vb);
        for (uint32_t i = 0; i < NB; i++) assert_true(vb[i] == brm_shadow_visibility(ss, l, pts[i]));
    }
    brm_shadows_free(ss);
    brm_scene_free(s);
}

/* Each map's tile ranges are the extremes of its texels, tile by tile (worked out here by
 * the plain loop over every texel). */
static void tile_ranges_should_be_the_extremes_of_their_texels(void **state)
{
    (void)state;
    brm_scene *s = load_json(room_json);
    brm_shadow_set *ss = room_shadows(s);
    uint32_t tiles = 0, finite = 0;
    for (uint32_t l = 0; l < s->light_count; l++) {
        const light_shadow *ls = &ss->lights[l];
        if (!ls->has_map) continue;
        for (uint32_t vi = 0; vi < ls->view_count; vi++) {
            const shadow_view *v = &ls->views[vi];
            const uint32_t T = BRM_SHADOW_TILE;
            assert_int_equal(v->tiles, (v->res + T - 1) / T);
            for (uint32_t tj = 0; tj < v->tiles; tj++)
                for (uint32_t ti = 0; ti < v->tiles; ti++) {
                    float lo = INFINITY, hi = -INFINITY;
                    for (uint32_t j = tj * T; j < (tj + 1) * T && j < v->res; j++)
                        for (uint32_t i = ti * T; i < (ti + 1) * T && i < v->res; i++) {
                            float d = v->depth[(size_t)j * v->res + i];
                            lo = d < lo ? d : lo;
                            hi = d > hi ? d : hi;
                        }
                    assert_true(v->tile_min[tj * v->tiles + ti] == lo);
                    assert_true(v->tile_max[tj * v->tiles + ti] == hi);
                    tiles++;
                    finite += isfinite(lo) && isfinite(hi);
                }
        }
    }
    /* Tiles with geometry in them, and tiles half empty (+inf beside a depth). */
    assert_true(tiles > 1000 && finite > 100 && finite < tiles);
    brm_shadows_free(ss);
    brm_scene_free(s);
}


/* The room with a noise medium too (the batches' media then take the vectorized fBm). */
static const char *noisy_room_json(void)
{
    static char buf[4096];
    const char *key = " \"media\": [";
    const char *at = strstr(room_json, key);
    assert_non_null(at);
    snprintf(buf, sizeof buf, "%.*s%s{\"type\": \"noise\", \"scale_m\": 1.5, \"octaves\": 4, \"seed\": 9, "
             "\"strength\": 0.8},%s", (int)(at - room_json), room_json, key, at + strlen(key));
    return buf;
}

/* The staged batch over clustered samples (the sky cursor hits, lights drop out at different
 * stages) against one sample at a time; every light mixed, none pre-classified. */
static void view_batch_check(const char *json)
{
    brm_scene *s = load_json(json);
    brm_shadow_set *ss = room_shadows(s);
    brm_kernel k = {s, ss};
    enum { N = 640 };
    static brm_kernel_view_sample smp[N];
    static brm_media_point mp[N];
    const uint32_t lights[3] = {0, 1, 2};
    const brm_vec3 cam = brm_v3(0, 1.6, -5.5);
    for (uint32_t i = 0; i < N; i++) {
        smp[i].p = cluster_point(i);
        smp[i].view = brm_norm(brm_sub(smp[i].p, cam));
        smp[i].sample_index = 3 * i + 1;
    }
    brm_kernel_eval_view_batch(&k, smp, N, lights, 3, mp);
    uint32_t lit = 0;
    for (uint32_t i = 0; i < N; i++) {
        brm_kernel_out ko;
        brm_kernel_eval_view(&k, smp[i].p, lights, 3, smp[i].sample_index, smp[i].view, &ko);
        assert_true(smp[i].sigma_t == ko.sigma_t);
        assert_int_equal(smp[i].light_evals, ko.light_evals);
        for (int c = 0; c < 3; c++) assert_true(smp[i].toward_view[c] == ko.toward_view[c]);
        lit += ko.toward_view[0] > 0.0;
    }
    assert_true(lit > N / 2);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

/* The world baker's batch (inscatter and the dir.* projection) against one sample at a
 * time, with the sun marked lit as culling would, the point light and the spot mixed. */
static void iso_batch_check(const char *json)
{
    brm_scene *s = load_json(json);
    brm_shadow_set *ss = room_shadows(s);
    brm_kernel k = {s, ss};
    enum { N = 600 };
    static brm_kernel_iso_sample smp[N];
    static brm_media_point mp[N];
    const uint32_t lights[3] = {0 | BRM_KERNEL_LIT, 1, 2};
    for (uint32_t i = 0; i < N; i++) {
        smp[i].p = cluster_point(i);
        smp[i].sample_index = 5 * i + 2;
    }
    brm_kernel_eval_iso_batch(&k, smp, N, lights, 3, mp);
    uint32_t lit = 0;
    for (uint32_t i = 0; i < N; i++) {
        brm_kernel_out ko;
        brm_kernel_eval(&k, smp[i].p, lights, 3, smp[i].sample_index, NULL, &ko);
        assert_true(smp[i].sigma_t == ko.sigma_t);
        assert_int_equal(smp[i].light_evals, ko.light_evals);
        for (int c = 0; c < 3; c++) {
            assert_true(smp[i].inscatter[c] == ko.inscatter[c]);
            for (int m = 0; m < 4; m++) assert_true(smp[i].dir[c][m] == ko.dir[c][m]);
        }
        lit += ko.inscatter[1] > 0.0;
    }
    assert_true(lit > N / 2);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

static void view_batch_over_clusters_should_give_the_bits_of_single_samples(void **state)
{
    (void)state;
    view_batch_check(room_json);
    view_batch_check(noisy_room_json());
}

static void iso_batch_over_clusters_should_give_the_bits_of_single_samples(void **state)
{
    (void)state;
    iso_batch_check(room_json);
    iso_batch_check(noisy_room_json());
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(phase_prepared_should_give_the_bits_of_phase_eval),
        cmocka_unit_test(local_falloff_should_give_the_bits_of_the_light_call),
        cmocka_unit_test(sky_cursor_should_give_the_bits_of_single_lookups),
        cmocka_unit_test(pcf_tile_ranges_and_batches_should_not_change_a_lookup),
        cmocka_unit_test(tile_ranges_should_be_the_extremes_of_their_texels),
        cmocka_unit_test(view_batch_over_clusters_should_give_the_bits_of_single_samples),
        cmocka_unit_test(iso_batch_over_clusters_should_give_the_bits_of_single_samples),
    };
    return cmocka_run_group_tests(tests, setup, teardown);
}
