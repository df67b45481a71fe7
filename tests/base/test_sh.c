/* The SH basis of src/base/sh.h against GSL's associated Legendre functions, and the
 * Ramamoorthi–Hanrahan irradiance of two closed-form environments. */
#include <gsl/gsl_sf_legendre.h>

#include "check.h"
#include "base/lds.h"
#include "base/sh.h"

/* Real orthonormal SH from GSL: gsl_sf_legendre_sphPlm includes the normalisation
 * sqrt((2l+1)/(4π)·(l−m)!/(l+m)!) and the Condon–Shortley phase (−1)^m; SPEC.md's basis has no
 * such phase, so multiply it back out. m > 0: √2·P·cos(mφ); m < 0: √2·P·sin(|m|φ). */
static double gsl_real_sh(int l, int m, double theta, double phi)
{
    int am = m < 0 ? -m : m;
    double p = gsl_sf_legendre_sphPlm(l, am, cos(theta)) * ((am & 1) ? -1.0 : 1.0);
    if (m == 0) return p;
    return m > 0 ? M_SQRT2 * p * cos(am * phi) : M_SQRT2 * p * sin(am * phi);
}

static void sh9_should_match_gsl_associated_legendre(void **state)
{
    (void)state;
    static const int lm[9][2] = {{0, 0}, {1, -1}, {1, 0}, {1, 1}, {2, -2}, {2, -1}, {2, 0}, {2, 1}, {2, 2}};
    for (uint32_t i = 0; i < 2000; i++) {
        double u[2];
        brm_sample2(99, i, u);
        double theta = acos(1.0 - 2.0 * u[0]), phi = 2.0 * M_PI * u[1];
        brm_vec3 d = {sin(theta) * cos(phi), sin(theta) * sin(phi), cos(theta)};
        double y[9];
        brm_sh9(d, y);
        for (int k = 0; k < 9; k++) {
            /* Source: GSL gsl_sf_legendre_sphPlm (GNU Scientific Library reference, "Legendre
             * Functions and Spherical Harmonics"); basis order and signs of SPEC.md. */
            assert_near(y[k], gsl_real_sh(lm[k][0], lm[k][1], theta, phi), 1e-6, 0);
        }
    }
}

static void irradiance_of_constant_sky_should_be_pi(void **state)
{
    (void)state;
    /* Source: Ramamoorthi & Hanrahan 2001; REFERENCES.md §3 worked example: L = 1 everywhere
     * gives L00 = 2√π and E(n) = π for every n. */
    double L[9] = {2.0 * sqrt(M_PI), 0, 0, 0, 0, 0, 0, 0, 0};
    brm_vec3 ns[] = {{1, 0, 0}, {0, -1, 0}, {0.6, 0, 0.8}};
    for (int i = 0; i < 3; i++) assert_near(brm_sh9_irradiance(L, ns[i]), M_PI, 1e-12, 0);
}

static void irradiance_of_a_delta_should_match_the_band_limited_table(void **state)
{
    (void)state;
    /* Source: REFERENCES.md §3, single directional light E = 1 along +z: L_lm = Y_lm(d) and
     * E_SH(c) = 3/32 + c/2 + 15c²/32: 17/16 at 0°, 0.0625 at 180°, −5/128 at 120°. */
    double L[9];
    brm_sh9(brm_v3(0, 0, 1), L);
    assert_near(brm_sh9_irradiance(L, brm_v3(0, 0, 1)), 17.0 / 16.0, 1e-12, 0);
    assert_near(brm_sh9_irradiance(L, brm_v3(0, 0, -1)), 1.0 / 16.0, 1e-12, 0);
    assert_near(brm_sh9_irradiance(L, brm_v3(sin(2 * M_PI / 3), 0, cos(2 * M_PI / 3))), -5.0 / 128.0, 1e-12, 0);
    assert_near(brm_sh9_irradiance(L, brm_v3(0.5, 0, sqrt(0.75))), 0.878325202, 1e-8, 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(sh9_should_match_gsl_associated_legendre),
        cmocka_unit_test(irradiance_of_constant_sky_should_be_pi),
        cmocka_unit_test(irradiance_of_a_delta_should_match_the_band_limited_table),
    };
    return cmocka_run_group_tests_name("sh", tests, NULL, NULL);
}
