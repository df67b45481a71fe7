/* Slice pictures: one slice (or a contact sheet of every slice) of one or three channels, as
 * an 8-bit PPM with a legend or as a raw PFM.
 *
 * How values become colours (PPM):
 * - radiance: a channel whose units contain "cd/m2" (or "lux", for irradiance) — exposed,
 *   tone-mapped with x/(1+x) and sRGB-encoded (view/tone.h); one channel as grey, three
 *   channels as R, G, B. Exposure: --exposure EV gives k = 2^EV; otherwise automatic (the
 *   99th percentile of the shown values at tone 0.8), the EV used is reported and printed
 *   in the legend so a series of slices can be pinned to one exposure.
 * - signed: SH coefficients of band 1 and up (dir.?1–3, sh.?1–8) — the diverging map over
 *   ±max|v| of the shown slices (or ±max(|lo|,|hi|) of a given range).
 * - scalar: everything else (extinction, occupancy, transmittance, validity) — the
 *   false-colour map from lo to hi: [0, 1] for occupancy, transmittance and validity, the
 *   shown slices' min..max for the rest, or a given range.
 * Three channels always make a colour image and must not be signed.
 *
 * Layout (PPM): the slice (or the sheet) at the top-left, magnified by an integer factor
 * (nearest) — by default so its long side is at least 256 px (a sheet's tiles at least
 * 64 px) — then, unless no_legend, a legend strip: caption (channel names, axis and index,
 * units), for frustum volumes the slice's depth range in metres, a colour bar and its end
 * values. A sheet lays tiles left to right, top to bottom, index 0 first, each under a label
 * with its index. PFM: the raw floats, no tone map and no legend, one pixel per cell unless a
 * scale is given; a sheet packs its tiles with no gaps (unused tiles 0). */
#ifndef BRM_VIEW_RENDER_H
#define BRM_VIEW_RENDER_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "base/diag.h"
#include "brume/brv.h"
#include "view/slice.h"

typedef enum brm_view_mode {
    BRM_VIEW_MODE_INVALID = 0,
    BRM_VIEW_MODE_RADIANCE,
    BRM_VIEW_MODE_SIGNED,
    BRM_VIEW_MODE_SCALAR,
    BRM_VIEW_MODE_MAX_ENUM
} brm_view_mode;

/* What to draw: whole channels of one grid (not owned). */
typedef struct brm_view_input {
    brv_grid_kind kind;
    uint32_t n[3];                  /* cells (probes) per axis */
    const double *slice_depths;     /* frustum: n[2] + 1 depths in metres; else NULL */
    uint32_t channel_count;         /* 1 or 3 */
    const float *data[3];           /* n[0]·n[1]·n[2] floats each, x fastest */
    const char *name[3];
    const char *units[3];
    const char *label;              /* caption instead of the names (e.g. "irradiance +x"); may be NULL */
    bool signed_values;             /* treat a single channel as signed whatever its name */
} brm_view_input;

typedef struct brm_view_options {   /* zero = defaults */
    brm_axis axis;
    uint32_t index;
    bool all;                       /* contact sheet of every slice */
    bool pfm;                       /* PFM instead of PPM */
    uint32_t scale;                 /* 0 = automatic (PPM) / 1 (PFM) */
    bool exposure_set;
    double exposure_ev;
    bool range_set;
    double range_lo, range_hi;
    bool no_legend;
} brm_view_options;

typedef struct brm_view_result {
    uint8_t *bytes;                 /* the whole file, malloc'd */
    size_t len;
    uint32_t width, height;         /* of the picture */
    brm_view_mode mode;             /* PPM: how colours were chosen */
    double exposure_ev;             /* radiance: the EV used */
    double range_lo, range_hi;      /* scalar, signed: the values at the ends of the bar */
    uint32_t scale;                 /* pixels per cell */
    uint32_t slice_x, slice_y;      /* top-left of the slice (of tile 0 for a sheet) */
    uint32_t tile_pitch_x, tile_pitch_y; /* sheet: offset between neighbouring tiles */
    uint32_t columns;               /* sheet: tiles per row */
} brm_view_result;

/* The display mode for a single channel from its name and units. */
brm_view_mode brm_view_mode_for(const char *name, const char *units);

/* Draws the picture. Errors: bad axis, index out of range (the message gives the range), a
 * signed channel in a colour image, a bad range or scale → BRM_E_USAGE; memory → BRM_E_NOMEM.
 * On failure *out is untouched. Deterministic: same input, same bytes. */
brm_status brm_view_render(const brm_view_input *in, const brm_view_options *opt,
                           brm_view_result *out, brm_diag *d);

void brm_view_result_free(brm_view_result *r);

#endif
