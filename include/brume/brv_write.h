/* brv_write.h — writer for brume volume files (.brv), version 1.
 *
 * Streaming: bricks are handed in one at a time, in any fixed order (the caller's order is the
 * file's order, so a deterministic caller gets deterministic bytes), each encoded, compressed
 * and written at once; memory does not grow with the volume. Tables go at the end and the
 * header is patched on finish, so the FILE must be seekable. The caller owns the file: it
 * writes to a temporary and renames it after brv_writer_finish succeeds. */
#ifndef BRUME_BRV_WRITE_H
#define BRUME_BRV_WRITE_H

#include <stdio.h>

#include "brume/brv.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef struct brv_channel_desc {
    const char *name;           /* unique; rgb9e5 triplets: three consecutive channels */
    const char *units;
    brv_encoding encoding;
} brv_channel_desc;

typedef struct brv_write_desc {
    brv_grid_kind kind;
    uint32_t cells[3];
    uint32_t brick_size;                    /* 0 = 16 */
    double bounds_min[3], bounds_max[3];    /* world, probes */
    brv_camera camera;                      /* frustum */
    const double *slice_depths;             /* frustum: cells[2] + 1 values */
    uint32_t channel_count;
    const brv_channel_desc *channels;
    int compression_level;                  /* zstd level 1..19; 0 = 9 */
    const char *metadata;                   /* JSON text, may be NULL */
    size_t metadata_len;
    const brv_allocator *alloc;             /* NULL = malloc/free */
    char *error;                            /* optional: receives why brv_writer_create failed */
    size_t error_size;
} brv_write_desc;

typedef struct brv_writer brv_writer;

/* Starts a volume at f's current position (the FILE must be seekable and opened for binary
 * writing). Returns BRV_OK and *out; BRV_E_ARGUMENT or BRV_E_LIMIT for a bad description
 * (desc->error, when given, says which field and why), BRV_E_NOMEM, BRV_E_IO.
 * Memory: O(brick_size³·channels) plus 17 bytes per brick for the table. */
BRV_API brv_result brv_writer_create(FILE *f, const brv_write_desc *desc, brv_writer **out);

/* Encodes and writes brick b (numbered x fastest, then y, then z). data holds every channel of
 * the brick's cells, channel-major: data[c·nx·ny·nz + x + nx·(y + ny·z)], where nx, ny, nz is
 * the brick's extent clipped to the grid. Each brick exactly once. A value the encoding cannot
 * hold (NaN, infinity, a negative value in rgb9e5) is BRV_E_UNREPRESENTABLE, never clamped. */
BRV_API brv_result brv_writer_put_brick(brv_writer *w, uint32_t b, const float *data);

/* Writes the tables and patches the header; every brick must have been put. */
BRV_API brv_result brv_writer_finish(brv_writer *w);

/* Frees the writer; accepts NULL. */
BRV_API void brv_writer_free(brv_writer *w);

/* Text of the last error with detail (e.g. which channel and value), or "". */
BRV_API const char *brv_writer_error(const brv_writer *w);

#ifdef __cplusplus
}
#endif

#endif
