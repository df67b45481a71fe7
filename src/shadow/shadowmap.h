/* Shadow-map lookups for callers that ask about one light at many points at once (the
 * kernel's batches). */
#ifndef BRM_SHADOWMAP_H
#define BRM_SHADOWMAP_H

#include "shadow/shadow.h"

/* brm_shadow_visibility(ss, l, p[i]) into out[i] for i < n: the same values bit for bit, the
 * map lookups' steps taken over a chunk of points at a time. */
void brm_shadow_visibility_batch(const brm_shadow_set *ss, uint32_t l, const brm_vec3 *p, uint32_t n, double *out);

#endif
