/* Sky lookups for callers that ask at many nearby points in a row (the kernel's batches):
 * a cursor remembers the cache cell of the last lookup and the nodes it has already read
 * there, so the next lookup in the same cell skips finding them again. */
#ifndef BRM_SKY_H
#define BRM_SKY_H

#include "shadow/shadow.h"

typedef struct brm_sky_cursor {
    int cell[3];                /* the cache cell the corners below belong to */
    int valid;                  /* 0: nothing remembered yet */
    const float *corner[8];     /* a node's 12 values, NULL for a node inside a solid, or
                                   not read yet (sky.c's marker) */
} brm_sky_cursor;

/* Forgets everything: call before the first lookup with a cursor (one cursor per thread and
 * per shadow set). */
void brm_sky_cursor_init(brm_sky_cursor *c);

/* brm_sky_incident(ss, p, sample_index, out) with the cursor's help: the same bits. */
void brm_sky_incident_cursor(const brm_shadow_set *ss, brm_sky_cursor *c, brm_vec3 p, uint32_t sample_index,
                             double out[3][4]);

#endif
