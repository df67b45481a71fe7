/* Bounding-volume hierarchy over the scene's triangles and spheres: the exact ray caster used
 * by the reference bake, sky occlusion and probes. Built once per scene, read-only after, so
 * any number of threads may trace at once. */
#ifndef BRM_BVH_H
#define BRM_BVH_H

#include "scene/scene.h"

typedef struct brm_bvh brm_bvh;

typedef struct brm_hit {
    double t;               /* distance along the (unit) ray */
    uint32_t object;        /* index into brm_scene.objects */
    uint32_t tri;           /* index into brm_scene.tris, UINT32_MAX for a sphere */
    brm_vec3 normal;        /* unit geometric normal facing against the ray */
    bool back_face;         /* the ray hit the triangle's back (winding) or a sphere from inside */
} brm_hit;

brm_status brm_bvh_build(const brm_scene *s, brm_bvh **out, brm_diag *d);
void brm_bvh_free(brm_bvh *b);
size_t brm_bvh_memory(const brm_scene *s);

/* Closest hit of the ray o + t·dir, dir unit, t in (tmin, tmax). Returns 1 on a hit. */
int brm_bvh_intersect(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax, brm_hit *hit);

/* Whether anything blocks the ray within (tmin, tmax) (any hit, faster). */
int brm_bvh_occluded(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax);

/* The same answer, trying first the leaf *hint names (BRM_BVH_NO_HINT, or a leaf an earlier
 * call stored there) and storing the leaf that blocks this ray. Rays alike in origin and
 * direction are mostly blocked by the same few triangles, which this tests before walking the
 * tree. A hint of any value is safe: one that does not name a leaf of this tree is ignored. */
#define BRM_BVH_NO_HINT UINT32_MAX
int brm_bvh_occluded_hint(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax, uint32_t *hint);

/* ---- additions (voxel room) ------------------------------------------------------------ */

/* The same over a subset: only primitives whose object has object_mask[object] != 0 (NULL:
 * all). The voxelizer's solid index uses it to cast parity rays against closed meshes only. */
brm_status brm_bvh_build_subset(const brm_scene *s, const uint8_t *object_mask, brm_bvh **out,
                                brm_diag *d);

/* Every hit of the ray within (tmin, tmax), in no particular order. near_edge is 1 when the
 * hit lies within the edge tolerance of a triangle's edge or vertex, or grazes a sphere: a
 * parity count should then cast again in another direction. */
typedef void (*brm_hit_visit)(void *ctx, const brm_hit *hit, int near_edge);
void brm_bvh_all_hits(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax,
                      brm_hit_visit visit, void *ctx);

/* brm_bvh_intersect and brm_bvh_occluded as the tree first traversed it, one child box at a
 * time: the reference the faster traversal is checked against (tests and bench). The same
 * answers, the same hit. */
int brm_bvh_intersect_reference(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax,
                                brm_hit *hit);
int brm_bvh_occluded_reference(const brm_bvh *b, brm_vec3 o, brm_vec3 dir, double tmin, double tmax);

/* Primitive tests the BVH uses, exposed for brute-force checks.
 * Ray–triangle by Möller and Trumbore (1997), barycentric bounds widened by BRM_TRI_EDGE_EPS so
 * a ray through a shared edge or vertex hits at least one of the triangles. Returns 1 and *t
 * for a hit with t in (tmin, tmax); *near_edge as above (may be NULL). */
#define BRM_TRI_EDGE_EPS 1e-10
int brm_ray_triangle(brm_vec3 o, brm_vec3 dir, const brm_vec3 v[3], double tmin, double tmax, double *t,
                     int *near_edge);
/* Ray–sphere, analytic: the nearest root in (tmin, tmax). */
int brm_ray_sphere(brm_vec3 o, brm_vec3 dir, brm_vec3 c, double r, double tmin, double tmax, double *t,
                   int *near_edge);

#endif
