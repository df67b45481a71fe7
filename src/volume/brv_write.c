/* .brv writer: bricks are encoded, filtered, compressed as one zstd frame each and written as
 * they come; the tables follow at finish and the header is patched last. Layout: brv.h. */
#include <math.h>
#include <stdarg.h>
#include <stdbool.h>
#include <stdio.h>
#include <zstd.h>

#include "brume/brv_write.h"
#include "brv_internal.h"

typedef struct group {
    uint32_t first, count; /* logical channels */
    brv_encoding enc;
    unsigned wb;
} group;

enum { W_OPEN, W_DONE, W_FAILED };

struct brv_writer {
    FILE *f;
    long base;
    brv_allocator alloc;
    bool has_alloc;
    int state;
    char err[512];

    brv_grid_kind kind;
    uint32_t cells[3], bs, bricks[3], brick_count, channel_count;
    double bounds_min[3], bounds_max[3];
    brv_camera camera;
    double *slice_depths;
    char names[BRV_MAX_CHANNELS][32], units[BRV_MAX_CHANNELS][16];
    brv_encoding enc[BRV_MAX_CHANNELS];
    float ch_min[BRV_MAX_CHANNELS], ch_max[BRV_MAX_CHANNELS];
    int exp_max[BRV_MAX_CHANNELS];
    group groups[BRV_MAX_CHANNELS];
    uint32_t group_count;
    char *metadata;
    size_t metadata_len;

    ZSTD_CCtx *cctx;
    uint8_t *words, *payload, *cbuf;
    size_t payload_cap, cbuf_cap;
    uint64_t *off;
    uint32_t *csize, *crc;
    uint8_t *done;
    uint64_t pos; /* next brick offset, relative to base */
};

static const brv_allocator *wr_allocator(const brv_writer *w) { return w->has_alloc ? &w->alloc : NULL; }

static brv_result fail(brv_writer *w, brv_result r, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;
static brv_result fail(brv_writer *w, brv_result r, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(w->err, sizeof w->err, fmt, ap);
    va_end(ap);
    return r;
}

static const char *enc_name(brv_encoding e)
{
    return e == BRV_ENCODING_F32 ? "f32" : e == BRV_ENCODING_F16 ? "f16" : e == BRV_ENCODING_RGB9E5 ? "rgb9e5" : "?";
}

const char *brv_writer_error(const brv_writer *w) { return w ? w->err : ""; }

void brv_writer_free(brv_writer *w)
{
    if (!w) return;
    const brv_allocator *a = wr_allocator(w);
    ZSTD_freeCCtx(w->cctx);
    brv_dealloc(a, w->slice_depths);
    brv_dealloc(a, w->metadata);
    brv_dealloc(a, w->words);
    brv_dealloc(a, w->payload);
    brv_dealloc(a, w->cbuf);
    brv_dealloc(a, w->off);
    brv_dealloc(a, w->csize);
    brv_dealloc(a, w->crc);
    brv_dealloc(a, w->done);
    brv_allocator copy = w->alloc;
    bool has = w->has_alloc;
    brv_dealloc(has ? &copy : NULL, w);
}

static bool write_at_end(brv_writer *w, const void *p, size_t n)
{
    return n == 0 || fwrite(p, 1, n, w->f) == n;
}

brv_result brv_writer_create(FILE *f, const brv_write_desc *d, brv_writer **out)
{
    if (!f || !d || !out) return BRV_E_ARGUMENT;
    if (d->alloc && (!d->alloc->alloc || !d->alloc->free)) return BRV_E_ARGUMENT;
    brv_writer *w = brv_alloc(d->alloc, sizeof *w);
    if (!w) return BRV_E_NOMEM;
    memset(w, 0, sizeof *w);
    if (d->alloc) {
        w->alloc = *d->alloc;
        w->has_alloc = true;
    }
    w->f = f;
    brv_result r = BRV_E_ARGUMENT;
#define WCHECK(cond, code, ...)                     \
    do {                                            \
        if (!(cond)) {                              \
            r = fail(w, (code), __VA_ARGS__);       \
            goto bad;                               \
        }                                           \
    } while (0)
    WCHECK(d->kind > BRV_GRID_INVALID && d->kind < BRV_GRID_MAX_ENUM, BRV_E_ARGUMENT, "grid kind %d is not world, frustum or probes", (int)d->kind);
    w->kind = d->kind;
    w->bs = d->brick_size ? d->brick_size : 16;
    WCHECK(w->bs <= BRV_MAX_BRICK_SIZE, BRV_E_LIMIT, "brick size %u over %u", w->bs, BRV_MAX_BRICK_SIZE);
    uint64_t nb = 1;
    for (int a = 0; a < 3; a++) {
        WCHECK(d->cells[a] >= 1 && d->cells[a] <= BRV_MAX_CELLS_PER_AXIS, BRV_E_LIMIT,
               "cells[%d] = %u, expected 1..%u", a, d->cells[a], BRV_MAX_CELLS_PER_AXIS);
        w->cells[a] = d->cells[a];
        w->bricks[a] = (d->cells[a] + w->bs - 1) / w->bs;
        nb *= w->bricks[a];
    }
    WCHECK(nb <= 0xFFFFFFFEu, BRV_E_LIMIT, "%llu bricks, over the 2^32 − 2 a file can index", (unsigned long long)nb);
    w->brick_count = (uint32_t)nb;
    WCHECK(d->channel_count >= 1 && d->channel_count <= BRV_MAX_CHANNELS && d->channels, BRV_E_LIMIT,
           "%u channels, expected 1..%u", d->channel_count, BRV_MAX_CHANNELS);
    w->channel_count = d->channel_count;
    for (int a = 0; a < 3; a++) {
        WCHECK(isfinite(d->bounds_min[a]) && isfinite(d->bounds_max[a]), BRV_E_ARGUMENT, "bounds are not finite");
        if (d->kind == BRV_GRID_WORLD)
            WCHECK(d->bounds_max[a] > d->bounds_min[a], BRV_E_ARGUMENT, "bounds_max[%d] must exceed bounds_min[%d]", a, a);
        if (d->kind == BRV_GRID_PROBES)
            WCHECK(d->bounds_max[a] >= d->bounds_min[a], BRV_E_ARGUMENT, "bounds_max[%d] below bounds_min[%d]", a, a);
        w->bounds_min[a] = d->bounds_min[a];
        w->bounds_max[a] = d->bounds_max[a];
    }
    if (d->kind == BRV_GRID_FRUSTUM) {
        double cv[13] = {d->camera.position[0], d->camera.position[1], d->camera.position[2],
                         d->camera.look_at[0],  d->camera.look_at[1],  d->camera.look_at[2],
                         d->camera.up[0],       d->camera.up[1],       d->camera.up[2],
                         d->camera.fov_y_deg,   d->camera.aspect,      d->camera.near_m,
                         d->camera.far_m};
        for (int i = 0; i < 13; i++) WCHECK(isfinite(cv[i]), BRV_E_ARGUMENT, "camera field %d is not finite", i);
        w->camera = d->camera;
        WCHECK(d->slice_depths != NULL, BRV_E_ARGUMENT, "a frustum grid needs cells[2] + 1 slice depths");
        uint32_t n = d->cells[2] + 1;
        w->slice_depths = brv_alloc(wr_allocator(w), n * sizeof(double));
        WCHECK(w->slice_depths, BRV_E_NOMEM, "out of memory");
        for (uint32_t k = 0; k < n; k++) {
            WCHECK(isfinite(d->slice_depths[k]) && d->slice_depths[k] > 0.0 &&
                       (k == 0 || d->slice_depths[k] > d->slice_depths[k - 1]),
                   BRV_E_ARGUMENT, "slice_depths[%u] = %g: depths must be positive and increasing", k,
                   d->slice_depths[k]);
            w->slice_depths[k] = d->slice_depths[k];
        }
    }
    for (uint32_t c = 0; c < w->channel_count; c++) {
        const brv_channel_desc *cd = &d->channels[c];
        WCHECK(cd->name && cd->name[0] && strlen(cd->name) < 32, BRV_E_ARGUMENT,
               "channel %u: a name of 1..31 bytes is needed", c);
        WCHECK(!cd->units || strlen(cd->units) < 16, BRV_E_ARGUMENT, "channel '%s': units longer than 15 bytes", cd->name);
        WCHECK(cd->encoding > BRV_ENCODING_INVALID && cd->encoding < BRV_ENCODING_MAX_ENUM, BRV_E_ARGUMENT,
               "channel '%s': encoding %d is not f32, f16 or rgb9e5", cd->name, (int)cd->encoding);
        for (uint32_t o = 0; o < c; o++)
            WCHECK(strcmp(w->names[o], cd->name) != 0, BRV_E_ARGUMENT, "channel name '%s' appears twice", cd->name);
        memset(w->names[c], 0, 32);
        memset(w->units[c], 0, 16);
        memcpy(w->names[c], cd->name, strlen(cd->name));
        if (cd->units) memcpy(w->units[c], cd->units, strlen(cd->units));
        w->enc[c] = cd->encoding;
        w->ch_min[c] = INFINITY;
        w->ch_max[c] = -INFINITY;
    }
    size_t payload_max = 0, cells_max = (size_t)w->bs * w->bs * w->bs;
    for (uint32_t c = 0; c < w->channel_count;) {
        group *g = &w->groups[w->group_count++];
        g->first = c;
        g->enc = w->enc[c];
        g->count = g->enc == BRV_ENCODING_RGB9E5 ? 3 : 1;
        g->wb = g->enc == BRV_ENCODING_F16 ? 2 : 4;
        if (g->count == 3)
            WCHECK(c + 2 < w->channel_count && w->enc[c + 1] == BRV_ENCODING_RGB9E5 && w->enc[c + 2] == BRV_ENCODING_RGB9E5,
                   BRV_E_ARGUMENT, "channel '%s': rgb9e5 channels come in consecutive triplets (r, g, b)", w->names[c]);
        payload_max += BRV_GROUP_HEADER + cells_max * g->wb;
        c += g->count;
    }
    int level = d->compression_level ? d->compression_level : 9;
    WCHECK(level >= 1 && level <= 19, BRV_E_ARGUMENT, "compression level %d, expected 1..19", level);
    if (d->metadata && d->metadata_len) {
        WCHECK(d->metadata_len <= BRV_METADATA_MAX, BRV_E_LIMIT, "metadata of %zu bytes over %u", d->metadata_len, BRV_METADATA_MAX);
        w->metadata = brv_alloc(wr_allocator(w), d->metadata_len);
        WCHECK(w->metadata, BRV_E_NOMEM, "out of memory");
        memcpy(w->metadata, d->metadata, d->metadata_len);
        w->metadata_len = d->metadata_len;
    }
    w->payload_cap = payload_max;
    w->cbuf_cap = ZSTD_compressBound(payload_max);
    w->words = brv_alloc(wr_allocator(w), cells_max * 4);
    w->payload = brv_alloc(wr_allocator(w), payload_max);
    w->cbuf = brv_alloc(wr_allocator(w), w->cbuf_cap);
    w->off = brv_alloc(wr_allocator(w), (size_t)w->brick_count * sizeof *w->off);
    w->csize = brv_alloc(wr_allocator(w), (size_t)w->brick_count * sizeof *w->csize);
    w->crc = brv_alloc(wr_allocator(w), (size_t)w->brick_count * sizeof *w->crc);
    w->done = brv_alloc(wr_allocator(w), w->brick_count);
    w->cctx = ZSTD_createCCtx();
    WCHECK(w->words && w->payload && w->cbuf && w->off && w->csize && w->crc && w->done && w->cctx, BRV_E_NOMEM,
           "out of memory for %u bricks", w->brick_count);
    memset(w->done, 0, w->brick_count);
    /* Single-threaded zstd (nbWorkers 0): its bytes are what the golden file pins, and frames
     * from one worker decode faster. */
    WCHECK(!ZSTD_isError(ZSTD_CCtx_setParameter(w->cctx, ZSTD_c_compressionLevel, level)) &&
               !ZSTD_isError(ZSTD_CCtx_setParameter(w->cctx, ZSTD_c_checksumFlag, 1)) &&
               !ZSTD_isError(ZSTD_CCtx_setParameter(w->cctx, ZSTD_c_contentSizeFlag, 1)),
           BRV_E_ARGUMENT, "zstd refused the compression parameters");
    w->base = ftell(f);
    WCHECK(w->base >= 0, BRV_E_IO, "the output is not seekable");
    /* A placeholder header (no magic yet): a file cut short before finish is never a volume. */
    uint8_t zero[BRV_HEADER_SIZE] = {0};
    WCHECK(write_at_end(w, zero, sizeof zero), BRV_E_IO, "cannot write the header");
    w->pos = BRV_HEADER_SIZE;
#undef WCHECK
    *out = w;
    return BRV_OK;
bad:
    if (d->error && d->error_size) snprintf(d->error, d->error_size, "%s", w->err);
    brv_writer_free(w);
    return r;
}

/* The smallest e in 0..127 with max_abs / 2^e ≤ limit. */
static int scale_exponent(float max_abs, float limit)
{
    int e = 0;
    while (e < BRV_SCALE_EXP_MAX && max_abs > ldexpf(limit, e)) e++;
    return e;
}

static void note_value(brv_writer *w, uint32_t c, float v)
{
    if (v < w->ch_min[c]) w->ch_min[c] = v;
    if (v > w->ch_max[c]) w->ch_max[c] = v;
}

brv_result brv_writer_put_brick(brv_writer *w, uint32_t b, const float *data)
{
    if (!w || !data) return BRV_E_ARGUMENT;
    if (w->state != W_OPEN) return fail(w, BRV_E_STATE, "the writer is %s", w->state == W_DONE ? "finished" : "failed");
    if (b >= w->brick_count) return fail(w, BRV_E_ARGUMENT, "brick %u of %u", b, w->brick_count);
    if (w->done[b]) return fail(w, BRV_E_STATE, "brick %u was put already", b);
    uint32_t bx = b % w->bricks[0], by = (b / w->bricks[0]) % w->bricks[1], bz = b / (w->bricks[0] * w->bricks[1]);
    uint32_t o[3] = {bx * w->bs, by * w->bs, bz * w->bs}, e[3];
    for (int a = 0; a < 3; a++) e[a] = w->cells[a] - o[a] < w->bs ? w->cells[a] - o[a] : w->bs;
    size_t n = (size_t)e[0] * e[1] * e[2];
    uint8_t *pp = w->payload;
    for (uint32_t gi = 0; gi < w->group_count; gi++) {
        const group *g = &w->groups[gi];
        const float *src = data + (size_t)g->first * n;
        float max_abs = 0.0f;
        for (size_t i = 0; i < n * g->count; i++) {
            float v = src[i];
            if (!isfinite(v) || (g->enc == BRV_ENCODING_RGB9E5 && v < 0.0f)) {
                uint32_t c = g->first + (uint32_t)(i / n), ci = (uint32_t)(i % n);
                return fail(w, BRV_E_UNREPRESENTABLE,
                            "channel '%s', brick %u, cell (%u, %u, %u): %g cannot be stored in %s%s", w->names[c], b,
                            o[0] + ci % e[0], o[1] + (ci / e[0]) % e[1], o[2] + ci / (e[0] * e[1]), (double)v,
                            enc_name(g->enc), g->enc == BRV_ENCODING_RGB9E5 && isfinite(v) ? " (negative)" : "");
            }
            float a = fabsf(v);
            if (a > max_abs) max_abs = a;
        }
        int ex = g->enc == BRV_ENCODING_F32   ? 0
                 : g->enc == BRV_ENCODING_F16 ? scale_exponent(max_abs, BRV_F16_MAX)
                                              : scale_exponent(max_abs, BRV_RGB9E5_MAX);
        if (ex >= BRV_SCALE_EXP_MAX && max_abs > ldexpf(g->enc == BRV_ENCODING_F16 ? BRV_F16_MAX : BRV_RGB9E5_MAX, ex))
            return fail(w, BRV_E_UNREPRESENTABLE, "channel '%s', brick %u: %g is beyond %s even scaled by 2^%d",
                        w->names[g->first], b, (double)max_abs, enc_name(g->enc), BRV_SCALE_EXP_MAX);
        float inv = ldexpf(1.0f, -ex), sc = ldexpf(1.0f, ex);
        /* Encode to words, and note each value as it will decode. */
        for (size_t i = 0; i < n; i++) {
            if (g->enc == BRV_ENCODING_F32) {
                brv_wr32(w->words + 4 * i, brv_f32_bits(src[i]));
                note_value(w, g->first, src[i]);
            } else if (g->enc == BRV_ENCODING_F16) {
                uint16_t h = brv_f32_to_f16(src[i] * inv);
                brv_wr16(w->words + 2 * i, h);
                note_value(w, g->first, brv_f16_to_f32(h) * sc);
            } else {
                uint32_t p = brv_rgb9e5_pack(src[i] * inv, src[n + i] * inv, src[2 * n + i] * inv);
                brv_wr32(w->words + 4 * i, p);
                float rgb[3];
                brv_rgb9e5_unpack(p, &rgb[0], &rgb[1], &rgb[2]);
                for (int k = 0; k < 3; k++) note_value(w, g->first + (uint32_t)k, rgb[k] * sc);
            }
        }
        for (uint32_t k = 0; k < g->count; k++)
            if (ex > w->exp_max[g->first + k]) w->exp_max[g->first + k] = ex;
        bool constant = true;
        for (size_t i = 1; i < n && constant; i++) constant = memcmp(w->words, w->words + i * g->wb, g->wb) == 0;
        pp[0] = constant ? BRV_MODE_CONSTANT : BRV_MODE_FILTERED;
        pp[1] = (uint8_t)(int8_t)ex;
        pp[2] = (uint8_t)g->wb;
        pp[3] = 0;
        pp += BRV_GROUP_HEADER;
        if (constant) {
            memcpy(pp, w->words, g->wb);
            pp += g->wb;
        } else {
            brv_delta_encode(w->words, n, g->wb, e[0]);
            brv_shuffle(w->words, pp, n, g->wb);
            pp += n * g->wb;
        }
    }
    size_t plen = (size_t)(pp - w->payload);
    size_t cs = ZSTD_compress2(w->cctx, w->cbuf, w->cbuf_cap, w->payload, plen);
    if (ZSTD_isError(cs)) {
        w->state = W_FAILED;
        return fail(w, BRV_E_NOMEM, "zstd: %s", ZSTD_getErrorName(cs));
    }
    if (cs > BRV_BRICK_STORED_MAX) {
        w->state = W_FAILED;
        return fail(w, BRV_E_LIMIT, "brick %u compresses to %zu bytes, over %u", b, cs, BRV_BRICK_STORED_MAX);
    }
    if (!write_at_end(w, w->cbuf, cs)) {
        w->state = W_FAILED;
        return fail(w, BRV_E_IO, "cannot write brick %u", b);
    }
    w->off[b] = w->pos;
    w->csize[b] = (uint32_t)cs;
    w->crc[b] = brv_crc32(0, w->cbuf, cs);
    w->done[b] = 1;
    w->pos += cs;
    return BRV_OK;
}

brv_result brv_writer_finish(brv_writer *w)
{
    if (!w) return BRV_E_ARGUMENT;
    if (w->state != W_OPEN) return fail(w, BRV_E_STATE, "the writer is %s", w->state == W_DONE ? "finished" : "failed");
    for (uint32_t b = 0; b < w->brick_count; b++)
        if (!w->done[b]) return fail(w, BRV_E_STATE, "brick %u of %u was never put", b, w->brick_count);
    uint32_t sd = w->kind == BRV_GRID_FRUSTUM ? w->cells[2] + 1 : 0;
    size_t tsize = BRV_TABLES_FIXED + 8 * (size_t)sd + BRV_CHANNEL_ENTRY * (size_t)w->channel_count +
                   BRV_BRICK_ENTRY * (size_t)w->brick_count + w->metadata_len;
    /* The tables are written piece by piece with a running CRC, never held whole in memory. */
    uint32_t tcrc = 0;
    bool ok = true;
#define PUT(p, n)                                       \
    do {                                                \
        tcrc = brv_crc32(tcrc, (p), (n));               \
        ok = ok && write_at_end(w, (p), (n));           \
    } while (0)
    uint8_t t[BRV_TABLES_FIXED] = {0};
    for (int a = 0; a < 3; a++) {
        brv_wrf64(t + 8 * a, w->bounds_min[a]);
        brv_wrf64(t + 24 + 8 * a, w->bounds_max[a]);
    }
    if (w->kind == BRV_GRID_FRUSTUM) {
        const brv_camera *c = &w->camera;
        double cv[13] = {c->position[0], c->position[1], c->position[2], c->look_at[0], c->look_at[1],
                         c->look_at[2],  c->up[0],       c->up[1],       c->up[2],      c->fov_y_deg,
                         c->aspect,      c->near_m,      c->far_m};
        for (int i = 0; i < 13; i++) brv_wrf64(t + 48 + 8 * i, cv[i]);
    }
    brv_wr32(t + 152, sd);
    brv_wr32(t + 156, (uint32_t)w->metadata_len);
    PUT(t, sizeof t);
    for (uint32_t k = 0; k < sd; k++) {
        uint8_t e[8];
        brv_wrf64(e, w->slice_depths[k]);
        PUT(e, 8);
    }
    for (uint32_t c = 0; c < w->channel_count; c++) {
        uint8_t e[BRV_CHANNEL_ENTRY] = {0};
        memcpy(e, w->names[c], 32);
        memcpy(e + 32, w->units[c], 16);
        e[48] = (uint8_t)w->enc[c];
        e[49] = (uint8_t)(int8_t)w->exp_max[c];
        brv_wrf32(e + 52, w->ch_min[c]);
        brv_wrf32(e + 56, w->ch_max[c]);
        PUT(e, sizeof e);
    }
    for (uint32_t b = 0; b < w->brick_count; b++) {
        uint8_t e[BRV_BRICK_ENTRY];
        brv_wr64(e, w->off[b]);
        brv_wr32(e + 8, w->csize[b]);
        brv_wr32(e + 12, w->crc[b]);
        PUT(e, sizeof e);
    }
    if (w->metadata_len) PUT(w->metadata, w->metadata_len);
#undef PUT

    uint8_t h[BRV_HEADER_SIZE] = {0};
    memcpy(h, BRV_MAGIC, 8);
    brv_wr16(h + 8, BRV_VERSION_MAJOR);
    brv_wr16(h + 10, BRV_VERSION_MINOR);
    brv_wr32(h + 12, BRV_HEADER_SIZE);
    h[16] = (uint8_t)w->kind;
    h[17] = (uint8_t)w->bs;
    brv_wr16(h + 18, (uint16_t)w->channel_count);
    for (int a = 0; a < 3; a++) brv_wr32(h + 20 + 4 * a, w->cells[a]);
    brv_wr64(h + 32, w->pos);
    brv_wr64(h + 40, tsize);
    brv_wr32(h + 48, tcrc);
    brv_wr16(h + 52, BRV_CHANNEL_ENTRY);
    brv_wr16(h + 54, BRV_BRICK_ENTRY);
    brv_wr32(h + 60, brv_crc32(0, h, BRV_HEADER_SIZE - 4));

    ok = ok && fseek(w->f, w->base, SEEK_SET) == 0 && fwrite(h, 1, sizeof h, w->f) == sizeof h &&
         fseek(w->f, 0, SEEK_END) == 0 && fflush(w->f) == 0 && !ferror(w->f);
    if (!ok) {
        w->state = W_FAILED;
        return fail(w, BRV_E_IO, "cannot write the tables or the header");
    }
    w->state = W_DONE;
    return BRV_OK;
}
