/* Warnings for legal but suspicious scenes: what `brume check` prints and `brume bake` reports.
 *
 * None of these stop a bake; each names the place (the light's or target's JSON path) and
 * what would fix it. The rules, with their thresholds:
 *  - a light that reaches none of the scene's targets (range and cone culling against what each
 *    target needs lit: its box, its view pyramid, or for probes everything their rays can see);
 *  - a world or frustum target with no fog anywhere inside it (no medium can be non-zero there);
 *  - a shadow-map texel larger than the target's cells (the planned map of a shadowing light
 *    that reaches the target, compared with the smallest cell edge; for frustum targets with
 *    the froxel width at the far plane): shadow edges finer than a texel are lost;
 *  - a target mostly inside solid geometry: more than half of a lattice of up to 16 points
 *    per axis spread over the target's cells (or probes) lies inside solids;
 *  - samples too few for the cell size against the shaft widths: fewer than
 *    BRM_WARN_MIN_SAMPLES samples per cell where the cells are larger than 1 m
 *    (BRM_WARN_COARSE_CELL_M) or span more than BRM_WARN_TEXELS_PER_SHAFT texels of a
 *    shadowing light that reaches them (the map can then cut shafts narrower than a cell), so
 *    such shafts are caught by too few jittered points and alias from cell to cell. Common
 *    practice, no source. (Automatic map resolution makes a texel about the smallest cell
 *    edge, so the texel part fires for elongated cells or maps finer than asked.) */
#ifndef BRM_WARNINGS_H
#define BRM_WARNINGS_H

#include "bake/bake.h"

#define BRM_WARN_MIN_SAMPLES 4u
#define BRM_WARN_COARSE_CELL_M 1.0
#define BRM_WARN_TEXELS_PER_SHAFT 2.0
#define BRM_WARN_SOLID_FRACTION 0.5
#define BRM_WARN_SOLID_LATTICE 16u

/* What target t needs lit, as the bake driver computes it for the shadow maps: the grid's
 * bounds (world: its box; frustum: the view pyramid), and for probes also the fog bounds and
 * every object's bounds (bounce light is gathered on any surface, fog anywhere). Returns an
 * empty box when the target's grid is invalid. */
brm_aabb brm_target_lit_bounds(const brm_scene *s, uint32_t t);

/* Whether light l can reach anything target t depends on. */
bool brm_light_reaches_target(const brm_scene *s, uint32_t l, uint32_t t);

/* Scene-wide warnings (lights that reach no target) appended to d. */
void brm_scene_warnings(const brm_scene *s, brm_diag *d);

/* Warnings for target t (no fog, coarse shadow maps, mostly solid, too few samples) appended
 * to d. Cost: planning the shadow maps (no rasterizing) and a few thousand point-in-solid
 * queries. o gives the thread count and the reference flag the bake will use. */
void brm_target_warnings(const brm_scene *s, uint32_t t, const brm_bake_opts *o, brm_diag *d);

#endif
