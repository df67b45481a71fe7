/* Turning numbers into display colours: the tone curve for radiance, sRGB encoding, and the
 * project's own false-colour and diverging maps.
 *
 * Radiance (cd/m²) is shown as: exposed value x = k·L with k = 2^EV; tone t = x/(1 + x)
 * (0 maps to 0, monotonic, never clips); then sRGB encoding per IEC 61966-2-1 and rounding
 * to 8 bits. The automatic exposure puts the 99th percentile of the shown positive values at
 * t = 0.8 (k = 4/p99): bright enough to read the gradients, highlights still unclipped.
 *
 * Scalar channels use the "brume fog" false-colour map, defined here by control points in
 * CIE 1976 L*a*b* (D65): L* rises linearly from 14 to 97 with the value, so the map is
 * monotonic in lightness and reads in grey print; hue runs deep indigo → slate blue → teal →
 * moss → straw → warm white. A point outside the sRGB gamut keeps its L* and loses chroma.
 * Signed channels use a diverging map: L* 96 neutral at zero, darkening symmetrically to
 * L* 34 at ±1, blue toward negative and red-brown toward positive values. */
#ifndef BRM_VIEW_TONE_H
#define BRM_VIEW_TONE_H

#include <stddef.h>
#include <stdint.h>

/* Linear [0,1] → sRGB-encoded [0,1] (IEC 61966-2-1: 12.92·c below 0.0031308, else
 * 1.055·c^(1/2.4) − 0.055); clamps outside [0,1], NaN → 0. */
double brm_srgb_encode(double c);
/* The inverse, sRGB-encoded [0,1] → linear. */
double brm_srgb_decode(double v);
/* brm_srgb_encode then round(255·v): brm_srgb_byte_exact computes it so, brm_srgb_byte gives
 * the same byte for every input from a table of the 255 points where it steps (no pow). */
uint8_t brm_srgb_byte(double c);
uint8_t brm_srgb_byte_exact(double c);

/* Tone curve x/(1 + x) for x > 0; 0 for x <= 0 or NaN. */
double brm_tone(double x);

/* Exposure multiplier k from the values shown: 4/p99 of the positive finite values
 * (p99 by the lower nearest rank on the sorted values), or 1 when none is positive.
 * vals is not modified. */
double brm_auto_exposure(const float *vals, size_t n);

/* CIE 1976 L* (0..100) of an 8-bit sRGB colour, D65. */
double brm_srgb_lightness(const uint8_t rgb[3]);

/* Both maps are defined on BRM_COLORMAP_STEPS evenly spaced entries (the input is rounded to
 * the nearest), so a picture can use a table of that size and get exactly these colours. */
#define BRM_COLORMAP_STEPS 4096

/* False colour for t in [0,1] (clamped; NaN → 0). */
void brm_falsecolor(double t, uint8_t rgb[3]);
/* Diverging colour for s in [−1,1] (clamped; NaN → 0). */
void brm_diverging(double s, uint8_t rgb[3]);
/* Entry e (0 .. BRM_COLORMAP_STEPS − 1) of each map: t = e/(STEPS − 1), s = 2t − 1. */
void brm_falsecolor_entry(uint32_t e, uint8_t rgb[3]);
void brm_diverging_entry(uint32_t e, uint8_t rgb[3]);
/* The entry a value falls on. */
uint32_t brm_colormap_entry(double t);

#endif
