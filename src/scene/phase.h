/* Phase functions, each normalised to 1 over the sphere.
 * cos_theta = dot(view direction, direction toward the light): g > 0 scatters forward, toward
 * a viewer looking at the light (SPEC.md). Sources beside each formula in phase.c. */
#ifndef BRM_PHASE_H
#define BRM_PHASE_H

#include "scene/scene.h"

double brm_phase_eval(const brm_phase *ph, double cos_theta);

/* Legendre moment chi_l = 2π ∫ p(μ) P_l(μ) dμ of the phase function for bands l = 0..2
 * (1, <cos θ>, ...), used to apply a phase to SH-projected radiance. Closed forms for every
 * model (HG: g^l; the others derived in phase.c). l outside 0..2 is a programming error. */
double brm_phase_moment(const brm_phase *ph, int l);

#endif
