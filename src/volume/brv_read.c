/* .brv reader: open checks every size, offset and count against the file before using it;
 * bricks are checked each time they are decoded (zstd frame and content checksum, payload
 * structure), and brv_verify also checks the CRC-32 of each brick's stored bytes. Layout: brv.h. */
#if !defined(_POSIX_C_SOURCE) && (defined(__unix__) || defined(__APPLE__))
#define _POSIX_C_SOURCE 200809L /* pread, fstat */
#endif
#include <math.h>
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <zstd.h>

#include "brv_internal.h"

#if defined(__SSE2__)
#include <emmintrin.h>
#endif

#if defined(_POSIX_VERSION) || defined(__unix__) || defined(__APPLE__)
#include <errno.h>
#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>
#define BRV_LAZY_FILE 1
#endif

typedef struct rgroup {
    uint32_t first, count;
    uint32_t code; /* stored encoding number */
    unsigned wb;   /* 0 when unknown (taken from the payload) */
} rgroup;

struct brv_volume {
    brv_allocator alloc;
    bool has_alloc;
    const uint8_t *data; /* the whole file; NULL when bricks are read from fd on demand */
    size_t size;
    void *owned; /* file contents (whole-file path) or the tables section (read on demand) */
    int fd;      /* bricks read on demand: the open file; -1 otherwise */
    uint32_t stored_max; /* largest stored brick, bytes */
    brv_grid_info grid;
    brv_channel_info ch[BRV_MAX_CHANNELS];
    char names[BRV_MAX_CHANNELS][32], units[BRV_MAX_CHANNELS][16];
    rgroup groups[BRV_MAX_CHANNELS];
    uint32_t group_count;
    int channel_group[BRV_MAX_CHANNELS];
    double *slice_depths;
    const uint8_t *brick_table;
    uint32_t brick_entry;
    char *metadata;
    size_t metadata_len;
    size_t payload_max; /* decoded payload bytes of a full brick */
};

struct brv_decoder {
    const brv_volume *v;
    ZSTD_DCtx *dctx;
    uint8_t *payload;
    float *scratch; /* one full brick, every channel */
    uint8_t *stored; /* bricks read on demand: one brick's stored bytes */
    uint16_t *half;  /* one full brick as halves */
    int stream;      /* brv_decoder_set_streaming: BRV_STREAM_OFF, _ON or _AUTO */
    uintptr_t run_end; /* BRV_STREAM_AUTO: where the previous call's output ended */
    size_t run;        /* and the bytes written by the calls of the forward run up to it */
    bool streamed;     /* the last brick call streamed its output */
};

const brv_allocator *brv_volume_allocator(const brv_volume *v) { return v->has_alloc ? &v->alloc : NULL; }

const char *brv_result_text(brv_result r)
{
    static const char *const text[] = {
#define BRV_X_TEXT(name, t) t,
        BRV_RESULT_LIST(BRV_X_TEXT)
#undef BRV_X_TEXT
    };
    if ((unsigned)r >= sizeof text / sizeof text[0]) return "unknown result";
    return text[r];
}

void brv_free(brv_volume *v)
{
    if (!v) return;
    const brv_allocator *a = brv_volume_allocator(v);
    brv_dealloc(a, v->owned);
#if defined(BRV_LAZY_FILE)
    if (v->fd >= 0) close(v->fd);
#endif
    brv_dealloc(a, v->slice_depths);
    brv_dealloc(a, v->metadata);
    brv_allocator copy = v->alloc;
    bool has = v->has_alloc;
    brv_dealloc(has ? &copy : NULL, v);
}

typedef struct span {
    uint64_t off, end;
} span;

static int span_cmp(const void *a, const void *b)
{
    const span *x = a, *y = b;
    return x->off < y->off ? -1 : x->off > y->off;
}

static bool str_ok(const uint8_t *p, size_t cap, bool nonempty)
{
    const void *z = memchr(p, 0, cap);
    if (!z) return false;
    size_t len = (size_t)((const uint8_t *)z - p);
    if (nonempty && len == 0) return false;
    for (size_t i = len; i < cap; i++)
        if (p[i]) return false; /* NUL-padded */
    return true;
}

/* Reads size bytes at offset off of an on-demand volume's file: BRV_E_TRUNCATED when the file
 * has become shorter than it was at open, BRV_E_IO on a read error. Safe from any thread. */
static brv_result read_at(const brv_volume *v, uint64_t off, size_t size, uint8_t *dst)
{
#if defined(BRV_LAZY_FILE)
    while (size) {
        if (off > (uint64_t)INT64_MAX) return BRV_E_IO;
        ssize_t got = pread(v->fd, dst, size, (off_t)off);
        if (got < 0 && errno == EINTR) continue;
        if (got < 0) return BRV_E_IO;
        if (got == 0) return BRV_E_TRUNCATED;
        dst += got;
        off += (uint64_t)got;
        size -= (size_t)got;
    }
    return BRV_OK;
#else
    (void)v, (void)off, (void)size, (void)dst;
    return BRV_E_IO;
#endif
}

/* Parses and checks everything but the bricks' contents. d: the file's first
 * min(size, BRV_HEADER_MAX) bytes; the tables come from memory or from the file. */
static brv_result parse(brv_volume *v, const uint8_t *d)
{
    size_t size = v->size;
    size_t m = size < 8 ? size : 8;
    if (memcmp(d, BRV_MAGIC, m) != 0) return BRV_E_MAGIC;
    if (size < BRV_HEADER_SIZE) return BRV_E_TRUNCATED;
    uint16_t major = brv_rd16(d + 8), minor = brv_rd16(d + 10);
    if (major != BRV_VERSION_MAJOR) return BRV_E_VERSION;
    uint32_t hs = brv_rd32(d + 12);
    if (hs < BRV_HEADER_SIZE || hs > BRV_HEADER_MAX) return BRV_E_LAYOUT;
    if (hs > size) return BRV_E_TRUNCATED;
    if (brv_crc32(0, d, hs - 4) != brv_rd32(d + hs - 4)) return BRV_E_HEADER_CRC;
    if (minor == BRV_VERSION_MINOR && (hs != BRV_HEADER_SIZE || brv_rd32(d + 56) != 0)) return BRV_E_LAYOUT;

    brv_grid_info *g = &v->grid;
    g->version_major = major;
    g->version_minor = minor;
    g->file_size = size;
    if (d[16] < BRV_GRID_WORLD || d[16] > BRV_GRID_PROBES) return BRV_E_LAYOUT;
    g->kind = (brv_grid_kind)d[16];
    g->brick_size = d[17];
    if (g->brick_size == 0) return BRV_E_LAYOUT;
    if (g->brick_size > BRV_MAX_BRICK_SIZE) return BRV_E_LIMIT;
    g->channel_count = brv_rd16(d + 18);
    if (g->channel_count == 0) return BRV_E_LAYOUT;
    if (g->channel_count > BRV_MAX_CHANNELS) return BRV_E_LIMIT;
    uint64_t nb = 1;
    for (int a = 0; a < 3; a++) {
        g->cells[a] = brv_rd32(d + 20 + 4 * a);
        if (g->cells[a] == 0) return BRV_E_LAYOUT;
        if (g->cells[a] > BRV_MAX_CELLS_PER_AXIS) return BRV_E_LIMIT;
        g->bricks[a] = (g->cells[a] + g->brick_size - 1) / g->brick_size;
        nb *= g->bricks[a];
    }
    if (nb > 0xFFFFFFFEu) return BRV_E_LIMIT;
    g->brick_count = (uint32_t)nb;
    uint64_t toff = brv_rd64(d + 32), tsize = brv_rd64(d + 40);
    uint32_t ces = brv_rd16(d + 52), bes = brv_rd16(d + 54);
    if (ces < BRV_CHANNEL_ENTRY || bes < BRV_BRICK_ENTRY) return BRV_E_LAYOUT;
    if (minor == BRV_VERSION_MINOR && (ces != BRV_CHANNEL_ENTRY || bes != BRV_BRICK_ENTRY)) return BRV_E_LAYOUT;
    if (toff < hs || tsize < BRV_TABLES_FIXED || toff > UINT64_MAX - tsize) return BRV_E_LAYOUT;
    if (toff + tsize > size) return BRV_E_TRUNCATED;
    if (toff + tsize < size) return BRV_E_LAYOUT; /* bytes after the tables */
    const uint8_t *t;
    if (v->data) {
        t = v->data + toff;
    } else {
        /* The tables are at most the file's size, which is known to be real. */
        if (tsize > SIZE_MAX) return BRV_E_NOMEM;
        v->owned = brv_alloc(brv_volume_allocator(v), (size_t)tsize);
        if (!v->owned) return BRV_E_NOMEM;
        brv_result rr = read_at(v, toff, (size_t)tsize, v->owned);
        if (rr != BRV_OK) return rr;
        t = v->owned;
    }
    if (brv_crc32(0, t, (size_t)tsize) != brv_rd32(d + 48)) return BRV_E_HEADER_CRC;

    uint32_t sd = brv_rd32(t + 152), msize = brv_rd32(t + 156);
    if (sd != (g->kind == BRV_GRID_FRUSTUM ? g->cells[2] + 1 : 0)) return BRV_E_LAYOUT;
    if (msize > BRV_METADATA_MAX) return BRV_E_LIMIT;
    uint64_t need = (uint64_t)BRV_TABLES_FIXED + 8ull * sd + (uint64_t)ces * g->channel_count +
                    (uint64_t)bes * g->brick_count + msize;
    if (need != tsize) return BRV_E_LAYOUT;

    for (int a = 0; a < 3; a++) {
        g->bounds_min[a] = brv_rdf64(t + 8 * a);
        g->bounds_max[a] = brv_rdf64(t + 24 + 8 * a);
        if (!isfinite(g->bounds_min[a]) || !isfinite(g->bounds_max[a])) return BRV_E_LAYOUT;
        if (g->kind == BRV_GRID_WORLD && !(g->bounds_max[a] > g->bounds_min[a])) return BRV_E_LAYOUT;
        if (g->kind == BRV_GRID_PROBES && !(g->bounds_max[a] >= g->bounds_min[a])) return BRV_E_LAYOUT;
    }
    double cv[13];
    for (int i = 0; i < 13; i++) {
        cv[i] = brv_rdf64(t + 48 + 8 * i);
        if (!isfinite(cv[i])) return BRV_E_LAYOUT;
    }
    for (int a = 0; a < 3; a++) {
        g->camera.position[a] = cv[a];
        g->camera.look_at[a] = cv[3 + a];
        g->camera.up[a] = cv[6 + a];
    }
    g->camera.fov_y_deg = cv[9];
    g->camera.aspect = cv[10];
    g->camera.near_m = cv[11];
    g->camera.far_m = cv[12];
    const uint8_t *p = t + BRV_TABLES_FIXED;
    if (sd) {
        v->slice_depths = brv_alloc(brv_volume_allocator(v), (size_t)sd * sizeof(double));
        if (!v->slice_depths) return BRV_E_NOMEM;
        for (uint32_t k = 0; k < sd; k++) {
            double z = brv_rdf64(p + 8 * (size_t)k);
            if (!isfinite(z) || !(z > 0.0) || (k && !(z > v->slice_depths[k - 1]))) return BRV_E_LAYOUT;
            v->slice_depths[k] = z;
        }
        g->slice_depths = v->slice_depths;
        p += 8 * (size_t)sd;
    }

    for (uint32_t c = 0; c < g->channel_count; c++, p += ces) {
        if (!str_ok(p, 32, true) || !str_ok(p + 32, 16, false)) return BRV_E_LAYOUT;
        memcpy(v->names[c], p, 32);
        memcpy(v->units[c], p + 32, 16);
        for (uint32_t o = 0; o < c; o++)
            if (strcmp(v->names[o], v->names[c]) == 0) return BRV_E_LAYOUT;
        brv_channel_info *ci = &v->ch[c];
        ci->name = v->names[c];
        ci->units = v->units[c];
        ci->encoding_code = p[48];
        bool known = p[48] >= BRV_ENCODING_F32 && p[48] <= BRV_ENCODING_RGB9E5;
        if (!known && minor <= BRV_VERSION_MINOR) return BRV_E_LAYOUT;
        ci->encoding = known ? (brv_encoding)p[48] : BRV_ENCODING_INVALID;
        ci->scale_exp_max = (int8_t)p[49];
        ci->min = brv_rdf32(p + 52);
        ci->max = brv_rdf32(p + 56);
        if (minor == BRV_VERSION_MINOR && (brv_rd16(p + 50) != 0 || brv_rd32(p + 60) != 0)) return BRV_E_LAYOUT;
    }
    size_t full = (size_t)g->brick_size * g->brick_size * g->brick_size;
    for (uint32_t c = 0; c < g->channel_count;) {
        rgroup *gr = &v->groups[v->group_count];
        gr->first = c;
        gr->code = v->ch[c].encoding_code;
        gr->count = 1;
        gr->wb = v->ch[c].encoding == BRV_ENCODING_F16 ? 2 : v->ch[c].encoding == BRV_ENCODING_INVALID ? 0 : 4;
        if (v->ch[c].encoding == BRV_ENCODING_RGB9E5) {
            if (c + 2 >= g->channel_count || v->ch[c + 1].encoding != BRV_ENCODING_RGB9E5 ||
                v->ch[c + 2].encoding != BRV_ENCODING_RGB9E5)
                return BRV_E_LAYOUT;
            gr->count = 3;
        }
        for (uint32_t k = 0; k < gr->count; k++) v->channel_group[c + k] = (int)v->group_count;
        v->payload_max += BRV_GROUP_HEADER + full * (gr->wb ? gr->wb : 8u);
        v->group_count++;
        c += gr->count;
    }

    v->brick_table = p;
    v->brick_entry = bes;
    span *sp = brv_alloc(brv_volume_allocator(v), (size_t)g->brick_count * sizeof *sp);
    if (!sp) return BRV_E_NOMEM;
    brv_result r = BRV_OK;
    uint64_t total = 0;
    for (uint32_t b = 0; b < g->brick_count && r == BRV_OK; b++) {
        const uint8_t *e = p + (size_t)b * bes;
        uint64_t off = brv_rd64(e);
        uint32_t cs = brv_rd32(e + 8);
        if (cs == 0 || cs > BRV_BRICK_STORED_MAX || off < hs || off > toff || cs > toff - off) r = BRV_E_BRICK_RANGE;
        sp[b].off = off;
        sp[b].end = off + cs;
        total += cs;
        if (cs > v->stored_max) v->stored_max = cs;
    }
    if (r == BRV_OK) {
        qsort(sp, g->brick_count, sizeof *sp, span_cmp);
        uint64_t at = hs;
        for (uint32_t b = 0; b < g->brick_count && r == BRV_OK; b++) {
            if (sp[b].off != at) r = BRV_E_BRICK_RANGE; /* a gap or an overlap */
            at = sp[b].end;
        }
        if (r == BRV_OK && at != toff) r = BRV_E_BRICK_RANGE;
    }
    brv_dealloc(brv_volume_allocator(v), sp);
    if (r != BRV_OK) return r;
    g->brick_bytes = total;
    p += (size_t)g->brick_count * bes;

    v->metadata = brv_alloc(brv_volume_allocator(v), (size_t)msize + 1);
    if (!v->metadata) return BRV_E_NOMEM;
    memcpy(v->metadata, p, msize);
    v->metadata[msize] = '\0';
    v->metadata_len = msize;
    return BRV_OK;
}

/* data: the whole file (owned: to free with the volume), or NULL to read from fd on demand
 * (the volume closes fd). */
static brv_result open_common(const void *data, size_t size, const brv_allocator *alloc, void *owned, int fd,
                              brv_volume **out)
{
    brv_volume *v = brv_alloc(alloc, sizeof *v);
    if (!v) {
        brv_dealloc(alloc, owned);
#if defined(BRV_LAZY_FILE)
        if (fd >= 0) close(fd);
#endif
        return BRV_E_NOMEM;
    }
    memset(v, 0, sizeof *v);
    v->fd = fd;
    if (alloc) {
        v->alloc = *alloc;
        v->has_alloc = true;
    }
    v->data = data;
    v->size = size;
    v->owned = owned;
    brv_result r;
    if (data) {
        r = parse(v, data);
    } else {
        uint8_t head[BRV_HEADER_MAX];
        size_t h = size < BRV_HEADER_MAX ? size : BRV_HEADER_MAX;
        r = read_at(v, 0, h, head);
        if (r == BRV_OK) r = parse(v, head);
    }
    if (r != BRV_OK) {
        brv_free(v);
        return r;
    }
    *out = v;
    return BRV_OK;
}

brv_result brv_open_memory(const void *data, size_t size, const brv_allocator *alloc, brv_volume **out)
{
    if ((!data && size) || !out) return BRV_E_ARGUMENT;
    if (alloc && (!alloc->alloc || !alloc->free)) return BRV_E_ARGUMENT;
    static const uint8_t empty[1] = {0};
    return open_common(size ? data : empty, size, alloc, NULL, -1, out);
}

brv_result brv_open_file(const char *path, const brv_allocator *alloc, brv_volume **out)
{
    if (!path || !out) return BRV_E_ARGUMENT;
    if (alloc && (!alloc->alloc || !alloc->free)) return BRV_E_ARGUMENT;
#if defined(BRV_LAZY_FILE)
    /* Header and tables now, each brick when it is decoded (pread: no shared file position). */
    int fd = open(path, O_RDONLY);
    if (fd < 0) return BRV_E_IO;
    struct stat st;
    if (fstat(fd, &st) != 0 || !S_ISREG(st.st_mode) || st.st_size < 0 || (uint64_t)st.st_size > SIZE_MAX) {
        close(fd); /* a folder or a device is not a volume file */
        return BRV_E_IO;
    }
    static const uint8_t empty[1] = {0};
    if (st.st_size == 0) { /* nothing to read on demand: fault as an empty buffer does */
        close(fd);
        return open_common(empty, 0, alloc, NULL, -1, out);
    }
    return open_common(NULL, (size_t)st.st_size, alloc, NULL, fd, out);
#else
    FILE *f = fopen(path, "rb");
    if (!f) return BRV_E_IO;
    brv_result r = BRV_E_IO;
    uint8_t *buf = NULL;
    long n = -1;
    if (fseek(f, 0, SEEK_END) == 0) n = ftell(f);
    /* One byte first: a folder opens and seeks "fine" on some systems, but cannot be read. */
    if (n >= 0 && fseek(f, 0, SEEK_SET) == 0 && (n == 0 || fgetc(f) != EOF) && fseek(f, 0, SEEK_SET) == 0) {
        buf = brv_alloc(alloc, n ? (size_t)n : 1);
        if (!buf) r = BRV_E_NOMEM;
        else if (n == 0 || fread(buf, 1, (size_t)n, f) == (size_t)n) r = BRV_OK;
    }
    fclose(f);
    if (r != BRV_OK) {
        brv_dealloc(alloc, buf);
        return r;
    }
    return open_common(buf, (size_t)n, alloc, buf, -1, out);
#endif
}

const brv_grid_info *brv_grid(const brv_volume *v) { return v ? &v->grid : NULL; }

const brv_channel_info *brv_channel(const brv_volume *v, uint32_t index)
{
    return v && index < v->grid.channel_count ? &v->ch[index] : NULL;
}

int brv_channel_find(const brv_volume *v, const char *name)
{
    if (!v || !name) return -1;
    for (uint32_t c = 0; c < v->grid.channel_count; c++)
        if (strcmp(v->names[c], name) == 0) return (int)c;
    return -1;
}

const char *brv_metadata(const brv_volume *v, size_t *len)
{
    if (!v) return NULL;
    if (len) *len = v->metadata_len;
    return v->metadata;
}

size_t brv_channel_size(const brv_volume *v)
{
    return v ? (size_t)v->grid.cells[0] * v->grid.cells[1] * v->grid.cells[2] : 0;
}

size_t brv_all_size(const brv_volume *v) { return v ? brv_channel_size(v) * v->grid.channel_count : 0; }

size_t brv_brick_size(const brv_volume *v)
{
    return v ? (size_t)v->grid.brick_size * v->grid.brick_size * v->grid.brick_size * v->grid.channel_count : 0;
}

brv_result brv_brick_extent(const brv_volume *v, uint32_t b, uint32_t origin[3], uint32_t extent[3])
{
    if (!v || !origin || !extent || b >= v->grid.brick_count) return BRV_E_ARGUMENT;
    const brv_grid_info *g = &v->grid;
    uint32_t bc[3] = {b % g->bricks[0], (b / g->bricks[0]) % g->bricks[1], b / (g->bricks[0] * g->bricks[1])};
    for (int a = 0; a < 3; a++) {
        origin[a] = bc[a] * g->brick_size;
        uint32_t left = g->cells[a] - origin[a];
        extent[a] = left < g->brick_size ? left : g->brick_size;
    }
    return BRV_OK;
}

brv_result brv_decoder_create(const brv_volume *v, brv_decoder **out)
{
    if (!v || !out) return BRV_E_ARGUMENT;
    const brv_allocator *a = brv_volume_allocator(v);
    brv_decoder *d = brv_alloc(a, sizeof *d);
    if (!d) return BRV_E_NOMEM;
    memset(d, 0, sizeof *d);
    d->v = v;
    d->stream = BRV_STREAM_AUTO;
    d->dctx = ZSTD_createDCtx();
    d->payload = brv_alloc(a, v->payload_max);
    d->scratch = brv_alloc(a, brv_brick_size(v) * sizeof(float));
    d->half = brv_alloc(a, brv_brick_size(v) * sizeof(uint16_t));
    if (!v->data) d->stored = brv_alloc(a, v->stored_max);
    if (!d->dctx || !d->payload || !d->scratch || !d->half || (!v->data && !d->stored)) {
        brv_decoder_free(d);
        return BRV_E_NOMEM;
    }
    *out = d;
    return BRV_OK;
}

void brv_decoder_set_streaming(brv_decoder *d, int on)
{
    if (!d) return;
    d->stream = on == BRV_STREAM_AUTO ? BRV_STREAM_AUTO : on != 0 ? BRV_STREAM_ON : BRV_STREAM_OFF;
    d->run = 0;
}

bool brv_decoder_streamed(const brv_decoder *d) { return d && d->streamed; }

/* Whether a brick call of the public API that writes bytes at out streams them (see
 * brv_decoder_set_streaming): in BRV_STREAM_AUTO, once the forward run of outputs — each
 * starting at or after the end of the one before — exceeds BRV_STREAM_AUTO_BYTES. */
static bool stream_for(brv_decoder *d, const void *out, size_t bytes)
{
    if (d->stream != BRV_STREAM_AUTO) return d->stream == BRV_STREAM_ON;
    uintptr_t at = (uintptr_t)out;
    d->run = d->run && at >= d->run_end ? d->run + bytes : bytes;
    d->run_end = at + bytes;
    return d->run > BRV_STREAM_AUTO_BYTES;
}

void brv_decoder_free(brv_decoder *d)
{
    if (!d) return;
    const brv_allocator *a = brv_volume_allocator(d->v);
    ZSTD_freeDCtx(d->dctx);
    brv_dealloc(a, d->payload);
    brv_dealloc(a, d->scratch);
    brv_dealloc(a, d->stored);
    brv_dealloc(a, d->half);
    brv_dealloc(a, d);
}

static void decode_constant(const uint8_t *w, size_t n, uint32_t code, float sc, float *out)
{
    float val[3];
    unsigned k = 1;
    if (code == BRV_ENCODING_F16) val[0] = brv_f16_to_f32(brv_rd16(w)) * sc;
    else if (code == BRV_ENCODING_F32) val[0] = brv_rdf32(w);
    else {
        brv_rgb9e5_unpack(brv_rd32(w), &val[0], &val[1], &val[2]);
        for (int i = 0; i < 3; i++) val[i] *= sc;
        k = 3;
    }
    for (unsigned c = 0; c < k; c++)
        for (size_t i = 0; i < n; i++) out[c * n + i] = val[c];
}

/* The stored bytes of a brick whose range open checked: in memory, or read into the decoder. */
static brv_result brick_bytes(const brv_volume *v, brv_decoder *dec, uint64_t off, size_t cs, const uint8_t **src)
{
    if (v->data) {
        *src = v->data + off;
        return BRV_OK;
    }
    *src = dec->stored;
    return read_at(v, off, cs, dec->stored);
}

/* One group's words as binary16 into dst (channel-major, n each; only ≥ 0: that channel alone).
 * An f16 group stored without scale is its own halves; any other goes through floats and the
 * rounding of brv_f32_to_f16. Returns BRV_E_UNREPRESENTABLE for a value beyond binary16's range
 * (after writing every word). */
static brv_result group_to_f16(brv_decoder *dec, const rgroup *g, unsigned mode, unsigned wb, int ex,
                               const uint8_t *p, size_t n, uint32_t nx, int only, uint16_t *dst, int8_t *raw_ex,
                               int simd)
{
    if ((raw_ex && g->code == BRV_ENCODING_F16) || (g->code == BRV_ENCODING_F16 && ex == 0)) {
        if (raw_ex) raw_ex[g->first] = (int8_t)ex; /* the stored halves, the scale given apart */
        int special;
        if (mode == BRV_MODE_CONSTANT) {
            uint16_t h = brv_rd16(p);
            for (size_t i = 0; i < n; i++) dst[i] = h;
            special = (h & 0x7C00u) == 0x7C00u;
        } else {
            special = brv_unfilter_f16_halves(p, n, nx, dst, simd);
        }
        return special ? BRV_E_UNREPRESENTABLE : BRV_OK;
    }
    float *tmp = dec->scratch, sc = ldexpf(1.0f, ex);
    if (mode == BRV_MODE_CONSTANT) decode_constant(p, n, g->code, sc, tmp);
    else if (wb == 2) brv_unfilter_f16(p, n, nx, ex, tmp, 1);
    else brv_unfilter_w32(p, n, nx, ex, g->code, tmp, 1);
    uint32_t c0 = only < 0 ? 0 : (uint32_t)only - g->first, c1 = only < 0 ? g->count : c0 + 1;
    unsigned special = 0;
    for (uint32_t c = c0; c < c1; c++)
        for (size_t i = 0; i < n; i++) {
            uint16_t h = brv_f32_to_f16(tmp[c * n + i]);
            special |= (h & 0x7C00u) == 0x7C00u;
            dst[(c - c0) * n + i] = h;
        }
    return special ? BRV_E_UNREPRESENTABLE : BRV_OK;
}

/* Brick b's stored bytes, checked (frame exactly the stored bytes, content no more than a brick
 * of n cells holds; with check_crc also the CRC of the stored bytes) and decompressed into
 * dec->payload; *got_out its length. */
static brv_result brick_payload(const brv_volume *v, brv_decoder *dec, uint32_t b, size_t n, bool check_crc,
                                size_t *got_out)
{
    const uint8_t *ent = v->brick_table + (size_t)b * v->brick_entry;
    const uint8_t *src;
    size_t cs = brv_rd32(ent + 8);
    brv_result fr = brick_bytes(v, dec, brv_rd64(ent), cs, &src);
    if (fr != BRV_OK) return fr;
    /* Decoding trusts zstd's content checksum (XXH64 of the payload) to reject any change to
     * the data; the CRC of the stored bytes, which also catches changes that leave the
     * payload intact, is for brv_verify (it would cost a third of zstd's own time here). */
    if (check_crc && brv_crc32(0, src, cs) != brv_rd32(ent + 12)) return BRV_E_BRICK_CORRUPT;
    /* The frame must be exactly the stored bytes, and claim no more than a brick can hold. */
    if (ZSTD_findFrameCompressedSize(src, cs) != cs) return BRV_E_BRICK_CORRUPT;
    unsigned long long content = ZSTD_getFrameContentSize(src, cs);
    size_t cap = 0;
    for (uint32_t gi = 0; gi < v->group_count; gi++)
        cap += BRV_GROUP_HEADER + n * (v->groups[gi].wb ? v->groups[gi].wb : 8u);
    if (content == ZSTD_CONTENTSIZE_ERROR || content == ZSTD_CONTENTSIZE_UNKNOWN || content > cap)
        return BRV_E_BRICK_CORRUPT;
    size_t got = ZSTD_decompressDCtx(dec->dctx, dec->payload, v->payload_max, src, cs);
    if (ZSTD_isError(got) || got != content) return BRV_E_BRICK_CORRUPT;
    *got_out = got;
    return BRV_OK;
}

/* Decodes brick b. only < 0: every channel into out (channel-major, n cells each);
 * only ≥ 0: that channel alone into out (n values). Floats to out, or (out is NULL) binary16
 * words to out16. caller: a brick call of the public API, whose output may be streamed (the
 * internal calls decode into the decoder's own buffers, which stay in the caches). */
static brv_result decode_brick(const brv_volume *v, brv_decoder *dec, uint32_t b, int only, float *out,
                               uint16_t *out16, int8_t *raw_ex, size_t out_count, bool check_crc, bool caller)
{
    uint32_t o[3], e[3];
    if (brv_brick_extent(v, b, o, e) != BRV_OK) return BRV_E_ARGUMENT;
    size_t n = (size_t)e[0] * e[1] * e[2];
    size_t need = only < 0 ? n * v->grid.channel_count : n;
    if (out_count < need) return BRV_E_BUFFER;
    bool stream = caller && (out ? stream_for(dec, out, need * sizeof(float))
                                 : stream_for(dec, out16, need * sizeof(uint16_t)));
    dec->streamed = stream;
    size_t got;
    brv_result fr = brick_payload(v, dec, b, n, check_crc, &got);
    if (fr != BRV_OK) return fr;

    const uint8_t *p = dec->payload, *end = dec->payload + got;
    int want_group = only >= 0 ? v->channel_group[only] : -1;
    brv_result range = BRV_OK; /* a half out of range: reported once the payload checks out */
    for (uint32_t gi = 0; gi < v->group_count; gi++) {
        const rgroup *g = &v->groups[gi];
        if ((size_t)(end - p) < BRV_GROUP_HEADER) return BRV_E_BRICK_CORRUPT;
        unsigned mode = p[0], wb = p[2];
        int ex = (int8_t)p[1];
        if (mode > BRV_MODE_CONSTANT || p[3] != 0 || wb == 0 || wb > 8 || (g->wb && wb != g->wb))
            return BRV_E_BRICK_CORRUPT;
        if ((g->code == BRV_ENCODING_F32 && ex != 0) || ex < 0) return BRV_E_BRICK_CORRUPT;
        p += BRV_GROUP_HEADER;
        size_t len = mode == BRV_MODE_CONSTANT ? wb : n * wb;
        if ((size_t)(end - p) < len) return BRV_E_BRICK_CORRUPT;
        bool wanted = only < 0 || (int)gi == want_group;
        if (wanted && !g->wb) return BRV_E_VERSION; /* a newer minor's encoding */
        if (wanted && !out) {
            uint16_t *dst = only < 0 ? out16 + (size_t)g->first * n : out16;
            if (group_to_f16(dec, g, mode, wb, ex, p, n, e[0], only, dst, raw_ex, stream ? 2 : 1) != BRV_OK)
                range = BRV_E_UNREPRESENTABLE;
        } else if (wanted) {
            float sc = ldexpf(1.0f, ex);
            float *dst = only < 0 ? out + (size_t)g->first * n : (g->count == 1 ? out : dec->scratch);
            int simd = stream && dst != dec->scratch ? 2 : 1; /* staging stays in the caches */
            if (mode == BRV_MODE_CONSTANT) decode_constant(p, n, g->code, sc, dst);
            else if (wb == 2) brv_unfilter_f16(p, n, e[0], ex, dst, simd);
            else brv_unfilter_w32(p, n, e[0], ex, g->code, dst, simd);
            if (only >= 0 && g->count > 1)
                memmove(out, dec->scratch + (size_t)((uint32_t)only - g->first) * n, n * sizeof(float));
        }
        p += len;
    }
    if (stream) brv_store_fence(); /* streaming stores are ordered before the return */
    if (p != end) return BRV_E_BRICK_CORRUPT;
    return range;
}

static brv_result with_decoder(const brv_volume *v, brv_decoder **dec, brv_decoder **tmp)
{
    *tmp = NULL;
    if (*dec) return (*dec)->v == v ? BRV_OK : BRV_E_ARGUMENT;
    brv_result r = brv_decoder_create(v, tmp);
    *dec = *tmp;
    return r;
}

brv_result brv_decode_brick(const brv_volume *v, brv_decoder *dec, uint32_t b, float *out, size_t out_count)
{
    if (!v || !out) return BRV_E_ARGUMENT;
    brv_decoder *tmp;
    brv_result r = with_decoder(v, &dec, &tmp);
    if (r == BRV_OK) r = decode_brick(v, dec, b, -1, out, NULL, NULL, out_count, false, true);
    brv_decoder_free(tmp);
    return r;
}

brv_result brv_decode_brick_f16(const brv_volume *v, brv_decoder *dec, uint32_t b, uint16_t *out, size_t out_count)
{
    if (!v || !out) return BRV_E_ARGUMENT;
    brv_decoder *tmp;
    brv_result r = with_decoder(v, &dec, &tmp);
    if (r == BRV_OK) r = decode_brick(v, dec, b, -1, NULL, out, NULL, out_count, false, true);
    brv_decoder_free(tmp);
    return r;
}

brv_result brv_decode_brick_raw16(const brv_volume *v, brv_decoder *dec, uint32_t b, uint16_t *out, size_t out_count,
                                  int8_t *scale_exp, bool *special)
{
    if (!v || !dec || !out || !scale_exp || !special || dec->v != v) return BRV_E_ARGUMENT;
    for (uint32_t c = 0; c < v->grid.channel_count; c++)
        if (v->ch[c].encoding != BRV_ENCODING_F16) return BRV_E_ARGUMENT;
    brv_result r = decode_brick(v, dec, b, -1, NULL, out, scale_exp, out_count, false, false);
    *special = r == BRV_E_UNREPRESENTABLE;
    return *special ? BRV_OK : r;
}

brv_result brv_decode_brick_cells16(const brv_volume *v, brv_decoder *dec, uint32_t b, uint16_t *out,
                                    size_t out_count, int8_t *scale_exp, bool *special, bool *done)
{
    if (done) *done = false;
    if (!v || !dec || !out || !scale_exp || !special || !done || dec->v != v) return BRV_E_ARGUMENT;
    if (v->grid.channel_count != 4 || v->group_count != 4) return BRV_E_ARGUMENT;
    for (uint32_t c = 0; c < 4; c++)
        if (v->ch[c].encoding != BRV_ENCODING_F16) return BRV_E_ARGUMENT;
    uint32_t o[3], e[3];
    if (brv_brick_extent(v, b, o, e) != BRV_OK) return BRV_E_ARGUMENT;
    if (e[0] != 16) return BRV_OK; /* not done: the caller decodes channel-major */
    size_t n = (size_t)e[0] * e[1] * e[2];
    if (out_count < 4 * n) return BRV_E_BUFFER;
    size_t got;
    brv_result r = brick_payload(v, dec, b, n, false, &got);
    if (r != BRV_OK) return r;
    /* The group headers, checked as decode_brick checks them. */
    const uint8_t *p = dec->payload, *end = dec->payload + got, *lo[4], *hi[4];
    uint16_t cval[4] = {0, 0, 0, 0};
    for (uint32_t gi = 0; gi < 4; gi++) {
        if ((size_t)(end - p) < BRV_GROUP_HEADER) return BRV_E_BRICK_CORRUPT;
        unsigned mode = p[0], wb = p[2];
        int ex = (int8_t)p[1];
        if (mode > BRV_MODE_CONSTANT || p[3] != 0 || wb != 2 || ex < 0) return BRV_E_BRICK_CORRUPT;
        p += BRV_GROUP_HEADER;
        size_t len = mode == BRV_MODE_CONSTANT ? 2 : 2 * n;
        if ((size_t)(end - p) < len) return BRV_E_BRICK_CORRUPT;
        scale_exp[gi] = (int8_t)ex;
        lo[gi] = mode == BRV_MODE_CONSTANT ? NULL : p;
        hi[gi] = mode == BRV_MODE_CONSTANT ? NULL : p + n;
        if (mode == BRV_MODE_CONSTANT) cval[gi] = brv_rd16(p);
        p += len;
    }
    if (p != end) return BRV_E_BRICK_CORRUPT;
    *special = brv_unfilter_f16_cells4(lo, hi, cval, n, out, 1) != 0;
    *done = true;
    return BRV_OK;
}

/* One brick row into the grid, which is far larger than any cache and is not read here again:
 * whole 64-byte lines with streaming stores (SSE2), the rest with memcpy. */
static void copy_row(void *dst, const void *src, size_t bytes)
{
#if defined(__SSE2__)
    if (((uintptr_t)dst & 63) == 0 && bytes % 64 == 0) {
        const uint8_t *p = src;
        uint8_t *q = dst;
        for (size_t i = 0; i < bytes; i += 16)
            _mm_stream_si128((__m128i *)(void *)(q + i), _mm_loadu_si128((const __m128i *)(const void *)(p + i)));
        return;
    }
#endif
    memcpy(dst, src, bytes);
}

/* Decodes every brick's requested channel (or all) through the decoder's brick buffers into
 * the grid: floats to out, or (out NULL) halves to out16. */
static brv_result decode_grid(const brv_volume *v, int only, float *out, uint16_t *out16, size_t out_count)
{
    const brv_grid_info *g = &v->grid;
    size_t cells = brv_channel_size(v);
    if (out_count < (only < 0 ? cells * g->channel_count : cells)) return BRV_E_BUFFER;
    brv_decoder *dec = NULL, *tmp;
    brv_result r = with_decoder(v, &dec, &tmp);
    uint32_t nch = only < 0 ? g->channel_count : 1;
    brv_result range = BRV_OK;
    for (uint32_t b = 0; b < g->brick_count && r == BRV_OK; b++) {
        uint32_t o[3], e[3];
        brv_brick_extent(v, b, o, e);
        size_t n = (size_t)e[0] * e[1] * e[2];
        float *s = dec->scratch;
        uint16_t *h = dec->half;
        /* A channel alone decodes into the scratch's tail, clear of the rgb9e5 staging at its head. */
        if (only >= 0) s = dec->scratch + brv_brick_size(v) - n;
        r = decode_brick(v, dec, b, only, out ? s : NULL, h, NULL, n * nch, false, false);
        if (r == BRV_E_UNREPRESENTABLE) { /* every word was written: go on, report it at the end */
            range = r;
            r = BRV_OK;
        }
        if (r != BRV_OK) break;
        for (uint32_t c = 0; c < nch; c++)
            for (uint32_t z = 0; z < e[2]; z++)
                for (uint32_t y = 0; y < e[1]; y++) {
                    size_t from = c * n + (size_t)e[0] * (y + (size_t)e[1] * z);
                    size_t at = (size_t)c * cells + o[0] + (size_t)g->cells[0] * ((o[1] + y) + (size_t)g->cells[1] * (o[2] + z));
                    if (out) copy_row(out + at, s + from, e[0] * sizeof(float));
                    else copy_row(out16 + at, h + from, e[0] * sizeof(uint16_t));
                }
    }
    brv_store_fence();
    brv_decoder_free(tmp);
    return r != BRV_OK ? r : range;
}

brv_result brv_decode_channel(const brv_volume *v, uint32_t channel, float *out, size_t out_count)
{
    if (!v || !out) return BRV_E_ARGUMENT;
    if (channel >= v->grid.channel_count) return BRV_E_NOT_FOUND;
    return decode_grid(v, (int)channel, out, NULL, out_count);
}

brv_result brv_decode_channel_f16(const brv_volume *v, uint32_t channel, uint16_t *out, size_t out_count)
{
    if (!v || !out) return BRV_E_ARGUMENT;
    if (channel >= v->grid.channel_count) return BRV_E_NOT_FOUND;
    return decode_grid(v, (int)channel, NULL, out, out_count);
}

brv_result brv_decode_all(const brv_volume *v, float *out, size_t out_count)
{
    if (!v || !out) return BRV_E_ARGUMENT;
    return decode_grid(v, -1, out, NULL, out_count);
}

brv_result brv_verify(const brv_volume *v, uint32_t *brick)
{
    if (brick) *brick = UINT32_MAX;
    if (!v) return BRV_E_ARGUMENT;
    brv_decoder *dec;
    brv_result r = brv_decoder_create(v, &dec);
    if (r != BRV_OK) return r;
    for (uint32_t b = 0; b < v->grid.brick_count; b++) {
        r = decode_brick(v, dec, b, -1, dec->scratch, NULL, NULL, brv_brick_size(v), true, false);
        if (r == BRV_E_VERSION) r = BRV_OK; /* a newer encoding: its frame and checksum were sound */
        if (r != BRV_OK) {
            if (brick) *brick = b;
            break;
        }
    }
    brv_decoder_free(dec);
    return r;
}
