/* 8-bit RGB images and the two Netpbm encoders the slice command writes.
 *
 * Rows are held top to bottom (row 0 is the top of the picture), pixels left to right, three
 * bytes R, G, B per pixel. PPM (P6) stores rows in that order; PFM stores them bottom to top,
 * so brm_pfm_encode reverses them (Netpbm ppm(5), pfm(5)). */
#ifndef BRM_VIEW_IMAGE_H
#define BRM_VIEW_IMAGE_H

#include <stddef.h>
#include <stdint.h>

#include "base/diag.h"

/* Largest width or height we draw: keeps a mistyped --scale from asking for gigabytes. */
#define BRM_IMAGE_MAX_SIDE 16384u

typedef struct brm_image {
    uint32_t w, h;
    uint8_t *rgb;           /* w·h·3 bytes, row 0 at the top */
} brm_image;

/* Allocates a w×h image filled with `fill` (3 bytes). Fails (BRM_E_USAGE) over
 * BRM_IMAGE_MAX_SIDE on a side, BRM_E_NOMEM when allocation fails; *im untouched then. */
brm_status brm_image_alloc(brm_image *im, uint32_t w, uint32_t h, const uint8_t fill[3], brm_diag *d);
/* Frees the pixels; accepts an image that was never allocated (zeroed). */
void brm_image_free(brm_image *im);

/* Sets one pixel; ignores coordinates outside the image. */
void brm_image_put(brm_image *im, int64_t x, int64_t y, const uint8_t rgb[3]);
/* Fills the rectangle [x, x+w) × [y, y+h), clipped to the image. */
void brm_image_fill_rect(brm_image *im, int64_t x, int64_t y, int64_t w, int64_t h, const uint8_t rgb[3]);
/* Copies a small RGB block (sw×sh, rows top to bottom) magnified by an integer factor
 * (nearest neighbour: each source pixel becomes scale×scale pixels) with its top-left at (x, y). */
void brm_image_blit_scaled(brm_image *im, int64_t x, int64_t y, const uint8_t *src, uint32_t sw,
                           uint32_t sh, uint32_t scale);

/* P6 file: "P6\n<w> <h>\n255\n" (exactly one whitespace after maxval), then the rows top to
 * bottom, one byte per sample (maxval < 256). Source: Netpbm ppm(5). *out is malloc'd. */
brm_status brm_ppm_encode(const brm_image *im, uint8_t **out, size_t *len, brm_diag *d);

/* PFM file from float pixels held top to bottom with `comps` (1 or 3) interleaved samples:
 * "Pf" (1) or "PF" (3), "\n<w> <h>\n-1.0\n", then IEEE 754 binary32 samples little-endian (the
 * negative scale says so) with the rows BOTTOM to TOP, pixels left to right, no padding.
 * Source: Netpbm pfm(5). The bytes do not depend on the host's byte order. */
brm_status brm_pfm_encode(const float *px, uint32_t w, uint32_t h, uint32_t comps, uint8_t **out,
                          size_t *len, brm_diag *d);

#endif
