/* Grids: index ⇄ world position for world boxes, camera frusta and probe lattices. */
#include "voxel/grid.h"

#include <stdlib.h>
#include <string.h>

/* Cells per target are capped so every index fits comfortably in 32-bit loops and the
 * per-cell arrays of later stages stay addressable: 2^31 cells. */
#define CELL_LIMIT ((uint64_t)1 << 31)

static void set_bricks(brm_grid *g)
{
    for (int a = 0; a < 3; a++) g->bricks[a] = (g->n[a] + BRM_BRICK - 1) / BRM_BRICK;
}

static brm_status check_cells(const brm_target *t, const uint32_t n[3], brm_diag *d)
{
    for (int a = 0; a < 3; a++)
        BRM_CHECK(d, n[a] >= 1, BRM_E_INPUT, "%s.cells[%d]: %u cells; expected a whole number >= 1",
                  t->json_path, a, n[a]);
    uint64_t total = (uint64_t)n[0] * n[1] * n[2];
    BRM_CHECK(d, total <= CELL_LIMIT, BRM_E_INPUT,
              "%s: %u x %u x %u = %llu cells; expected at most %llu (use fewer cells)", t->json_path, n[0],
              n[1], n[2], (unsigned long long)total, (unsigned long long)CELL_LIMIT);
    return BRM_OK;
}

void brm_grid_set_depth_blend(brm_grid *g, double blend)
{
    if (g->kind != BRM_GRID_FRUSTUM || !g->slice_depths) return;
    double b = brm_clamp(blend, 0.0, 1.0);
    g->depth_blend = b;
    double nr = g->cam.near, fr = g->cam.far;
    uint32_t nz = g->n[2];
    for (uint32_t k = 0; k <= nz; k++) {
        double f = (double)k / nz;
        double ex = nr * pow(fr / nr, f);
        double li = nr + (fr - nr) * f;
        g->slice_depths[k] = (1.0 - b) * ex + b * li;
    }
    /* The ends are exact whatever pow's rounding. */
    g->slice_depths[0] = nr;
    g->slice_depths[nz] = fr;
}

static brm_status init_frustum(brm_grid *g, const brm_target *t, brm_diag *d)
{
    const brm_camera *c = &t->camera;
    const char *jp = t->json_path;
    BRM_CHECK(d, c->near > 0 && isfinite(c->near), BRM_E_INPUT,
              "%s.camera.near: %g; expected a distance > 0 in metres", jp, c->near);
    BRM_CHECK(d, c->far > c->near && isfinite(c->far), BRM_E_INPUT,
              "%s.camera.far: %g; expected a distance greater than near (%g)", jp, c->far, c->near);
    BRM_CHECK(d, c->fov_y_deg > 0 && c->fov_y_deg < 180, BRM_E_INPUT,
              "%s.camera.fov_y_deg: %g; expected an angle between 0 and 180 degrees", jp, c->fov_y_deg);
    BRM_CHECK(d, c->aspect > 0 && isfinite(c->aspect), BRM_E_INPUT,
              "%s.camera.aspect: %g; expected width/height > 0", jp, c->aspect);
    brm_vec3 f = brm_sub(c->look_at, c->position);
    BRM_CHECK(d, brm_len(f) > 0, BRM_E_INPUT,
              "%s.camera.look_at: equals the position; expected a point the camera looks toward", jp);
    g->fwd = brm_norm(f);
    brm_vec3 r = brm_cross(g->fwd, c->up);
    BRM_CHECK(d, brm_len(r) > 1e-9 * brm_len(c->up) && brm_len(c->up) > 0, BRM_E_INPUT,
              "%s.camera.up: parallel to the view direction (or zero); expected a direction not along "
              "look_at - position",
              jp);
    g->right = brm_norm(r);
    g->up = brm_cross(g->right, g->fwd);
    g->cam = *c;
    g->tan_half_y = tan(c->fov_y_deg * BRM_PI / 360.0);
    g->tan_half_x = c->aspect * g->tan_half_y;
    g->slice_depths = malloc(sizeof(double) * ((size_t)g->n[2] + 1));
    if (!g->slice_depths)
        return brm_diag_error(d, BRM_E_NOMEM, "%s: cannot allocate %u depth slices", jp, g->n[2]);
    g->depth_blend = 0.0;
    brm_grid_set_depth_blend(g, 0.0);
    /* Box: the bounds of the view pyramid. */
    g->box = brm_grid_bounds(g);
    return BRM_OK;
}

brm_status brm_grid_init(brm_grid *g, const brm_target *t, brm_diag *d)
{
    brm_grid tmp;
    memset(&tmp, 0, sizeof tmp);
    tmp.kind = t->grid;
    const char *jp = t->json_path;
    brm_status st;
    switch (t->grid) {
    case BRM_GRID_WORLD: {
        if ((st = check_cells(t, t->cells, d)) != BRM_OK) return st;
        brm_vec3 size = brm_sub(t->box.max, t->box.min);
        BRM_CHECK(d, size.x > 0 && size.y > 0 && size.z > 0 && isfinite(size.x + size.y + size.z), BRM_E_INPUT,
                  "%s: min (%g, %g, %g) is not below max (%g, %g, %g) on every axis; expected min < max",
                  jp, t->box.min.x, t->box.min.y, t->box.min.z, t->box.max.x, t->box.max.y, t->box.max.z);
        memcpy(tmp.n, t->cells, sizeof tmp.n);
        tmp.box = t->box;
        tmp.cell = brm_v3(size.x / tmp.n[0], size.y / tmp.n[1], size.z / tmp.n[2]);
        break;
    }
    case BRM_GRID_PROBES: {
        double sp = t->spacing_m;
        BRM_CHECK(d, sp > 0 && isfinite(sp), BRM_E_INPUT, "%s.spacing_m: %g; expected a distance > 0 in metres",
                  jp, sp);
        brm_vec3 size = brm_sub(t->box.max, t->box.min);
        BRM_CHECK(d, size.x >= 0 && size.y >= 0 && size.z >= 0 && isfinite(size.x + size.y + size.z),
                  BRM_E_INPUT, "%s: min (%g, %g, %g) is above max (%g, %g, %g); expected min <= max", jp,
                  t->box.min.x, t->box.min.y, t->box.min.z, t->box.max.x, t->box.max.y, t->box.max.z);
        uint32_t n[3];
        for (int a = 0; a < 3; a++) {
            /* SPEC.md: n = floor((max − min)/spacing + 1e-6) + 1, bounds inclusive. */
            double c = floor(brm_vget(size, a) / sp + 1e-6) + 1.0;
            BRM_CHECK(d, c <= (double)CELL_LIMIT, BRM_E_INPUT,
                      "%s.spacing_m: %g gives %.0f probes along axis %d; expected a larger spacing", jp, sp, c,
                      a);
            n[a] = (uint32_t)c;
        }
        if ((st = check_cells(t, n, d)) != BRM_OK) return st;
        memcpy(tmp.n, n, sizeof n);
        tmp.cell = brm_v3(sp, sp, sp);
        tmp.box.min = t->box.min;
        tmp.box.max = brm_add(t->box.min, brm_v3((n[0] - 1) * sp, (n[1] - 1) * sp, (n[2] - 1) * sp));
        break;
    }
    case BRM_GRID_FRUSTUM:
        if ((st = check_cells(t, t->cells, d)) != BRM_OK) return st;
        memcpy(tmp.n, t->cells, sizeof tmp.n);
        if ((st = init_frustum(&tmp, t, d)) != BRM_OK) {
            free(tmp.slice_depths);
            return st;
        }
        break;
    default:
        return brm_diag_error(d, BRM_E_INPUT, "%s.grid: unknown kind %d; expected world, frustum or probes", jp,
                              (int)t->grid);
    }
    set_bricks(&tmp);
    *g = tmp;
    return BRM_OK;
}

void brm_grid_free(brm_grid *g)
{
    if (!g) return;
    free(g->slice_depths);
    g->slice_depths = NULL;
}

/* View depth inside slice floor(fk), linear within the slice; extrapolates past the ends. */
static double frustum_depth(const brm_grid *g, double fk)
{
    uint32_t nz = g->n[2];
    double kf = floor(fk);
    uint32_t k = kf < 0 ? 0 : kf >= nz ? nz - 1 : (uint32_t)kf;
    double d0 = g->slice_depths[k], d1 = g->slice_depths[k + 1];
    return d0 + (fk - k) * (d1 - d0);
}

brm_vec3 brm_grid_point(const brm_grid *g, double fi, double fj, double fk)
{
    switch (g->kind) {
    case BRM_GRID_FRUSTUM: {
        double x = 2.0 * fi / g->n[0] - 1.0, y = 2.0 * fj / g->n[1] - 1.0;
        double depth = frustum_depth(g, fk);
        brm_vec3 ray = brm_add(g->fwd, brm_add(brm_scale(g->right, x * g->tan_half_x),
                                               brm_scale(g->up, y * g->tan_half_y)));
        return brm_madd(g->cam.position, ray, depth);
    }
    default:
        return brm_v3(g->box.min.x + fi * g->cell.x, g->box.min.y + fj * g->cell.y, g->box.min.z + fk * g->cell.z);
    }
}

int brm_grid_locate(const brm_grid *g, brm_vec3 p, double *fi, double *fj, double *fk)
{
    if (g->kind == BRM_GRID_FRUSTUM) {
        brm_vec3 v = brm_sub(p, g->cam.position);
        double z = brm_dot(v, g->fwd);
        if (!(z > 0)) {
            *fi = *fj = 0;
            *fk = -HUGE_VAL;
            return 0;
        }
        double x = brm_dot(v, g->right) / (z * g->tan_half_x);
        double y = brm_dot(v, g->up) / (z * g->tan_half_y);
        *fi = (x + 1.0) * 0.5 * g->n[0];
        *fj = (y + 1.0) * 0.5 * g->n[1];
        /* Slice by binary search over the increasing boundaries. */
        uint32_t lo = 0, hi = g->n[2];
        while (hi - lo > 1) {
            uint32_t mid = lo + (hi - lo) / 2;
            if (g->slice_depths[mid] <= z) lo = mid;
            else hi = mid;
        }
        double d0 = g->slice_depths[lo], d1 = g->slice_depths[lo + 1];
        *fk = lo + (z - d0) / (d1 - d0);
        return x >= -1 && x <= 1 && y >= -1 && y <= 1 && z >= g->cam.near && z <= g->cam.far;
    }
    *fi = (p.x - g->box.min.x) / g->cell.x;
    *fj = (p.y - g->box.min.y) / g->cell.y;
    *fk = (p.z - g->box.min.z) / g->cell.z;
    double top = g->kind == BRM_GRID_PROBES ? 1.0 : 0.0;   /* probes: indices 0..n−1 */
    return *fi >= 0 && *fj >= 0 && *fk >= 0 && *fi <= g->n[0] - top && *fj <= g->n[1] - top &&
           *fk <= g->n[2] - top;
}

brm_aabb brm_grid_cell_bounds(const brm_grid *g, uint32_t i, uint32_t j, uint32_t k)
{
    brm_aabb b;
    if (g->kind == BRM_GRID_FRUSTUM) {
        b = brm_aabb_empty();
        for (int c = 0; c < 8; c++)
            brm_aabb_grow(&b, brm_grid_point(g, i + (c & 1), j + ((c >> 1) & 1), k + ((c >> 2) & 1)));
    } else if (g->kind == BRM_GRID_PROBES) {
        /* The probe's half-spacing neighbourhood. */
        brm_vec3 p = brm_grid_point(g, i, j, k), h = brm_scale(g->cell, 0.5);
        b.min = brm_sub(p, h);
        b.max = brm_add(p, h);
    } else {
        b.min = brm_grid_point(g, i, j, k);
        /* The last cell ends exactly on the box. */
        b.max = brm_grid_point(g, i + 1, j + 1, k + 1);
        if (i + 1 == g->n[0]) b.max.x = g->box.max.x;
        if (j + 1 == g->n[1]) b.max.y = g->box.max.y;
        if (k + 1 == g->n[2]) b.max.z = g->box.max.z;
    }
    return b;
}

brm_aabb brm_grid_bounds(const brm_grid *g)
{
    if (g->kind != BRM_GRID_FRUSTUM) return g->box;
    brm_aabb b = brm_aabb_empty();
    brm_aabb_grow(&b, g->cam.position);
    for (int c = 0; c < 4; c++) {
        double x = c & 1 ? 1.0 : -1.0, y = c & 2 ? 1.0 : -1.0;
        brm_vec3 ray = brm_add(g->fwd, brm_add(brm_scale(g->right, x * g->tan_half_x),
                                               brm_scale(g->up, y * g->tan_half_y)));
        brm_aabb_grow(&b, brm_madd(g->cam.position, ray, g->cam.far));
    }
    return b;
}

void brm_grid_brick_range(const brm_grid *g, uint32_t b, uint32_t lo[3], uint32_t hi[3])
{
    uint32_t idx[3] = {b % g->bricks[0], (b / g->bricks[0]) % g->bricks[1], b / (g->bricks[0] * g->bricks[1])};
    for (int a = 0; a < 3; a++) {
        lo[a] = idx[a] * BRM_BRICK;
        hi[a] = lo[a] + BRM_BRICK < g->n[a] ? lo[a] + BRM_BRICK : g->n[a];
    }
}
