/* Photometric light evaluation: falloff, cone, colour. Visibility (shadow maps, rays) and
 * transmittance through fog are applied by the caller (src/bake kernel). */
#ifndef BRM_LIGHT_H
#define BRM_LIGHT_H

#include "scene/scene.h"

/* Illuminance (lux, before colour, shadow and fog) that light l delivers at p on a surface
 * facing it, and the unit direction from p toward the light in *to_light and the distance in
 * *dist (HUGE_VAL for directional). Point and spot: I/d² × max(0, 1 − (d/range)⁴)² when a range
 * is given; spots also × smoothstep(cos outer, cos inner, cos α). Returns 0 where it cannot
 * reach. */
double brm_light_illuminance(const brm_light *l, brm_vec3 p, brm_vec3 *to_light, double *dist);

/* Luminous intensity (cd) of a point light (I = Φ/(4π)) or a spot with cone cosine cos_outer
 * (I = Φ/(2π(1 − cos outer)), the flux spread over the cone's solid angle) of flux flux_lm.
 * The loader uses it for `flux_lm`. */
double brm_light_intensity_from_flux(brm_light_type type, double flux_lm, double cos_outer);

/* Whether the light can reach anything inside box b (range and cone culling, conservative). */
bool brm_light_reaches(const brm_light *l, brm_aabb b);

#endif
