/* Tests of the grids (src/voxel/grid.c): index ⇄ position for the three kinds. */
#include <string.h>

#include "check.h"
#include "fixture.h"
#include "voxel/grid.h"

static brm_target world_target(void)
{
    brm_target t;
    memset(&t, 0, sizeof t);
    strcpy(t.json_path, "targets[0]");
    t.grid = BRM_GRID_WORLD;
    t.box.min = brm_v3(-3, 0.5, 2);
    t.box.max = brm_v3(9, 4.5, 12);
    t.cells[0] = 24;
    t.cells[1] = 5;
    t.cells[2] = 33;
    return t;
}

static brm_target frustum_target(void)
{
    brm_target t;
    memset(&t, 0, sizeof t);
    strcpy(t.json_path, "targets[1]");
    t.grid = BRM_GRID_FRUSTUM;
    t.camera.position = brm_v3(1, 2, 3);
    t.camera.look_at = brm_v3(4, 1.5, -6);
    t.camera.up = brm_v3(0, 1, 0);
    t.camera.fov_y_deg = 60;
    t.camera.aspect = 16.0 / 9.0;
    t.camera.near = 0.3;
    t.camera.far = 120;
    t.cells[0] = 33;
    t.cells[1] = 19;
    t.cells[2] = 64;
    return t;
}

static void round_trip(const brm_grid *g, double lo_margin, double hi_margin)
{
    uint64_t rng = 4242;
    for (int n = 0; n < 5000; n++) {
        double f[3];
        for (int a = 0; a < 3; a++) f[a] = fx_range(&rng, lo_margin, g->n[a] - hi_margin);
        brm_vec3 p = brm_grid_point(g, f[0], f[1], f[2]);
        double b[3];
        assert_true(brm_grid_locate(g, p, &b[0], &b[1], &b[2]));
        for (int a = 0; a < 3; a++) assert_near(b[a], f[a], 1e-9, 1e-12);
    }
}

static void world_grid_should_round_trip_index_and_position(void **state)
{
    (void)state;
    brm_target t = world_target();
    brm_grid g;
    assert_int_equal(brm_grid_init(&g, &t, NULL), BRM_OK);
    /* SPEC.md: cell (i,j,k) spans min + (i,j,k)·size/cells to the next. */
    assert_near(g.cell.x, 0.5, 1e-15, 0);
    assert_near(g.cell.y, 0.8, 1e-15, 0);
    assert_near(g.cell.z, 10.0 / 33, 1e-15, 0);
    assert_int_equal(g.bricks[0], 2);
    assert_int_equal(g.bricks[1], 1);
    assert_int_equal(g.bricks[2], 3);
    assert_int_equal(brm_grid_brick_count(&g), 6);
    brm_vec3 p = brm_grid_point(&g, 2, 1, 3);
    assert_near(p.x, -2.0, 1e-12, 0);
    assert_near(p.y, 1.3, 1e-12, 0);
    assert_near(p.z, 2 + 30.0 / 33, 1e-12, 0);
    round_trip(&g, 0, 0);
    double fi, fj, fk;
    assert_false(brm_grid_locate(&g, brm_v3(-3.01, 1, 3), &fi, &fj, &fk));
    assert_near(fi, -0.02, 1e-12, 0);
    brm_aabb cb = brm_grid_cell_bounds(&g, 23, 4, 32);
    assert_true(cb.max.x == 9 && cb.max.y == 4.5 && cb.max.z == 12);
    brm_aabb gb = brm_grid_bounds(&g);
    assert_true(gb.min.x == -3 && gb.max.z == 12);
    /* Bricks: x fastest; the last brick on an axis is clipped to the grid. */
    uint32_t lo[3], hi[3];
    brm_grid_brick_range(&g, 5, lo, hi);
    assert_int_equal(lo[0], 16);
    assert_int_equal(hi[0], 24);
    assert_int_equal(lo[1], 0);
    assert_int_equal(hi[1], 5);
    assert_int_equal(lo[2], 32);
    assert_int_equal(hi[2], 33);
    /* Every cell lies in exactly one brick. */
    size_t covered = 0;
    for (uint32_t b = 0; b < brm_grid_brick_count(&g); b++) {
        brm_grid_brick_range(&g, b, lo, hi);
        covered += (size_t)(hi[0] - lo[0]) * (hi[1] - lo[1]) * (hi[2] - lo[2]);
    }
    assert_int_equal(covered, brm_grid_cells(&g));
    brm_grid_free(&g);
}

static void probe_grid_should_count_probes_inclusively(void **state)
{
    (void)state;
    brm_target t;
    memset(&t, 0, sizeof t);
    strcpy(t.json_path, "targets[2]");
    t.grid = BRM_GRID_PROBES;
    t.box.min = brm_v3(0, -1, 5);
    t.box.max = brm_v3(1.0, 2.5, 5);
    t.spacing_m = 0.1;
    brm_grid g;
    assert_int_equal(brm_grid_init(&g, &t, NULL), BRM_OK);
    /* SPEC.md: n = floor((max − min)/spacing + 1e-6) + 1. 1.0/0.1 is 9.999999999999998 in
     * binary64, the 1e-6 keeps the last probe: 11; 3.5/0.1 → 36; a flat axis → 1. */
    assert_int_equal(g.n[0], 11);
    assert_int_equal(g.n[1], 36);
    assert_int_equal(g.n[2], 1);
    assert_near(g.box.max.x, 1.0, 1e-12, 0);
    assert_near(g.box.max.y, 2.5, 1e-12, 0);
    brm_vec3 p = brm_grid_point(&g, 3, 7, 0);
    assert_near(p.x, 0.3, 1e-12, 0);
    assert_near(p.y, -0.3, 1e-12, 0);
    assert_near(p.z, 5.0, 1e-12, 0);
    /* Round trip over lattice coordinates 0..n−1 (z is flat: only 0). */
    uint64_t rng = 5;
    for (int n = 0; n < 2000; n++) {
        double fi = fx_range(&rng, 0, 10), fj = fx_range(&rng, 0, 35);
        brm_vec3 q = brm_grid_point(&g, fi, fj, 0);
        double a, b, c;
        assert_true(brm_grid_locate(&g, q, &a, &b, &c));
        assert_near(a, fi, 1e-9, 0);
        assert_near(b, fj, 1e-9, 0);
        assert_near(c, 0, 1e-12, 0);
    }
    double a, b, c;
    assert_false(brm_grid_locate(&g, brm_v3(1.05, 0, 5), &a, &b, &c));
    brm_grid_free(&g);
}

static void frustum_grid_should_round_trip_and_slice_exponentially(void **state)
{
    (void)state;
    brm_target t = frustum_target();
    brm_grid g;
    assert_int_equal(brm_grid_init(&g, &t, NULL), BRM_OK);
    /* Orthonormal, right-handed basis with fwd toward look_at. */
    assert_near(brm_dot(g.fwd, g.right), 0, 1e-15, 0);
    assert_near(brm_dot(g.fwd, g.up), 0, 1e-15, 0);
    assert_near(brm_dot(g.up, g.right), 0, 1e-15, 0);
    assert_near(brm_dot(brm_cross(g.right, g.up), g.fwd), -1.0, 1e-15, 0);   /* right × up = −fwd */
    brm_vec3 want_fwd = brm_norm(brm_v3(3, -0.5, -9));
    assert_near(brm_dot(g.fwd, want_fwd), 1.0, 1e-15, 0);
    assert_true(g.up.y > 0);
    /* tan(30°) = 1/√3. */
    assert_near(g.tan_half_y, 1.0 / sqrt(3.0), 1e-15, 0);
    assert_near(g.tan_half_x, 16.0 / 9.0 / sqrt(3.0), 1e-15, 0);
    /* Exponential slices: d_0 = near, d_nz = far and a constant ratio (far/near)^(1/nz). */
    assert_true(g.slice_depths[0] == 0.3 && g.slice_depths[64] == 120);
    double ratio = pow(120 / 0.3, 1.0 / 64);
    for (int k = 0; k < 64; k++) assert_rel(g.slice_depths[k + 1] / g.slice_depths[k], ratio, 1e-12);
    /* The centre column of an odd-width image looks straight down fwd; its view depth at the
     * start of slice k is d_k. */
    brm_vec3 c = brm_grid_point(&g, 16.5, 9.5, 10);
    brm_vec3 v = brm_sub(c, t.camera.position);
    assert_near(brm_dot(v, g.fwd), g.slice_depths[10], 1e-12, 0);
    assert_near(brm_len(brm_sub(v, brm_scale(g.fwd, brm_dot(v, g.fwd)))), 0, 1e-12, 0);
    /* The image corner fi = nx, fj = ny is at ndc (1, 1). */
    brm_vec3 e = brm_sub(brm_grid_point(&g, 33, 19, 64), t.camera.position);
    assert_near(brm_dot(e, g.right) / 120, g.tan_half_x, 1e-12, 0);
    assert_near(brm_dot(e, g.up) / 120, g.tan_half_y, 1e-12, 0);
    round_trip(&g, 0, 0);
    double fi, fj, fk;
    assert_false(brm_grid_locate(&g, brm_sub(t.camera.position, g.fwd), &fi, &fj, &fk));
    assert_false(brm_grid_locate(&g, brm_madd(t.camera.position, g.fwd, 0.2), &fi, &fj, &fk));
    assert_false(brm_grid_locate(&g, brm_madd(t.camera.position, g.fwd, 121), &fi, &fj, &fk));
    /* The froxel bounds hold the froxel's centre; the grid bounds hold the far corners. */
    brm_aabb cb = brm_grid_cell_bounds(&g, 3, 4, 50);
    assert_true(brm_aabb_contains(cb, brm_grid_point(&g, 3.5, 4.5, 50.5)));
    brm_aabb gb = brm_grid_bounds(&g);
    assert_true(brm_aabb_contains(gb, brm_madd(t.camera.position, e, 1.0 - 1e-12)));
    assert_true(brm_aabb_contains(gb, t.camera.position));

    /* Blend 1: linear slices; blend ½: the average of the two forms. */
    double d_exp = g.slice_depths[16];
    brm_grid_set_depth_blend(&g, 1.0);
    assert_near(g.slice_depths[16], 0.3 + (120 - 0.3) * 16 / 64.0, 1e-12, 0);
    brm_grid_set_depth_blend(&g, 0.5);
    assert_near(g.slice_depths[16], 0.5 * d_exp + 0.5 * (0.3 + (120 - 0.3) * 0.25), 1e-12, 0);
    round_trip(&g, 0, 0);
    brm_grid_free(&g);
}

static void grid_init_should_name_the_bad_key(void **state)
{
    (void)state;
    brm_diag d;
    brm_grid g;
    memset(&g, 0, sizeof g);
    brm_target t = world_target();
    t.cells[1] = 0;
    brm_diag_init(&d);
    assert_int_equal(brm_grid_init(&g, &t, &d), BRM_E_INPUT);
    assert_non_null(strstr(d.message, "targets[0].cells[1]"));
    t = world_target();
    t.box.max.y = t.box.min.y;
    brm_diag_init(&d);
    assert_int_equal(brm_grid_init(&g, &t, &d), BRM_E_INPUT);
    assert_non_null(strstr(d.message, "min < max"));
    t = world_target();
    t.cells[0] = t.cells[1] = t.cells[2] = 2000;
    brm_diag_init(&d);
    assert_int_equal(brm_grid_init(&g, &t, &d), BRM_E_INPUT);
    assert_non_null(strstr(d.message, "cells"));
    t = frustum_target();
    t.camera.up = brm_v3(3, -0.5, -9);
    brm_diag_init(&d);
    assert_int_equal(brm_grid_init(&g, &t, &d), BRM_E_INPUT);
    assert_non_null(strstr(d.message, "targets[1].camera.up"));
    t = frustum_target();
    t.camera.far = 0.2;
    brm_diag_init(&d);
    assert_int_equal(brm_grid_init(&g, &t, &d), BRM_E_INPUT);
    assert_non_null(strstr(d.message, "targets[1].camera.far"));
    /* Nothing was allocated into g on failure. */
    assert_null(g.slice_depths);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(world_grid_should_round_trip_index_and_position),
        cmocka_unit_test(probe_grid_should_count_probes_inclusively),
        cmocka_unit_test(frustum_grid_should_round_trip_and_slice_exponentially),
        cmocka_unit_test(grid_init_should_name_the_bad_key),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
