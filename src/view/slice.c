#include "view/slice.h"

#include <string.h>

brm_axis brm_axis_parse(const char *s)
{
    if (s == NULL) return BRM_AXIS_MAX_ENUM;
    if (strcmp(s, "x") == 0) return BRM_AXIS_X;
    if (strcmp(s, "y") == 0) return BRM_AXIS_Y;
    if (strcmp(s, "z") == 0) return BRM_AXIS_Z;
    return BRM_AXIS_MAX_ENUM;
}

char brm_axis_letter(brm_axis a) { return a == BRM_AXIS_X ? 'x' : a == BRM_AXIS_Y ? 'y' : 'z'; }

/* Which grid axis runs to the right and which runs up, for each slicing axis. */
static void slice_axes(brm_axis axis, int *right, int *up)
{
    switch (axis) {
    case BRM_AXIS_X: *right = 2; *up = 1; break;
    case BRM_AXIS_Y: *right = 0; *up = 2; break;
    default:         *right = 0; *up = 1; break;
    }
}

void brm_slice_dims(const uint32_t n[3], brm_axis axis, uint32_t *w, uint32_t *h)
{
    int r, u;
    slice_axes(axis, &r, &u);
    *w = n[r];
    *h = n[u];
}

void brm_slice_cell(const uint32_t n[3], brm_axis axis, uint32_t index, uint32_t col, uint32_t row,
                    uint32_t ijk[3])
{
    int r, u;
    slice_axes(axis, &r, &u);
    ijk[axis] = index;
    ijk[r] = col;
    ijk[u] = n[u] - 1 - row;   /* row 0 is the top: the highest index */
}

void brm_slice_extract(const float *vol, const uint32_t n[3], brm_axis axis, uint32_t index, float *out)
{
    uint32_t w, h;
    brm_slice_dims(n, axis, &w, &h);
    for (uint32_t row = 0; row < h; row++)
        for (uint32_t col = 0; col < w; col++) {
            uint32_t c[3];
            brm_slice_cell(n, axis, index, col, row, c);
            out[(size_t)row * w + col] = vol[(size_t)c[0] + (size_t)n[0] * ((size_t)c[1] + (size_t)n[1] * c[2])];
        }
}
