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

#endif
