/* Phase functions, each normalised to 1 over the sphere.
 * cos_theta = dot(view direction, direction toward the light): g > 0 scatters forward, toward
 * a viewer looking at the light (SPEC.md). Sources beside each formula in phase.c. */
#ifndef BRM_PHASE_H
#define BRM_PHASE_H

#include <math.h>

#include "scene/scene.h"

double brm_phase_eval(const brm_phase *ph, double cos_theta);

/* Legendre moment chi_l = 2π ∫ p(μ) P_l(μ) dμ of the phase function for bands l = 0..2
 * (1, <cos θ>, ...), used to apply a phase to SH-projected radiance. Closed forms for every
 * model (HG: g^l; the others derived in phase.c). l outside 0..2 is a programming error. */
double brm_phase_moment(const brm_phase *ph, int l);

/* A phase function with its per-model constants worked out once (the inner loops of the
 * kernel evaluate it millions of times): brm_phase_eval_prepared gives brm_phase_eval's bits,
 * the same operations in the same order, only the terms that do not depend on cos_theta
 * taken from the table. */
typedef struct brm_phase_prepared {
    brm_phase_model model;
    double k[2];    /* HG, Cornette-Shanks: (1 − g²)/(4π) (CS: 3/(8π)(1 − g²)/(2 + g²)); Schlick:
                       (1 − k²)/(4π); two-lobe: each lobe's (1 − g²)/(4π) */
    double a[2];    /* HG, CS, two-lobe: 1 + g² per lobe */
    double b[2];    /* HG, CS, two-lobe: 2g per lobe; Schlick: its k */
    double w[2];    /* two-lobe: forward_weight, 1 − forward_weight */
} brm_phase_prepared;

void brm_phase_prepare(const brm_phase *ph, brm_phase_prepared *out);

static inline double brm_phase_hg_prepared(double k, double a, double b, double c)
{
    double den = a - b * c;
    return k / (den * sqrt(den));
}

static inline double brm_phase_eval_prepared(const brm_phase_prepared *pp, double cos_theta)
{
    double c = brm_clamp(cos_theta, -1.0, 1.0);
    switch (pp->model) {
    case BRM_PHASE_HENYEY_GREENSTEIN: return brm_phase_hg_prepared(pp->k[0], pp->a[0], pp->b[0], c);
    case BRM_PHASE_SCHLICK: {
        double den = 1.0 - pp->b[0] * c;
        return pp->k[0] / (den * den);
    }
    case BRM_PHASE_RAYLEIGH: return 3.0 / (16.0 * BRM_PI) * (1.0 + c * c);
    case BRM_PHASE_CORNETTE_SHANKS: {
        double den = pp->a[0] - pp->b[0] * c;
        return pp->k[0] * (1.0 + c * c) / (den * sqrt(den));
    }
    case BRM_PHASE_TWO_LOBE:
        return pp->w[0] * brm_phase_hg_prepared(pp->k[0], pp->a[0], pp->b[0], c) +
               pp->w[1] * brm_phase_hg_prepared(pp->k[1], pp->a[1], pp->b[1], c);
    case BRM_PHASE_ISOTROPIC:
    default: return 1.0 / (4.0 * BRM_PI);
    }
}

#endif
