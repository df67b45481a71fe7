/* A structural JSON scanner that tracks the path of every key and value (see json_pos.h). */
#include "scene/json_pos.h"

#include <stdio.h>
#include <string.h>

#define MAX_DEPTH 1000      /* cJSON's compiled-in nesting limit (TOOLCHAIN.md) */
#define PATH_CAP 512

typedef struct scan {
    const char *t;
    size_t n, i;
    char path[PATH_CAP];
    size_t plen;
    bool path_overflow;     /* deeper than PATH_CAP: such paths never match */
    int depth;
    /* find mode */
    const char *want;
    int nth, seen;
    bool at_key, found;
    size_t found_off;
    /* check mode */
    bool failed;
    size_t err_off;
    const char *expected;
    char err_path[PATH_CAP];
} scan;

static void ws(scan *s)
{
    while (s->i < s->n) {
        char c = s->t[s->i];
        if (c == ' ' || c == '\t' || c == '\n' || c == '\r') s->i++;
        else break;
    }
}

static void fail(scan *s, const char *expected)
{
    if (s->failed) return;
    s->failed = true;
    s->err_off = s->i < s->n ? s->i : s->n;
    s->expected = expected;
    memcpy(s->err_path, s->path, s->plen);
    s->err_path[s->plen] = '\0';
}

static void visit(scan *s, bool is_key)
{
    if (!s->want || s->found || s->path_overflow || is_key != s->at_key) return;
    if (strlen(s->want) == s->plen && memcmp(s->want, s->path, s->plen) == 0 && ++s->seen == s->nth) {
        s->found = true;
        s->found_off = s->i;
    }
}

/* Appends ".key" / "key" / "[i]"; returns the previous length to restore. */
static size_t push(scan *s, const char *seg, size_t len, bool index)
{
    size_t old = s->plen;
    if (s->path_overflow) return old;
    size_t need = len + (index || old == 0 ? 0 : 1);
    if (old + need + 1 > PATH_CAP) {
        s->path_overflow = true;
        return old;
    }
    if (!index && old != 0) s->path[s->plen++] = '.';
    memcpy(s->path + s->plen, seg, len);
    s->plen += len;
    return old;
}

static void pop(scan *s, size_t old, bool was_overflow)
{
    s->plen = old;
    s->path_overflow = was_overflow;
}

/* Skips a string starting at the quote; returns false if it does not end. */
static bool skip_string(scan *s)
{
    s->i++;
    while (s->i < s->n) {
        char c = s->t[s->i];
        if (c == '\\') s->i += 2;
        else if (c == '"') {
            s->i++;
            return true;
        } else if (c == '\0') return false;
        else s->i++;
    }
    return false;
}

static void value(scan *s);

static void object(scan *s)
{
    s->i++;
    ws(s);
    if (s->i < s->n && s->t[s->i] == '}') {
        s->i++;
        return;
    }
    for (;;) {
        ws(s);
        if (s->i >= s->n || s->t[s->i] != '"') { fail(s, "a key in double quotes"); return; }
        size_t k0 = s->i;
        if (!skip_string(s)) {
            s->i = k0;
            { fail(s, "a closing '\"' for the key"); return; }
        }
        bool ov = s->path_overflow;
        size_t old = push(s, s->t + k0 + 1, s->i - k0 - 2, false);
        size_t after = s->i;
        s->i = k0;
        visit(s, true);
        s->i = after;
        ws(s);
        if (s->i >= s->n || s->t[s->i] != ':') {
            fail(s, "':' after the key");
            { pop(s, old, ov); return; }
        }
        s->i++;
        value(s);
        pop(s, old, ov);
        if (s->failed || s->found) return;
        ws(s);
        if (s->i < s->n && s->t[s->i] == ',') {
            s->i++;
            continue;
        }
        if (s->i < s->n && s->t[s->i] == '}') {
            s->i++;
            return;
        }
        { fail(s, "',' or '}' after the value"); return; }
    }
}

static void array(scan *s)
{
    s->i++;
    ws(s);
    if (s->i < s->n && s->t[s->i] == ']') {
        s->i++;
        return;
    }
    for (unsigned long idx = 0;; idx++) {
        char seg[32];
        int l = snprintf(seg, sizeof seg, "[%lu]", idx);
        bool ov = s->path_overflow;
        size_t old = push(s, seg, (size_t)l, true);
        value(s);
        pop(s, old, ov);
        if (s->failed || s->found) return;
        ws(s);
        if (s->i < s->n && s->t[s->i] == ',') {
            s->i++;
            continue;
        }
        if (s->i < s->n && s->t[s->i] == ']') {
            s->i++;
            return;
        }
        { fail(s, "',' or ']' after the element"); return; }
    }
}

static void value(scan *s)
{
    ws(s);
    if (s->i >= s->n) { fail(s, "a value (the file ends here)"); return; }
    visit(s, false);
    if (s->found) return;
    char c = s->t[s->i];
    if (c == '{' || c == '[') {
        if (++s->depth > MAX_DEPTH) {
            s->depth--;
            { fail(s, "at most 1000 levels of nesting"); return; }
        }
        if (c == '{') object(s);
        else array(s);
        s->depth--;
        return;
    }
    if (c == '"') {
        size_t k0 = s->i;
        if (!skip_string(s)) {
            s->i = k0;
            fail(s, "a closing '\"' for the string");
        }
        return;
    }
    if (!((c >= '0' && c <= '9') || c == '-' || c == 't' || c == 'f' || c == 'n'))
        { fail(s, "a value: an object, array, string, number, true, false or null"); return; }
    while (s->i < s->n) {
        c = s->t[s->i];
        if ((c >= '0' && c <= '9') || (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || c == '+' || c == '-' || c == '.')
            s->i++;
        else break;
    }
}

static void start(scan *s, const char *text, size_t len)
{
    memset(s, 0, sizeof *s);
    s->t = text;
    s->n = len;
    /* A UTF-8 byte-order mark is skipped, as cJSON does. */
    if (len >= 3 && (unsigned char)text[0] == 0xef && (unsigned char)text[1] == 0xbb && (unsigned char)text[2] == 0xbf)
        s->i = 3;
}

size_t brm_json_offset(const char *text, size_t len, const char *path, int nth, bool at_key)
{
    char want[PATH_CAP];
    snprintf(want, sizeof want, "%s", path);
    for (;;) {
        scan s;
        start(&s, text, len);
        s.want = want;
        s.nth = nth < 1 ? 1 : nth;
        s.at_key = at_key;
        value(&s);
        if (s.found) return s.found_off;
        if (want[0] == '\0') return 0;
        /* Fall back to the enclosing path, as a value. */
        size_t l = strlen(want);
        while (l > 0 && want[l - 1] != '.' && want[l - 1] != '[') l--;
        if (l > 0 && want[l - 1] == '[') l--;
        else if (l > 0) l--;
        want[l] = '\0';
        nth = 1;
        at_key = false;
    }
}

bool brm_json_check(const char *text, size_t len, size_t *err_off, char *path_out, size_t path_cap,
                    const char **expected)
{
    scan s;
    start(&s, text, len);
    value(&s);
    if (!s.failed) {
        ws(&s);
        if (s.i < s.n && s.t[s.i] != '\0') {
            s.plen = 0;
            fail(&s, "the end of the file after the top-level value");
        }
    }
    if (!s.failed) return true;
    *err_off = s.err_off;
    snprintf(path_out, path_cap, "%s", s.err_path);
    *expected = s.expected;
    return false;
}

void brm_json_line_col(const char *text, size_t len, size_t off, unsigned *line, unsigned *col)
{
    unsigned l = 1, c = 1;
    if (off > len) off = len;
    for (size_t i = 0; i < off; i++) {
        unsigned char b = (unsigned char)text[i];
        if (b == '\n') {
            l++;
            c = 1;
        } else if ((b & 0xc0) != 0x80) {
            c++;
        }
    }
    *line = l;
    *col = c;
}

size_t brm_utf8_check(const char *text, size_t len)
{
    const unsigned char *u = (const unsigned char *)text;
    size_t i = 0;
    while (i < len) {
        unsigned b = u[i];
        if (b == 0) return i;
        if (b < 0x80) {
            i++;
            continue;
        }
        size_t need;
        unsigned cp;
        if (b >= 0xc2 && b <= 0xdf) { need = 1; cp = b & 0x1f; }
        else if (b >= 0xe0 && b <= 0xef) { need = 2; cp = b & 0x0f; }
        else if (b >= 0xf0 && b <= 0xf4) { need = 3; cp = b & 0x07; }
        else return i;
        if (len - i <= need) return i;
        for (size_t k = 1; k <= need; k++) {
            if ((u[i + k] & 0xc0) != 0x80) return i;
            cp = (cp << 6) | (u[i + k] & 0x3f);
        }
        if ((need == 2 && cp < 0x800) || (need == 3 && (cp < 0x10000 || cp > 0x10ffff)) || (cp >= 0xd800 && cp <= 0xdfff))
            return i;
        i += need + 1;
    }
    return len;
}
