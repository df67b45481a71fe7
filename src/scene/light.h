/* Photometric light evaluation: falloff, cone, colour. Visibility (shadow maps, rays) and
 * transmittance through fog are applied by the caller (src/bake kernel). */
#ifndef BRM_LIGHT_H
#define BRM_LIGHT_H

#include <math.h>

#include "scene/scene.h"

/* Illuminance (lux, before colour, shadow and fog) that light l delivers at p on a surface
 * facing it, and the unit direction from p toward the light in *to_light and the distance in
 * *dist (HUGE_VAL for directional). Point and spot: I/d² × max(0, 1 − (d/range)⁴)² when a range
 * is given; spots also × smoothstep(cos outer, cos inner, cos α). Returns 0 where it cannot
 * reach. */
double brm_light_illuminance(const brm_light *l, brm_vec3 p, brm_vec3 *to_light, double *dist);

/* Window max(0, 1 − (d/r)⁴)², the windowing part of the falloff of Karis 2013 (SIGGRAPH 2013
 * course "Physically Based Shading in Theory and Practice"); SPEC.md uses it with the plain
 * inverse square. */
static inline double brm_light_range_window(double d, double range)
{
    double x = d / range, x2 = x * x, w = 1.0 - x2 * x2;
    return w > 0.0 ? w * w : 0.0;
}

/* brm_light_illuminance for a point or spot light (not directional), inline for the kernel's
 * loops: the same operations, the same bits. */
static inline double brm_light_illuminance_local(const brm_light *l, brm_vec3 p, brm_vec3 *to_light, double *dist)
{
    brm_vec3 v = brm_sub(l->position, p);
    double d2 = brm_dot(v, v), d = sqrt(d2);
    *dist = d;
    if (!(d > 0.0)) {
        /* At the light itself the direction is undefined and the law diverges. */
        *to_light = brm_v3(0.0, 1.0, 0.0);
        return 0.0;
    }
    brm_vec3 u = brm_scale(v, 1.0 / d);
    *to_light = u;
    if (l->range_m > 0.0 && d >= l->range_m) return 0.0;
    /* Inverse-square law: E = I / d² on a surface facing the light. */
    double e = l->intensity_cd / d2;
    if (l->range_m > 0.0) e *= brm_light_range_window(d, l->range_m);
    if (l->type == BRM_LIGHT_SPOT) {
        double cos_a = -brm_dot(u, l->direction);
        if (cos_a <= l->cos_outer) return 0.0;
        e *= brm_smoothstep(l->cos_outer, l->cos_inner, cos_a);
    }
    return e;
}

/* Luminous intensity (cd) of a point light (I = Φ/(4π)) or a spot with cone cosine cos_outer
 * (I = Φ/(2π(1 − cos outer)), the flux spread over the cone's solid angle) of flux flux_lm.
 * The loader uses it for `flux_lm`. */
double brm_light_intensity_from_flux(brm_light_type type, double flux_lm, double cos_outer);

/* Whether the light can reach anything inside box b (range and cone culling, conservative). */
bool brm_light_reaches(const brm_light *l, brm_aabb b);

#endif
