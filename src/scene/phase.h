/* Phase functions, each normalised to 1 over the sphere.
 * cos_theta = dot(view direction, direction toward the light): g > 0 scatters forward, toward
 * a viewer looking at the light (SPEC.md). Sources beside each formula in phase.c. */
#ifndef BRM_PHASE_H
#define BRM_PHASE_H

#include "scene/scene.h"

double brm_phase_eval(const brm_phase *ph, double cos_theta);

/* Legendre moment g_l of the phase function for bands l = 0..2 (1, <cos>, ...), used to apply
 * a phase to SH-projected radiance. Exact for HG (g^l); numerically integrated once otherwise. */
double brm_phase_moment(const brm_phase *ph, int l);

#endif
