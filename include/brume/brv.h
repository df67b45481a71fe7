/* brv.h — reader for brume volume files (.brv), version 1.
 *
 * (Owner of this file: the volume room. The byte-level specification, the usage block and the
 * per-prototype documentation go here; see the issue on the runtime reader.)
 *
 * Runtime code needs only this header, the reader sources and zstd. */
#ifndef BRUME_BRV_H
#define BRUME_BRV_H

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

#if defined(BRV_BUILDING_SHARED) && defined(__GNUC__)
#define BRV_API __attribute__((visibility("default")))
#else
#define BRV_API
#endif

/* Result codes: X(name, text). Append only; a shipped code is never renumbered. */
#define BRV_RESULT_LIST(X)                                               \
    X(BRV_OK, "ok")                                                      \
    X(BRV_E_ARGUMENT, "invalid argument")                                \
    X(BRV_E_IO, "cannot read or write the file")                         \
    X(BRV_E_NOMEM, "out of memory")                                      \
    X(BRV_E_MAGIC, "not a brume volume (bad magic)")                     \
    X(BRV_E_VERSION, "unsupported major version")                        \
    X(BRV_E_TRUNCATED, "file is truncated")                              \
    X(BRV_E_HEADER_CRC, "header or table checksum mismatch")             \
    X(BRV_E_LAYOUT, "inconsistent header or tables")                     \
    X(BRV_E_LIMIT, "dimensions over the reader's limits")                \
    X(BRV_E_BRICK_RANGE, "brick lies outside the file or overlaps")      \
    X(BRV_E_BRICK_CORRUPT, "brick data corrupt (zstd or checksum)")      \
    X(BRV_E_NOT_FOUND, "no such channel")                                \
    X(BRV_E_BUFFER, "buffer too small")                                  \
    X(BRV_E_UNREPRESENTABLE, "value cannot be represented in the encoding") \
    X(BRV_E_STATE, "call out of order")

typedef enum brv_result {
#define BRV_X_ENUM(name, text) name,
    BRV_RESULT_LIST(BRV_X_ENUM)
#undef BRV_X_ENUM
    BRV_RESULT_MAX_ENUM
} brv_result;

typedef enum brv_grid_kind {
    BRV_GRID_INVALID = 0,
    BRV_GRID_WORLD = 1,
    BRV_GRID_FRUSTUM = 2,
    BRV_GRID_PROBES = 3,
    BRV_GRID_MAX_ENUM
} brv_grid_kind;

typedef enum brv_encoding {
    BRV_ENCODING_INVALID = 0,
    BRV_ENCODING_F32 = 1,
    BRV_ENCODING_F16 = 2,
    BRV_ENCODING_RGB9E5 = 3,   /* a colour triplet: three consecutive logical channels */
    BRV_ENCODING_MAX_ENUM
} brv_encoding;

typedef struct brv_camera {
    double position[3], look_at[3], up[3];
    double fov_y_deg, aspect, near_m, far_m;
} brv_camera;

typedef struct brv_allocator {
    void *(*alloc)(void *user, size_t size);
    void (*free)(void *user, void *ptr);
    void *user;
} brv_allocator;

/* One logical channel: rgb9e5 triplets appear as three channels sharing a stored group. */
typedef struct brv_channel_info {
    const char *name;       /* e.g. "extinction", "inscatter.r" */
    const char *units;      /* e.g. "1/m", "cd/m2/m" */
    brv_encoding encoding;
    float min, max;         /* over the whole volume, as decoded */
} brv_channel_info;

typedef struct brv_grid_info {
    brv_grid_kind kind;
    uint32_t cells[3];          /* cells (probes) per axis */
    uint32_t brick_size;        /* cells per brick side */
    uint32_t bricks[3];         /* bricks per axis */
    double bounds_min[3], bounds_max[3];  /* world; probes: first and last probe */
    brv_camera camera;          /* frustum */
    const double *slice_depths; /* frustum: cells[2] + 1 depths, near to far; else NULL */
    uint32_t channel_count;
} brv_grid_info;

typedef struct brv_volume brv_volume;

BRV_API const char *brv_result_text(brv_result r);

BRV_API brv_result brv_open_file(const char *path, const brv_allocator *alloc, brv_volume **out);
BRV_API brv_result brv_open_memory(const void *data, size_t size, const brv_allocator *alloc,
                                   brv_volume **out);
BRV_API void brv_free(brv_volume *v);

BRV_API const brv_grid_info *brv_grid(const brv_volume *v);
BRV_API const brv_channel_info *brv_channel(const brv_volume *v, uint32_t index);
/* Index of the named channel, or -1. */
BRV_API int brv_channel_find(const brv_volume *v, const char *name);
/* The metadata JSON text (NUL-terminated) and its length. */
BRV_API const char *brv_metadata(const brv_volume *v, size_t *len);

/* Floats needed for one whole channel: cells[0]·cells[1]·cells[2]. */
BRV_API size_t brv_channel_size(const brv_volume *v);
/* Decodes one channel of the whole grid into out (x fastest, then y, then z). */
BRV_API brv_result brv_decode_channel(const brv_volume *v, uint32_t channel, float *out, size_t out_count);

/* Checks structure and every brick's checksum; on a fault, *brick (if not NULL) names it. */
BRV_API brv_result brv_verify(const brv_volume *v, uint32_t *brick);

#ifdef __cplusplus
}
#endif

#endif
