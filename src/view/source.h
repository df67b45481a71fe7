/* What a slice shows, read from a .brv volume: one or three named channels, or probe
 * irradiance toward an axis computed from the SH channels. */
#ifndef BRM_VIEW_SOURCE_H
#define BRM_VIEW_SOURCE_H

#include "base/diag.h"
#include "view/render.h"

typedef struct brm_view_source {
    brm_view_input in;          /* points into the fields below */
    float *data[3];             /* owned */
    char name[3][64];
    char units[3][32];
    char label[64];
    double *slice_depths;       /* owned copy, frustum only */
} brm_view_source;

/* Opens path and decodes what to show.
 * channels: "NAME" or "R,G,B" (exactly three for colour), or NULL when irradiance is given.
 * irradiance: "+x", "-x", "+y", "-y", "+z" or "-z": irradiance (lux) on a surface facing that
 *   way, E(n) = Σ Â_l L_lm Y_lm(n) from the probes' sh.r0…sh.b8 (Ramamoorthi & Hanrahan 2001,
 *   src/base/sh.h), shown as colour.
 * Errors (message names the file): cannot read → BRM_E_IO; not a valid volume or a corrupt
 * brick → BRM_E_INPUT; unknown channel (the message lists the channels there are), a bad
 * list or axis, irradiance without SH channels → BRM_E_USAGE. On failure *out is zeroed. */
brm_status brm_view_open(const char *path, const char *channels, const char *irradiance,
                         brm_view_source *out, brm_diag *d);

/* Frees what brm_view_open allocated; accepts a zeroed source. */
void brm_view_source_free(brm_view_source *s);

#endif
