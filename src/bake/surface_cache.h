/* A cache of surface irradiance for bounce hits: values per node of a small grid laid on each
 * of the scene's triangles, interpolated bilinearly between the four nodes around a hit.
 *
 * Each triangle's grid runs along its longest edge (u) and across it (v), nodes at most h apart,
 * so a long thin triangle gets a long thin grid. A node off the triangle is evaluated at the
 * triangle's nearest point (lifted by eps along the winding normal like every node), so a
 * lookup never reads light from beyond the triangle's edges.
 *
 * A node holds BRM_SURFACE_VALUES numbers; the first BRM_SURFACE_TESTED are tested: a cell
 * whose four nodes differ in one of them by more than a tolerance (a shadow's edge crosses it)
 * does not interpolate, and the caller evaluates that hit itself. Nodes are evaluated once,
 * each by a call that depends only on the node (its point, normal and index): the cache is the
 * same whatever the thread count, and whether its nodes are evaluated all at build, in
 * parallel, or (a lazy cache) each when a lookup first reads it. Spheres are not cached. */
#ifndef BRM_SURFACE_CACHE_H
#define BRM_SURFACE_CACHE_H

#include "base/diag.h"
#include "scene/scene.h"

enum { BRM_SURFACE_VALUES = 6, BRM_SURFACE_TESTED = 3, BRM_SURFACE_MAX_EXTRA = 64 };

/* The values at point p with unit normal n into v[0 .. BRM_SURFACE_VALUES + extra): the
 * interpolated ones, then the cache's extra values (kept per node, handed back raw). index is
 * the node's index (for deterministic per-node sampling). Called from several threads at once. */
typedef void (*brm_surface_eval)(const void *ctx, brm_vec3 p, brm_vec3 n, uint32_t index, double *v);

typedef struct brm_surface_cache brm_surface_cache;

/* Nodes the cache of s at spacing h would hold (for the caller's is-it-worth-it test). */
uint64_t brm_surface_cache_nodes(const brm_scene *s, double h);

/* Bytes a cache of `nodes` nodes with `extra` values each over s takes. */
uint64_t brm_surface_cache_memory(const brm_scene *s, uint64_t nodes, uint32_t extra);

/* Builds the cache with nodes at most h apart, lifted eps off their triangle, each holding
 * BRM_SURFACE_VALUES values and `extra` (at most BRM_SURFACE_MAX_EXTRA) more; a cell
 * interpolates when max − min of its four nodes is at most tol in every tested value.
 * BRM_E_INTERRUPTED if brm_interrupted is raised meanwhile. */
brm_status brm_surface_cache_build(const brm_scene *s, double h, double eps, double tol, uint32_t extra, int threads,
                                   brm_surface_eval eval, const void *ctx, brm_surface_cache **out, brm_diag *d);

/* The same cache, its nodes evaluated by the first lookup that reads them instead of at
 * build (eval and ctx must then stay valid, and eval callable from the lookup's threads, until
 * the cache is freed): a bake whose hits reach a fraction of the surfaces evaluates only that
 * fraction. Lookups give exactly what they give on a cache built by brm_surface_cache_build. */
brm_status brm_surface_cache_build_lazy(const brm_scene *s, double h, double eps, double tol, uint32_t extra,
                                        brm_surface_eval eval, const void *ctx, brm_surface_cache **out, brm_diag *d);

/* The values at point q on (or next to) scene triangle tri, bilinear between the four nodes of
 * the cell around q: returns 1, or 0 when that cell's nodes disagree in a tested value (the
 * caller evaluates those at q itself; out holds the interpolation either way). With cell not NULL, it receives the cell's four nodes'
 * extra values and weights either way. */
typedef struct brm_surface_cell {
    const float *extra[4];  /* the extra values of the nodes (0,0), (1,0), (0,1), (1,1) */
    double w[4];            /* their bilinear weights at q */
} brm_surface_cell;
int brm_surface_cache_lookup(const brm_surface_cache *sc, uint32_t tri, brm_vec3 q, double out[BRM_SURFACE_VALUES],
                             brm_surface_cell *cell);

void brm_surface_cache_free(brm_surface_cache *sc);

#endif
