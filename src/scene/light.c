/* Photometric lights: the inverse-square law, the range window and the spot cone of SPEC.md
 * ("Lights"). Visibility and fog transmittance are the caller's. */
#include "scene/light.h"

#include <math.h>

double brm_light_illuminance(const brm_light *l, brm_vec3 p, brm_vec3 *to_light, double *dist)
{
    if (l->type == BRM_LIGHT_DIRECTIONAL) {
        *to_light = brm_scale(l->direction, -1.0);
        *dist = HUGE_VAL;
        return l->illuminance_lux;
    }
    return brm_light_illuminance_local(l, p, to_light, dist);
}

bool brm_light_reaches(const brm_light *l, brm_aabb b)
{
    if (l->type == BRM_LIGHT_DIRECTIONAL) return true;
    /* The box's bounding sphere, for the cone test. */
    brm_vec3 c = brm_scale(brm_add(b.min, b.max), 0.5);
    double r = 0.5 * brm_len(brm_sub(b.max, b.min));
    if (l->range_m > 0.0) {
        /* Distance from the light to the box (0 inside). */
        brm_vec3 q = brm_vmax(b.min, brm_vmin(l->position, b.max));
        if (brm_len(brm_sub(q, l->position)) >= l->range_m) return false;
    }
    if (l->type == BRM_LIGHT_POINT) return true;
    brm_vec3 v = brm_sub(c, l->position);
    double dv = brm_len(v);
    if (dv <= r) return true;
    /* The sphere subtends asin(r/dv) around v; the cone reaches it when the angle between v
     * and the axis minus that is below the outer half-angle. */
    double ang = acos(brm_clamp(brm_dot(v, l->direction) / dv, -1.0, 1.0));
    double half = asin(r / dv);
    return ang - half < l->outer_deg * (BRM_PI / 180.0) + 1e-9;
}

double brm_light_intensity_from_flux(brm_light_type type, double flux_lm, double cos_outer)
{
    /* An isotropic source spreads Φ over 4π sr; a spot over its cone, Ω = 2π(1 − cos θ_o). */
    if (type == BRM_LIGHT_SPOT) return flux_lm / (2.0 * BRM_PI * (1.0 - cos_outer));
    return flux_lm / (4.0 * BRM_PI);
}
