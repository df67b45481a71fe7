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
