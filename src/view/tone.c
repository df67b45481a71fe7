#include "view/tone.h"

#include <math.h>
#include <pthread.h>
#include <stddef.h>
#include <stdlib.h>
#include <string.h>

double brm_srgb_encode(double c)
{
    if (!(c > 0.0)) return 0.0;
    if (c >= 1.0) return 1.0;
    /* Source: IEC 61966-2-1:1999, sRGB transfer function. */
    return c <= 0.0031308 ? 12.92 * c : 1.055 * pow(c, 1.0 / 2.4) - 0.055;
}

double brm_srgb_decode(double v)
{
    if (!(v > 0.0)) return 0.0;
    if (v >= 1.0) return 1.0;
    return v <= 0.04045 ? v / 12.92 : pow((v + 0.055) / 1.055, 2.4);
}

uint8_t brm_srgb_byte_exact(double c) { return (uint8_t)lround(255.0 * brm_srgb_encode(c)); }

/* brm_srgb_byte_exact is non-decreasing in c, so it is fixed by the 255 points where it steps
 * up: thr[k] is the smallest double c with byte(c) >= k, found once by bisection over the bit
 * patterns of the doubles in [0, 1] (positive doubles order as their bits do), with the exact
 * function itself as the judge. A byte is then a search of 8 comparisons instead of a pow(). */
static double srgb_thr[256];
static pthread_once_t srgb_once = PTHREAD_ONCE_INIT;

static double bits_double(uint64_t b)
{
    double d;
    memcpy(&d, &b, sizeof d);
    return d;
}

static void srgb_init(void)
{
    const double one = 1.0;
    uint64_t top;
    memcpy(&top, &one, sizeof top);
    srgb_thr[0] = 0.0;
    for (int k = 1; k < 256; k++) {
        uint64_t lo = 0, hi = top; /* byte(lo) < k <= byte(hi) */
        while (hi - lo > 1) {
            uint64_t mid = lo + (hi - lo) / 2;
            if (brm_srgb_byte_exact(bits_double(mid)) >= k) hi = mid;
            else lo = mid;
        }
        srgb_thr[k] = bits_double(hi);
    }
}

uint8_t brm_srgb_byte(double c)
{
    if (!(c > 0.0)) return 0;
    if (c >= 1.0) return 255;
    pthread_once(&srgb_once, srgb_init);
    unsigned k = 0;
    for (unsigned step = 128; step; step >>= 1)
        if (k + step < 256 && c >= srgb_thr[k + step]) k += step;
    return (uint8_t)k;
}

double brm_tone(double x) { return x > 0.0 ? (isinf(x) ? 1.0 : x / (1.0 + x)) : 0.0; }

/* The k-th smallest of v[0..n) (k < n), moving elements: Hoare's selection with the median
 * of three as pivot, linear on average (Hoare 1961, "Algorithm 65: Find"). The same element
 * a full sort would put at k, in a tenth of the time for a million pixels. */
static float select_kth(float *v, size_t n, size_t k)
{
    ptrdiff_t lo = 0, hi = (ptrdiff_t)n - 1, kk = (ptrdiff_t)k;
    while (hi > lo) {
        ptrdiff_t mid = lo + (hi - lo) / 2;
        float a = v[lo], b = v[mid], c = v[hi];
        float piv = a < b ? (b < c ? b : (a < c ? c : a)) : (a < c ? a : (b < c ? c : b));
        ptrdiff_t i = lo, j = hi;
        while (i <= j) {
            while (v[i] < piv) i++;
            while (v[j] > piv) j--;
            if (i <= j) {
                float t = v[i];
                v[i] = v[j], v[j] = t;
                i++, j--;
            }
        }
        /* Now v[lo..j] <= piv <= v[i..hi], and whatever lies between equals piv. */
        if (kk <= j) hi = j;
        else if (kk >= i) lo = i;
        else break;
    }
    return v[k];
}

double brm_auto_exposure(const float *vals, size_t n)
{
    size_t m = 0;
    for (size_t i = 0; i < n; i++)
        if (vals[i] > 0.0f && isfinite(vals[i])) m++;
    if (m == 0) return 1.0;
    float *tmp = malloc(m * sizeof *tmp);
    if (tmp == NULL) return 1.0;
    size_t j = 0;
    for (size_t i = 0; i < n; i++)
        if (vals[i] > 0.0f && isfinite(vals[i])) tmp[j++] = vals[i];
    double p = select_kth(tmp, m, (size_t)floor(0.99 * (double)(m - 1)));
    free(tmp);
    /* t = kp/(1 + kp) = 0.8  ⇔  k = 4/p. */
    return 4.0 / p;
}

/* ---- CIE L*a*b* (D65) → sRGB ---------------------------------------------------------- */

/* D65 white, 2° observer (Source: CIE 15:2004, as used by IEC 61966-2-1). */
static const double XN = 0.95047, YN = 1.0, ZN = 1.08883;

static double lab_finv(double t)
{
    const double e = 6.0 / 29.0;
    return t > e ? t * t * t : 3.0 * e * e * (t - 4.0 / 29.0);
}

static double lab_f(double t)
{
    const double e = 6.0 / 29.0;
    return t > e * e * e ? cbrt(t) : t / (3.0 * e * e) + 4.0 / 29.0;
}

/* Lab → linear sRGB; returns 1 when all three are inside [0, 1]. */
static int lab_to_linear(double L, double a, double b, double rgb[3])
{
    double fy = (L + 16.0) / 116.0, fx = fy + a / 500.0, fz = fy - b / 200.0;
    double X = XN * lab_finv(fx), Y = YN * lab_finv(fy), Z = ZN * lab_finv(fz);
    /* XYZ → linear sRGB. Source: IEC 61966-2-1:1999 (matrix as given there). */
    rgb[0] = 3.2406 * X - 1.5372 * Y - 0.4986 * Z;
    rgb[1] = -0.9689 * X + 1.8758 * Y + 0.0415 * Z;
    rgb[2] = 0.0557 * X - 0.2040 * Y + 1.0570 * Z;
    const double eps = 1e-9;
    for (int i = 0; i < 3; i++)
        if (rgb[i] < -eps || rgb[i] > 1.0 + eps) return 0;
    return 1;
}

double brm_srgb_lightness(const uint8_t rgb[3]);

/* Lab → 8-bit sRGB keeping L*: chroma is scaled down (bisection) until the colour fits. */
static void lab_to_srgb8(double L, double a, double b, uint8_t out[3])
{
    double rgb[3];
    if (!lab_to_linear(L, a, b, rgb)) {
        double lo = 0.0, hi = 1.0;
        for (int it = 0; it < 40; it++) {
            double mid = 0.5 * (lo + hi);
            if (lab_to_linear(L, a * mid, b * mid, rgb)) lo = mid;
            else hi = mid;
        }
        lab_to_linear(L, a * lo, b * lo, rgb);
    }
    /* Of the 8 ways to round the three channels up or down, take the one whose L* is closest
     * to the one asked for: 8-bit rounding alone moves L* by up to about half a step of a
     * 256-entry map and would break its monotonic lightness. */
    uint8_t base[3];
    double best = INFINITY;
    for (int i = 0; i < 3; i++) {
        double v = floor(255.0 * brm_srgb_encode(rgb[i]));
        base[i] = (uint8_t)(v > 254.0 ? 254.0 : v);
    }
    for (int m = 0; m < 8; m++) {
        uint8_t c[3];
        for (int i = 0; i < 3; i++) c[i] = (uint8_t)(base[i] + ((m >> i) & 1));
        double e = fabs(brm_srgb_lightness(c) - L);
        if (e < best) {
            best = e;
            memcpy(out, c, 3);
        }
    }
}

double brm_srgb_lightness(const uint8_t rgb[3])
{
    double r = brm_srgb_decode(rgb[0] / 255.0), g = brm_srgb_decode(rgb[1] / 255.0),
           b = brm_srgb_decode(rgb[2] / 255.0);
    /* Relative luminance from linear sRGB. Source: IEC 61966-2-1:1999 (Y row of the matrix). */
    double Y = 0.2126 * r + 0.7152 * g + 0.0722 * b;
    /* Source: CIE 15:2004, L* = 116 f(Y/Yn) − 16. */
    return 116.0 * lab_f(Y / YN) - 16.0;
}

/* The project's false-colour map: (t, a*, b*) control points; L* = 14 + 83·t. */
static const double FOG_MAP[][3] = {
    {0.00, 18.0, -38.0},   /* deep indigo */
    {0.22, 6.0, -42.0},    /* slate blue */
    {0.45, -30.0, -12.0},  /* teal */
    {0.66, -28.0, 34.0},   /* moss */
    {0.84, 2.0, 52.0},     /* straw */
    {1.00, 4.0, 12.0},     /* warm white */
};

uint32_t brm_colormap_entry(double t)
{
    if (!(t > 0.0)) return 0;
    if (t >= 1.0) return BRM_COLORMAP_STEPS - 1;
    return (uint32_t)lround(t * (BRM_COLORMAP_STEPS - 1));
}

void brm_falsecolor_entry(uint32_t e, uint8_t rgb[3])
{
    if (e > BRM_COLORMAP_STEPS - 1) e = BRM_COLORMAP_STEPS - 1;
    double t = (double)e / (BRM_COLORMAP_STEPS - 1);
    size_t n = sizeof FOG_MAP / sizeof FOG_MAP[0], i = 0;
    while (i + 2 < n && t > FOG_MAP[i + 1][0]) i++;
    double u = (t - FOG_MAP[i][0]) / (FOG_MAP[i + 1][0] - FOG_MAP[i][0]);
    double a = FOG_MAP[i][1] + u * (FOG_MAP[i + 1][1] - FOG_MAP[i][1]);
    double b = FOG_MAP[i][2] + u * (FOG_MAP[i + 1][2] - FOG_MAP[i][2]);
    lab_to_srgb8(14.0 + 83.0 * t, a, b, rgb);
}

void brm_diverging_entry(uint32_t e, uint8_t rgb[3])
{
    if (e > BRM_COLORMAP_STEPS - 1) e = BRM_COLORMAP_STEPS - 1;
    double s = 2.0 * (double)e / (BRM_COLORMAP_STEPS - 1) - 1.0;
    double m = fabs(s);
    double L = 96.0 - 62.0 * m;
    double a = s < 0.0 ? 8.0 * m : 48.0 * m;
    double b = s < 0.0 ? -52.0 * m : 36.0 * m;
    lab_to_srgb8(L, a, b, rgb);
}

void brm_falsecolor(double t, uint8_t rgb[3]) { brm_falsecolor_entry(brm_colormap_entry(t), rgb); }

void brm_diverging(double s, uint8_t rgb[3])
{
    if (isnan(s)) s = 0.0;
    brm_diverging_entry(brm_colormap_entry(0.5 * (s + 1.0)), rgb);
}
