/* Scene loading and validation (SPEC.md "Scene file").
 *
 * The whole file is checked before anything is built on it: UTF-8, JSON syntax (cJSON, with
 * our own structural scan to say where and what was expected), then every key, type and range.
 * Every message is "FILE:LINE:COL: json.path: what is wrong; what is expected"; positions come
 * from json_pos.c because cJSON keeps none. On any failure nothing is returned. */
#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cJSON.h>

#include "base/sha256.h"
#include "scene/json_pos.h"
#include "scene/light.h"
#include "scene/media.h"
#include "scene/obj.h"
#include "scene/scene.h"

#define MAX_SCENE_BYTES (256u << 20)    /* a scene file is text of a few KiB; refuse absurd ones */
#define MAX_MESH_BYTES ((size_t)1 << 31)
#define MAX_COORD 1e7                   /* metres: beyond this, single-precision stages lose the scene */
#define MAX_CELLS_AXIS 8192u
#define MAX_CELLS_TOTAL 2147483648.0    /* 2^31 */
#define MAX_PROBES 16777216.0           /* 2^24 */

typedef struct loader {
    const char *file;
    const char *text;
    size_t len;
    brm_diag *d;
    brm_scene *s;
    const brm_scene_load_opts *opts;
    size_t obj_cap, tri_cap, file_cap;
} loader;

/* ---- messages ------------------------------------------------------------------------- */

/* The path as printed: "(top level)" for the root, control bytes of odd keys shown as '?',
 * long paths (deep nesting) shortened. */
static const char *shown_buf(const char *path, char buf[136])
{
    if (!path[0]) return "(top level)";
    size_t l = strlen(path), k = 0;
    for (size_t i = 0; i < l && k < 128; i++) {
        if (l > 120 && i == 60) {
            memcpy(buf + k, "...", 3);
            k += 3;
            i = l - 40;
        }
        unsigned char c = (unsigned char)path[i];
        buf[k++] = (c < 0x20 || c == 0x7f) ? '?' : (char)c;
    }
    buf[k] = '\0';
    return buf;
}
#define shown(path) shown_buf((path), (char[136]){0})

#if defined(__GNUC__)
__attribute__((format(printf, 5, 6)))
#endif
static bool fail_at(loader *L, const char *path, int nth, bool at_key, const char *fmt, ...)
{
    if (L->d && L->d->status != BRM_OK) return false;
    unsigned line, col;
    size_t off = brm_json_offset(L->text, L->len, path, nth, at_key);
    brm_json_line_col(L->text, L->len, off, &line, &col);
    char msg[1400];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(msg, sizeof msg, fmt, ap);
    va_end(ap);
    brm_diag_error(L->d, BRM_E_INPUT, "%s:%u:%u: %s: %s", L->file, line, col, shown(path), msg);
    return false;
}

#define FAIL(L, path, ...) fail_at((L), (path), 1, false, __VA_ARGS__)

static void join(char *out, size_t cap, const char *path, const char *key)
{
    if (path[0]) snprintf(out, cap, "%s.%s", path, key);
    else snprintf(out, cap, "%s", key);
}

static void join_index(char *out, size_t cap, const char *path, unsigned i) { snprintf(out, cap, "%s[%u]", path, i); }

static const char *type_name(const cJSON *v)
{
    if (cJSON_IsObject(v)) return "an object";
    if (cJSON_IsArray(v)) return "an array";
    if (cJSON_IsString(v)) return "a string";
    if (cJSON_IsNumber(v)) return "a number";
    if (cJSON_IsBool(v)) return "a boolean";
    if (cJSON_IsNull(v)) return "null";
    return "an unknown value";
}

/* Levenshtein distance (Levenshtein 1966), for "did you mean". */
static size_t edit_distance(const char *a, const char *b)
{
    size_t la = strlen(a), lb = strlen(b);
    if (la > 63 || lb > 63) return 99;
    size_t row[64];
    for (size_t j = 0; j <= lb; j++) row[j] = j;
    for (size_t i = 1; i <= la; i++) {
        size_t diag = row[0];
        row[0] = i;
        for (size_t j = 1; j <= lb; j++) {
            size_t up = row[j];
            size_t best = diag + (a[i - 1] != b[j - 1]);
            if (row[j - 1] + 1 < best) best = row[j - 1] + 1;
            if (up + 1 < best) best = up + 1;
            row[j] = best;
            diag = up;
        }
    }
    return row[lb];
}

/* The closest word of a NULL-terminated list, or NULL when none is close. */
static const char *closest(const char *word, const char *const *list)
{
    const char *best = NULL;
    size_t bd = 99, wl = strlen(word);
    for (size_t i = 0; list[i]; i++) {
        size_t dd = edit_distance(word, list[i]);
        if (dd < bd) {
            bd = dd;
            best = list[i];
        }
    }
    size_t limit = wl <= 3 ? 1 : wl <= 6 ? 2 : 3;
    return bd <= limit ? best : NULL;
}

static void list_words(char *out, size_t cap, const char *const *list)
{
    size_t k = 0;
    out[0] = '\0';
    for (size_t i = 0; list[i] && k + 1 < cap; i++) {
        int w = snprintf(out + k, cap - k, "%s\"%s\"", i ? (list[i + 1] ? ", " : " or ") : "", list[i]);
        if (w < 0) break;
        k += (size_t)w;
    }
}

/* Printable, bounded copy of a user string for messages. */
static void clip(const char *s, char out[72])
{
    size_t k = 0;
    for (size_t i = 0; s[i] && k < 64; i++) {
        unsigned char c = (unsigned char)s[i];
        out[k++] = (c >= 0x20 && c != 0x7f) ? (char)c : '?';
    }
    if (strlen(s) > 64) out[k++] = '.', out[k++] = '.', out[k++] = '.';
    out[k] = '\0';
}

/* ---- keys ----------------------------------------------------------------------------- */

/* Every key of obj must be in allowed (NULL-terminated) and appear once. */
static bool check_keys(loader *L, const cJSON *obj, const char *path, const char *const *allowed)
{
    char p[600];
    for (const cJSON *c = obj->child; c; c = c->next) {
        const char *k = c->string ? c->string : "";
        bool ok = false;
        for (size_t i = 0; allowed[i]; i++)
            if (strcmp(k, allowed[i]) == 0) ok = true;
        join(p, sizeof p, path, k);
        char ks[72];
        clip(k, ks);
        if (!ok) {
            const char *near = closest(k, allowed);
            char words[600];
            list_words(words, sizeof words, allowed);
            if (near) return fail_at(L, p, 1, true, "unknown key \"%s\"; did you mean \"%s\"?", ks, near);
            return fail_at(L, p, 1, true, "unknown key \"%s\"; expected one of %s", ks, words);
        }
        int n = 1;
        for (const cJSON *e = obj->child; e != c; e = e->next)
            if (e->string && strcmp(e->string, k) == 0) n++;
        if (n > 1) return fail_at(L, p, n, true, "duplicate key \"%s\"; each key may appear only once", ks);
    }
    return true;
}

static const cJSON *item(const cJSON *obj, const char *key) { return cJSON_GetObjectItemCaseSensitive(obj, key); }

static bool need(loader *L, const cJSON *obj, const char *path, const char *key, const char *what)
{
    if (item(obj, key)) return true;
    return FAIL(L, path, "missing key \"%s\"; expected %s", key, what);
}

/* ---- typed values --------------------------------------------------------------------- */

static bool as_number(loader *L, const cJSON *v, const char *p, double *out)
{
    if (!cJSON_IsNumber(v)) return FAIL(L, p, "expected a number, found %s", type_name(v));
    if (!isfinite(v->valuedouble))
        return FAIL(L, p, "number is too large (it overflows to infinity); expected a finite number");
    *out = v->valuedouble;
    return true;
}

/* Optional number; *present tells whether it was there. */
static bool opt_num(loader *L, const cJSON *obj, const char *path, const char *key, double *out, bool *present)
{
    const cJSON *v = item(obj, key);
    if (present) *present = v != NULL;
    if (!v) return true;
    char p[600];
    join(p, sizeof p, path, key);
    return as_number(L, v, p, out);
}

enum { GT0, GE0, ANY };

static bool check_sign(loader *L, const char *path, const char *key, double v, int rule)
{
    char p[600];
    join(p, sizeof p, path, key);
    if (rule == GT0 && !(v > 0.0)) return FAIL(L, p, "value %g must be positive; expected a number > 0", v);
    if (rule == GE0 && !(v >= 0.0)) return FAIL(L, p, "value %g is negative; expected a number >= 0", v);
    if (fabs(v) > 1e30) return FAIL(L, p, "value %g is absurdly large; expected a magnitude below 1e30", v);
    return true;
}

static bool num_rule(loader *L, const cJSON *obj, const char *path, const char *key, bool required, double def,
                     int rule, double *out)
{
    bool present = false;
    double v = def;
    if (required && !need(L, obj, path, key, "a number")) return false;
    if (!opt_num(L, obj, path, key, &v, &present)) return false;
    if (present && !check_sign(L, path, key, v, rule)) return false;
    *out = v;
    return true;
}

static bool num_in(loader *L, const cJSON *obj, const char *path, const char *key, bool required, double def,
                   double lo, bool lo_open, double hi, bool hi_open, double *out)
{
    bool present = false;
    double v = def;
    if (required && !need(L, obj, path, key, "a number")) return false;
    if (!opt_num(L, obj, path, key, &v, &present)) return false;
    if (present) {
        bool bad = lo_open ? !(v > lo) : !(v >= lo);
        bad = bad || (hi_open ? !(v < hi) : !(v <= hi));
        if (bad) {
            char p[600];
            join(p, sizeof p, path, key);
            return FAIL(L, p, "value %g is out of range; expected a number in %c%g, %g%c", v, lo_open ? '(' : '[', lo, hi,
                        hi_open ? ')' : ']');
        }
    }
    *out = v;
    return true;
}

static bool int_in(loader *L, const cJSON *obj, const char *path, const char *key, bool required, int64_t def,
                   int64_t lo, int64_t hi, int64_t *out)
{
    const cJSON *v = item(obj, key);
    if (!v) {
        if (required) return need(L, obj, path, key, "an integer");
        *out = def;
        return true;
    }
    char p[600];
    join(p, sizeof p, path, key);
    double x = 0.0;
    if (!as_number(L, v, p, &x)) return false;
    if (x != floor(x)) return FAIL(L, p, "value %g is not a whole number; expected an integer %lld..%lld", x, (long long)lo, (long long)hi);
    if (x < (double)lo || x > (double)hi)
        return FAIL(L, p, "value %.17g is out of range; expected an integer %lld..%lld", x, (long long)lo, (long long)hi);
    *out = (int64_t)x;
    return true;
}

static bool opt_bool(loader *L, const cJSON *obj, const char *path, const char *key, bool def, bool *out)
{
    const cJSON *v = item(obj, key);
    *out = def;
    if (!v) return true;
    char p[600];
    join(p, sizeof p, path, key);
    if (!cJSON_IsBool(v)) return FAIL(L, p, "expected true or false, found %s", type_name(v));
    *out = cJSON_IsTrue(v);
    return true;
}

/* A 3-vector of finite numbers; rule applies per element; zero_ok false refuses [0,0,0]. */
static bool vec3(loader *L, const cJSON *obj, const char *path, const char *key, bool required, brm_vec3 def,
                 int rule, brm_vec3 *out, bool *present)
{
    const cJSON *v = item(obj, key);
    if (present) *present = v != NULL;
    if (!v) {
        if (required) return need(L, obj, path, key, "an array of 3 numbers [x, y, z]");
        *out = def;
        return true;
    }
    char p[600], e[640];
    join(p, sizeof p, path, key);
    if (!cJSON_IsArray(v)) return FAIL(L, p, "expected an array of 3 numbers, found %s", type_name(v));
    int n = cJSON_GetArraySize(v);
    if (n != 3) return FAIL(L, p, "array has %d element%s; expected 3 numbers [x, y, z]", n, n == 1 ? "" : "s");
    double c[3];
    int i = 0;
    for (const cJSON *x = v->child; x; x = x->next, i++) {
        join_index(e, sizeof e, p, (unsigned)i);
        if (!as_number(L, x, e, &c[i])) return false;
        if (rule == GE0 && !(c[i] >= 0.0)) return FAIL(L, e, "value %g is negative; expected a number >= 0", c[i]);
        if (fabs(c[i]) > MAX_COORD)
            return FAIL(L, e, "value %g is too large; expected a magnitude up to %g", c[i], MAX_COORD);
    }
    *out = brm_v3(c[0], c[1], c[2]);
    return true;
}

static bool albedo3(loader *L, const cJSON *obj, const char *path, double def, brm_vec3 *out)
{
    if (!vec3(L, obj, path, "albedo", false, brm_v3(def, def, def), GE0, out, NULL)) return false;
    double a[3] = {out->x, out->y, out->z};
    for (unsigned i = 0; i < 3; i++)
        if (a[i] > 1.0) {
            char p[600], e[640];
            join(p, sizeof p, path, "albedo");
            join_index(e, sizeof e, p, i);
            return FAIL(L, e, "albedo %g is above 1; expected a fraction in [0, 1]", a[i]);
        }
    return true;
}

static bool direction3(loader *L, const cJSON *obj, const char *path, const char *key, brm_vec3 *out)
{
    if (!vec3(L, obj, path, key, true, brm_v3(0, 0, 0), ANY, out, NULL)) return false;
    double l = brm_len(*out);
    if (!(l > 1e-12)) {
        char p[600];
        join(p, sizeof p, path, key);
        return FAIL(L, p, "zero vector has no direction; expected a non-zero vector");
    }
    *out = brm_scale(*out, 1.0 / l);
    return true;
}

/* One of a fixed set of words; index into list. */
static bool word(loader *L, const cJSON *obj, const char *path, const char *key, bool required, int def,
                 const char *const *list, int *out)
{
    const cJSON *v = item(obj, key);
    char words[400];
    list_words(words, sizeof words, list);
    if (!v) {
        if (required) return FAIL(L, path, "missing key \"%s\"; expected one of %s", key, words);
        *out = def;
        return true;
    }
    char p[600];
    join(p, sizeof p, path, key);
    if (!cJSON_IsString(v)) return FAIL(L, p, "expected a string (one of %s), found %s", words, type_name(v));
    for (int i = 0; list[i]; i++)
        if (strcmp(v->valuestring, list[i]) == 0) {
            *out = i;
            return true;
        }
    char vs[72];
    clip(v->valuestring, vs);
    const char *near = closest(v->valuestring, list);
    if (near) return FAIL(L, p, "unknown %s \"%s\"; did you mean \"%s\"?", key, vs, near);
    return FAIL(L, p, "unknown %s \"%s\"; expected one of %s", key, vs, words);
}

static bool box_minmax(loader *L, const cJSON *obj, const char *path, bool strict, brm_aabb *out)
{
    brm_vec3 a, b;
    if (!vec3(L, obj, path, "min", true, brm_v3(0, 0, 0), ANY, &a, NULL)) return false;
    if (!vec3(L, obj, path, "max", true, brm_v3(0, 0, 0), ANY, &b, NULL)) return false;
    const char *ax = "xyz";
    for (int i = 0; i < 3; i++) {
        double lo = brm_vget(a, i), hi = brm_vget(b, i);
        if (strict ? !(lo < hi) : !(lo <= hi)) {
            char p[600], e[640];
            join(p, sizeof p, path, "max");
            join_index(e, sizeof e, p, (unsigned)i);
            return FAIL(L, e, "max.%c = %g is not %s min.%c = %g; expected min %s max on every axis", ax[i], hi,
                        strict ? "above" : "at least", ax[i], lo, strict ? "<" : "<=");
        }
    }
    out->min = a;
    out->max = b;
    return true;
}

/* ---- growing arrays ------------------------------------------------------------------- */

static bool grow(loader *L, void **buf, size_t *cap, size_t need_n, size_t elem)
{
    if (need_n <= *cap) return true;
    size_t nc = *cap ? *cap : 16;
    while (nc < need_n) {
        if (nc > ((size_t)-1) / 4) break;
        nc *= 2;
    }
    size_t bytes;
    void *n = NULL;
    if (nc >= need_n && brm_mul_size(nc, elem, &bytes)) n = realloc(*buf, bytes);
    if (!n) {
        brm_diag_error(L->d, BRM_E_NOMEM, "%s: out of memory loading the scene", L->file);
        return false;
    }
    *buf = n;
    *cap = nc;
    return true;
}

static bool add_tri(loader *L, brm_vec3 a, brm_vec3 b, brm_vec3 c, uint32_t object)
{
    brm_scene *s = L->s;
    if (s->tri_count >= 0xfffffff0u) {
        brm_diag_error(L->d, BRM_E_INPUT, "%s: more than 2^32 triangles in the scene; expected fewer", L->file);
        return false;
    }
    if (!grow(L, (void **)&s->tris, &L->tri_cap, (size_t)s->tri_count + 1, sizeof *s->tris)) return false;
    brm_tri *t = &s->tris[s->tri_count++];
    t->v[0] = a;
    t->v[1] = b;
    t->v[2] = c;
    t->object = object;
    return true;
}

/* ---- geometry ------------------------------------------------------------------------- */

/* The 12 triangles of a box, counter-clockwise seen from outside (normals point out). */
static bool box_triangles(loader *L, brm_aabb b, uint32_t object)
{
    brm_vec3 c = brm_scale(brm_add(b.min, b.max), 0.5);
    for (int axis = 0; axis < 3; axis++)
        for (int side = 0; side < 2; side++) {
            int u = (axis + 1) % 3, v = (axis + 2) % 3;
            brm_vec3 q[4];
            for (int k = 0; k < 4; k++) {
                double co[3];
                co[axis] = side ? brm_vget(b.max, axis) : brm_vget(b.min, axis);
                co[u] = (k == 1 || k == 2) ? brm_vget(b.max, u) : brm_vget(b.min, u);
                co[v] = (k >= 2) ? brm_vget(b.max, v) : brm_vget(b.min, v);
                q[k] = brm_v3(co[0], co[1], co[2]);
            }
            brm_vec3 n = brm_cross(brm_sub(q[1], q[0]), brm_sub(q[2], q[0]));
            brm_vec3 out = brm_sub(q[0], c);
            bool flip = brm_dot(n, out) < 0.0;
            if (flip) {
                if (!add_tri(L, q[0], q[2], q[1], object) || !add_tri(L, q[0], q[3], q[2], object)) return false;
            } else {
                if (!add_tri(L, q[0], q[1], q[2], object) || !add_tri(L, q[0], q[2], q[3], object)) return false;
            }
        }
    return true;
}

typedef struct weld_key {
    brm_vec3 p;
    uint32_t idx;
} weld_key;

static int cmp_weld(const void *a, const void *b)
{
    const weld_key *x = a, *y = b;
    if (x->p.x != y->p.x) return x->p.x < y->p.x ? -1 : 1;
    if (x->p.y != y->p.y) return x->p.y < y->p.y ? -1 : 1;
    if (x->p.z != y->p.z) return x->p.z < y->p.z ? -1 : 1;
    return x->idx < y->idx ? -1 : x->idx > y->idx;
}

static int cmp_u64(const void *a, const void *b)
{
    uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;
    return x < y ? -1 : x > y;
}

/* Whether every edge (vertices welded by exact position) is shared by exactly two of the kept
 * triangles; *open_edges counts the others. Returns false only on allocation failure. */
static bool mesh_closed(const brm_obj_mesh *m, const uint32_t *keep, uint32_t kept, bool *closed, size_t *open_edges)
{
    *closed = false;
    *open_edges = 0;
    weld_key *w = malloc((m->vert_count ? m->vert_count : 1) * sizeof *w);
    uint32_t *canon = malloc((m->vert_count ? m->vert_count : 1) * sizeof *canon);
    uint64_t *e = malloc(((size_t)kept * 3 + 1) * sizeof *e);
    if (!w || !canon || !e) {
        free(w);
        free(canon);
        free(e);
        return false;
    }
    for (uint32_t i = 0; i < m->vert_count; i++) w[i] = (weld_key){m->verts[i], i};
    qsort(w, m->vert_count, sizeof *w, cmp_weld);
    uint32_t id = 0;
    for (uint32_t i = 0; i < m->vert_count; i++) {
        if (i > 0 && (w[i].p.x != w[i - 1].p.x || w[i].p.y != w[i - 1].p.y || w[i].p.z != w[i - 1].p.z)) id++;
        canon[w[i].idx] = id;
    }
    size_t ne = 0;
    for (uint32_t t = 0; t < kept; t++) {
        const uint32_t *f = m->faces[keep[t]];
        for (int k = 0; k < 3; k++) {
            uint64_t a = canon[f[k]], b = canon[f[(k + 1) % 3]];
            e[ne++] = a < b ? (a << 32) | b : (b << 32) | a;
        }
    }
    qsort(e, ne, sizeof *e, cmp_u64);
    size_t bad = 0;
    for (size_t i = 0; i < ne;) {
        size_t j = i;
        while (j < ne && e[j] == e[i]) j++;
        if (j - i != 2) bad++;
        i = j;
    }
    *open_edges = bad;
    *closed = bad == 0 && ne > 0;
    free(w);
    free(canon);
    free(e);
    return true;
}

static int default_read(void *user, const char *path, char **data, size_t *len)
{
    (void)user;
    FILE *f = fopen(path, "rb");
    if (!f) return errno ? errno : EIO;
    size_t cap = 1 << 16, n = 0;
    char *buf = malloc(cap);
    if (!buf) {
        fclose(f);
        return ENOMEM;
    }
    for (;;) {
        if (n == cap) {
            if (cap >= MAX_MESH_BYTES) {
                free(buf);
                fclose(f);
                return EFBIG;
            }
            char *nb = realloc(buf, cap * 2);
            if (!nb) {
                free(buf);
                fclose(f);
                return ENOMEM;
            }
            buf = nb;
            cap *= 2;
        }
        size_t r = fread(buf + n, 1, cap - n, f);
        n += r;
        if (r == 0) break;
    }
    int err = ferror(f) ? (errno ? errno : EIO) : 0;
    fclose(f);
    if (err) {
        free(buf);
        return err;
    }
    *data = buf;
    *len = n;
    return 0;
}

/* R = Rz·Ry·Rx (SPEC.md: about x by a, then y by b, then z by c). */
static brm_vec3 rotate_xyz(brm_vec3 p, const double cs[3], const double sn[3])
{
    brm_vec3 r = brm_v3(p.x, cs[0] * p.y - sn[0] * p.z, sn[0] * p.y + cs[0] * p.z);
    r = brm_v3(cs[1] * r.x + sn[1] * r.z, r.y, -sn[1] * r.x + cs[1] * r.z);
    return brm_v3(cs[2] * r.x - sn[2] * r.y, sn[2] * r.x + cs[2] * r.y, r.z);
}

static bool load_mesh(loader *L, const cJSON *g, const char *path, brm_object *o, uint32_t object)
{
    brm_scene *s = L->s;
    char pp[600];
    join(pp, sizeof pp, path, "path");
    const cJSON *pv = item(g, "path");
    if (!pv) return FAIL(L, path, "missing key \"path\"; expected the mesh file, e.g. \"meshes/roof.obj\"");
    if (!cJSON_IsString(pv)) return FAIL(L, pp, "expected a string (an OBJ file path), found %s", type_name(pv));
    const char *rel = pv->valuestring;
    if (rel[0] == '\0') return FAIL(L, pp, "empty path; expected an OBJ file path relative to the scene file");
    for (const char *c = rel; *c; c++)
        if ((unsigned char)*c < 0x20 || *c == 0x7f)
            return FAIL(L, pp, "path contains a control character; expected a plain file path relative to the scene file");
    brm_vec3 tr, rot;
    double scale = 1.0;
    if (!vec3(L, g, path, "translate", false, brm_v3(0, 0, 0), ANY, &tr, NULL)) return false;
    if (!vec3(L, g, path, "rotate_deg", false, brm_v3(0, 0, 0), ANY, &rot, NULL)) return false;
    if (!num_rule(L, g, path, "scale", false, 1.0, GT0, &scale)) return false;
    char full[BRM_PATH_MAX];
    int fl;
    if (rel[0] == '/' || s->dir[0] == '\0') fl = snprintf(full, sizeof full, "%s", rel);
    else if (strcmp(s->dir, "/") == 0) fl = snprintf(full, sizeof full, "/%s", rel);
    else fl = snprintf(full, sizeof full, "%s/%s", s->dir, rel);
    if (fl < 0 || (size_t)fl >= sizeof full) return FAIL(L, pp, "path is too long; expected at most %d bytes", BRM_PATH_MAX - 1);

    unsigned line, col;
    brm_json_line_col(L->text, L->len, brm_json_offset(L->text, L->len, pp, 1, false), &line, &col);
    char *data = NULL;
    size_t len = 0;
    int err = L->opts && L->opts->read_file ? L->opts->read_file(L->opts->user, full, &data, &len)
                                            : default_read(NULL, full, &data, &len);
    if (err) {
        brm_diag_error(L->d, BRM_E_IO, "%s:%u:%u: %s: cannot read mesh \"%s\" (%s); expected a readable OBJ file (paths are relative to the scene file's folder)",
                       L->file, line, col, pp, full, strerror(err));
        return false;
    }
    /* Reference the file by content for up-to-date checks (one entry per distinct path). */
    uint32_t fi = 0;
    while (fi < s->file_count && strcmp(s->files[fi].path, full) != 0) fi++;
    if (fi == s->file_count) {
        if (!grow(L, (void **)&s->files, &L->file_cap, (size_t)s->file_count + 1, sizeof *s->files)) {
            free(data);
            return false;
        }
        memset(&s->files[fi], 0, sizeof s->files[fi]);
        snprintf(s->files[fi].path, sizeof s->files[fi].path, "%s", full);
        brm_sha256_buf(data, len, s->files[fi].sha256);
        s->file_count++;
    }
    o->file_index = fi;

    brm_obj_mesh m;
    brm_diag od;
    brm_diag_init(&od);
    brm_status st = brm_obj_parse(data, len, full, &m, &od);
    free(data);
    if (st != BRM_OK) {
        brm_diag_error(L->d, st, "%s (mesh of %s at %s:%u:%u)", od.message, pp, L->file, line, col);
        return false;
    }
    if (m.face_count == 0 && m.repeated_dropped == 0) {
        brm_obj_free(&m);
        brm_diag_error(L->d, BRM_E_INPUT, "%s: mesh has no faces; expected \"f\" lines (mesh of %s at %s:%u:%u)", full, pp, L->file,
                       line, col);
        return false;
    }
    double cs[3] = {cos(rot.x * BRM_PI / 180.0), cos(rot.y * BRM_PI / 180.0), cos(rot.z * BRM_PI / 180.0)};
    double sn[3] = {sin(rot.x * BRM_PI / 180.0), sin(rot.y * BRM_PI / 180.0), sin(rot.z * BRM_PI / 180.0)};
    /* World positions: scale, then rotate, then translate. */
    for (uint32_t i = 0; i < m.vert_count; i++) {
        brm_vec3 w = brm_add(rotate_xyz(brm_scale(m.verts[i], scale), cs, sn), tr);
        if (!(fabs(w.x) <= MAX_COORD && fabs(w.y) <= MAX_COORD && fabs(w.z) <= MAX_COORD)) {
            brm_obj_free(&m);
            brm_diag_error(L->d, BRM_E_INPUT, "%s: vertex %u lies %g m from the origin after the transform; expected coordinates within %g m (mesh of %s at %s:%u:%u)",
                           full, i + 1, brm_len(w), MAX_COORD, pp, L->file, line, col);
            return false;
        }
        m.verts[i] = w;
    }
    uint32_t *keep = malloc(((size_t)m.face_count + 1) * sizeof *keep);
    if (!keep) {
        brm_obj_free(&m);
        brm_diag_error(L->d, BRM_E_NOMEM, "%s: out of memory", full);
        return false;
    }
    uint32_t kept = 0, dropped = m.repeated_dropped;
    o->first_tri = s->tri_count;
    o->bounds = brm_aabb_empty();
    for (uint32_t t = 0; t < m.face_count; t++) {
        brm_vec3 a = m.verts[m.faces[t][0]], b = m.verts[m.faces[t][1]], c = m.verts[m.faces[t][2]];
        brm_vec3 e1 = brm_sub(b, a), e2 = brm_sub(c, a);
        /* Zero area: the cross product vanishes relative to the edges (collinear or coincident). */
        if (!(brm_len(brm_cross(e1, e2)) > 1e-12 * brm_len(e1) * brm_len(e2)) || brm_len(e1) == 0.0 || brm_len(e2) == 0.0) {
            dropped++;
            continue;
        }
        if (!add_tri(L, a, b, c, object)) {
            free(keep);
            brm_obj_free(&m);
            return false;
        }
        keep[kept++] = t;
        brm_aabb_grow(&o->bounds, a);
        brm_aabb_grow(&o->bounds, b);
        brm_aabb_grow(&o->bounds, c);
    }
    o->tri_count = kept;
    if (kept == 0) {
        free(keep);
        brm_obj_free(&m);
        brm_diag_error(L->d, BRM_E_INPUT, "%s: all %u faces are degenerate (zero area); expected at least one proper triangle (mesh of %s at %s:%u:%u)",
                       full, dropped, pp, L->file, line, col);
        return false;
    }
    size_t open_edges = 0;
    if (!mesh_closed(&m, keep, kept, &o->closed, &open_edges)) {
        free(keep);
        brm_obj_free(&m);
        brm_diag_error(L->d, BRM_E_NOMEM, "%s: out of memory", full);
        return false;
    }
    free(keep);
    brm_obj_free(&m);
    if (dropped) {
        s->degenerate_dropped += dropped;
        brm_diag_warn(L->d, "%s:%u:%u: %s: %s: dropped %u degenerate (zero-area) triangle%s", L->file, line, col, pp, full, dropped,
                      dropped == 1 ? "" : "s");
    }
    if (!o->closed)
        brm_diag_warn(L->d, "%s:%u:%u: %s: %s is not closed (%zu edge%s not shared by exactly two triangles); solid occupancy inside it may be unreliable",
                      L->file, line, col, pp, full, open_edges, open_edges == 1 ? "" : "s");
    return true;
}

static const char *const shapes[] = {"box", "sphere", "mesh", NULL};

static bool load_geometry(loader *L, const cJSON *arr)
{
    brm_scene *s = L->s;
    if (!cJSON_IsArray(arr)) return FAIL(L, "geometry", "expected an array of shapes, found %s", type_name(arr));
    unsigned i = 0;
    for (const cJSON *g = arr->child; g; g = g->next, i++) {
        char path[64];
        join_index(path, sizeof path, "geometry", i);
        if (!cJSON_IsObject(g)) return FAIL(L, path, "expected an object {\"shape\": ...}, found %s", type_name(g));
        int shape;
        if (!word(L, g, path, "shape", true, 0, shapes, &shape)) return false;
        static const char *const box_keys[] = {"shape", "min", "max", "albedo", NULL};
        static const char *const sph_keys[] = {"shape", "center", "radius", "albedo", NULL};
        static const char *const mesh_keys[] = {"shape", "path", "translate", "rotate_deg", "scale", "albedo", NULL};
        const char *const *keys = shape == 0 ? box_keys : shape == 1 ? sph_keys : mesh_keys;
        if (!check_keys(L, g, path, keys)) return false;
        if (s->object_count >= 0x7fffffffu) return FAIL(L, path, "too many objects");
        if (!grow(L, (void **)&s->objects, &L->obj_cap, (size_t)s->object_count + 1, sizeof *s->objects)) return false;
        uint32_t oi = s->object_count;
        brm_object *o = &s->objects[oi];
        memset(o, 0, sizeof *o);
        if (!albedo3(L, g, path, 0.5, &o->albedo)) return false;
        if (shape == 0) {
            o->shape = BRM_SHAPE_BOX;
            if (!box_minmax(L, g, path, true, &o->bounds)) return false;
            o->first_tri = s->tri_count;
            o->tri_count = 12;
            o->closed = true;
            s->object_count++;
            if (!box_triangles(L, o->bounds, oi)) return false;
        } else if (shape == 1) {
            o->shape = BRM_SHAPE_SPHERE;
            if (!vec3(L, g, path, "center", true, brm_v3(0, 0, 0), ANY, &o->center, NULL)) return false;
            if (!num_rule(L, g, path, "radius", true, 0.0, GT0, &o->radius)) return false;
            if (o->radius > MAX_COORD) {
                char p[600];
                join(p, sizeof p, path, "radius");
                return FAIL(L, p, "radius %g is too large; expected at most %g m", o->radius, MAX_COORD);
            }
            brm_vec3 r = brm_v3(o->radius, o->radius, o->radius);
            o->bounds.min = brm_sub(o->center, r);
            o->bounds.max = brm_add(o->center, r);
            o->closed = true;
            s->object_count++;
        } else {
            o->shape = BRM_SHAPE_MESH;
            s->object_count++;
            /* load_mesh may grow s->tris but not s->objects: o stays valid. */
            if (!load_mesh(L, g, path, o, oi)) return false;
        }
    }
    return true;
}

/* ---- lights --------------------------------------------------------------------------- */

static const char *const light_types[] = {"directional", "point", "spot", NULL};

static bool load_shadow(loader *L, const cJSON *lo, const char *path, brm_light *l)
{
    l->shadow = true;
    l->shadow_resolution = 0;
    l->softness_texels = 1.5;
    const cJSON *v = item(lo, "shadow");
    if (!v) return true;
    char p[600];
    join(p, sizeof p, path, "shadow");
    if (cJSON_IsBool(v)) {
        l->shadow = cJSON_IsTrue(v);
        return true;
    }
    if (!cJSON_IsObject(v))
        return FAIL(L, p, "expected false, true or an object {\"resolution\", \"softness_texels\"}, found %s", type_name(v));
    static const char *const keys[] = {"resolution", "softness_texels", NULL};
    if (!check_keys(L, v, p, keys)) return false;
    int64_t res;
    if (!int_in(L, v, p, "resolution", false, 0, 16, 16384, &res)) return false;
    l->shadow_resolution = (uint32_t)res;
    if (!num_in(L, v, p, "softness_texels", false, 1.5, 0.0, false, 64.0, false, &l->softness_texels)) return false;
    return true;
}

static bool load_lights(loader *L, const cJSON *arr)
{
    brm_scene *s = L->s;
    if (!cJSON_IsArray(arr)) return FAIL(L, "lights", "expected an array of lights, found %s", type_name(arr));
    int n = cJSON_GetArraySize(arr);
    s->lights = calloc((size_t)(n > 0 ? n : 1), sizeof *s->lights);
    if (!s->lights) return brm_diag_error(L->d, BRM_E_NOMEM, "%s: out of memory", L->file) == BRM_OK;
    unsigned i = 0;
    for (const cJSON *lo = arr->child; lo; lo = lo->next, i++) {
        char path[32];
        join_index(path, sizeof path, "lights", i);
        if (!cJSON_IsObject(lo)) return FAIL(L, path, "expected an object {\"type\": ...}, found %s", type_name(lo));
        int type;
        if (!word(L, lo, path, "type", true, 0, light_types, &type)) return false;
        static const char *const dir_keys[] = {"type", "direction", "illuminance_lux", "color", "shadow", NULL};
        static const char *const pt_keys[] = {"type", "position", "intensity_cd", "flux_lm", "range_m", "color", "shadow", NULL};
        static const char *const spot_keys[] = {"type", "position", "direction", "inner_deg", "outer_deg", "intensity_cd",
                                                "flux_lm", "range_m", "color", "shadow", NULL};
        if (!check_keys(L, lo, path, type == 0 ? dir_keys : type == 1 ? pt_keys : spot_keys)) return false;
        brm_light *l = &s->lights[i];
        snprintf(l->json_path, sizeof l->json_path, "%s", path);
        l->type = type == 0 ? BRM_LIGHT_DIRECTIONAL : type == 1 ? BRM_LIGHT_POINT : BRM_LIGHT_SPOT;
        if (!vec3(L, lo, path, "color", false, brm_v3(1, 1, 1), GE0, &l->color, NULL)) return false;
        if (type == 0) {
            if (!direction3(L, lo, path, "direction", &l->direction)) return false;
            if (!num_rule(L, lo, path, "illuminance_lux", true, 0.0, GE0, &l->illuminance_lux)) return false;
        } else {
            if (!vec3(L, lo, path, "position", true, brm_v3(0, 0, 0), ANY, &l->position, NULL)) return false;
            if (type == 2) {
                if (!direction3(L, lo, path, "direction", &l->direction)) return false;
                if (!num_in(L, lo, path, "inner_deg", true, 0, 0.0, true, 90.0, true, &l->inner_deg)) return false;
                if (!num_in(L, lo, path, "outer_deg", true, 0, 0.0, true, 90.0, true, &l->outer_deg)) return false;
                if (!(l->inner_deg < l->outer_deg)) {
                    char p[600];
                    join(p, sizeof p, path, "inner_deg");
                    return FAIL(L, p, "inverted cone: inner_deg %g is not below outer_deg %g; expected 0 < inner_deg < outer_deg < 90",
                                l->inner_deg, l->outer_deg);
                }
                l->cos_inner = cos(l->inner_deg * BRM_PI / 180.0);
                l->cos_outer = cos(l->outer_deg * BRM_PI / 180.0);
            }
            bool has_i = item(lo, "intensity_cd") != NULL, has_f = item(lo, "flux_lm") != NULL;
            if (has_i == has_f) {
                if (has_i) {
                    char p[600];
                    join(p, sizeof p, path, "flux_lm");
                    return FAIL(L, p, "both intensity_cd and flux_lm are given; expected only one of them");
                }
                return FAIL(L, path, "missing key \"intensity_cd\" or \"flux_lm\"; expected exactly one of them");
            }
            if (has_i) {
                if (!num_rule(L, lo, path, "intensity_cd", true, 0.0, GE0, &l->intensity_cd)) return false;
            } else {
                double flux;
                if (!num_rule(L, lo, path, "flux_lm", true, 0.0, GE0, &flux)) return false;
                l->intensity_cd = brm_light_intensity_from_flux(l->type, flux, l->cos_outer);
            }
            if (!num_rule(L, lo, path, "range_m", false, 0.0, GT0, &l->range_m)) return false;
        }
        if (!load_shadow(L, lo, path, l)) return false;
        s->light_count++;
    }
    return true;
}

/* ---- media ---------------------------------------------------------------------------- */

static const char *const medium_types[] = {"uniform", "height", "box", "noise", NULL};
static const char *const phase_models[] = {"isotropic", "henyey-greenstein", "schlick", "rayleigh", "cornette-shanks",
                                           "two-lobe", NULL};

static bool load_phase(loader *L, const cJSON *mo, const char *path, brm_phase *ph)
{
    ph->model = BRM_PHASE_ISOTROPIC;
    const cJSON *v = item(mo, "phase");
    if (!v) return true;
    char p[600];
    join(p, sizeof p, path, "phase");
    if (!cJSON_IsObject(v)) return FAIL(L, p, "expected an object {\"model\": ...}, found %s", type_name(v));
    int m;
    if (!word(L, v, p, "model", true, 0, phase_models, &m)) return false;
    static const char *const k_none[] = {"model", NULL};
    static const char *const k_g[] = {"model", "g", NULL};
    static const char *const k_two[] = {"model", "g_forward", "g_back", "forward_weight", NULL};
    const char *const *keys = (m == 0 || m == 3) ? k_none : m == 5 ? k_two : k_g;
    if (!check_keys(L, v, p, keys)) return false;
    static const brm_phase_model models[] = {BRM_PHASE_ISOTROPIC, BRM_PHASE_HENYEY_GREENSTEIN, BRM_PHASE_SCHLICK,
                                             BRM_PHASE_RAYLEIGH, BRM_PHASE_CORNETTE_SHANKS, BRM_PHASE_TWO_LOBE};
    ph->model = models[m];
    if (m == 2) {
        /* Schlick's k = 1.55g − 0.55g³ reaches 1 at g ≈ 0.938, where the lobe diverges. */
        if (!num_in(L, v, p, "g", true, 0, -0.93, false, 0.93, false, &ph->g)) return false;
    } else if (m == 1 || m == 4) {
        if (!num_in(L, v, p, "g", true, 0, -1.0, true, 1.0, true, &ph->g)) return false;
    } else if (m == 5) {
        if (!num_in(L, v, p, "g_forward", true, 0, -1.0, true, 1.0, true, &ph->g)) return false;
        if (!num_in(L, v, p, "g_back", true, 0, -1.0, true, 1.0, true, &ph->g_back)) return false;
        if (!num_in(L, v, p, "forward_weight", true, 0, 0.0, false, 1.0, false, &ph->forward_weight)) return false;
    }
    return true;
}

static bool load_media(loader *L, const cJSON *arr)
{
    brm_scene *s = L->s;
    if (!cJSON_IsArray(arr)) return FAIL(L, "media", "expected an array of media, found %s", type_name(arr));
    int n = cJSON_GetArraySize(arr);
    if (n > BRM_MAX_MEDIA) {
        char p[64];
        join_index(p, sizeof p, "media", BRM_MAX_MEDIA);
        return FAIL(L, p, "too many media (%d); expected at most %d", n, BRM_MAX_MEDIA);
    }
    s->media = calloc((size_t)(n > 0 ? n : 1), sizeof *s->media);
    if (!s->media) return brm_diag_error(L->d, BRM_E_NOMEM, "%s: out of memory", L->file) == BRM_OK;
    unsigned i = 0;
    for (const cJSON *mo = arr->child; mo; mo = mo->next, i++) {
        char path[64];
        join_index(path, sizeof path, "media", i);
        if (!cJSON_IsObject(mo)) return FAIL(L, path, "expected an object {\"type\": ...}, found %s", type_name(mo));
        int type;
        if (!word(L, mo, path, "type", true, 0, medium_types, &type)) return false;
        static const char *const k_uni[] = {"type", "visibility_m", "extinction_per_m", "albedo", "phase", NULL};
        static const char *const k_h[] = {"type", "extinction_per_m", "base_y", "scale_height_m", "albedo", "phase", NULL};
        static const char *const k_box[] = {"type", "min", "max", "extinction_per_m", "edge_fade_m", "albedo", "phase", NULL};
        static const char *const k_noise[] = {"type", "scale_m", "octaves", "seed", "strength", NULL};
        const char *const *keys = type == 0 ? k_uni : type == 1 ? k_h : type == 2 ? k_box : k_noise;
        if (!check_keys(L, mo, path, keys)) return false;
        brm_medium *m = &s->media[i];
        static const brm_medium_type types[] = {BRM_MEDIUM_UNIFORM, BRM_MEDIUM_HEIGHT, BRM_MEDIUM_BOX, BRM_MEDIUM_NOISE};
        m->type = types[type];
        if (type == 3) {
            int64_t oct, seed;
            if (!num_rule(L, mo, path, "scale_m", true, 0, GT0, &m->scale_m)) return false;
            if (!int_in(L, mo, path, "octaves", true, 0, 1, 12, &oct)) return false;
            if (!int_in(L, mo, path, "seed", true, 0, 0, 4294967295ll, &seed)) return false;
            if (!num_rule(L, mo, path, "strength", true, 0, GE0, &m->strength)) return false;
            m->octaves = (uint32_t)oct;
            m->seed = (uint32_t)seed;
        } else {
            if (!albedo3(L, mo, path, 0.9, &m->albedo)) return false;
            if (!load_phase(L, mo, path, &m->phase)) return false;
            if (type == 0) {
                bool hv = item(mo, "visibility_m") != NULL, he = item(mo, "extinction_per_m") != NULL;
                if (hv && he) {
                    char p[600];
                    join(p, sizeof p, path, "extinction_per_m");
                    return FAIL(L, p, "both visibility_m and extinction_per_m are given; expected only one of them");
                }
                if (!hv && !he) return FAIL(L, path, "missing key \"visibility_m\" or \"extinction_per_m\"; expected exactly one of them");
                if (hv) {
                    double vis;
                    if (!num_rule(L, mo, path, "visibility_m", true, 0, GT0, &vis)) return false;
                    m->sigma_t = brm_media_extinction_from_visibility(vis);
                } else if (!num_rule(L, mo, path, "extinction_per_m", true, 0, GE0, &m->sigma_t)) {
                    return false;
                }
            } else {
                if (!num_rule(L, mo, path, "extinction_per_m", true, 0, GE0, &m->sigma_t)) return false;
            }
            if (type == 1) {
                if (!num_rule(L, mo, path, "base_y", true, 0, ANY, &m->base_y)) return false;
                if (!num_rule(L, mo, path, "scale_height_m", true, 0, GT0, &m->scale_height_m)) return false;
            } else if (type == 2) {
                if (!box_minmax(L, mo, path, true, &m->box)) return false;
                if (!num_rule(L, mo, path, "edge_fade_m", false, 0.0, GE0, &m->edge_fade_m)) return false;
            }
        }
        s->medium_count++;
    }
    return true;
}

/* ---- sky, bounds ---------------------------------------------------------------------- */

static bool load_sky(loader *L, const cJSON *v)
{
    brm_sky *sky = &L->s->sky;
    if (!cJSON_IsObject(v)) return FAIL(L, "sky", "expected an object {\"zenith\", \"horizon\", \"ground\"}, found %s", type_name(v));
    static const char *const keys[] = {"zenith", "horizon", "ground", NULL};
    if (!check_keys(L, v, "sky", keys)) return false;
    if (!vec3(L, v, "sky", "zenith", true, brm_v3(0, 0, 0), GE0, &sky->zenith, NULL)) return false;
    if (!vec3(L, v, "sky", "horizon", true, brm_v3(0, 0, 0), GE0, &sky->horizon, NULL)) return false;
    if (!vec3(L, v, "sky", "ground", true, brm_v3(0, 0, 0), GE0, &sky->ground, NULL)) return false;
    sky->present = true;
    return true;
}

/* ---- targets -------------------------------------------------------------------------- */

static const char *const grids[] = {"world", "frustum", "probes", NULL};
static const char *const encodings[] = {"f32", "f16", "compact", NULL};

static bool valid_name(loader *L, const cJSON *obj, const char *path, char out[BRM_NAME_MAX])
{
    const cJSON *v = item(obj, "name");
    if (!v) return FAIL(L, path, "missing key \"name\"; expected a name of 1 to 63 characters A-Z a-z 0-9 . _ -");
    char p[600];
    join(p, sizeof p, path, "name");
    if (!cJSON_IsString(v)) return FAIL(L, p, "expected a string, found %s", type_name(v));
    const char *n = v->valuestring;
    size_t l = strlen(n);
    char ns[72];
    clip(n, ns);
    if (l == 0 || l > BRM_NAME_MAX - 1)
        return FAIL(L, p, "name \"%s\" has %zu characters; expected 1 to %d (it becomes a file name)", ns, l, BRM_NAME_MAX - 1);
    for (size_t i = 0; i < l; i++) {
        char c = n[i];
        if (!((c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') || c == '.' || c == '_' || c == '-'))
            return FAIL(L, p, "name \"%s\" has the character '%c' at %zu; expected only A-Z a-z 0-9 . _ - (it becomes a file name)", ns,
                        (c >= 0x20 && c < 0x7f) ? c : '?', i + 1);
    }
    if (strcmp(n, ".") == 0 || strcmp(n, "..") == 0)
        return FAIL(L, p, "name \"%s\" is not a usable file name; expected letters, digits, . _ -", ns);
    memcpy(out, n, l + 1);
    return true;
}

static bool cells3(loader *L, const cJSON *t, const char *path, uint32_t cells[3])
{
    const cJSON *v = item(t, "cells");
    if (!v) return FAIL(L, path, "missing key \"cells\"; expected [nx, ny, nz], integers 1..%u", MAX_CELLS_AXIS);
    char p[600], e[640];
    join(p, sizeof p, path, "cells");
    if (!cJSON_IsArray(v)) return FAIL(L, p, "expected an array [nx, ny, nz] of integers, found %s", type_name(v));
    int n = cJSON_GetArraySize(v);
    if (n != 3) return FAIL(L, p, "array has %d element%s; expected 3 integers [nx, ny, nz]", n, n == 1 ? "" : "s");
    unsigned i = 0;
    double total = 1.0;
    for (const cJSON *x = v->child; x; x = x->next, i++) {
        join_index(e, sizeof e, p, i);
        double c = 0.0;
        if (!as_number(L, x, e, &c)) return false;
        if (c != floor(c) || c < 1 || c > MAX_CELLS_AXIS)
            return FAIL(L, e, "cell count %g is out of range; expected an integer 1..%u", c, MAX_CELLS_AXIS);
        cells[i] = (uint32_t)c;
        total *= c;
    }
    if (total > MAX_CELLS_TOTAL)
        return FAIL(L, p, "%u x %u x %u = %.0f cells is too many; expected at most 2^31 = 2147483648 per target", cells[0], cells[1],
                    cells[2], total);
    return true;
}

static bool load_camera(loader *L, const cJSON *t, const char *path, brm_camera *c)
{
    const cJSON *v = item(t, "camera");
    char p[600];
    join(p, sizeof p, path, "camera");
    if (!v) return FAIL(L, path, "missing key \"camera\"; expected {\"position\", \"look_at\", \"up\", \"fov_y_deg\", \"aspect\", \"near\", \"far\"}");
    if (!cJSON_IsObject(v)) return FAIL(L, p, "expected an object, found %s", type_name(v));
    static const char *const keys[] = {"position", "look_at", "up", "fov_y_deg", "aspect", "near", "far", NULL};
    if (!check_keys(L, v, p, keys)) return false;
    if (!vec3(L, v, p, "position", true, brm_v3(0, 0, 0), ANY, &c->position, NULL)) return false;
    if (!vec3(L, v, p, "look_at", true, brm_v3(0, 0, 0), ANY, &c->look_at, NULL)) return false;
    if (!vec3(L, v, p, "up", false, brm_v3(0, 1, 0), ANY, &c->up, NULL)) return false;
    brm_vec3 f = brm_sub(c->look_at, c->position);
    char q[640];
    if (!(brm_len(f) > 1e-9)) {
        join(q, sizeof q, p, "look_at");
        return FAIL(L, q, "look_at equals position, so there is no view direction; expected a point away from the camera");
    }
    if (!(brm_len(c->up) > 1e-12)) {
        join(q, sizeof q, p, "up");
        return FAIL(L, q, "zero vector has no direction; expected a non-zero up vector such as [0, 1, 0]");
    }
    if (!(brm_len(brm_cross(brm_norm(f), brm_norm(c->up))) > 1e-6)) {
        join(q, sizeof q, p, "up");
        return FAIL(L, q, "up is parallel to the view direction; expected an up vector not along look_at - position");
    }
    if (!num_in(L, v, p, "fov_y_deg", true, 0, 0.0, true, 180.0, true, &c->fov_y_deg)) return false;
    if (!num_in(L, v, p, "aspect", true, 0, 0.0, true, 1000.0, false, &c->aspect)) return false;
    if (!num_in(L, v, p, "near", true, 0, 0.0, true, MAX_COORD, false, &c->near)) return false;
    if (!num_in(L, v, p, "far", true, 0, 0.0, true, MAX_COORD, false, &c->far)) return false;
    if (!(c->near < c->far)) {
        join(q, sizeof q, p, "far");
        return FAIL(L, q, "far %g is not beyond near %g; expected 0 < near < far", c->far, c->near);
    }
    return true;
}

/* The whole view pyramid from the camera position to the far plane's corners. */
static void frustum_bounds(const brm_camera *c, brm_aabb *b)
{
    brm_vec3 f = brm_norm(brm_sub(c->look_at, c->position));
    brm_vec3 r = brm_norm(brm_cross(f, c->up));
    brm_vec3 u = brm_cross(r, f);
    double h = c->far * tan(0.5 * c->fov_y_deg * BRM_PI / 180.0), w = h * c->aspect;
    brm_aabb_grow(b, c->position);
    for (int k = 0; k < 4; k++) {
        brm_vec3 p = brm_madd(c->position, f, c->far);
        p = brm_madd(p, r, (k & 1) ? w : -w);
        p = brm_madd(p, u, (k & 2) ? h : -h);
        brm_aabb_grow(b, p);
    }
}

static bool load_targets(loader *L, const cJSON *arr)
{
    brm_scene *s = L->s;
    if (!cJSON_IsArray(arr)) return FAIL(L, "targets", "expected an array of targets, found %s", type_name(arr));
    int n = cJSON_GetArraySize(arr);
    if (n == 0) return FAIL(L, "targets", "no targets; expected at least one target to bake");
    s->targets = calloc((size_t)n, sizeof *s->targets);
    if (!s->targets) return brm_diag_error(L->d, BRM_E_NOMEM, "%s: out of memory", L->file) == BRM_OK;
    unsigned i = 0;
    for (const cJSON *t = arr->child; t; t = t->next, i++) {
        char path[32];
        join_index(path, sizeof path, "targets", i);
        if (!cJSON_IsObject(t)) return FAIL(L, path, "expected an object {\"name\", \"grid\", ...}, found %s", type_name(t));
        int grid;
        if (!word(L, t, path, "grid", true, 0, grids, &grid)) return false;
        static const char *const k_world[] = {"name", "grid", "min", "max", "cells", "samples", "encoding", "compression_level", NULL};
        static const char *const k_fr[] = {"name", "grid", "camera", "cells", "samples", "keep_froxel_terms", "encoding",
                                           "compression_level", NULL};
        static const char *const k_pr[] = {"name", "grid", "min", "max", "spacing_m", "rays", "relocate", "encoding",
                                           "compression_level", NULL};
        if (!check_keys(L, t, path, grid == 0 ? k_world : grid == 1 ? k_fr : k_pr)) return false;
        brm_target *tg = &s->targets[i];
        snprintf(tg->json_path, sizeof tg->json_path, "%s", path);
        if (!valid_name(L, t, path, tg->name)) return false;
        for (unsigned j = 0; j < i; j++)
            if (strcmp(s->targets[j].name, tg->name) == 0) {
                char p[600];
                join(p, sizeof p, path, "name");
                return FAIL(L, p, "duplicate target name \"%s\" (also targets[%u]); expected names unique within the scene", tg->name, j);
            }
        int enc;
        int64_t level;
        if (!word(L, t, path, "encoding", false, 1, encodings, &enc)) return false;
        tg->encoding = enc == 0 ? BRM_ENCODING_F32 : enc == 1 ? BRM_ENCODING_F16 : BRM_ENCODING_COMPACT;
        if (!int_in(L, t, path, "compression_level", false, 9, 1, 19, &level)) return false;
        tg->compression_level = (int)level;
        int64_t v;
        if (grid == 0) {
            tg->grid = BRM_GRID_WORLD;
            if (!box_minmax(L, t, path, true, &tg->box)) return false;
            if (!cells3(L, t, path, tg->cells)) return false;
            if (!int_in(L, t, path, "samples", false, 4, 1, 1024, &v)) return false;
            tg->samples = (uint32_t)v;
        } else if (grid == 1) {
            tg->grid = BRM_GRID_FRUSTUM;
            if (!load_camera(L, t, path, &tg->camera)) return false;
            if (!cells3(L, t, path, tg->cells)) return false;
            if (!int_in(L, t, path, "samples", false, 4, 1, 1024, &v)) return false;
            tg->samples = (uint32_t)v;
            if (!opt_bool(L, t, path, "keep_froxel_terms", false, &tg->keep_froxel_terms)) return false;
            tg->box = brm_aabb_empty();
            frustum_bounds(&tg->camera, &tg->box);
        } else {
            tg->grid = BRM_GRID_PROBES;
            if (!box_minmax(L, t, path, false, &tg->box)) return false;
            if (!num_rule(L, t, path, "spacing_m", true, 0, GT0, &tg->spacing_m)) return false;
            double total = 1.0;
            for (int a = 0; a < 3; a++)
                total *= floor((brm_vget(tg->box.max, a) - brm_vget(tg->box.min, a)) / tg->spacing_m + 1e-6) + 1.0;
            if (!(total <= MAX_PROBES)) {
                char p[600];
                join(p, sizeof p, path, "spacing_m");
                return FAIL(L, p, "spacing %g m gives %.0f probes; expected at most 2^24 = 16777216 (use a larger spacing)",
                            tg->spacing_m, total);
            }
            if (!int_in(L, t, path, "rays", false, 256, 1, 65536, &v)) return false;
            tg->rays = (uint32_t)v;
            if (!opt_bool(L, t, path, "relocate", false, &tg->relocate)) return false;
        }
        tg->json_text = cJSON_PrintUnformatted(t);
        if (!tg->json_text) return brm_diag_error(L->d, BRM_E_NOMEM, "%s: out of memory", L->file) == BRM_OK;
        s->target_count++;
    }
    return true;
}

/* ---- the whole file ------------------------------------------------------------------- */

static bool my_exp_end(const char *expected) { return strstr(expected, "the file ends here") != NULL; }

static bool syntax_error(loader *L, size_t cjson_off)
{
    size_t off = cjson_off;
    char path[512] = "";
    const char *expected = "valid JSON (check for a missing comma, quote or bracket)";
    size_t my_off;
    const char *my_exp;
    char my_path[512];
    if (!brm_json_check(L->text, L->len, &my_off, my_path, sizeof my_path, &my_exp)) {
        off = my_off;
        expected = my_exp;
        snprintf(path, sizeof path, "%s", my_path);
    } else {
        /* Our scan saw sound structure: the fault is inside a token (a bad number, literal or
         * escape); cJSON's offset points at or just after it. */
        expected = "a valid number, string escape, true, false or null";
    }
    unsigned line, col;
    brm_json_line_col(L->text, L->len, off, &line, &col);
    char near[40];
    size_t k = 0;
    for (size_t i = off; i < L->len && k < 16; i++) {
        unsigned char c = (unsigned char)L->text[i];
        if (c == '\n') break;
        near[k++] = (c >= 0x20 && c < 0x7f) ? (char)c : '?';
    }
    near[k] = '\0';
    if (off >= L->len || k == 0 || (my_exp_end(expected)))
        brm_diag_error(L->d, BRM_E_INPUT, "%s:%u:%u: %s: invalid JSON at the end of the %s; expected %s", L->file, line, col, shown(path),
                       off >= L->len || my_exp_end(expected) ? "file" : "line", expected);
    else
        brm_diag_error(L->d, BRM_E_INPUT, "%s:%u:%u: %s: invalid JSON at \"%s\"; expected %s", L->file, line, col, shown(path), near,
                       expected);
    return false;
}

static bool load_root(loader *L, cJSON *root)
{
    brm_scene *s = L->s;
    if (!cJSON_IsObject(root)) return FAIL(L, "", "the file holds %s; expected a JSON object {\"brume\": 1, ...}", type_name(root));
    static const char *const keys[] = {"brume", "name", "fog_bounds", "geometry", "lights", "media", "sky", "targets", NULL};
    if (!check_keys(L, root, "", keys)) return false;
    const cJSON *ver = item(root, "brume");
    if (!ver) return FAIL(L, "", "missing key \"brume\"; expected \"brume\": 1 (the scene format version)");
    double vv = 0.0;
    if (!as_number(L, ver, "brume", &vv)) return false;
    if (vv != 1.0) return FAIL(L, "brume", "unsupported scene version %g; this brume reads version 1", vv);
    if (!valid_name(L, root, "", s->name)) return false;
    const cJSON *v;
    if ((v = item(root, "fog_bounds"))) {
        if (!cJSON_IsObject(v)) return FAIL(L, "fog_bounds", "expected an object {\"min\", \"max\"}, found %s", type_name(v));
        static const char *const bk[] = {"min", "max", NULL};
        if (!check_keys(L, v, "fog_bounds", bk)) return false;
        if (!box_minmax(L, v, "fog_bounds", true, &s->fog_bounds)) return false;
        s->fog_bounds_given = true;
    }
    if ((v = item(root, "geometry")) && !load_geometry(L, v)) return false;
    if ((v = item(root, "lights")) && !load_lights(L, v)) return false;
    if ((v = item(root, "media")) && !load_media(L, v)) return false;
    if ((v = item(root, "sky")) && !load_sky(L, v)) return false;
    if (!(v = item(root, "targets"))) return FAIL(L, "", "missing key \"targets\"; expected a list of at least one target");
    if (!load_targets(L, v)) return false;
    if (!s->fog_bounds_given) {
        brm_aabb b = brm_aabb_empty();
        for (uint32_t i = 0; i < s->object_count; i++) brm_aabb_union(&b, s->objects[i].bounds);
        for (uint32_t i = 0; i < s->target_count; i++) brm_aabb_union(&b, s->targets[i].box);
        s->fog_bounds = b;
    }
    /* Canonical text of everything but the targets, for up-to-date checks. */
    cJSON *targets = cJSON_DetachItemFromObjectCaseSensitive(root, "targets");
    s->shared_json_text = cJSON_PrintUnformatted(root);
    cJSON_Delete(targets);
    if (!s->shared_json_text) return brm_diag_error(L->d, BRM_E_NOMEM, "%s: out of memory", L->file) == BRM_OK;
    if (brm_media_prepare(s, L->d) != BRM_OK) return false;
    return true;
}

brm_status brm_scene_load_ex(const char *json, size_t len, const char *path, const brm_scene_load_opts *opts,
                             brm_scene **out, brm_diag *d)
{
    brm_diag local;
    if (!d) {
        brm_diag_init(&local);
        d = &local;
    }
    if (d->status != BRM_OK) return d->status;
    const char *file = path ? path : "(memory)";
    if (len > MAX_SCENE_BYTES)
        return brm_diag_error(d, BRM_E_INPUT, "%s: file is %zu bytes; expected a scene file under %u MiB", file, len, MAX_SCENE_BYTES >> 20);
    loader L = {0};
    L.file = file;
    L.text = json;
    L.len = len;
    L.d = d;
    L.opts = opts;
    /* Bytes first: cJSON accepts invalid UTF-8 and stops at NUL. */
    size_t bad = brm_utf8_check(json, len);
    if (bad < len) {
        unsigned line, col;
        brm_json_line_col(json, len, bad, &line, &col);
        if (json[bad] == '\0')
            return brm_diag_error(d, BRM_E_INPUT, "%s:%u:%u: (file): NUL byte; expected a UTF-8 text file", file, line, col);
        return brm_diag_error(d, BRM_E_INPUT, "%s:%u:%u: (file): invalid UTF-8 byte 0x%02x; expected the scene file in UTF-8", file, line,
                              col, (unsigned char)json[bad]);
    }
    size_t ws = 0;
    while (ws < len && (json[ws] == ' ' || json[ws] == '\t' || json[ws] == '\n' || json[ws] == '\r')) ws++;
    if (ws == len) return brm_diag_error(d, BRM_E_INPUT, "%s:1:1: (file): empty file; expected a JSON object {\"brume\": 1, ...}", file);
    /* cJSON needs the terminating NUL counted when require_null_terminated is set. */
    char *buf = malloc(len + 1);
    if (!buf) return brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory", file);
    memcpy(buf, json, len);
    buf[len] = '\0';
    L.text = buf;
    const char *end = NULL;
    cJSON *root = cJSON_ParseWithLengthOpts(buf, len + 1, &end, 1);
    if (!root) {
        syntax_error(&L, end ? (size_t)(end - buf) : 0);
        free(buf);
        return d->status;
    }
    brm_scene *s = calloc(1, sizeof *s);
    if (!s) {
        cJSON_Delete(root);
        free(buf);
        return brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory", file);
    }
    L.s = s;
    snprintf(s->path, sizeof s->path, "%s", path ? path : "");
    const char *slash = path ? strrchr(path, '/') : NULL;
    if (slash) {
        size_t dl = (size_t)(slash - path);
        if (dl == 0) dl = 1;    /* "/scene.json": the root folder */
        if (dl >= sizeof s->dir) dl = sizeof s->dir - 1;
        memcpy(s->dir, path, dl);
        s->dir[dl] = '\0';
    }
    bool ok = load_root(&L, root);
    cJSON_Delete(root);
    free(buf);
    if (!ok || d->status != BRM_OK) {
        brm_scene_free(s);
        return d->status != BRM_OK ? d->status : BRM_E_INTERNAL;
    }
    *out = s;
    return BRM_OK;
}

brm_status brm_scene_load_memory(const char *json, size_t len, const char *path, brm_scene **out, brm_diag *d)
{
    return brm_scene_load_ex(json, len, path, NULL, out, d);
}

brm_status brm_scene_load(const char *path, brm_scene **out, brm_diag *d)
{
    char *data = NULL;
    size_t len = 0;
    int err = default_read(NULL, path, &data, &len);
    if (err)
        return brm_diag_error(d, BRM_E_IO, "%s: cannot read the scene file (%s); expected a readable JSON file", path, strerror(err));
    brm_status st = brm_scene_load_ex(data, len, path, NULL, out, d);
    free(data);
    return st;
}
