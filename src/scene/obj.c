/* Wavefront OBJ parser (positions and faces only); see obj.h for the accepted subset. */
#include "scene/obj.h"

#include <errno.h>
#include <stdarg.h>
#include <stdio.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

typedef struct parser {
    const char *p, *end;        /* current line's content */
    const char *name;
    uint32_t line;
    brm_diag *d;
    brm_obj_mesh m;
    size_t vcap, fcap;
} parser;

#if defined(__GNUC__)
__attribute__((format(printf, 2, 3)))
#endif
static brm_status perr(parser *ps, const char *fmt, ...)
{
    char msg[768];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    return brm_diag_error(ps->d, BRM_E_INPUT, "%s:%u: %s", ps->name, ps->line, msg);
}

static int is_space(char c) { return c == ' ' || c == '\t' || c == '\r' || c == '\v' || c == '\f'; }

/* Next whitespace-separated token of the line, or length 0 at its end. */
static size_t next_token(parser *ps, const char **tok)
{
    while (ps->p < ps->end && is_space(*ps->p)) ps->p++;
    *tok = ps->p;
    while (ps->p < ps->end && !is_space(*ps->p)) ps->p++;
    return (size_t)(ps->p - *tok);
}

/* Printable excerpt of a token for messages. */
static void excerpt(const char *t, size_t n, char out[40])
{
    size_t k = 0;
    for (size_t i = 0; i < n && k < 32; i++) out[k++] = (t[i] >= 0x20 && t[i] < 0x7f) ? t[i] : '?';
    if (n > 32) { out[k++] = '.'; out[k++] = '.'; out[k++] = '.'; }
    out[k] = '\0';
}

static int parse_real(const char *t, size_t n, double *out)
{
    char buf[64];
    if (n == 0 || n >= sizeof buf) return 0;
    for (size_t i = 0; i < n; i++) {
        char c = t[i];
        if (!((c >= '0' && c <= '9') || c == '+' || c == '-' || c == '.' || c == 'e' || c == 'E')) return 0;
    }
    memcpy(buf, t, n);
    buf[n] = '\0';
    char *e;
    errno = 0;
    double v = strtod(buf, &e);
    if (e != buf + n || !isfinite(v)) return 0;
    *out = v;
    return 1;
}

/* A signed decimal integer in [−2^31, 2^31); 0 on junk or overflow. */
static int parse_index(const char *t, size_t n, long long *out)
{
    size_t i = 0;
    int neg = 0;
    if (i < n && (t[i] == '-' || t[i] == '+')) neg = t[i++] == '-';
    if (i == n) return 0;
    long long v = 0;
    for (; i < n; i++) {
        if (t[i] < '0' || t[i] > '9') return 0;
        v = v * 10 + (t[i] - '0');
        if (v > 2147483648ll) return 0;
    }
    *out = neg ? -v : v;
    return 1;
}

static int grow(void **buf, size_t *cap, size_t need, size_t elem)
{
    if (need <= *cap) return 1;
    size_t nc = *cap ? *cap : 64;
    while (nc < need) {
        if (nc > ((size_t)-1) / 4) return 0;
        nc *= 2;
    }
    size_t bytes;
    if (!brm_mul_size(nc, elem, &bytes)) return 0;
    void *n = realloc(*buf, bytes);
    if (!n) return 0;
    *buf = n;
    *cap = nc;
    return 1;
}

static brm_status parse_vertex(parser *ps)
{
    double c[3];
    const char *t;
    size_t n;
    char ex[40];
    for (int i = 0; i < 3; i++) {
        n = next_token(ps, &t);
        if (n == 0) return perr(ps, "vertex has %s coordinates; expected \"v x y z\"", i == 0 ? "no" : "too few");
        if (!parse_real(t, n, &c[i])) {
            excerpt(t, n, ex);
            return perr(ps, "vertex coordinate \"%s\" is not a finite number; expected \"v x y z\" with decimal numbers", ex);
        }
    }
    for (int extra = 0;; extra++) {
        n = next_token(ps, &t);
        if (n == 0) break;
        double dummy;
        if (extra >= 4 || !parse_real(t, n, &dummy)) {
            excerpt(t, n, ex);
            return perr(ps, "unexpected \"%s\" after the vertex; expected \"v x y z\" (optionally w, or a colour r g b)", ex);
        }
    }
    if (ps->m.vert_count >= 0x7fffffffu) return perr(ps, "too many vertices; expected fewer than 2^31");
    if (!grow((void **)&ps->m.verts, &ps->vcap, (size_t)ps->m.vert_count + 1, sizeof(brm_vec3)))
        return brm_diag_error(ps->d, BRM_E_NOMEM, "%s:%u: out of memory", ps->name, ps->line);
    ps->m.verts[ps->m.vert_count++] = brm_v3(c[0], c[1], c[2]);
    return BRM_OK;
}

/* One face corner "v", "v/vt", "v//vn" or "v/vt/vn" to a 0-based vertex index. */
static brm_status parse_corner(parser *ps, const char *t, size_t n, uint32_t *out)
{
    char ex[40];
    excerpt(t, n, ex);
    const char *s1 = memchr(t, '/', n);
    size_t vn = s1 ? (size_t)(s1 - t) : n;
    long long v;
    if (!parse_index(t, vn, &v))
        return perr(ps, "face corner \"%s\" has no valid vertex index; expected v, v/vt, v//vn or v/vt/vn with integers", ex);
    if (s1) {
        const char *rest = s1 + 1, *e = t + n;
        const char *s2 = memchr(rest, '/', (size_t)(e - rest));
        size_t a = s2 ? (size_t)(s2 - rest) : (size_t)(e - rest);
        long long dummy;
        if (a > 0 && !parse_index(rest, a, &dummy))
            return perr(ps, "face corner \"%s\" has a bad texture index; expected v, v/vt, v//vn or v/vt/vn with integers", ex);
        if (s2) {
            size_t b = (size_t)(e - (s2 + 1));
            if (b == 0 || !parse_index(s2 + 1, b, &dummy) || memchr(s2 + 1, '/', b))
                return perr(ps, "face corner \"%s\" has a bad normal index; expected v, v/vt, v//vn or v/vt/vn with integers", ex);
        } else if (a == 0) {
            return perr(ps, "face corner \"%s\" ends with '/'; expected v, v/vt, v//vn or v/vt/vn", ex);
        }
    }
    long long count = ps->m.vert_count;
    long long idx = v > 0 ? v - 1 : count + v;
    if (v == 0 || idx < 0 || idx >= count) {
        char num[48], lim[96];
        snprintf(num, sizeof num, "%lld", v);
        if (count == 0) snprintf(lim, sizeof lim, "no vertices defined before this face; expected \"v\" lines first");
        else snprintf(lim, sizeof lim, "%lld vertices defined so far; expected 1..%lld or -%lld..-1", count, count, count);
        return perr(ps, "face index %s out of range: %s", num, lim);
    }
    *out = (uint32_t)idx;
    return BRM_OK;
}

static brm_status parse_face(parser *ps)
{
    uint32_t first = 0, prev = 0;
    uint32_t k = 0;
    const char *t;
    size_t n;
    while ((n = next_token(ps, &t)) != 0) {
        uint32_t idx = 0;
        brm_status st = parse_corner(ps, t, n, &idx);
        if (st != BRM_OK) return st;
        if (k == 0) first = idx;
        else if (k >= 2) {
            if (first == prev || prev == idx || first == idx) {
                ps->m.repeated_dropped++;
            } else {
                if (ps->m.face_count >= 0x7fffffffu) return perr(ps, "too many faces; expected fewer than 2^31");
                if (!grow((void **)&ps->m.faces, &ps->fcap, (size_t)ps->m.face_count + 1, sizeof ps->m.faces[0]))
                    return brm_diag_error(ps->d, BRM_E_NOMEM, "%s:%u: out of memory", ps->name, ps->line);
                ps->m.faces[ps->m.face_count][0] = first;
                ps->m.faces[ps->m.face_count][1] = prev;
                ps->m.faces[ps->m.face_count][2] = idx;
                ps->m.face_count++;
            }
        }
        prev = idx;
        k++;
    }
    if (k < 3) {
        return perr(ps, "face has %u corner%s; expected at least 3 (\"f 1 2 3\")", k, k == 1 ? "" : "s");
    }
    return BRM_OK;
}

brm_status brm_obj_parse(const char *data, size_t len, const char *name, brm_obj_mesh *out, brm_diag *d)
{
    parser ps;
    memset(&ps, 0, sizeof ps);
    ps.name = name;
    ps.d = d;
    const char *p = data, *end = data + len;
    brm_status st = BRM_OK;
    /* A UTF-8 byte-order mark is harmless. */
    if (len >= 3 && (unsigned char)p[0] == 0xef && (unsigned char)p[1] == 0xbb && (unsigned char)p[2] == 0xbf) p += 3;
    while (p < end && st == BRM_OK) {
        ps.line++;
        const char *eol = memchr(p, '\n', (size_t)(end - p));
        if (!eol) eol = end;
        const char *hash = memchr(p, '#', (size_t)(eol - p));
        const char *nul = memchr(p, '\0', (size_t)(eol - p));
        if (nul) {
            st = perr(&ps, "NUL byte in the file; expected a text file");
            break;
        }
        ps.p = p;
        ps.end = hash ? hash : eol;
        p = eol < end ? eol + 1 : end;
        const char *kw;
        size_t kn = next_token(&ps, &kw);
        if (kn == 0) continue;
        if (kn == 1 && kw[0] == 'v') st = parse_vertex(&ps);
        else if (kn == 1 && kw[0] == 'f') st = parse_face(&ps);
        else if ((kn == 1 && (kw[0] == 'o' || kw[0] == 'g' || kw[0] == 's')) || (kn == 2 && (!memcmp(kw, "vt", 2) || !memcmp(kw, "vn", 2))) ||
                 (kn == 6 && !memcmp(kw, "usemtl", 6)) || (kn == 6 && !memcmp(kw, "mtllib", 6)))
            continue;   /* accepted and ignored: names, groups, smoothing, materials, uv, normals */
        else {
            char ex[40];
            excerpt(kw, kn, ex);
            st = perr(&ps, "unknown statement \"%s\"; expected v, f, vt, vn, o, g, s, usemtl, mtllib or a # comment", ex);
        }
    }
    if (st != BRM_OK) {
        brm_obj_free(&ps.m);
        return st;
    }
    *out = ps.m;
    return BRM_OK;
}

void brm_obj_free(brm_obj_mesh *m)
{
    free(m->verts);
    free(m->faces);
    memset(m, 0, sizeof *m);
}
