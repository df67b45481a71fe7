/* brv.h — reader for brume volume files (.brv), version 1.
 *
 * Runtime code needs only this header, the reader sources (src/volume/) and zstd (libc, libm).
 * The reader is safe on untrusted files: every size, offset and count is checked against the
 * file before it is used, and every fault gets a named result code.
 *
 * ---- Usage (this block is compiled and run as a test: tests/volume/test_brv_usage.c) -------
 *
 *     brv_volume *vol = NULL;
 *     brv_result r = brv_open_file("fog.brv", NULL, &vol);
 *     if (r != BRV_OK) { fprintf(stderr, "fog.brv: %s\n", brv_result_text(r)); return 1; }
 *     const brv_grid_info *g = brv_grid(vol);
 *     int ch = brv_channel_find(vol, "extinction");
 *     size_t n = brv_channel_size(vol);               // cells[0]·cells[1]·cells[2] floats
 *     float *ext = malloc(n * sizeof *ext);
 *     if (ch >= 0 && ext && brv_decode_channel(vol, (uint32_t)ch, ext, n) == BRV_OK)
 *         printf("first cell %g 1/m of %u x %u x %u\n", ext[0], g->cells[0], g->cells[1], g->cells[2]);
 *     free(ext);
 *     brv_free(vol);                                   // accepts NULL
 *
 * Random access: brv_sampler_create(vol, 64, &s); brv_sample_world(s, pos, values); ...
 * (README.md, "Reading a volume in your engine", has a complete program.)
 *
 * ---- Threads ---------------------------------------------------------------------------
 * A brv_volume is never modified after open: any number of threads may call the decode and
 * query functions on one volume at once, as long as each thread passes its own brv_decoder
 * (or NULL, which makes the call allocate a temporary one). A volume opened with brv_open_file
 * reads its bricks from the file with pread, into the calling decoder's own buffer, so this
 * holds for it too. A brv_sampler holds a brick cache and belongs to one thread at a time.
 *
 * ---- Byte-level layout of version 1.0 -----------------------------------------------------
 * All integers are little-endian, all reals IEEE 754 (f32 binary32, f64 binary64,
 * little-endian). Offsets are from the start of the file. A file is:
 *     header (header_size bytes) · bricks (contiguous, no gaps) · tables (tables_size bytes)
 * and nothing else: tables_offset + tables_size is the file size, and the bricks exactly
 * fill [header_size, tables_offset) in the order the brick table's offsets give.
 *
 * Header (64 bytes in 1.0):
 *   0  u8[8]  magic "BRUMEVOL"
 *   8  u16    major version = 1   (a reader refuses another major: BRV_E_VERSION)
 *  10  u16    minor version = 0   (a reader accepts any minor of its major; see Versioning)
 *  12  u32    header_size, 64 ≤ header_size ≤ 4096 (64 in 1.0; later minors may append fields)
 *  16  u8     grid kind: 1 world, 2 frustum, 3 probes
 *  17  u8     brick_size: cells per brick side, 1..32 (16 by default)
 *  18  u16    channel_count: logical channels, 1..64
 *  20  u32[3] cells per axis (x, y, z), each 1..65536 (probes: probes per axis)
 *  32  u64    tables_offset
 *  40  u64    tables_size
 *  48  u32    tables_crc: CRC-32 of the whole tables section
 *  52  u16    channel_entry_size (64 in 1.0; ≥ 64)
 *  54  u16    brick_entry_size (16 in 1.0; ≥ 16)
 *  56  u32    reserved, 0
 *  60  u32    header_crc: CRC-32 of header bytes [0, header_size − 4); it is the header's
 *             last 4 bytes (bytes 60..63 in 1.0)
 * CRC-32 is the ISO-HDLC / IEEE 802.3 CRC (reflected polynomial 0xEDB88320, initial value
 * and final xor 0xFFFFFFFF; CRC of "123456789" = 0xCBF43926), as in zlib's crc32().
 *
 * Tables section (at tables_offset):
 *   0    f64[3] bounds_min, metres   world: the box's low corner; probes: the first probe
 *   24   f64[3] bounds_max, metres   world: the box's high corner; probes: the last probe
 *   48   f64[13] camera (frustum; zero otherwise): position[3], look_at[3], up[3] in metres,
 *               fov_y_deg (degrees), aspect (width/height), near_m, far_m (metres)
 *   152  u32    slice_depth_count: frustum cells[2] + 1, otherwise 0
 *   156  u32    metadata_size in bytes (≤ 16 MiB)
 *   160  f64[slice_depth_count] view-space depths in metres, increasing, near to far
 *   then channel_count channel entries of channel_entry_size bytes:
 *     0  u8[32] name, UTF-8, NUL-padded, at least one NUL (so ≤ 31 bytes)
 *    32  u8[16] units, UTF-8, NUL-padded, at least one NUL
 *    48  u8     encoding: 1 f32, 2 f16, 3 rgb9e5
 *    49  i8     scale_exp_max: the largest per-brick scale exponent used for this channel
 *    50  u16    reserved, 0
 *    52  f32    min over the whole volume, as decoded
 *    56  f32    max over the whole volume, as decoded
 *    60  u32    reserved, 0
 *   then one brick entry of brick_entry_size bytes per brick, bricks numbered x fastest,
 *   then y, then z (bricks per axis = ceil(cells / brick_size)):
 *     0  u64    offset of the brick's stored bytes
 *     8  u32    stored size in bytes (1..16 MiB)
 *    12  u32    CRC-32 of the stored bytes
 *   then metadata_size bytes of metadata: a UTF-8 JSON object (scene content hash, settings,
 *   tool version; never a timestamp, so equal bakes give equal bytes).
 *
 * A brick's stored bytes are one standard zstd frame (RFC 8878) with the content size and
 * the content checksum present; `zstd -d` decodes it. Its content, the brick payload, holds
 * the brick's cells — clipped to the grid at the high edges, extent nx·ny·nz — as one group
 * per stored channel, in channel order. A group is one f32 or f16 channel, or an rgb9e5
 * triplet: three consecutive channels with encoding 3 (red, green, blue), which the channel
 * table must hold in runs of a multiple of three. Each group is
 *     u8 mode · i8 scale_exp (0..127; 0 for f32) · u8 word_bytes (1..8) · u8 reserved (0), then
 *     mode 1 (constant): one word — every cell holds it (empty air costs a few bytes)
 *     mode 0 (filtered): nx·ny·nz words, transformed losslessly for zstd: first each word
 *            (an unsigned integer of word_bytes bytes) is replaced by its difference, modulo
 *            2^(8·word_bytes), from the word before it in the same x row (the first word of
 *            each row is kept), cells x fastest, then y, then z; then the bytes are shuffled
 *            into planes: all words' byte 0 (least significant), then all byte 1, and so on.
 * The payload ends after the last group; its size must match exactly.
 *
 * Encodings and their error (v is the value written, d the value read, s = 2^scale_exp):
 *   f32 (word_bytes 4): the IEEE binary32 bits, s = 1; exact.
 *   f16 (word_bytes 2): IEEE 754 binary16 of v/s, rounded to nearest, ties to even;
 *       |d − v| ≤ max(|v|·2⁻¹¹, s·2⁻²⁵).
 *   rgb9e5 (word_bytes 4): the shared-exponent format of the OpenGL EXT_texture_shared_exponent
 *       specification applied to (r, g, b)/s: bits 0–8 red, 9–17 green, 18–26 blue mantissas,
 *       27–31 the exponent (bias 15); decoded x = mantissa·2^(exp − 24), times s;
 *       |d − v| ≤ max(m/511, s·2⁻²⁵) for each component, m the triplet's largest component.
 * The scale exponent is chosen per brick and per group by the writer, because a streaming
 * writer cannot know a channel's range before its first brick: it is the smallest e in
 * 0..127 for which every |v|/2^e fits the encoding (f16 ≤ 65504, rgb9e5 ≤ 65408), so a sun
 * seen through fog (10⁵ cd/m² and more) stays representable; e is 0 for f32. The channel
 * table keeps the largest e used. NaN, infinities and (rgb9e5) negative values cannot be
 * represented: the writer refuses them with BRV_E_UNREPRESENTABLE, it never clamps.
 *
 * Versioning: the major version changes when a 1.x reader could misread a file; it refuses
 * other majors. A newer minor only appends: header fields before the header CRC (header_size
 * grows), bytes at the end of channel and brick entries (entry sizes grow), and new encoding
 * codes. This reader ignores the appended bytes, and lists a channel of an unknown encoding
 * with encoding BRV_ENCODING_INVALID (encoding_code keeps the stored number): decoding it
 * gives BRV_E_VERSION while the other channels decode normally (a group of unknown encoding
 * is one channel, skipped by its word_bytes). Unknown metadata keys are ignored.
 *
 * Channels and their spherical-harmonic conventions (see SPEC.md "Output channels"):
 * real orthonormal SH without the Condon–Shortley phase, evaluated on a unit direction
 * ω = (x, y, z) in scene coordinates (y up, right-handed) pointing toward where light comes
 * from, index i: 0 Y00 = 0.282095; 1 Y1,−1 = 0.488603·y; 2 Y10 = 0.488603·z;
 * 3 Y11 = 0.488603·x; 4 Y2,−2 = 1.092548·xy; 5 Y2,−1 = 1.092548·yz; 6 Y20 = 0.315392·(3z²−1);
 * 7 Y21 = 1.092548·xz; 8 Y22 = 0.546274·(x² − y²).
 *   world grids: "dir.r0".."dir.r3", "dir.g0".., "dir.b0".. are bands 0–1 (i = 0..3) of
 *     sigma_s times the incident radiance; a Henyey–Greenstein phase g gives the in-scatter
 *     toward a viewer looking along v as Σ_l g^l Σ_m dir_lm·Y_lm(v).
 *   probe grids: "sh.r0".."sh.r8", "sh.g0".., "sh.b0".. are bands 0–2 (i = 0..8), the raw
 *     (unwindowed) projection of incident radiance in cd/m²; irradiance by Ramamoorthi and
 *     Hanrahan's convolution E(n) = Σ Â_l L_lm Y_lm(n), Â = (π, 2π/3, π/4).
 * Cell (i, j, k) of a world grid spans bounds_min + (i, j, k)·(max − min)/cells to the next;
 * its value is the cell average and sits at the cell centre for sampling. Probe (i, j, k) is
 * at bounds_min + (i, j, k)·(max − min)/(cells − 1). Frustum column (i, j) is the pixel column
 * at image position ((i + ½)/nx, (j + ½)/ny), i right, j up; slice k spans view depths
 * slice_depths[k]..slice_depths[k + 1].
 */
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

#define BRV_VERSION_MAJOR 1
#define BRV_VERSION_MINOR 0
#define BRV_MAX_BRICK_SIZE 32u
#define BRV_MAX_CHANNELS 64u
#define BRV_MAX_CELLS_PER_AXIS 65536u

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

/* Optional allocator: alloc returns NULL on failure; free accepts NULL. */
typedef struct brv_allocator {
    void *(*alloc)(void *user, size_t size);
    void (*free)(void *user, void *ptr);
    void *user;
} brv_allocator;

/* One logical channel: rgb9e5 triplets appear as three channels sharing a stored group. */
typedef struct brv_channel_info {
    const char *name;       /* e.g. "extinction", "inscatter.r" */
    const char *units;      /* e.g. "1/m", "cd/m2/m" */
    brv_encoding encoding;  /* BRV_ENCODING_INVALID: a newer minor's encoding (see encoding_code) */
    float min, max;         /* over the whole volume, as decoded */
    int scale_exp_max;      /* largest per-brick power-of-two scale exponent used */
    uint32_t encoding_code; /* the stored encoding number */
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
    /* Added fields (append only): */
    uint32_t brick_count;       /* bricks[0]·bricks[1]·bricks[2] */
    uint32_t version_major, version_minor;
    uint64_t file_size;         /* bytes */
    uint64_t brick_bytes;       /* sum of the bricks' stored (compressed) sizes */
} brv_grid_info;

typedef struct brv_volume brv_volume;
typedef struct brv_decoder brv_decoder;
typedef struct brv_sampler brv_sampler;

/* Text of a result code, from the same list as the enum.
 * Returns a static string; "unknown result" for a value outside the list. */
BRV_API const char *brv_result_text(brv_result r);

/* Opens a volume file: reads its header and tables and checks its structure (header, tables,
 * brick ranges against the file's size, header and table CRCs). On POSIX systems the bricks
 * stay on disk and are read (pread, no shared file position, so threads with their own
 * decoders may read at once) each time one is decoded; the file stays open until brv_free.
 * If the file is shortened after open, a decode gives BRV_E_TRUNCATED; if it is changed, the
 * checks below give BRV_E_BRICK_CORRUPT. Elsewhere the whole file is read at open. Each brick's zstd content checksum is checked whenever the brick is
 * decoded, so changed data is never returned; brv_verify checks every brick and also the
 * CRC-32 of its stored bytes (which catches changes that leave the decoded data intact).
 * Returns BRV_OK and *out, or a fault code with *out untouched.
 * Notes: safe on untrusted files; allocates at most the header and tables (the whole file
 * where bricks cannot be read on demand) plus O(channels + bricks), and each decoder one
 * stored brick.
 * path: a file name. alloc: NULL for malloc/free; the volume keeps a copy. */
BRV_API brv_result brv_open_file(const char *path, const brv_allocator *alloc, brv_volume **out);

/* Opens a volume held in memory, without copying it.
 * Returns as brv_open_file.
 * data: size bytes that must stay valid and unchanged until brv_free. */
BRV_API brv_result brv_open_memory(const void *data, size_t size, const brv_allocator *alloc,
                                   brv_volume **out);

/* Frees a volume; accepts NULL. */
BRV_API void brv_free(brv_volume *v);

/* The grid description; valid until brv_free. */
BRV_API const brv_grid_info *brv_grid(const brv_volume *v);
/* Channel index's description, or NULL when index ≥ channel_count. */
BRV_API const brv_channel_info *brv_channel(const brv_volume *v, uint32_t index);
/* Index of the named channel (exact, case-sensitive), or -1. */
BRV_API int brv_channel_find(const brv_volume *v, const char *name);
/* The metadata JSON text (NUL-terminated) and its length (len may be NULL). */
BRV_API const char *brv_metadata(const brv_volume *v, size_t *len);

/* Floats needed for one whole channel: cells[0]·cells[1]·cells[2]. */
BRV_API size_t brv_channel_size(const brv_volume *v);
/* Floats needed for every channel of the whole grid: channel_count·brv_channel_size. */
BRV_API size_t brv_all_size(const brv_volume *v);
/* Floats needed for one brick's every channel: channel_count·brick_size³ (the largest brick). */
BRV_API size_t brv_brick_size(const brv_volume *v);

/* First cell and extent (clipped to the grid) of brick b. Returns BRV_E_ARGUMENT when
 * b ≥ brick_count. */
BRV_API brv_result brv_brick_extent(const brv_volume *v, uint32_t b, uint32_t origin[3],
                                    uint32_t extent[3]);

/* A decoding workspace (zstd context and scratch) for one thread. */
BRV_API brv_result brv_decoder_create(const brv_volume *v, brv_decoder **out);
/* Frees a decoder; accepts NULL. */
BRV_API void brv_decoder_free(brv_decoder *d);
/* How brv_decode_brick and brv_decode_brick_f16 store their output (the values are the same
 * bits in every mode, and visible to other threads when the call returns):
 *   BRV_STREAM_OFF: ordinary stores; the output stays in the caches.
 *   BRV_STREAM_ON: streaming (cache-bypassing, non-temporal) stores where the machine has them
 *     (SSE2) and the output is 16-byte aligned; any other nonzero value of `on` means this.
 *   BRV_STREAM_AUTO, the default of a new decoder: ordinary stores until the decoder's calls
 *     have written more than BRV_STREAM_AUTO_BYTES (8 MiB) in a forward run — each call's
 *     output starting at or after the end of the previous call's, as when a volume is decoded
 *     brick by brick into one large array, by one thread or by several taking turns — then
 *     streaming stores, until a call's output starts before that end (a reused buffer, a new
 *     pass over the array), which begins a new run. Why: an ordinary store to a line that is
 *     not in the caches first reads the line from memory (read for ownership) and later
 *     writes it back; a streaming store only writes. Once a run has passed 8 MiB its first
 *     bytes have left a core's own caches (current x86-64 cores have 1–2 MiB of L2, the
 *     machine measured here 2 MiB by lscpu; the threshold is common practice, no source), so
 *     keeping the rest in the caches buys little. Measured (bench/bench_brv,
 *     256³ cells, 4 channels, bricks of 16³, 256 MiB of floats; CPU time, medians): ordinary
 *     stores reach 86–90 % of ZSTD_decompress's own speed into the same kind of buffer at one
 *     and two threads, the default 96–97 % (halves: 92–95 % and 99–101 %). A volume of 64³
 *     cells (4 MiB of floats) stays under the threshold, and there streaming would be slower.
 *     A reused brick buffer never streams. A caller that reads each
 *     brick right after decoding it into a large pool filled in order should choose
 *     BRV_STREAM_OFF (its reads would otherwise come from memory).
 * (Whatever this setting, f32 channels with rows of 16 cells are un-filtered with AVX-512 or
 * AVX2 on x86-64 processors that have them, chosen at run time, with the output read a little
 * ahead; the values are the same bits as the portable code's.) Accepts NULL; each call begins
 * a new run. */
#define BRV_STREAM_OFF 0
#define BRV_STREAM_ON 1
#define BRV_STREAM_AUTO 2
#define BRV_STREAM_AUTO_BYTES (8u << 20)
BRV_API void brv_decoder_set_streaming(brv_decoder *d, int on);

/* Decodes brick b, every channel, channel-major in the layout brv_writer_put_brick takes:
 * out[c·nx·ny·nz + x + nx·(y + ny·z)], nx·ny·nz the brick's clipped extent.
 * Returns BRV_OK, BRV_E_BUFFER (out_count too small), BRV_E_BRICK_CORRUPT (checksum or zstd
 * fault), BRV_E_VERSION (a channel of unknown encoding), or BRV_E_NOMEM.
 * Notes: thread-safe for distinct decoders; dec may be NULL (a temporary one is made).
 * On a fault, out may have been partly written; its contents are not data. */
BRV_API brv_result brv_decode_brick(const brv_volume *v, brv_decoder *dec, uint32_t b, float *out,
                                    size_t out_count);

/* brv_decode_brick as binary16 words (IEEE 754, round to nearest even), same layout. An f16
 * channel stored without scale (scale_exp 0, the usual case) is copied as its stored halves,
 * with no conversion; others are decoded and rounded as brv_f32_to_f16 would.
 * Returns as brv_decode_brick, and BRV_E_UNREPRESENTABLE when a value is beyond binary16's
 * range (65504) or is an infinity or NaN (every word is still written). */
BRV_API brv_result brv_decode_brick_f16(const brv_volume *v, brv_decoder *dec, uint32_t b, uint16_t *out,
                                        size_t out_count);

/* Decodes one channel of the whole grid into out (x fastest, then y, then z).
 * Returns as brv_decode_brick. out_count ≥ brv_channel_size(v).
 * Notes: a brick row that is a whole 64-byte line of out (16 floats starting on a 64-byte
 * boundary: give out 64-byte alignment, e.g. aligned_alloc(64, …), and cells[0] a multiple of
 * 16) goes with a streaming (cache-bypassing) store where the machine has them (SSE2), as in
 * brv_decode_all: a grid is larger than the caches. The values are the same either way and
 * visible to other threads on return. */
BRV_API brv_result brv_decode_channel(const brv_volume *v, uint32_t channel, float *out, size_t out_count);

/* The same as binary16 (IEEE 754, round to nearest even) words: out_count ≥ brv_channel_size.
 * Unscaled f16 channels are copied without conversion (see brv_decode_brick_f16).
 * Returns BRV_E_UNREPRESENTABLE when a decoded value is beyond binary16's range (65504). */
BRV_API brv_result brv_decode_channel_f16(const brv_volume *v, uint32_t channel, uint16_t *out,
                                          size_t out_count);

/* Decodes every channel of the whole grid, channel-major: out[c·cells + x + nx·(y + ny·z)].
 * out_count ≥ brv_all_size(v). */
BRV_API brv_result brv_decode_all(const brv_volume *v, float *out, size_t out_count);

/* Checks structure and every brick: the CRC-32 of its stored bytes, its zstd frame and content
 * checksum, and its payload. On a fault, *brick (if not NULL) names the first bad brick
 * (UINT32_MAX when the fault is not in a brick). */
BRV_API brv_result brv_verify(const brv_volume *v, uint32_t *brick);

/* Random access with a cache of cache_bricks decoded bricks (0 = 64; at most brick_count).
 * With room for every brick each has its slot; otherwise the cache is two-way set-associative
 * (least recently used out) over a multiplicative hash of the brick index.
 * Memory (brv_sampler_memory tells it exactly): cache_bricks·brv_brick_size(v)·e bytes, e = 2
 * when every channel is f16 (the stored halves are kept, with each brick's scale apart; the
 * samples are the same bits as from floats) and 4 otherwise, plus about 64 bytes a brick; and
 * one decoder (one brick's payload and scratch). 16³ cells and 4 f16 channels: 32 KiB a
 * brick, so the default 64 bricks take 2 MiB and a whole 256³ volume (4096 bricks) 128 MiB.
 * On Linux a cache of 16 MiB or more is marked for transparent huge pages (madvise, a hint).
 * The cache memory is committed here (a write to each page), so the sampling calls take no
 * page faults: creating a sampler of 128 MiB costs the system's page clearing, about 15-25 ms.
 * One thread at a time per sampler; make one per thread. Allocates through the volume's
 * allocator.
 * Cost (bench/bench_brv 256 random: 256³ cells, 4 f16 channels, a cache of every brick, 128
 * MiB; one thread, CPU time, medians): 1 million single calls at random points take 0.27–0.28
 * s with an empty cache (cold) and 0.16–0.17 s with a full one (warm); the cold figure is the
 * warm one plus decoding each of the 4096 bricks once (0.105 s, of which zstd's own
 * decompression 0.084 s), and is the same for a volume opened from a file. One channel (a
 * cache of 32 MiB): 0.25–0.27 s cold, 0.14–0.16 s warm. The batch call: 0.20 s cold, 0.10 s
 * warm. A warm sample waits mostly on memory: 25 ns a sample when its cells are in the L1
 * cache. */
BRV_API brv_result brv_sampler_create(const brv_volume *v, uint32_t cache_bricks, brv_sampler **out);
/* brv_sampler_create for some channels only: channels holds count indices (one may appear
 * more than once); the sampler caches and interpolates those alone, and the sampling calls
 * write count floats, in that order — the same bits as the same channels from a sampler of
 * every channel. The cache memory above scales with count instead of channel_count; each
 * brick is still decompressed whole (it is one zstd frame). count 0 (channels may be NULL):
 * every channel, as brv_sampler_create.
 * Returns BRV_E_NOT_FOUND for an index ≥ channel_count, BRV_E_ARGUMENT for count > 64. */
BRV_API brv_result brv_sampler_create_channels(const brv_volume *v, uint32_t cache_bricks, const uint32_t *channels,
                                               uint32_t count, brv_sampler **out);
/* Bytes the sampler holds for its cache (slots, their data and scales); 0 for NULL. */
BRV_API size_t brv_sampler_memory(const brv_sampler *s);
/* Frees a sampler; accepts NULL. */
BRV_API void brv_sampler_free(brv_sampler *s);

/* Trilinear sample of every channel at world position pos (metres) of a world or probe grid.
 * World cells are sampled at their centres, probes at their positions; outside the grid the
 * nearest edge value is used (clamp to edge).
 * Returns BRV_OK; BRV_E_ARGUMENT for a frustum grid or a non-finite position; a decode fault.
 * out: channel_count floats. */
BRV_API brv_result brv_sample_world(brv_sampler *s, const double pos[3], float *out);

/* brv_sample_world for count positions (pos: 3·count doubles, out: channel_count·count floats),
 * each point getting the same bits. From 256 points on, the points are visited in the order
 * of their bricks (a counting sort, in chunks of 2^20 points), so with room for every brick
 * each is fetched once and its points are sampled together; memory is prefetched a few samples
 * ahead (with a smaller cache, neighbouring bricks can be decoded more than once).
 * Temporary memory: 32 bytes a point of a chunk (the sort and a sorted copy of the positions;
 * 32 MiB for a full chunk) plus 4 bytes a brick, through the volume's allocator (without it,
 * points go in order).
 * Returns BRV_E_ARGUMENT at the first non-finite position, after sampling the points before
 * it; on a decode fault, out is not data. */
BRV_API brv_result brv_sample_world_batch(brv_sampler *s, size_t count, const double *pos, float *out);

/* Trilinear sample of a frustum grid at pixel coordinate (px, py) in cell units (column i
 * spans px in [i, i + 1), j up) and view-space depth (metres). Froxel values sit at the centre
 * of their pixel and at the middle depth of their slice; outside, clamp to edge.
 * Returns as brv_sample_world (BRV_E_ARGUMENT for a non-frustum grid). */
BRV_API brv_result brv_sample_frustum(brv_sampler *s, double px, double py, double depth, float *out);

#ifdef __cplusplus
}
#endif

#endif
