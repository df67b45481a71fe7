/* Cutting a 2-D slice out of a 3-D channel, oriented as SPEC.md says:
 *   z-slice: x to the right, y up     (image w = nx, h = ny)
 *   y-slice: x to the right, z up     (image w = nx, h = nz)
 *   x-slice: z to the right, y up     (image w = nz, h = ny)
 * Frustum volumes use the same rule on (i, j, k): a depth slice has i to the right, j up.
 * Slices are held with row 0 at the TOP of the picture, so "up" means row 0 is the highest
 * index along the vertical axis. Channels are x fastest, then y, then z (as brv decodes). */
#ifndef BRM_VIEW_SLICE_H
#define BRM_VIEW_SLICE_H

#include <stddef.h>
#include <stdint.h>

typedef enum brm_axis {
    BRM_AXIS_X = 0,
    BRM_AXIS_Y = 1,
    BRM_AXIS_Z = 2,
    BRM_AXIS_MAX_ENUM
} brm_axis;

/* Parses "x", "y" or "z"; returns BRM_AXIS_MAX_ENUM for anything else. */
brm_axis brm_axis_parse(const char *s);
/* 'x', 'y' or 'z'. */
char brm_axis_letter(brm_axis a);

/* Image size of a slice across `axis` of an n[0]×n[1]×n[2] grid. */
void brm_slice_dims(const uint32_t n[3], brm_axis axis, uint32_t *w, uint32_t *h);

/* Grid cell shown at image column col, row row (row 0 = top) of slice `index`. */
void brm_slice_cell(const uint32_t n[3], brm_axis axis, uint32_t index, uint32_t col, uint32_t row,
                    uint32_t ijk[3]);

/* Copies slice `index` (< n[axis]) of vol into out (w·h floats, rows top to bottom). */
void brm_slice_extract(const float *vol, const uint32_t n[3], brm_axis axis, uint32_t index, float *out);

#endif
