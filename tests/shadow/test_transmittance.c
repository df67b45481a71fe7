/* Tests of src/shadow/optical_depth.c: transmittance toward lights through the media, fast
 * optical-depth grids and the reference march, against Beer–Lambert closed forms and each
 * other. */
#include <stdio.h>

#include "shadow_fixture.h"
#include "shadow/shadow_internal.h"

/* Distance from p along unit t to where it leaves box b (p inside b). */
static double exit_distance(brm_vec3 p, brm_vec3 t, brm_aabb b)
{
    double s = HUGE_VAL;
    for (int a = 0; a < 3; a++) {
        double o = brm_vget(p, a), d = brm_vget(t, a);
        if (d > 0) s = fmin(s, (brm_vget(b.max, a) - o) / d);
        if (d < 0) s = fmin(s, (brm_vget(b.min, a) - o) / d);
    }
    return s;
}

/* Source: REFERENCES §1, exponential height fog sigma(h) = s0·exp(−h/H) along h(s) = h0 + μs:
 * tau = s0·e^(−h0/H)·(H/μ)·(1 − e^(−μd/H)), and s0·e^(−h0/H)·d for μ = 0. */
static double height_tau(double s0, double H, double h0, double mu, double d)
{
    double a = s0 * exp(-h0 / H);
    if (mu == 0.0) return a * d;
    if (!isfinite(d)) return a * H / mu;
    return a * (H / mu) * (1.0 - exp(-mu * d / H));
}

static void uniform_fog_should_follow_beer_lambert_to_the_fog_exit(void **state)
{
    (void)state;
    brm_aabb fog = {{-20, 0, -20}, {20, 10, 20}};
    brm_scene *s = sf_scene(fog);
    sf_medium(s, BRM_MEDIUM_UNIFORM, 0.1);
    sf_sun(s, brm_v3(0, -1, 0));
    brm_vec3 slant = brm_norm(brm_v3(0.6, -0.5, -0.3));
    sf_sun(s, slant);
    sf_point(s, brm_v3(1, 5, 1));
    sf_point(s, brm_v3(0, 30, 0)); /* outside the fog: only the part inside counts */
    sf_spot(s, brm_v3(2, 9, -1), brm_v3(0, -1, 0.1), 20, 40);
    sf_ready(s);
    brm_aabb target = {{-6, 0, -6}, {6, 8, 6}};
    brm_shadow_set *ss = sf_build(s, target, 0.25, false, NULL, 1);
    /* Source: REFERENCES §1 table, sigma_t = 0.1 over d = 10 → T = 0.367879441171. */
    assert_near(brm_shadow_transmittance(ss, 0, brm_v3(0.3, 0.0, -0.2)), 0.367879441171, 0.0, 1e-6);
    assert_near(brm_shadow_transmittance_march(ss, 0, brm_v3(0.3, 0.0, -0.2)), 0.367879441171, 0.0, 1e-10);
    uint64_t rng = 11;
    for (int n = 0; n < 500; n++) {
        brm_vec3 p = sf_in_box(&rng, target);
        /* Source: Beer–Lambert (REFERENCES §1): T = exp(−sigma_t·s), s the path in the fog. */
        double t0 = exp(-0.1 * (10.0 - p.y));
        double t1 = exp(-0.1 * exit_distance(p, brm_scale(slant, -1.0), fog));
        brm_vec3 l2 = s->lights[2].position, l3 = s->lights[3].position, l4 = s->lights[4].position;
        double t2 = exp(-0.1 * brm_len(brm_sub(l2, p)));
        brm_vec3 up = brm_norm(brm_sub(l3, p));
        double t3 = exp(-0.1 * exit_distance(p, up, fog));
        double t4 = exp(-0.1 * brm_len(brm_sub(l4, p)));
        double want[5] = {t0, t1, t2, t3, t4};
        for (uint32_t l = 0; l < 5; l++) {
            assert_near(brm_shadow_transmittance_march(ss, l, p), want[l], 0.0, 1e-9);
            assert_near(brm_shadow_transmittance(ss, l, p), want[l], 0.0, 1e-4);
        }
    }
    brm_shadows_free(ss);
    brm_scene_free(s);
}

typedef struct height_case {
    double s0, H, h0, mu, d, T; /* REFERENCES §1 table row; d < 0 for ∞ */
} height_case;

static void height_fog_should_match_reference_table_rows(void **state)
{
    (void)state;
    /* Source: REFERENCES §1 height-fog table (quadrature-checked closed form), T column. */
    const height_case rows[] = {
        {0.1, 10, 0, 0.5, 20, 0.282453563851},
        {0.1, 10, 0, 0.0, 20, 0.135335283237},
        {0.05, 100, 50, -0.6, 100, 0.0156805296433},
        {0.1, 10, 0, 1.0, -1, 0.367879441171},
    };
    for (size_t r = 0; r < sizeof rows / sizeof rows[0]; r++) {
        const height_case *c = &rows[r];
        /* The path toward the light: from p = (0, h0, 0) along w = (√(1−μ²), μ, 0), leaving the
         * fog after d (for ∞: a ceiling so high the rest is below 1e-40). The density keeps the
         * pure exponential along the path by placing base_y below it and scaling sigma_t. */
        brm_vec3 w = brm_v3(sqrt(1.0 - c->mu * c->mu), c->mu, 0.0);
        brm_vec3 p = brm_v3(0, c->h0, 0);
        double base = c->mu < 0 ? -1000.0 : 0.0;
        brm_aabb fog = {{-5000, base - 1000, -5000}, {5000, 5000, 5000}};
        if (c->d > 0) {
            if (w.x > 1e-12) fog.max.x = p.x + w.x * c->d;
            if (c->mu > 0) fog.max.y = p.y + w.y * c->d;
        } else {
            fog.max.y = 1000.0;
        }
        brm_scene *s = sf_scene(fog);
        brm_medium *m = sf_medium(s, BRM_MEDIUM_HEIGHT, c->s0 * exp(-base / c->H));
        m->base_y = base;
        m->scale_height_m = c->H;
        sf_sun(s, brm_scale(w, -1.0));
        sf_ready(s);
        brm_aabb target = {{-1, c->h0 - 1 > base ? c->h0 - 1 : base, -1}, {1, c->h0 + 1, 1}};
        brm_shadow_set *ss = sf_build(s, target, 0.25, false, NULL, 1);
        double fast = brm_shadow_transmittance(ss, 0, p), ref = brm_shadow_transmittance_march(ss, 0, p);
        printf("row %zu: table %.12g, march %.12g, fast %.12g\n", r, c->T, ref, fast);
        assert_near(ref, c->T, 0.0, 1e-6);
        assert_near(fast, c->T, 0.0, 2e-3);
        brm_shadows_free(ss);
        brm_scene_free(s);
    }
}

static void height_fog_should_match_closed_form_for_many_elevations(void **state)
{
    (void)state;
    const double s0 = 0.08, H = 4.0;
    brm_aabb fog = {{-60, 0, -60}, {60, 40, 60}};
    brm_aabb target = {{-8, 0, -8}, {8, 6, 8}};
    const double elev[] = {8, 15, 30, 45, 60, 75, 90};
    double worst_fast = 0.0;
    for (size_t e = 0; e < sizeof elev / sizeof elev[0]; e++) {
        double a = elev[e] * BRM_PI / 180.0;
        brm_vec3 w = brm_norm(brm_v3(cos(a) * 0.8, sin(a), cos(a) * 0.6)); /* toward the light */
        brm_scene *s = sf_scene(fog);
        brm_medium *m = sf_medium(s, BRM_MEDIUM_HEIGHT, s0);
        m->base_y = 0.0;
        m->scale_height_m = H;
        sf_sun(s, brm_scale(w, -1.0));
        sf_ready(s);
        brm_shadow_set *ss = sf_build(s, target, 0.25, false, NULL, 1);
        uint64_t rng = 5 + e;
        for (int n = 0; n < 300; n++) {
            brm_vec3 p = sf_in_box(&rng, target);
            double d = exit_distance(p, w, fog);
            /* Source: REFERENCES §1 closed form, h0 = p.y above the base, μ = w.y. */
            double want = exp(-height_tau(s0, H, p.y, w.y, d));
            double fast = brm_shadow_transmittance(ss, 0, p);
            assert_near(brm_shadow_transmittance_march(ss, 0, p), want, 0.0, 1e-6);
            assert_near(fast, want, 0.0, 0.01); /* the brief's 1 % */
            worst_fast = fmax(worst_fast, fabs(fast - want) / want);
        }
        brm_shadows_free(ss);
        brm_scene_free(s);
    }
    printf("height fog, 7 elevations: worst fast-path relative error %.2e\n", worst_fast);
}

/* A height fog, a box with a fade edge and 4-octave noise in fog bounds `fog`, lit by a sun and
 * a spot: the media every kind of lookup has to follow. */
static brm_scene *mixed_scene(brm_aabb fog)
{
    brm_scene *s = sf_scene(fog);
    brm_medium *h = sf_medium(s, BRM_MEDIUM_HEIGHT, 0.08);
    h->base_y = 0.5;
    h->scale_height_m = 4.0;
    brm_medium *b = sf_medium(s, BRM_MEDIUM_BOX, 0.2);
    b->box = (brm_aabb){{-6, 0, -3}, {2, 5, 6}};
    b->edge_fade_m = 1.0;
    brm_medium *nz = sf_medium(s, BRM_MEDIUM_NOISE, 0.0);
    nz->scale_m = 6.0;
    nz->octaves = 4;
    nz->seed = 7;
    nz->strength = 0.6;
    sf_sun(s, brm_v3(0.4, -1.0, 0.3));
    sf_spot(s, brm_v3(2, 12, -3), brm_v3(-0.1, -1, 0.2), 25, 35);
    return s;
}

static void fast_path_should_match_reference_march_within_one_percent(void **state)
{
    (void)state;
    brm_aabb fog = {{-40, -2, -40}, {40, 30, 40}};
    brm_scene *s = mixed_scene(fog);
    brm_light *pt = sf_point(s, brm_v3(-3, 4, 2));
    pt->range_m = 30.0;
    sf_ready(s);
    brm_aabb target = {{-6, 0, -6}, {6, 6, 6}};
    brm_shadow_set *ss = sf_build(s, target, 0.25, false, NULL, 2);
    printf("optical-depth grids built in %.3f s, %.1f MiB\n", brm_shadows_build_seconds(ss),
           (double)brm_shadows_bytes(ss) / 1048576.0);
    for (uint32_t l = 0; l < s->light_count; l++)
        printf("light %u grid %u x %u x %u (x%u views)\n", l, ss->lights[l].views[0].og_n[0], ss->lights[l].views[0].og_n[1],
               ss->lights[l].views[0].og_n[2], ss->lights[l].view_count);
    uint64_t rng = 99;
    for (uint32_t l = 0; l < s->light_count; l++) {
        double worst = 0.0, tmin = 1.0;
        int tested = 0;
        for (int n = 0; n < 1500; n++) {
            brm_vec3 p = sf_in_box(&rng, target);
            const brm_light *L = &s->lights[l];
            if (L->type == BRM_LIGHT_SPOT && brm_dot(brm_norm(brm_sub(p, L->position)), L->direction) < L->cos_outer)
                continue;
            double fast = brm_shadow_transmittance(ss, l, p), ref = brm_shadow_transmittance_march(ss, l, p);
            worst = fmax(worst, fabs(fast - ref) / ref);
            tmin = fmin(tmin, ref);
            tested++;
        }
        printf("light %u: %d points, T down to %.3g, worst relative error %.2e\n", l, tested, tmin, worst);
        assert_true(tested > 300);
        assert_true(tmin < 0.5); /* the fog is thick enough for the check to mean something */
        assert_true(worst < 0.01); /* the brief: within 1 % of the reference */
    }
    brm_shadows_free(ss);
    brm_scene_free(s);
}

/* World point of view v at grid coordinates (x, y, z): ortho lateral (u·p, v·p) and depth f·p;
 * persp tan coordinates and distance from the light. */
static brm_vec3 grid_point(const shadow_view *v, double x, double y, double z)
{
    if (v->kind == BRM_VIEW_ORTHO) return brm_add(brm_add(brm_scale(v->u, x), brm_scale(v->v, y)), brm_scale(v->f, z));
    brm_vec3 d = brm_norm(brm_add(v->f, brm_add(brm_scale(v->u, x), brm_scale(v->v, y))));
    return brm_madd(v->origin, d, z);
}

/* The centre corrections: inside the depth intervals a correction made good (corr_on), the
 * corrected grid must agree with the exact march like the rest of the grid, and must do
 * better there than the uncorrected interpolation it replaces. */
static void corrected_cells_should_match_the_exact_march(void **state)
{
    (void)state;
    brm_aabb fog = {{-40, -2, -40}, {40, 30, 40}};
    brm_scene *s = mixed_scene(fog);
    sf_ready(s);
    brm_aabb target = {{-6, 0, -3}, {2, 5, 5}}; /* around the box medium, whose fade edges get flagged */
    brm_shadow_set *ss = sf_build(s, target, 0.25, false, NULL, 2);
    uint64_t rng = 5;
    for (uint32_t l = 0; l < s->light_count; l++) {
        shadow_view *v = &ss->lights[l].views[0];
        uint32_t nk = v->og_n[2], n0 = v->og_n[0];
        int tested = 0, raw_misses = 0;
        double worst = 0.0, worst_tau = 0.0, sum_fix = 0.0, sum_raw = 0.0;
        /* One point in a random share of the corrected intervals, about 600 (marches are
         * slow), spread over all the corrections. */
        size_t n_on = 0;
        for (size_t i = 0; i < (size_t)v->corr_count * (nk - 1); i++) n_on += v->corr_on[i];
        double share = n_on > 600 ? 600.0 / (double)n_on : 1.0;
        for (uint32_t c = 0; c < v->corr_count; c++) {
            uint32_t cell = v->corr_cell[c], ci = cell % (n0 - 1), cj = cell / (n0 - 1);
            for (uint32_t k = 0; k + 1 < nk; k++) {
                if (!v->corr_on[(size_t)c * (nk - 1) + k]) continue;
                if (sf_unif(&rng) >= share) continue;
                {
                    double x = v->og_lo[0] + v->og_step[0] * (ci + sf_unif(&rng));
                    double y = v->og_lo[1] + v->og_step[1] * (cj + sf_unif(&rng));
                    double z = v->og_lo[2] + v->og_step[2] * (k + sf_unif(&rng));
                    brm_vec3 p = grid_point(v, x, y, z);
                    if (!brm_aabb_contains(s->fog_bounds, p)) continue;
                    double tau;
                    if (!brm_od_lookup(s, v, p, &tau)) continue; /* another entry face: marches */
                    double ref = brm_shadow_transmittance_march(ss, l, p);
                    double err = fabs(exp(-tau) - ref) / ref;
                    /* The same point without the correction (its intervals are no longer
                     * flagged, so the lookup interpolates the base grid alone). */
                    int32_t keep = v->corr[cell];
                    v->corr[cell] = -1;
                    double raw;
                    int ok = brm_od_lookup(s, v, p, &raw);
                    v->corr[cell] = keep;
                    assert_true(ok);
                    double exact = -log(ref);
                    sum_fix += fabs(tau - exact);
                    sum_raw += fabs(raw - exact);
                    raw_misses += fabs(raw - exact) > BRM_OD_CHECK_TAU;
                    worst = fmax(worst, err);
                    worst_tau = fmax(worst_tau, fabs(tau - exact));
                    tested++;
                }
            }
        }
        printf("light %u: %u corrections, %d points in corrected intervals, worst relative error %.2e "
               "(optical depth %.2e), mean |error| %.2e corrected vs %.2e uncorrected, %d uncorrected misses\n",
               l, v->corr_count, tested, worst, worst_tau, tested ? sum_fix / tested : 0.0,
               tested ? sum_raw / tested : 0.0, raw_misses);
        assert_true(tested > 300);
        /* As for the whole grid (the brief's bound): within 1 % of the exact march. */
        assert_true(worst < 0.01);
        /* The correction does something: it beats plain interpolation where it applies, and
         * plain interpolation really missed the tolerance at some of these points. */
        assert_true(sum_fix < 0.75 * sum_raw);
        assert_true(raw_misses > 0);
    }
    /* The same corrections and flags whatever the thread count. */
    brm_shadow_set *one = sf_build(s, target, 0.25, false, NULL, 1);
    for (uint32_t l = 0; l < s->light_count; l++) {
        const shadow_view *va = &ss->lights[l].views[0], *vb = &one->lights[l].views[0];
        assert_true(va->corr_count > 0);
        assert_int_equal(va->corr_count, vb->corr_count);
        assert_memory_equal(va->corr_cell, vb->corr_cell, va->corr_count * sizeof(uint32_t));
        assert_memory_equal(va->corr_dg, vb->corr_dg, (size_t)va->corr_count * va->og_n[2] * BRM_OD_CORR_PTS * sizeof(float));
        assert_memory_equal(va->corr_on, vb->corr_on, (size_t)va->corr_count * (va->og_n[2] - 1));
        assert_memory_equal(va->od_bad, vb->od_bad, (size_t)(va->og_n[0] - 1) * (va->og_n[1] - 1) * (va->og_n[2] - 1));
    }
    brm_shadows_free(one);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

/* The interval of view v's grid that a lookup at p reads: its od_bad (or blk_bad) flag. */
static uint8_t lookup_flag(const shadow_view *v, brm_vec3 p)
{
    double c[3];
    if (v->kind == BRM_VIEW_ORTHO) {
        c[0] = brm_dot(p, v->u), c[1] = brm_dot(p, v->v), c[2] = brm_dot(p, v->f);
    } else {
        brm_vec3 d = brm_sub(p, v->origin);
        double zf = brm_dot(d, v->f);
        c[0] = brm_dot(d, v->u) / zf, c[1] = brm_dot(d, v->v) / zf, c[2] = brm_len(d);
    }
    uint32_t ix[3];
    double w[3];
    for (int a = 0; a < 3; a++) {
        double f = (c[a] - v->og_lo[a]) / v->og_step[a], lim = v->og_n[a] - 1.0;
        assert_true(f >= 0.0 && f <= lim); /* the grid covers the target */
        double fl = fmin(floor(f), lim - 1.0);
        ix[a] = (uint32_t)fl, w[a] = f - fl;
    }
    uint32_t nk = v->og_n[2], R = BRM_OD_REFINE;
    size_t cell = ix[0] + (size_t)(v->og_n[0] - 1) * ix[1];
    int32_t b = v->refine[cell];
    if (b < 0) return v->od_bad[cell * (nk - 1) + ix[2]];
    uint32_t si = (uint32_t)fmin(floor(w[0] * R), R - 1.0), sj = (uint32_t)fmin(floor(w[1] * R), R - 1.0);
    return v->blk_bad[((size_t)b * R * R + si + R * sj) * (nk - 1) + ix[2]];
}

/* The grids fill each column only as deep as the paths around it stay in the fog bounds:
 * every point of the fog, right up to its faces and corners, must still find filled nodes,
 * and the lookups must agree with the march. */
static void grid_columns_should_reach_every_point_of_the_fog(void **state)
{
    (void)state;
    brm_aabb fog = {{0, 0, 0}, {12, 5, 8}};
    brm_scene *s = sf_scene(fog);
    sf_medium(s, BRM_MEDIUM_UNIFORM, 0.02);
    brm_medium *h = sf_medium(s, BRM_MEDIUM_HEIGHT, 0.1);
    h->base_y = 0.0;
    h->scale_height_m = 1.5;
    sf_sun(s, brm_v3(0.5, -1.0, 0.3));
    brm_light *pt = sf_point(s, brm_v3(3, 3.5, 4));
    pt->range_m = 20.0;
    sf_spot(s, brm_v3(9, 4.5, 2), brm_v3(-0.3, -1, 0.4), 30, 45);
    sf_ready(s);
    brm_shadow_set *ss = sf_build(s, fog, 0.25, false, NULL, 1);
    uint64_t rng = 5;
    for (uint32_t l = 0; l < s->light_count; l++) {
        const light_shadow *ls = &ss->lights[l];
        size_t cut = 0, cols = 0;
        for (uint32_t k = 0; k < ls->view_count; k++) {
            const shadow_view *v = &ls->views[k];
            for (size_t c = 0; c < (size_t)v->og_n[0] * v->og_n[1]; c++) cut += v->od_last[c] + 1u < v->og_n[2];
            cols += (size_t)v->og_n[0] * v->og_n[1];
        }
        int tested = 0, unfilled = 0;
        double worst = 0.0;
        for (int n = 0; n < 3000; n++) {
            brm_vec3 p = sf_in_box(&rng, fog);
            double *pa[3] = {&p.x, &p.y, &p.z};
            for (int a = 0; a < 3; a++) { /* on a face, an edge or a corner, mostly */
                double r = sf_unif(&rng), lo = brm_vget(fog.min, a), hi = brm_vget(fog.max, a);
                if (r < 1.0 / 3.0) *pa[a] = lo + 1e-6;
                else if (r < 2.0 / 3.0) *pa[a] = hi - 1e-6;
            }
            const brm_light *L = &s->lights[l];
            if (L->type == BRM_LIGHT_SPOT && brm_dot(brm_norm(brm_sub(p, L->position)), L->direction) < L->cos_outer)
                continue;
            unfilled += lookup_flag(brm_shadow_pick_view(ls, p), p) == BRM_OD_UNFILLED;
            double fast = brm_shadow_transmittance(ss, l, p), ref = brm_shadow_transmittance_march(ss, l, p);
            worst = fmax(worst, fabs(fast - ref) / ref);
            tested++;
        }
        printf("light %u: %.0f %% of columns cut short; %d points, %d in unfilled intervals, worst relative error "
               "%.2e\n", l, 100.0 * (double)cut / (double)cols, tested, unfilled, worst);
        assert_true(tested > 300);
        assert_true(cut > cols / 10); /* the check means something: columns were cut */
        assert_int_equal(unfilled, 0);
        assert_true(worst < 0.01); /* the brief: within 1 % of the reference */
    }
    brm_shadows_free(ss);
    brm_scene_free(s);
}

static void transmittance_without_media_should_be_one(void **state)
{
    (void)state;
    brm_scene *s = sf_scene((brm_aabb){{-10, -10, -10}, {10, 10, 10}});
    sf_sun(s, brm_v3(0, -1, 0));
    sf_point(s, brm_v3(0, 2, 0));
    brm_medium *b = sf_medium(s, BRM_MEDIUM_BOX, 0.5); /* fog only far from the target */
    b->box = (brm_aabb){{-10, -10, -10}, {-9, -9, -9}};
    sf_ready(s);
    brm_shadow_set *ss = sf_build(s, (brm_aabb){{0, 0, 0}, {4, 4, 4}}, 0.5, false, NULL, 1);
    assert_near(brm_shadow_transmittance(ss, 0, brm_v3(1, 1, 1)), 1.0, 0.0, 0.0);
    assert_near(brm_shadow_transmittance(ss, 1, brm_v3(1, 1, 1)), 1.0, 0.0, 0.0);
    /* A path that does cross the box: toward a light beyond it. */
    brm_shadows_free(ss);
    sf_point(s, brm_v3(-9.5, -9.5, -9.5));
    ss = sf_build(s, (brm_aabb){{0, 0, 0}, {4, 4, 4}}, 0.5, false, NULL, 1);
    /* Source: Beer–Lambert, the diagonal of the unit box: exp(−0.5·√3) from a point on it. */
    assert_near(brm_shadow_transmittance(ss, 2, brm_v3(0, 0, 0)), exp(-0.5 * 0.5 * sqrt(3.0)), 0.0, 1e-9);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

/* The lookups' exp(−tau) (shadow_internal.h): 2^(j/32) from a table times a degree-4 Taylor
 * polynomial on |r| ≤ ln2/64, whose Lagrange remainder is under (ln2/64)^5/5! = 1.3e-12
 * (Source: Taylor's theorem, Lagrange form), so within 1e-11 of libm's exp over the range
 * transmittance takes, exactly 1 at tau = 0, 0 from 700 on. */
static void transmittance_exp_should_match_libm(void **state)
{
    (void)state;
    double worst = 0.0;
    for (int i = 0; i <= 400000; i++) {
        double tau = i < 200000 ? 20.0 * i / 200000.0 : 20.0 + 679.9 * (i - 200000) / 200000.0;
        double want = exp(-tau);
        worst = fmax(worst, fabs(brm_exp_neg(tau) - want) / want);
    }
    print_message("transmittance exp: worst relative error %.3g on [0, 700)\n", worst);
    assert_true(worst < 1e-11);
    assert_true(brm_exp_neg(0.0) == 1.0);
    assert_true(brm_exp_neg(700.0) == 0.0 && brm_exp_neg(HUGE_VAL) == 0.0);
    assert_near(brm_exp_neg(log(2.0)), 0.5, 0.0, 1e-12);
}

/* A box of fog with hard faces (no fade: sigma_t jumps by 0.3 /m there) in noisy uniform fog:
 * the grid columns cross the faces, whose pieces are integrated between the faces with their
 * end samples a thousandth of the piece inside it (optical_depth.c), so no float position
 * falls across a jump. Fast path within 1 % of the reference march (Beer–Lambert along each
 * path), at random points and at points a hair either side of the faces. */
static void hard_box_faces_should_stay_within_one_percent_of_the_march(void **state)
{
    (void)state;
    brm_aabb fog = {{-10, -2, -10}, {10, 10, 10}};
    brm_scene *s = sf_scene(fog);
    sf_medium(s, BRM_MEDIUM_UNIFORM, 0.02);
    brm_medium *b = sf_medium(s, BRM_MEDIUM_BOX, 0.3);
    b->box = (brm_aabb){{-3, 0, -2}, {2, 4, 3}};
    brm_medium *nz = sf_medium(s, BRM_MEDIUM_NOISE, 0.0);
    nz->scale_m = 4.0;
    nz->octaves = 3;
    nz->seed = 5;
    nz->strength = 0.3;
    sf_sun(s, brm_v3(0.35, -1.0, 0.25));
    brm_light *pt = sf_point(s, brm_v3(4, 3, -4));
    pt->range_m = 20.0;
    sf_ready(s);
    brm_aabb target = {{-5, 0, -5}, {5, 5, 5}};
    brm_shadow_set *ss = sf_build(s, target, 0.25, false, NULL, 2);
    uint64_t rng = 7;
    for (uint32_t l = 0; l < s->light_count; l++) {
        double worst = 0.0, tmin = 1.0;
        int tested = 0;
        for (int n = 0; n < 1600; n++) {
            brm_vec3 p = sf_in_box(&rng, target);
            if (n >= 800) { /* on a face of the box, a hair inside or outside */
                int a = n % 3;
                double side = (n / 3) % 2 ? brm_vget(b->box.max, a) : brm_vget(b->box.min, a);
                side += (n / 6) % 2 ? 1e-6 : -1e-6;
                p = a == 0 ? brm_v3(side, p.y, p.z) : a == 1 ? brm_v3(p.x, side, p.z) : brm_v3(p.x, p.y, side);
            }
            double fast = brm_shadow_transmittance(ss, l, p), ref = brm_shadow_transmittance_march(ss, l, p);
            worst = fmax(worst, fabs(fast - ref) / ref);
            tmin = fmin(tmin, ref);
            tested++;
        }
        printf("hard box, light %u: %d points, T down to %.3g, worst relative error %.2e\n", l, tested, tmin, worst);
        assert_true(tmin < 0.5); /* paths through the box: the jump matters */
        assert_true(worst < 0.01); /* the brief: within 1 % of the reference */
    }
    brm_shadows_free(ss);
    brm_scene_free(s);
}

/* The batch lookup (prefetched a batch ahead) gives brm_shadow_transmittance's values bit for
 * bit: sun, spot, point lights inside and outside the fog, a hard box (whose lookups all take
 * the general path), points inside and outside the fog and the target. */
static void transmittance_batch_should_equal_single_lookups(void **state)
{
    (void)state;
    brm_aabb fog = {{-20, -2, -20}, {20, 15, 20}};
    brm_scene *s = mixed_scene(fog);
    brm_light *pt = sf_point(s, brm_v3(-3, 4, 2));
    pt->range_m = 30.0;
    brm_light *out_pt = sf_point(s, brm_v3(0, 25, 0)); /* above the fog */
    out_pt->range_m = 40.0;
    sf_ready(s);
    brm_aabb target = {{-6, 0, -6}, {6, 6, 6}};
    brm_shadow_set *ss = sf_build(s, target, 0.25, false, NULL, 2);
    enum { N = 3000 };
    static brm_vec3 p[N];
    static double one[N], many[N];
    static uint8_t slow[N];
    uint64_t rng = 17;
    brm_aabb wide = {{-8, -3, -8}, {8, 8, 8}};
    for (int i = 0; i < N; i++) p[i] = sf_in_box(&rng, i % 5 ? target : wide);
    /* and in clusters of eight within 0.4 m, as the kernel's tiles ask (neighbours mostly
     * share a cube face; some clusters straddle two), around points spread as above */
    enum { NC = 2400 };
    static brm_vec3 pc[NC];
    static double onec[NC], manyc[NC];
    static uint8_t slowc[NC];
    for (int i = 0; i < NC; i += 8) {
        brm_vec3 c = sf_in_box(&rng, target);
        brm_aabb near = {brm_sub(c, brm_v3(0.2, 0.2, 0.2)), brm_add(c, brm_v3(0.2, 0.2, 0.2))};
        for (int k = 0; k < 8; k++) pc[i + k] = sf_in_box(&rng, near);
    }
    for (uint32_t l = 0; l < s->light_count; l++) {
        for (int i = 0; i < N; i++) one[i] = brm_shadow_transmittance(ss, l, p[i]);
        brm_shadow_transmittance_batch(ss, l, p, N, many);
        assert_memory_equal(one, many, sizeof one);
        /* the base and the AVX2 code alike (where the processor has it), spread and clustered
         * points: the same points from the grid, each with the single lookup's bits */
        for (int i = 0; i < NC; i++) onec[i] = brm_shadow_transmittance(ss, l, pc[i]);
        brm_shadow_transmittance_batch(ss, l, pc, NC, manyc);
        assert_memory_equal(onec, manyc, sizeof onec);
        static uint8_t slow0[N], slowc0[NC];
        for (int simd = 0; simd < 2; simd++) {
            brm_od_transmittance_batch_isa(s, &ss->lights[l], p, N, many, slow, simd);
            brm_od_transmittance_batch_isa(s, &ss->lights[l], pc, NC, manyc, slowc, simd);
            for (int i = 0; i < N; i++)
                if (!slow[i]) assert_memory_equal(&many[i], &one[i], sizeof many[i]);
            int fastc = 0;
            for (int i = 0; i < NC; i++) {
                if (slowc[i]) continue;
                assert_memory_equal(&manyc[i], &onec[i], sizeof manyc[i]);
                fastc++;
            }
            if (simd) {
                assert_memory_equal(slow, slow0, sizeof slow);
                assert_memory_equal(slowc, slowc0, sizeof slowc);
            } else {
                memcpy(slow0, slow, sizeof slow);
                memcpy(slowc0, slowc, sizeof slowc);
            }
            if (l < 3) assert_true(fastc > NC / 2);
            else assert_int_equal(fastc, 0);
        }
        brm_od_transmittance_batch(s, &ss->lights[l], p, N, many, slow);
        int fast = 0;
        for (int i = 0; i < N; i++) fast += !slow[i];
        printf("batch, light %u: %d of %d points from clean cells\n", l, fast, N);
        if (l < 3) assert_true(fast > N / 2); /* the batch path is the common one */
        else assert_int_equal(fast, 0);        /* a light outside the fog: the general path */
    }
    brm_shadows_free(ss);
    brm_scene_free(s);
    /* hard box faces: every lookup takes the general path, the values the same */
    s = sf_scene(fog);
    brm_medium *hb = sf_medium(s, BRM_MEDIUM_BOX, 0.3);
    hb->box = (brm_aabb){{-3, 0, -2}, {2, 4, 3}};
    sf_sun(s, brm_v3(0.35, -1.0, 0.25));
    sf_ready(s);
    ss = sf_build(s, target, 0.25, false, NULL, 1);
    for (int i = 0; i < N; i++) one[i] = brm_shadow_transmittance(ss, 0, p[i]);
    brm_shadow_transmittance_batch(ss, 0, p, N, many);
    assert_memory_equal(one, many, sizeof one);
    brm_shadows_free(ss);
    brm_scene_free(s);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(transmittance_exp_should_match_libm),
        cmocka_unit_test(transmittance_batch_should_equal_single_lookups),
        cmocka_unit_test(uniform_fog_should_follow_beer_lambert_to_the_fog_exit),
        cmocka_unit_test(height_fog_should_match_reference_table_rows),
        cmocka_unit_test(height_fog_should_match_closed_form_for_many_elevations),
        cmocka_unit_test(fast_path_should_match_reference_march_within_one_percent),
        cmocka_unit_test(hard_box_faces_should_stay_within_one_percent_of_the_march),
        cmocka_unit_test(corrected_cells_should_match_the_exact_march),
        cmocka_unit_test(grid_columns_should_reach_every_point_of_the_fog),
        cmocka_unit_test(transmittance_without_media_should_be_one),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
