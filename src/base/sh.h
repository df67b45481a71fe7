/* Real orthonormal spherical harmonics, bands 0–2, in the order and with the signs of
 * SPEC.md and Ramamoorthi & Hanrahan 2001 (no Condon–Shortley phase):
 *   0: Y00 = 0.282095
 *   1: Y1,−1 = 0.488603·y   2: Y10 = 0.488603·z   3: Y11 = 0.488603·x
 *   4: Y2,−2 = 1.092548·xy  5: Y2,−1 = 1.092548·yz  6: Y20 = 0.315392·(3z² − 1)
 *   7: Y21 = 1.092548·xz    8: Y22 = 0.546274·(x² − y²)
 * evaluated on a unit direction (x, y, z) in scene coordinates pointing toward where light
 * comes from. Constants in closed form: 1/(2√π), √(3/(4π)), ½√(15/π), ¼√(5/π), ¼√(15/π). */
#ifndef BRM_SH_H
#define BRM_SH_H

#include "base/vec.h"

#define BRM_SH_C0 0.28209479177387814    /* 1/(2√π) */
#define BRM_SH_C1 0.48860251190291992    /* √(3/(4π)) */
#define BRM_SH_C2 1.09254843059207907    /* ½√(15/π) */
#define BRM_SH_C20 0.31539156525252001   /* ¼√(5/π) */
#define BRM_SH_C22 0.54627421529603959   /* ¼√(15/π) */

/* Bands 0–1 (4 values). */
static inline void brm_sh4(brm_vec3 d, double out[4])
{
    out[0] = BRM_SH_C0;
    out[1] = BRM_SH_C1 * d.y;
    out[2] = BRM_SH_C1 * d.z;
    out[3] = BRM_SH_C1 * d.x;
}

/* Bands 0–2 (9 values). */
static inline void brm_sh9(brm_vec3 d, double out[9])
{
    out[0] = BRM_SH_C0;
    out[1] = BRM_SH_C1 * d.y;
    out[2] = BRM_SH_C1 * d.z;
    out[3] = BRM_SH_C1 * d.x;
    out[4] = BRM_SH_C2 * d.x * d.y;
    out[5] = BRM_SH_C2 * d.y * d.z;
    out[6] = BRM_SH_C20 * (3.0 * d.z * d.z - 1.0);
    out[7] = BRM_SH_C2 * d.x * d.z;
    out[8] = BRM_SH_C22 * (d.x * d.x - d.y * d.y);
}

/* Band of coefficient index i (0..8). */
static inline int brm_sh_band(int i) { return i == 0 ? 0 : i < 4 ? 1 : 2; }

/* Irradiance E(n) from raw radiance coefficients L[9] by the clamped-cosine convolution of
 * Ramamoorthi & Hanrahan 2001: E(n) = Σ Â_l L_lm Y_lm(n), Â0 = π, Â1 = 2π/3, Â2 = π/4. */
static inline double brm_sh9_irradiance(const double L[9], brm_vec3 n)
{
    static const double A[3] = {BRM_PI, 2.0 * BRM_PI / 3.0, BRM_PI / 4.0};
    double y[9], e = 0.0;
    brm_sh9(n, y);
    for (int i = 0; i < 9; i++) e += A[brm_sh_band(i)] * L[i] * y[i];
    return e;
}

#endif
