#include "base/lds.h"

#include <math.h>

/* Plastic-number generalisations: phi_d is the positive root of x^(d+1) = x + 1. */
static const double PHI2 = 1.32471795724474602596;   /* d = 2 */
static const double PHI3 = 1.22074408460575947536;   /* d = 3 */

static double frac(double x) { return x - floor(x); }

void brm_sample3(uint64_t key, uint32_t i, double out[3])
{
    double a1 = 1.0 / PHI3, a2 = a1 / PHI3, a3 = a2 / PHI3;
    double n = (double)i + 0.5;
    out[0] = frac(brm_hash_unit(key * 3 + 0) + n * a1);
    out[1] = frac(brm_hash_unit(key * 3 + 1) + n * a2);
    out[2] = frac(brm_hash_unit(key * 3 + 2) + n * a3);
}

void brm_sample2(uint64_t key, uint32_t i, double out[2])
{
    double a1 = 1.0 / PHI2, a2 = a1 / PHI2;
    double n = (double)i + 0.5;
    out[0] = frac(brm_hash_unit(key * 2 + 0) + n * a1);
    out[1] = frac(brm_hash_unit(key * 2 + 1) + n * a2);
}

void brm_cell_samples(uint64_t key, uint32_t S, double (*out)[3])
{
    uint32_t perm[BRM_MAX_CELL_SAMPLES];
    if (S > BRM_MAX_CELL_SAMPLES) S = BRM_MAX_CELL_SAMPLES;
    for (int a = 0; a < 3; a++) {
        uint64_t k = brm_hash64(key * 0x2545f4914f6cdd1dull + (uint64_t)a * 0x9e3779b97f4a7c15ull + 1);
        for (uint32_t s = 0; s < S; s++) perm[s] = s;
        /* Fisher–Yates with a counter-based hash as the random source. */
        for (uint32_t s = S; s > 1; s--) {
            uint32_t r = (uint32_t)((brm_hash64(k + s) >> 32) * (uint64_t)s >> 32);
            uint32_t t = perm[s - 1];
            perm[s - 1] = perm[r];
            perm[r] = t;
        }
        for (uint32_t s = 0; s < S; s++) out[s][a] = ((double)perm[s] + 0.5) / (double)S;
    }
}
