/* Test helpers shared by every test file. cmocka 1.1.5 has no double assertion and its
 * assert_float_equal casts to float, so we use our own. */
#ifndef BRM_TEST_CHECK_H
#define BRM_TEST_CHECK_H

#include <math.h>
#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <stdio.h>
#include <cmocka.h>

/* |a − b| <= abs_tol + rel_tol·|b|, with both values in the failure message. */
#define assert_near(a, b, abs_tol, rel_tol)                                                   \
    do {                                                                                      \
        double brm_a_ = (double)(a), brm_b_ = (double)(b);                                    \
        double brm_t_ = (double)(abs_tol) + (double)(rel_tol) * fabs(brm_b_);                 \
        if (!(fabs(brm_a_ - brm_b_) <= brm_t_)) {                                             \
            print_error("%s = %.12g, expected %s = %.12g (tolerance %.3g)\n", #a, brm_a_, #b, \
                        brm_b_, brm_t_);                                                      \
            fail();                                                                           \
        }                                                                                     \
    } while (0)

/* Relative error check: |a − b| <= rel·|b|. */
#define assert_rel(a, b, rel) assert_near(a, b, 0.0, rel)

#endif
