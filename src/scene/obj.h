/* Wavefront OBJ meshes: the subset a scene needs (positions and faces).
 *
 * Accepted: `v x y z [w]` (up to three more numbers, e.g. vertex colours, are ignored), `f`
 * with three or more corners in the forms `v`, `v/vt`, `v//vn`, `v/vt/vn`, negative
 * (relative) indices, n-gons (triangulated as a fan from the first corner), comments (`#`),
 * CRLF line ends; `o g s usemtl mtllib vt vn` are accepted and ignored. Anything else is an
 * error "FILE:LINE: what is wrong; what is expected". Untrusted input is safe: no read beyond
 * len, no unbounded allocation beyond what the data's size implies. */
#ifndef BRM_OBJ_H
#define BRM_OBJ_H

#include <stddef.h>
#include <stdint.h>

#include "base/diag.h"
#include "base/vec.h"

typedef struct brm_obj_mesh {
    brm_vec3 *verts;
    uint32_t vert_count;
    uint32_t (*faces)[3];       /* triangles, 0-based vertex indices */
    uint32_t face_count;
    uint32_t repeated_dropped;  /* triangles with a repeated corner index, dropped (degenerate) */
} brm_obj_mesh;

/* Parses len bytes of OBJ text; name labels messages. On failure *out is untouched and d holds
 * "name:line: problem; expected" with BRM_E_INPUT (or BRM_E_NOMEM). An input with no faces
 * parses (the caller decides whether an empty mesh is an error). */
brm_status brm_obj_parse(const char *data, size_t len, const char *name, brm_obj_mesh *out, brm_diag *d);

/* Frees what brm_obj_parse allocated; accepts a zeroed struct. */
void brm_obj_free(brm_obj_mesh *m);

#endif
