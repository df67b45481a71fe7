/* Voxelization of the scene's solid geometry into a grid.
 *
 * Surface cells: every cell a triangle overlaps (separating-axis triangle–box test,
 * Akenine-Möller 2001) and every cell a box or sphere boundary crosses (exact, analytic).
 * Interior: cells not reachable from the grid boundary through empty cells (6-connected flood
 * fill), so closed meshes and primitives fill and open meshes mark only their surface.
 * Occupancy is the fraction of each cell inside solid geometry: 0 or 1 away from surfaces,
 * estimated by sub-cell point classification in surface cells.
 *
 * Interior, precisely: the empty cells fall into 6-connected components bounded by surface
 * cells and the grid boundary. No surface crosses an empty cell, so every point of a component
 * is inside the same solids; one point query (the centre of the component's first cell in
 * index order) decides the whole component. This fills closed meshes and primitives even where
 * the grid boundary cuts them, keeps open meshes to their surface, and leaves air sealed inside
 * solid walls (a closed room) empty rather than solid. */
#ifndef BRM_VOXELIZE_H
#define BRM_VOXELIZE_H

#include "voxel/grid.h"

enum {
    BRM_CELL_EMPTY = 0,
    BRM_CELL_SURFACE = 1,
    BRM_CELL_INTERIOR = 2
};

typedef struct brm_occupancy {
    uint32_t n[3];
    uint8_t *state;     /* BRM_CELL_* per cell, x fastest; owned */
    float *fraction;    /* solid fraction per cell in [0, 1]; owned */
} brm_occupancy;

/* Voxelizes every object of s into grid g (world and frustum grids). threads: worker count. */
brm_status brm_voxelize(const brm_scene *s, const brm_grid *g, int threads, brm_occupancy *out,
                        brm_diag *d);
void brm_occupancy_free(brm_occupancy *o);

/* Bytes brm_voxelize needs for grid g (for the memory estimate). */
size_t brm_voxelize_memory(const brm_grid *g);

/* Separating-axis triangle/box overlap (Akenine-Möller 2001): box centre c, half-size h.
 * Touching counts as overlap. */
int brm_tri_box_overlap(brm_vec3 c, brm_vec3 h, const brm_vec3 v[3]);

/* Whether point p lies inside solid geometry of s (boxes, spheres, closed meshes by ray
 * parity). The exact reference and probe validity use it. */
int brm_point_in_solid(const brm_scene *s, brm_vec3 p);

/* ---- additions (voxel room) ------------------------------------------------------------ */

/* brm_point_in_solid above is the simple path: it loops over every triangle of every closed
 * mesh. For many queries build a solid index once (a ray caster over the closed meshes only,
 * plus the list of boxes and spheres) and query it; the answers are the same. Read-only after
 * the build: any number of threads may query at once. */
typedef struct brm_solid_index brm_solid_index;
brm_status brm_solid_index_build(const brm_scene *s, brm_solid_index **out, brm_diag *d);
void brm_solid_index_free(brm_solid_index *x);
int brm_solid_index_query(const brm_solid_index *x, brm_vec3 p);
/* brm_solid_index_query for n points on a line, in order along it (n ≤ 64): out[a] is
 * whether pt[a] is inside a solid, the same answer as a query per point, with two rays for the
 * meshes instead of one a point (see row_in_closed_mesh). */
void brm_solid_index_query_row(const brm_solid_index *x, const brm_vec3 *pt, int n, int *out);

/* Sub-cell lattice used for the occupancy fraction of surface cells: BRM_OCC_SUB³ points at
 * offsets (s + ½)/BRM_OCC_SUB of the cell on each axis. */
#define BRM_OCC_SUB 4

#endif
