/* Tone curve, sRGB encoding, and the false-colour and diverging maps. */
#include "check.h"

#include <stdlib.h>
#include <string.h>

#include "view/tone.h"

static void srgb_encode_should_follow_iec_61966_2_1(void **state)
{
    (void)state;
    /* Source: IEC 61966-2-1:1999 transfer function (12.92·c below 0.0031308, else
     * 1.055·c^(1/2.4) − 0.055); expected values evaluated from that formula in Python 3. */
    assert_near(brm_srgb_encode(0.5), 0.7353569830524495, 1e-12, 0);
    assert_near(brm_srgb_encode(0.18), 0.46135612950044164, 1e-12, 0);
    assert_near(brm_srgb_encode(0.001), 0.01292, 1e-12, 0);
    assert_near(brm_srgb_encode(0.0031308), 0.040449936, 1e-9, 0);
    assert_near(brm_srgb_encode(0.0), 0.0, 0, 0);
    assert_near(brm_srgb_encode(1.0), 1.0, 0, 0);
    assert_near(brm_srgb_encode(-3.0), 0.0, 0, 0);
    assert_near(brm_srgb_encode(7.0), 1.0, 0, 0);
    for (double c = 0.0; c <= 1.0; c += 1.0 / 64)
        assert_near(brm_srgb_decode(brm_srgb_encode(c)), c, 1e-12, 1e-12);
    assert_int_equal(brm_srgb_byte(0.5), 188);   /* 255·0.73536 = 187.52 */
    assert_int_equal(brm_srgb_byte(1.0), 255);
    assert_int_equal(brm_srgb_byte(0.0), 0);
}

/* The table-driven byte must be the exact one everywhere: at a million random inputs, at every
 * double within 64 steps of each of the 255 step points, on both sides of each step, and at
 * the special values. */
static void srgb_byte_table_should_equal_the_exact_rounding_everywhere(void **state)
{
    (void)state;
    uint64_t x = 0x9e3779b97f4a7c15ull;
    for (int i = 0; i < 1000000; i++) {
        x ^= x << 13, x ^= x >> 7, x ^= x << 17;
        double c = (double)(x >> 11) * 0x1.0p-53;
        if (i & 1) c = c * c * c; /* dense near 0 as well, where the linear segment is */
        assert_int_equal(brm_srgb_byte(c), brm_srgb_byte_exact(c));
    }
    for (int k = 1; k < 256; k++) {
        /* the k-th step: the smallest c the exact rounding sends to k or more */
        double v = (k - 0.5) / 255.0, c = brm_srgb_decode(v);
        for (int s = 0; s < 40 && brm_srgb_byte_exact(c) >= k; s++) c = nextafter(c, 0.0);
        for (int s = 0; s < 80 && brm_srgb_byte_exact(c) < k; s++) c = nextafter(c, 1.0);
        assert_true(brm_srgb_byte_exact(c) >= k && brm_srgb_byte_exact(nextafter(c, 0.0)) < k);
        double d = c;
        for (int s = 0; s < 64; s++) d = nextafter(d, 0.0);
        for (int s = 0; s < 129; s++, d = nextafter(d, 1.0)) assert_int_equal(brm_srgb_byte(d), brm_srgb_byte_exact(d));
    }
    const double special[] = {0.0, -0.0, -1.0, 1.0, 2.0, 0x1p-1074, 0.0031308, nextafter(1.0, 0.0), INFINITY, -INFINITY, NAN};
    for (size_t i = 0; i < sizeof special / sizeof special[0]; i++)
        assert_int_equal(brm_srgb_byte(special[i]), brm_srgb_byte_exact(special[i]));
}

static void tone_should_map_zero_to_zero_and_rise_monotonically(void **state)
{
    (void)state;
    assert_true(brm_tone(0.0) == 0.0);
    assert_true(brm_tone(-1.0) == 0.0);
    assert_true(brm_tone(NAN) == 0.0);
    assert_near(brm_tone(1.0), 0.5, 1e-15, 0);   /* x/(1+x) at 1 */
    assert_near(brm_tone(4.0), 0.8, 1e-15, 0);
    double prev = 0.0;
    for (double x = 1e-6; x < 1e6; x *= 1.05) {
        double t = brm_tone(x);
        assert_true(t > prev);
        assert_true(t < 1.0);
        prev = t;
    }
    /* Through the 8-bit encoding it stays monotonic (non-decreasing) and 0 stays black. */
    int prevb = 0;
    for (double x = 0.0; x < 100.0; x += 0.01) {
        int b = brm_srgb_byte(brm_tone(x));
        assert_true(b >= prevb);
        prevb = b;
    }
    assert_int_equal(brm_srgb_byte(brm_tone(0.0)), 0);
}

static void auto_exposure_should_put_the_99th_percentile_at_0_8(void **state)
{
    (void)state;
    float v[200];
    for (int i = 0; i < 100; i++) v[i] = (float)(100 - i);   /* 1..100, unsorted */
    for (int i = 100; i < 200; i++) v[i] = 0.0f;             /* zeros do not count */
    double k = brm_auto_exposure(v, 200);
    /* lower nearest rank: sorted index floor(0.99·99) = 98 → value 99 */
    assert_near(k, 4.0 / 99.0, 1e-15, 0);
    assert_near(brm_tone(k * 99.0), 0.8, 1e-12, 0);
    assert_true(v[0] == 100.0f);   /* input untouched */
    float zeros[4] = {0, 0, -1, 0};
    assert_near(brm_auto_exposure(zeros, 4), 1.0, 0, 0);
}

static int cmp_float_test(const void *a, const void *b)
{
    float x = *(const float *)a, y = *(const float *)b;
    return (x > y) - (x < y);
}

/* The percentile by selection is the element a full sort puts there: random sets of 1 to
 * 3000 values, with many repeats (values drawn from a few levels), sorted runs and ties. */
static void auto_exposure_should_pick_what_a_full_sort_picks(void **state)
{
    (void)state;
    uint64_t r = 12345;
    float *v = malloc(3000 * sizeof *v), *sorted = malloc(3000 * sizeof *sorted);
    assert_true(v && sorted);
    for (int trial = 0; trial < 300; trial++) {
        size_t n = 1 + (size_t)(trial * 10 % 3000);
        int levels = trial % 3 == 0 ? 3 : trial % 3 == 1 ? 50 : 1 << 20;
        for (size_t i = 0; i < n; i++) {
            r = r * 6364136223846793005ull + 1442695040888963407ull;
            v[i] = trial % 7 == 0 ? (float)(i + 1) : (float)(1 + (r >> 33) % (uint64_t)levels);
        }
        memcpy(sorted, v, n * sizeof *v);
        qsort(sorted, n, sizeof *sorted, cmp_float_test);
        double want = 4.0 / sorted[(size_t)floor(0.99 * (double)(n - 1))];
        assert_true(brm_auto_exposure(v, n) == want);
    }
    free(v);
    free(sorted);
}

static void lightness_should_match_cie_l_star(void **state)
{
    (void)state;
    /* Source: CIE 15:2004 L* = 116 f(Y/Yn) − 16 with sRGB decoding (IEC 61966-2-1); values
     * from those formulas in Python 3. */
    const uint8_t white[3] = {255, 255, 255}, black[3] = {0, 0, 0}, grey[3] = {119, 119, 119};
    assert_near(brm_srgb_lightness(white), 100.0, 1e-9, 0);
    assert_near(brm_srgb_lightness(black), 0.0, 1e-9, 0);
    assert_near(brm_srgb_lightness(grey), 50.034438792538225, 1e-9, 0);
}

static void falsecolor_should_be_monotonic_in_lightness(void **state)
{
    (void)state;
    /* Defined with L* = 14 + 83·t (a design property of our map, checked after gamut
     * mapping and 8-bit rounding). */
    double prev = -1.0;
    for (int i = 0; i <= 255; i++) {
        uint8_t rgb[3];
        brm_falsecolor(i / 255.0, rgb);
        double L = brm_srgb_lightness(rgb);
        assert_near(L, 14.0 + 83.0 * i / 255.0, 0.6, 0);
        assert_true(L > prev);   /* strictly rising, step for step */
        prev = L;
    }
    uint8_t a[3], b[3];
    brm_falsecolor(-5.0, a);
    brm_falsecolor(0.0, b);
    assert_memory_equal(a, b, 3);   /* clamped */
    brm_falsecolor(5.0, a);
    brm_falsecolor(1.0, b);
    assert_memory_equal(a, b, 3);
    /* It is a colour map, not grey: the middle has visible chroma. */
    brm_falsecolor(0.45, a);
    assert_true(abs((int)a[0] - (int)a[2]) > 30 || abs((int)a[0] - (int)a[1]) > 30);
}

static void diverging_should_be_neutral_at_zero_and_symmetric_in_lightness(void **state)
{
    (void)state;
    uint8_t z[3];
    brm_diverging(0.0, z);
    assert_true(abs((int)z[0] - (int)z[1]) <= 1 && abs((int)z[1] - (int)z[2]) <= 1);
    assert_near(brm_srgb_lightness(z), 96.0, 0.6, 0);
    double prev = 101.0;
    for (int i = 1; i <= 64; i++) {
        double s = i / 64.0;
        uint8_t p[3], n[3];
        brm_diverging(s, p);
        brm_diverging(-s, n);
        double Lp = brm_srgb_lightness(p), Ln = brm_srgb_lightness(n);
        assert_near(Lp, Ln, 0.8, 0);
        assert_true(Lp < prev);          /* darker with |s| */
        prev = Lp;
        assert_true(p[0] > p[2]);        /* positive: warm */
        assert_true(n[2] > n[0]);        /* negative: blue */
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(srgb_encode_should_follow_iec_61966_2_1),
        cmocka_unit_test(srgb_byte_table_should_equal_the_exact_rounding_everywhere),
        cmocka_unit_test(tone_should_map_zero_to_zero_and_rise_monotonically),
        cmocka_unit_test(auto_exposure_should_put_the_99th_percentile_at_0_8),
        cmocka_unit_test(auto_exposure_should_pick_what_a_full_sort_picks),
        cmocka_unit_test(lightness_should_match_cie_l_star),
        cmocka_unit_test(falsecolor_should_be_monotonic_in_lightness),
        cmocka_unit_test(diverging_should_be_neutral_at_zero_and_symmetric_in_lightness),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
