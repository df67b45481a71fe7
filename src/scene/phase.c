/* Phase functions and their Legendre moments.
 *
 * Convention (SPEC.md): cos_theta = dot(view direction, direction toward the light), so the
 * forward peak (g > 0) is seen by a viewer looking at the light. Every function integrates to
 * 1 over the sphere; the moments are chi_l = 2π ∫ p(μ) P_l(μ) dμ, so chi_0 = 1 and
 * chi_1 = <cos θ>. All moments are closed forms (derivations beside each). */
#include "scene/phase.h"

#include <assert.h>
#include <math.h>
#include <string.h>

#define INV_4PI (1.0 / (4.0 * BRM_PI))

/* Henyey & Greenstein 1941, Astrophys. J. 93:70-83:
 * p = (1 − g²) / (4π (1 + g² − 2g cos θ)^{3/2}). */
static double hg(double g, double c)
{
    double den = 1.0 + g * g - 2.0 * g * c;
    return (1.0 - g * g) * INV_4PI / (den * sqrt(den));
}

/* Schlick's approximation (Blasi, Le Saëc & Schlick 1993): k = 1.55g − 0.55g³,
 * p = (1 − k²) / (4π (1 − k cos θ)²). The loader keeps |g| ≤ 0.93 so that |k| < 1; a direct
 * caller with a larger |g| gets k clamped to ±0.9999 (the cubic exceeds 1 for g > 0.938). */
static double schlick_k(double g)
{
    double k = 1.55 * g - 0.55 * g * g * g;
    return brm_clamp(k, -0.9999, 0.9999);
}

static double schlick(double g, double c)
{
    double k = schlick_k(g);
    double den = 1.0 - k * c;
    return (1.0 - k * k) * INV_4PI / (den * den);
}

/* Rayleigh: p = 3/(16π) (1 + cos² θ) (Bruneton & Neyret 2008, eq. 2). */
static double rayleigh(double c) { return 3.0 / (16.0 * BRM_PI) * (1.0 + c * c); }

/* Cornette & Shanks 1992, Applied Optics 31(16):3152-3160:
 * p = 3/(8π) · (1 − g²)/(2 + g²) · (1 + cos² θ)/(1 + g² − 2g cos θ)^{3/2}. */
static double cornette_shanks(double g, double c)
{
    double den = 1.0 + g * g - 2.0 * g * c;
    return 3.0 / (8.0 * BRM_PI) * (1.0 - g * g) / (2.0 + g * g) * (1.0 + c * c) / (den * sqrt(den));
}

void brm_phase_prepare(const brm_phase *ph, brm_phase_prepared *out)
{
    memset(out, 0, sizeof *out);
    out->model = ph->model;
    double g = ph->g;
    switch (ph->model) {
    case BRM_PHASE_HENYEY_GREENSTEIN:
        out->k[0] = (1.0 - g * g) * INV_4PI, out->a[0] = 1.0 + g * g, out->b[0] = 2.0 * g;
        break;
    case BRM_PHASE_SCHLICK: {
        double k = schlick_k(g);
        out->k[0] = (1.0 - k * k) * INV_4PI, out->b[0] = k;
        break;
    }
    case BRM_PHASE_CORNETTE_SHANKS:
        out->k[0] = 3.0 / (8.0 * BRM_PI) * (1.0 - g * g) / (2.0 + g * g);
        out->a[0] = 1.0 + g * g, out->b[0] = 2.0 * g;
        break;
    case BRM_PHASE_TWO_LOBE:
        for (int i = 0; i < 2; i++) {
            double gi = i ? ph->g_back : g;
            out->k[i] = (1.0 - gi * gi) * INV_4PI, out->a[i] = 1.0 + gi * gi, out->b[i] = 2.0 * gi;
        }
        out->w[0] = ph->forward_weight, out->w[1] = 1.0 - ph->forward_weight;
        break;
    default: break;
    }
}

double brm_phase_eval(const brm_phase *ph, double cos_theta)
{
    double c = brm_clamp(cos_theta, -1.0, 1.0);
    switch (ph->model) {
    case BRM_PHASE_HENYEY_GREENSTEIN: return hg(ph->g, c);
    case BRM_PHASE_SCHLICK: return schlick(ph->g, c);
    case BRM_PHASE_RAYLEIGH: return rayleigh(c);
    case BRM_PHASE_CORNETTE_SHANKS: return cornette_shanks(ph->g, c);
    case BRM_PHASE_TWO_LOBE:
        return ph->forward_weight * hg(ph->g, c) + (1.0 - ph->forward_weight) * hg(ph->g_back, c);
    case BRM_PHASE_ISOTROPIC:
    default: return INV_4PI;
    }
}

/* HG: chi_l = g^l (the Legendre expansion 4π p = Σ (2l+1) g^l P_l). */
static double hg_moment(double g, int l) { return l == 1 ? g : g * g; }

/* Schlick: chi_l = (1 − k²)/2 ∫ P_l(μ) (1 − kμ)^{-2} dμ over [−1, 1]. With u = 1 − kμ and
 * L = ln((1 + k)/(1 − k)):
 *   I0 = ∫ u^{-2} = 2/(1 − k²),  I1 = ∫ μ u^{-2} = (I0 − L/k)/k,
 *   I2 = ∫ μ² u^{-2} = (I0 − 2L/k + 2)/k².
 * These cancel badly for small |k|, where the series 1/u² = Σ (n+1) k^n μ^n is used. */
static double schlick_moment(double g, int l)
{
    if (l == 0) return 1.0;
    double k = schlick_k(g);
    double w = 1.0 - k * k;
    if (fabs(k) < 0.1) {
        /* Σ_n (n+1) k^n ∫ μ^n P_l dμ; 0.1^40 is far below double precision. */
        double sum = 0.0, kn = 1.0;
        for (int n = 0; n <= 40; n++, kn *= k) {
            double m;
            if (l == 1) m = (n % 2 == 1) ? 2.0 / (n + 2) : 0.0;
            else m = (n % 2 == 0) ? 0.5 * (3.0 * 2.0 / (n + 3) - 2.0 / (n + 1)) : 0.0;
            sum += (n + 1) * kn * m;
        }
        return 0.5 * w * sum;
    }
    double L = log((1.0 + k) / (1.0 - k));
    double i0 = 2.0 / w;
    if (l == 1) return 0.5 * w * (i0 - L / k) / k;
    double i2 = (i0 - 2.0 * L / k + 2.0) / (k * k);
    return 0.5 * w * 0.5 * (3.0 * i2 - i0);
}

/* Cornette-Shanks = 3/(2(2 + g²)) · (1 + μ²) · HG(μ). With μ² P_0 = (2P_2 + P_0)/3,
 * μ² P_1 = (2P_3 + 3P_1)/5, μ² P_2 = (12/35)P_4 + (11/21)P_2 + (2/15)P_0 and HG's moments g^n:
 *   chi_0 = 1, chi_1 = 3g(4 + g²)/(5(2 + g²)), chi_2 = 3/(2(2 + g²)) · ((12/35)g⁴ + (32/21)g² + 2/15).
 * At g = 0 this is Rayleigh: 1, 0, 1/10. */
static double cs_moment(double g, int l)
{
    double g2 = g * g, f = 3.0 / (2.0 * (2.0 + g2));
    if (l == 0) return 1.0;
    if (l == 1) return 3.0 * g * (4.0 + g2) / (5.0 * (2.0 + g2));
    return f * ((12.0 / 35.0) * g2 * g2 + (32.0 / 21.0) * g2 + 2.0 / 15.0);
}

double brm_phase_moment(const brm_phase *ph, int l)
{
    assert(l >= 0 && l <= 2);
    if (l == 0) return 1.0;
    switch (ph->model) {
    case BRM_PHASE_HENYEY_GREENSTEIN: return hg_moment(ph->g, l);
    case BRM_PHASE_SCHLICK: return schlick_moment(ph->g, l);
    case BRM_PHASE_RAYLEIGH: return cs_moment(0.0, l);
    case BRM_PHASE_CORNETTE_SHANKS: return cs_moment(ph->g, l);
    case BRM_PHASE_TWO_LOBE:
        return ph->forward_weight * hg_moment(ph->g, l) + (1.0 - ph->forward_weight) * hg_moment(ph->g_back, l);
    case BRM_PHASE_ISOTROPIC:
    default: return 0.0;
    }
}
