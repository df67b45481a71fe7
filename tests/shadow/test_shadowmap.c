/* Tests of src/shadow/shadowmap.c: depth maps for directional, spot and point lights, their
 * filtered lookups, against analytic shadow volumes and the BVH ray caster. */
#include <stdio.h>

#include "shadow_fixture.h"
#include "shadow/shadow_internal.h"
#include "voxel/voxelize.h"

static const brm_aabb slab = {{-10, 0, -10}, {10, 4, 10}};

/* Distance from p to the axis of the shadow cylinder a sphere (c, r) casts along f, and
 * whether p lies behind the sphere (past its centre along f). */
static double cylinder_distance(brm_vec3 p, brm_vec3 c, brm_vec3 f, int *behind)
{
    brm_vec3 d = brm_sub(p, c);
    double along = brm_dot(d, f);
    *behind = along > 0.0;
    return brm_len(brm_sub(d, brm_scale(f, along)));
}

static void sphere_outside_target_should_shadow_exactly_its_cylinder(void **state)
{
    (void)state;
    /* A sphere 25 m above a fog slab and outside the target casts a shadow cylinder of its
     * own radius along the light (Source: the geometry of a parallel projection — a sphere's
     * orthographic silhouette is a circle of its radius). */
    brm_scene *s = sf_scene((brm_aabb){{-50, -10, -50}, {50, 50, 50}});
    brm_vec3 c = brm_v3(1.0, 29.0, -2.0);
    double r = 3.0;
    sf_sphere(s, c, r);
    brm_vec3 f = brm_norm(brm_v3(0.2, -1.0, 0.1));
    sf_sun(s, f);
    sf_ready(s);
    double cell = 0.125;
    brm_shadow_set *ss = sf_build(s, slab, cell, false, NULL, 1);
    double texel = brm_shadow_texel_size(ss, 0);
    assert_true(texel > 0.0 && texel <= cell); /* default: a texel no larger than a cell */
    uint64_t rng = 1;
    int inside = 0, outside = 0;
    for (int n = 0; n < 20000; n++) {
        brm_vec3 p = sf_in_box(&rng, slab);
        int behind;
        double dist = cylinder_distance(p, c, f, &behind);
        assert_true(behind);
        if (fabs(dist - r) < 3.0 * texel) continue; /* the filtered edge band */
        double v = brm_shadow_visibility(ss, 0, p);
        if (dist < r) {
            inside++;
            assert_near(v, 0.0, 0.0, 0.0);
        } else {
            outside++;
            assert_near(v, 1.0, 0.0, 0.0);
        }
    }
    /* Both sides were really tested: the shadow disc covers about π·3²/400 of the slab. */
    assert_true(inside > 1000 && outside > 10000);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

static void shadow_edge_should_be_filtered_not_stair_stepped(void **state)
{
    (void)state;
    /* A large box's straight edge, crossed slowly: PCF gives a monotone ramp with many
     * intermediate values, about 2·softness texels wide. */
    brm_scene *s = sf_scene((brm_aabb){{-50, -10, -50}, {50, 50, 50}});
    sf_box(s, brm_v3(-40, 20, -40), brm_v3(0.03, 21, 40), false);
    sf_sun(s, brm_v3(0, -1, 0));
    sf_ready(s);
    brm_shadow_set *ss = sf_build(s, slab, 0.25, false, NULL, 1);
    double texel = brm_shadow_texel_size(ss, 0), prev = -1.0;
    int partial = 0;
    double first0 = HUGE_VAL, last1 = -HUGE_VAL;
    for (int k = 0; k <= 400; k++) {
        double x = 0.5 - 1.0 * k / 400.0; /* from lit (x > 0.03) into shadow */
        double v = brm_shadow_visibility(ss, 0, brm_v3(x, 2.0, 0.37));
        if (prev >= 0.0) assert_true(v <= prev + 1e-12);
        prev = v;
        if (v > 0.0 && v < 1.0) partial++;
        if (v >= 1.0) last1 = x;
        if (v <= 0.0 && x > -HUGE_VAL && first0 == HUGE_VAL) first0 = x;
    }
    printf("edge: %d partial values, width %.3f m, texel %.3f m, middle at %.3f m\n", partial,
           last1 - fmax(first0, -0.5), texel, 0.5 * (last1 + first0));
    assert_true(partial >= 10);
    double width = last1 - fmax(first0, -0.5);
    /* Common practice, no source: a box filter of half-width 1.5 texels over nearest-texel
     * tests spans 3 texels (plus one for where the edge falls in its texel), centred on the
     * edge within a texel: coverage by texel centres does not push shadows out. */
    assert_true(width > 2.0 * texel && width < 4.5 * texel);
    assert_near(0.5 * (last1 + first0), 0.03, 1.0 * texel, 0.0);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

/* Whether the BVH answer is the same at p and at points a distance `band` around it across
 * the ray and along it: then p is away from every shadow edge and occluder surface. */
static int reference_ray(const brm_bvh *b, const brm_light *l, brm_vec3 p)
{
    if (l->type == BRM_LIGHT_DIRECTIONAL) return !brm_bvh_occluded(b, p, brm_scale(l->direction, -1.0), 1e-9, HUGE_VAL);
    brm_vec3 t = brm_sub(l->position, p);
    double d = brm_len(t);
    return !brm_bvh_occluded(b, p, brm_scale(t, 1.0 / d), 1e-9, d - 1e-9);
}

static int away_from_edges(const brm_bvh *b, const brm_light *l, brm_vec3 p, double band, int ref)
{
    brm_vec3 t = l->type == BRM_LIGHT_DIRECTIONAL ? brm_scale(l->direction, -1.0) : brm_norm(brm_sub(l->position, p));
    brm_vec3 a = brm_norm(brm_cross(t, fabs(t.y) < 0.9 ? brm_v3(0, 1, 0) : brm_v3(1, 0, 0)));
    brm_vec3 c = brm_cross(t, a);
    for (int k = 0; k < 10; k++) {
        brm_vec3 off;
        if (k < 8) {
            double ang = 2.0 * BRM_PI * k / 8.0;
            off = brm_add(brm_scale(a, cos(ang) * band), brm_scale(c, sin(ang) * band));
        } else {
            off = brm_scale(t, k == 8 ? band : -band);
        }
        if (reference_ray(b, l, brm_add(p, off)) != ref) return 0;
    }
    return 1;
}

static void shadow_maps_should_agree_with_bvh_rays_away_from_edges(void **state)
{
    (void)state;
    /* A yard: ground slab, two boxes, a thin wall (mesh), a sphere, a roof outside the target;
     * sun, spot and point light. */
    brm_aabb target = {{-8, 0.05, -8}, {8, 6, 8}};
    brm_scene *s = sf_scene((brm_aabb){{-60, -5, -60}, {60, 60, 60}});
    sf_box(s, brm_v3(-20, -1, -20), brm_v3(20, 0, 20), false);
    sf_box(s, brm_v3(-5, 0, -3), brm_v3(-2, 4, 1), false);
    sf_box(s, brm_v3(2, 1, 2), brm_v3(4.5, 2.5, 6), true);
    sf_box(s, brm_v3(-1, 0, 4), brm_v3(3, 5, 4.05), true); /* thin wall */
    sf_sphere(s, brm_v3(3, 3.5, -4), 1.5);
    sf_box(s, brm_v3(-30, 14, -30), brm_v3(-6, 14.2, 30), false); /* roof outside the target */
    sf_sun(s, brm_v3(0.5, -1.0, 0.3));
    sf_spot(s, brm_v3(0, 9, 0), brm_v3(0.1, -1, 0.05), 30, 50);
    sf_point(s, brm_v3(1, 5.5, -1));
    sf_ready(s);
    brm_bvh *b = sf_bvh(s);
    brm_shadow_set *ss = sf_build(s, target, 0.1, false, b, 2);
    uint64_t rng = 7;
    for (uint32_t l = 0; l < s->light_count; l++) {
        int tested = 0, agree = 0, lit = 0;
        for (int n = 0; n < 6000; n++) {
            brm_vec3 p = sf_in_box(&rng, target);
            if (brm_point_in_solid(s, p)) continue;
            int ref = reference_ray(b, &s->lights[l], p);
            double dist = s->lights[l].type == BRM_LIGHT_DIRECTIONAL ? 1.0 : brm_len(brm_sub(s->lights[l].position, p));
            double texel = s->lights[l].type == BRM_LIGHT_DIRECTIONAL
                               ? brm_shadow_texel_size(ss, l)
                               : brm_shadow_pick_view(&ss->lights[l], p)->texel * dist;
            if (!away_from_edges(b, &s->lights[l], p, 4.0 * texel, ref)) continue;
            if (s->lights[l].type == BRM_LIGHT_SPOT) {
                brm_vec3 to = brm_norm(brm_sub(p, s->lights[l].position));
                if (brm_dot(to, s->lights[l].direction) < s->lights[l].cos_outer) continue;
            }
            tested++;
            lit += ref;
            double v = brm_shadow_visibility(ss, l, p);
            if (fabs(v - (double)ref) < 1e-9) agree++;
        }
        printf("light %u: %d tested, %d lit, %d agree\n", l, tested, lit, agree);
        assert_true(tested > 2000);
        assert_true(lit > tested / 10 && lit < tested - tested / 10); /* both cases occur */
        /* The brief's criterion: more than 99 % agreement away from edges. */
        assert_true(agree > 0.99 * tested);
    }
    brm_shadows_free(ss);
    brm_bvh_free(b);
    brm_scene_free(s);
}

static void closed_room_of_thin_walls_should_not_leak_light(void **state)
{
    (void)state;
    /* A room of zero-thickness walls (an open-or-closed mesh of six quads): every point
     * inside, clear of the filter band, sees no light from any of the three light kinds.
     * Source: the definition of a closed surface — every ray from inside meets it. */
    brm_aabb room = {{-3, 0, -3}, {3, 3, 3}};
    brm_scene *s = sf_scene((brm_aabb){{-20, -5, -20}, {20, 20, 20}});
    sf_box(s, room.min, room.max, true);
    sf_sun(s, brm_v3(0.7, -0.4, 0.2));
    sf_spot(s, brm_v3(0, 8, 2), brm_v3(0, -1, -0.2), 40, 55);
    sf_point(s, brm_v3(6, 2, 5));
    sf_ready(s);
    brm_aabb target = {{-6, 0, -6}, {6, 5, 6}};
    brm_shadow_set *ss = sf_build(s, target, 0.1, false, NULL, 1);
    uint64_t rng = 3;
    brm_aabb inner = {{-2.6, 0.4, -2.6}, {2.6, 2.6, 2.6}};
    for (int n = 0; n < 3000; n++) {
        brm_vec3 p = sf_in_box(&rng, inner);
        for (uint32_t l = 0; l < s->light_count; l++) assert_near(brm_shadow_visibility(ss, l, p), 0.0, 0.0, 0.0);
    }
    /* And the light does reach outside, beside the room. */
    assert_near(brm_shadow_visibility(ss, 0, brm_v3(-5.5, 4.5, 0)), 1.0, 0.0, 0.0);
    assert_near(brm_shadow_visibility(ss, 2, brm_v3(5, 2, 5)), 1.0, 0.0, 0.0);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

static void lights_without_shadows_or_geometry_should_see_everything(void **state)
{
    (void)state;
    brm_scene *s = sf_scene((brm_aabb){{-20, -5, -20}, {20, 20, 20}});
    sf_sun(s, brm_v3(0, -1, 0));
    sf_point(s, brm_v3(0, 3, 0));
    sf_ready(s);
    brm_shadow_set *ss = sf_build(s, slab, 0.5, false, NULL, 1);
    assert_near(brm_shadow_visibility(ss, 0, brm_v3(1, 1, 1)), 1.0, 0.0, 0.0);
    assert_near(brm_shadow_texel_size(ss, 0), 0.0, 0.0, 0.0); /* no geometry: no map */
    brm_shadows_free(ss);
    sf_box(s, brm_v3(-20, 10, -20), brm_v3(20, 11, 20), false);
    s->lights[0].shadow = false;
    ss = sf_build(s, slab, 0.5, false, NULL, 1);
    assert_near(brm_shadow_visibility(ss, 0, brm_v3(1, 1, 1)), 1.0, 0.0, 0.0); /* shadow: false */
    assert_near(brm_shadow_visibility(ss, 1, brm_v3(1, 1, 1)), 1.0, 0.0, 0.0); /* under the light */
    assert_near(brm_shadow_visibility(ss, 1, brm_v3(1, 11.5, 1)), 0.0, 0.0, 0.0);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

static void resolution_should_follow_cells_overrides_and_cap(void **state)
{
    (void)state;
    brm_scene *s = sf_scene((brm_aabb){{-20, -5, -20}, {20, 20, 20}});
    sf_box(s, brm_v3(-1, 6, -1), brm_v3(1, 7, 1), false);
    brm_light *sun = sf_sun(s, brm_v3(0, -1, 0));
    sf_ready(s);
    brm_shadow_set *ss = sf_build(s, slab, 0.5, false, NULL, 1);
    const shadow_view *v = &ss->lights[0].views[0];
    /* 20 m across at 0.5 m cells, BRM_SHADOW_TEXELS_PER_CELL texels per cell, plus the filter
     * margin of 2·(⌈1.5⌉ + 2). */
    assert_int_equal(v->res, (uint32_t)(40 * BRM_SHADOW_TEXELS_PER_CELL) + 8);
    assert_near(v->texel, 0.5 / BRM_SHADOW_TEXELS_PER_CELL, 0.0, 1e-12);
    brm_shadows_free(ss);
    /* A 1 mm cell would ask for 160 000 texels: the automatic resolution stops at 4096. */
    ss = sf_build(s, slab, 0.001, false, NULL, 1);
    assert_int_equal(ss->lights[0].views[0].res, BRM_SHADOW_AUTO_MAX);
    brm_shadows_free(ss);
    sun->shadow_resolution = 300;
    ss = sf_build(s, slab, 0.001, false, NULL, 1);
    assert_int_equal(ss->lights[0].views[0].res, 300);
    brm_shadows_free(ss);
    /* Point light: six faces, each of the requested resolution. */
    sf_point(s, brm_v3(0, 2, 0))->shadow_resolution = 64;
    ss = sf_build(s, slab, 0.5, false, NULL, 1);
    assert_int_equal(ss->lights[1].view_count, 6);
    for (int k = 0; k < 6; k++) assert_int_equal(ss->lights[1].views[k].res, 64);
    brm_shadows_free(ss);
    /* Automatic per-face resolution stops at 2048 (six faces). */
    s->lights[1].shadow_resolution = 0;
    ss = sf_build(s, slab, 0.001, false, NULL, 1);
    assert_int_equal(ss->lights[1].views[0].res, BRM_SHADOW_AUTO_MAX_CUBE);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

static void build_should_not_depend_on_thread_count(void **state)
{
    (void)state;
    brm_scene *s = sf_scene((brm_aabb){{-30, -5, -30}, {30, 30, 30}});
    sf_box(s, brm_v3(-5, 0, -3), brm_v3(-2, 4, 1), false);
    sf_sphere(s, brm_v3(3, 3.5, -4), 1.5);
    sf_sun(s, brm_v3(0.5, -1.0, 0.3));
    sf_point(s, brm_v3(1, 5.5, -1));
    brm_medium *m = sf_medium(s, BRM_MEDIUM_HEIGHT, 0.1);
    m->scale_height_m = 3.0;
    sf_ready(s);
    brm_aabb target = {{-8, 0, -8}, {8, 6, 8}};
    brm_shadow_set *a = sf_build(s, target, 0.1, false, NULL, 1);
    brm_shadow_set *b = sf_build(s, target, 0.1, false, NULL, 2);
    for (uint32_t l = 0; l < s->light_count; l++) {
        const light_shadow *la = &a->lights[l], *lb = &b->lights[l];
        assert_int_equal(la->view_count, lb->view_count);
        assert_true(la->has_map && la->has_od);
        for (uint32_t k = 0; k < la->view_count; k++) {
            const shadow_view *va = &la->views[k], *vb = &lb->views[k];
            assert_int_equal(va->res, vb->res);
            assert_memory_equal(va->depth, vb->depth, (size_t)va->res * va->res * sizeof(float));
            size_t n = va->od_nodes * 2;
            assert_true(n > 0);
            assert_int_equal(va->od_nodes, vb->od_nodes);
            assert_memory_equal(va->od_col, vb->od_col, (size_t)va->og_n[0] * va->og_n[1] * sizeof(int64_t));
            assert_memory_equal(va->od, vb->od, n * sizeof(float));
            assert_int_equal(va->blk_count, vb->blk_count);
            size_t nb = (size_t)va->blk_count * (BRM_OD_REFINE + 1) * (BRM_OD_REFINE + 1) * va->og_n[2] * 2;
            if (nb) assert_memory_equal(va->blk_od, vb->blk_od, nb * sizeof(float));
            size_t nf = (size_t)(va->og_n[0] - 1) * (va->og_n[1] - 1) * (va->og_n[2] - 1);
            assert_memory_equal(va->od_bad, vb->od_bad, nf);
            size_t ncol = (size_t)va->og_n[0] * va->og_n[1], ncell = (size_t)(va->og_n[0] - 1) * (va->og_n[1] - 1);
            assert_memory_equal(va->od_first, vb->od_first, ncol * sizeof(uint16_t));
            assert_memory_equal(va->od_last, vb->od_last, ncol * sizeof(uint16_t));
            assert_non_null(va->cell_clean);
            assert_memory_equal(va->cell_clean, vb->cell_clean, 2 * ncell * sizeof(uint16_t));
            assert_int_equal(va->corr_count, vb->corr_count);
            size_t nc = (size_t)va->corr_count * va->og_n[2] * BRM_OD_CORR_PTS;
            if (nc) assert_memory_equal(va->corr_dg, vb->corr_dg, nc * sizeof(float));
        }
    }
    /* The memory estimate bounds what the build allocated: exact but for the refinement
     * blocks and cell corrections it reserves in full and the build allocates as needed,
     * and for the grid columns it counts whole and the build packs to their reach. */
    brm_shadow_opts o = {target, 0.1, 1, false, NULL, false, 1.0};
    size_t est = brm_shadows_memory(s, &o), got = brm_shadows_bytes(a);
    size_t reserve = 0;
    for (uint32_t l = 0; l < s->light_count; l++)
        for (uint32_t k = 0; k < a->lights[l].view_count; k++) {
            const shadow_view *v = &a->lights[l].views[k];
            size_t r1 = BRM_OD_REFINE + 1;
            reserve += (size_t)(v->blk_cap - v->blk_count) *
                       (r1 * r1 * v->og_n[2] * 2 * sizeof(float) + BRM_OD_REFINE * BRM_OD_REFINE * (v->og_n[2] - 1) +
                        (v->kind == BRM_VIEW_ORTHO ? 3 * r1 * r1 * sizeof(float) : 0));
            /* the estimate counts whole columns; the build stores each as far as it reaches */
            size_t whole = (size_t)v->og_n[0] * v->og_n[1] * v->og_n[2];
            assert_true(v->od_nodes <= whole);
            reserve += (whole - v->od_nodes) * 2 * sizeof(float);
        }
    /* and the cell corrections: the estimate counts corr_pool of them per light, the build
     * may take more out of what the unused blocks leave (5·og_n[2] floats, og_n[2] − 1
     * flags, a face and a cell index each) */
    long long corr_diff = 0;
    for (uint32_t l = 0; l < s->light_count; l++) {
        const light_shadow *ls = &a->lights[l];
        long long used = 0, nk = ls->views[0].og_n[2];
        for (uint32_t k = 0; k < ls->view_count; k++) used += ls->views[k].corr_count;
        corr_diff += ((long long)ls->corr_pool - used) *
                     (long long)(BRM_OD_CORR_PTS * nk * sizeof(float) + (nk - 1) + 1 + sizeof(uint32_t));
    }
    assert_true(est >= got);
    assert_true((long long)est == (long long)(got + reserve) + corr_diff);
    brm_shadows_free(a);
    brm_shadows_free(b);
    brm_scene_free(s);
}

static void reference_mode_should_trace_rays(void **state)
{
    (void)state;
    brm_scene *s = sf_scene((brm_aabb){{-20, -5, -20}, {20, 20, 20}});
    sf_sphere(s, brm_v3(0, 10, 0), 2.0);
    sf_sun(s, brm_v3(0, -1, 0));
    sf_point(s, brm_v3(0, 15, 0));
    sf_ready(s);
    brm_bvh *b = sf_bvh(s);
    brm_shadow_set *ss = sf_build(s, slab, 0.5, true, b, 1);
    /* The reference evaluates the filtered visibility the maps approximate, by rays: the lit
     * fraction of the square of half-width softness·texel around p (in the light's plane). */
    double w = ss->lights[0].softness * ss->lights[0].views[0].texel;
    assert_true(w > 0.0);
    const double xs[] = {2.0 - 2 * w, 2.0 - 0.5 * w, 2.0, 2.0 + 0.5 * w, 2.0 + 2 * w};
    for (int k = 0; k < 5; k++) {
        /* Source: the box filter's definition, here integrated over a 400 × 400 grid of the
         * square against the sphere's silhouette (a circle of radius 2 seen along −y). */
        double lit = 0;
        for (int j = 0; j < 400; j++)
            for (int i = 0; i < 400; i++) {
                double x = xs[k] + w * (2.0 * (i + 0.5) / 400 - 1), z = w * (2.0 * (j + 0.5) / 400 - 1);
                lit += x * x + z * z > 4.0;
            }
        lit /= 160000.0;
        assert_near(brm_shadow_visibility(ss, 0, brm_v3(xs[k], 1, 0)), lit, 0.03, 0.0);
    }
    assert_near(brm_shadow_visibility(ss, 0, brm_v3(1.5, 1, 0)), 0.0, 0.0, 0.0);
    assert_near(brm_shadow_visibility(ss, 0, brm_v3(2.5, 1, 0)), 1.0, 0.0, 0.0);
    assert_near(brm_shadow_visibility(ss, 1, brm_v3(0, 1, 0)), 0.0, 0.0, 0.0);
    assert_near(brm_shadow_visibility(ss, 1, brm_v3(0, 12.5, 0)), 1.0, 0.0, 0.0); /* between sphere and light */
    brm_shadows_free(ss);
    brm_bvh_free(b);
    brm_scene_free(s);
}

static void classify_should_agree_with_every_lookup_in_the_box(void **state)
{
    (void)state;
    /* The same yard as above: whole boxes the maps call lit (or shadowed) must give exactly 1
     * (or 0) at every point inside, or the kernel's shortcut would change a bake. */
    brm_aabb target = {{-8, 0.05, -8}, {8, 6, 8}};
    brm_scene *s = sf_scene((brm_aabb){{-60, -5, -60}, {60, 60, 60}});
    sf_box(s, brm_v3(-20, -1, -20), brm_v3(20, 0, 20), false);
    sf_box(s, brm_v3(-5, 0, -3), brm_v3(-2, 4, 1), false);
    sf_box(s, brm_v3(-1, 0, 4), brm_v3(3, 5, 4.05), true);
    sf_sphere(s, brm_v3(3, 3.5, -4), 1.5);
    sf_sun(s, brm_v3(0.5, -1.0, 0.3));
    sf_spot(s, brm_v3(0, 9, 0), brm_v3(0.1, -1, 0.05), 30, 50);
    sf_point(s, brm_v3(1, 5.5, -1));
    sf_ready(s);
    brm_shadow_set *ss = sf_build(s, target, 0.1, false, NULL, 2);
    uint64_t rng = 11;
    int counts[3] = {0, 0, 0};
    for (uint32_t l = 0; l < s->light_count; l++)
        for (int n = 0; n < 3000; n++) {
            brm_vec3 c = sf_in_box(&rng, target);
            double h = 0.05 + 0.6 * (double)(n % 7) / 6.0;
            brm_aabb box = {brm_sub(c, brm_v3(h, h, h)), brm_add(c, brm_v3(h, h, h))};
            int cls = brm_shadow_classify(ss, l, box);
            counts[cls + 1]++;
            if (cls < 0) continue;
            for (int k = 0; k < 20; k++) {
                brm_vec3 p = sf_in_box(&rng, box);
                assert_true(brm_shadow_visibility(ss, l, p) == (double)cls);
            }
        }
    /* All three answers occur, so the check above tested something. */
    assert_true(counts[0] > 100 && counts[1] > 100 && counts[2] > 100);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

/* Whether the ray from p toward the light (against f) meets box b: the exact shadow of a box. */
static int box_blocks(brm_vec3 p, brm_vec3 f, brm_aabb b)
{
    brm_vec3 d = brm_scale(f, -1.0);
    double t0, t1;
    return brm_ray_aabb(p, brm_v3(1.0 / d.x, 1.0 / d.y, 1.0 / d.z), b, 1e-9, HUGE_VAL, &t0, &t1);
}

/* A floor lit by a low sun, with a pillar's shadow on it. At the floor, the plain lookup's
 * filter reaches over floor that is nearer the light than the point and the fog-sized bias
 * does not cover it: the lit floor darkens in stripes. The surface lookup must see the lit
 * floor wholly lit and the pillar's shadow wholly dark, on the fast path and the reference
 * alike, at every sun height. The shadow is the exact one, a ray toward the light against the
 * pillar's box (Source: the geometry of a parallel projection). */
static void lit_surfaces_should_not_shadow_themselves(void **state)
{
    (void)state;
    const brm_aabb pillar = {{-0.5, 0.0, -0.5}, {0.5, 3.0, 0.5}};
    const double from_normal_deg[3] = {30.0, 63.0, 76.0};
    for (int a = 0; a < 3; a++) {
        brm_scene *s = sf_scene((brm_aabb){{-10, 0, -10}, {10, 4, 10}});
        sf_box(s, brm_v3(-12, -1, -12), brm_v3(12, 0, 12), false);
        sf_box(s, pillar.min, pillar.max, false);
        double th = from_normal_deg[a] * BRM_PI / 180.0;
        brm_vec3 f = brm_v3(sin(th) * 0.8, -cos(th), sin(th) * 0.6);
        sf_sun(s, f);
        sf_ready(s);
        const brm_aabb floor_zone = {{-8, 0, -8}, {8, 0.5, 8}};
        for (int ref = 0; ref < 2; ref++) {
            brm_shadow_set *ss = sf_build(s, floor_zone, 0.25, ref == 1, NULL, 1);
            /* The filter's reach, stretched over the floor by 1/cos of the sun's angle, and the
             * surface lookup's lift toward the light. */
            double texel = brm_shadow_texel_size(ss, 0), band = (3.0 * texel + 0.02) / cos(th) + 4.0 * 2.5 * texel;
            uint64_t rng = 5 + (uint64_t)a;
            int lit = 0, dark = 0, plain_dim = 0;
            for (int n = 0; n < (ref ? 400 : 4000); n++) {
                brm_vec3 p = sf_in_box(&rng, floor_zone);
                p.y = 1e-6;
                /* Away from the shadow's edge: the same answer a band's width around. */
                int in = box_blocks(p, f, pillar), edge = 0;
                for (int k = 0; k < 8 && !edge; k++) {
                    double ang = k * BRM_PI / 4.0;
                    edge = box_blocks(brm_add(p, brm_v3(band * cos(ang), 0, band * sin(ang))), f, pillar) != in;
                }
                if (edge) continue;
                double v = brm_shadow_visibility_surface(ss, 0, p, brm_v3(0, 1, 0));
                if (in) {
                    dark++;
                    assert_near(v, 0.0, 0.0, 0.0);
                } else {
                    lit++;
                    assert_near(v, 1.0, 0.0, 0.0);
                    plain_dim += brm_shadow_visibility(ss, 0, p) < 0.99;
                }
            }
            assert_true(lit > (ref ? 100 : 1000) && dark > (ref ? 2 : 20));
            /* Not vacuous: low sun, the plain lookup does darken the lit floor. */
            if (!ref && a == 2) assert_true(plain_dim > lit / 10);
            brm_shadows_free(ss);
        }
        brm_scene_free(s);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(sphere_outside_target_should_shadow_exactly_its_cylinder),
        cmocka_unit_test(shadow_edge_should_be_filtered_not_stair_stepped),
        cmocka_unit_test(shadow_maps_should_agree_with_bvh_rays_away_from_edges),
        cmocka_unit_test(closed_room_of_thin_walls_should_not_leak_light),
        cmocka_unit_test(lights_without_shadows_or_geometry_should_see_everything),
        cmocka_unit_test(resolution_should_follow_cells_overrides_and_cap),
        cmocka_unit_test(build_should_not_depend_on_thread_count),
        cmocka_unit_test(reference_mode_should_trace_rays),
        cmocka_unit_test(classify_should_agree_with_every_lookup_in_the_box),
        cmocka_unit_test(lit_surfaces_should_not_shadow_themselves),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
