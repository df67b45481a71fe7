/* Grids: where each cell of a target is. One struct for the three target kinds.
 *
 * Continuous index coordinates (fi, fj, fk): cell (i, j, k) covers [i, i+1) × [j, j+1) ×
 * [k, k+1). World: axis-aligned box min + f·size/cells. Frustum: fi, fj across the image
 * (i right, j up), fk across depth slices slice_depths[k]..[k+1]. Probes: fi, fj, fk are
 * lattice indices; probe (i,j,k) sits at min + (i,j,k)·spacing (not a cell centre). */
#ifndef BRM_GRID_H
#define BRM_GRID_H

#include <stddef.h>
#include <stdint.h>

#include "scene/scene.h"

#define BRM_BRICK 16    /* cells per brick side */

typedef struct brm_grid {
    brm_grid_kind kind;
    uint32_t n[3];              /* cells (probes) per axis */
    uint32_t bricks[3];         /* bricks per axis: ceil(n / BRM_BRICK) */

    /* world and probes */
    brm_aabb box;               /* world: the target box; probes: first..last probe position */
    brm_vec3 cell;              /* world: cell size; probes: spacing on every axis */

    /* frustum */
    brm_camera cam;
    brm_vec3 right, up, fwd;    /* orthonormal camera basis, fwd toward look_at */
    double tan_half_x, tan_half_y;
    double *slice_depths;       /* n[2] + 1 view-space depths, near to far, owned */
    double depth_blend;         /* frustum: 0 (default) exponential slices, 1 linear; see
                                   brm_grid_set_depth_blend */
} brm_grid;

brm_status brm_grid_init(brm_grid *g, const brm_target *t, brm_diag *d);
void brm_grid_free(brm_grid *g);

static inline size_t brm_grid_cells(const brm_grid *g) { return (size_t)g->n[0] * g->n[1] * g->n[2]; }
static inline size_t brm_grid_index(const brm_grid *g, uint32_t i, uint32_t j, uint32_t k)
{
    return (size_t)i + (size_t)g->n[0] * ((size_t)j + (size_t)g->n[1] * k);
}
static inline uint32_t brm_grid_brick_count(const brm_grid *g)
{
    return g->bricks[0] * g->bricks[1] * g->bricks[2];
}

/* World position of continuous index coordinates. */
brm_vec3 brm_grid_point(const brm_grid *g, double fi, double fj, double fk);

/* Inverse of brm_grid_point; returns 0 when p falls outside the grid (coordinates still set). */
int brm_grid_locate(const brm_grid *g, brm_vec3 p, double *fi, double *fj, double *fk);

/* World-space bounds of cell (i, j, k) (frustum: of the froxel's 8 corners). */
brm_aabb brm_grid_cell_bounds(const brm_grid *g, uint32_t i, uint32_t j, uint32_t k);

/* World-space bounds of the whole grid (frustum: the view pyramid from the camera to far). */
brm_aabb brm_grid_bounds(const brm_grid *g);

/* Brick b's cell range [lo, hi) per axis; bricks are numbered x fastest, then y, then z. */
void brm_grid_brick_range(const brm_grid *g, uint32_t b, uint32_t lo[3], uint32_t hi[3]);

/* Frustum: redistributes the depth slices. View-space depth of slice boundary k (0..nz):
 *   d_k = (1 − b)·near·(far/near)^(k/nz) + b·(near + (far − near)·k/nz),  b = blend in [0, 1].
 * b = 0 (the default after brm_grid_init) is the exponential distribution, equal ratios
 * d_{k+1}/d_k, so slices stay in proportion to their distance; b = 1 is linear. Within a slice
 * brm_grid_point and brm_grid_locate are linear in depth. No effect on other kinds. */
void brm_grid_set_depth_blend(brm_grid *g, double blend);

#endif
