#include "view/source.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/sh.h"
#include "brume/brv.h"

static brm_status open_error(const char *path, brv_result r, brm_diag *d)
{
    if (r == BRV_E_IO) return brm_diag_error(d, BRM_E_IO, "%s: cannot read the file; check the path", path);
    if (r == BRV_E_NOMEM) return brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory", path);
    return brm_diag_error(d, BRM_E_INPUT, "%s: not a valid brume volume: %s; re-bake it or run 'brume verify'",
                          path, brv_result_text(r));
}

static brm_status unknown_channel(const char *path, const brv_volume *v, const char *name, brm_diag *d)
{
    char list[1536] = "";
    const brv_grid_info *g = brv_grid(v);
    for (uint32_t c = 0; c < g->channel_count; c++) {
        size_t u = strlen(list);
        if (u + 80 >= sizeof list) {
            snprintf(list + u, sizeof list - u, ", ...");
            break;
        }
        snprintf(list + u, sizeof list - u, "%s%s", c ? ", " : "", brv_channel(v, c)->name);
    }
    return brm_diag_error(d, BRM_E_USAGE, "%s: no channel '%s'; the volume has: %s", path, name, list);
}

static brm_status decode(const char *path, const brv_volume *v, int ch, float **out, brm_diag *d)
{
    size_t n = brv_channel_size(v), bytes;
    BRM_CHECK(d, brm_mul_size(n, sizeof(float), &bytes), BRM_E_NOMEM, "%s: volume too large", path);
    float *p = malloc(bytes ? bytes : 1);
    BRM_CHECK(d, p != NULL, BRM_E_NOMEM, "%s: out of memory for %zu cells", path, n);
    brv_result r = brv_decode_channel(v, (uint32_t)ch, p, n);
    if (r != BRV_OK) {
        free(p);
        if (r == BRV_E_NOMEM) return brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory", path);
        return brm_diag_error(d, BRM_E_INPUT, "%s: channel '%s' cannot be decoded: %s; run 'brume verify'",
                              path, brv_channel(v, (uint32_t)ch)->name, brv_result_text(r));
    }
    *out = p;
    return BRM_OK;
}

static brm_status load_channels(const char *path, const brv_volume *v, const char *list,
                                brm_view_source *s, brm_diag *d)
{
    char buf[256];
    BRM_CHECK(d, strlen(list) < sizeof buf, BRM_E_USAGE, "--channel list is too long");
    snprintf(buf, sizeof buf, "%s", list);
    char *names[4];
    uint32_t n = 0;
    char *p = buf;
    for (;;) {
        char *comma = strchr(p, ',');
        if (comma) *comma = '\0';
        BRM_CHECK(d, *p != '\0', BRM_E_USAGE, "--channel '%s' has an empty name; give NAME or R,G,B", list);
        BRM_CHECK(d, n < 3, BRM_E_USAGE, "--channel '%s' names more than three channels; give NAME or R,G,B", list);
        names[n++] = p;
        if (!comma) break;
        p = comma + 1;
    }
    BRM_CHECK(d, n == 1 || n == 3, BRM_E_USAGE,
              "--channel '%s' names %u channels; give one, or three for a colour image", list, n);
    int idx[3];
    for (uint32_t c = 0; c < n; c++) {
        idx[c] = brv_channel_find(v, names[c]);
        if (idx[c] < 0) return unknown_channel(path, v, names[c], d);
    }
    for (uint32_t c = 0; c < n; c++) {
        const brv_channel_info *ci = brv_channel(v, (uint32_t)idx[c]);
        snprintf(s->name[c], sizeof s->name[c], "%s", ci->name);
        snprintf(s->units[c], sizeof s->units[c], "%s", ci->units ? ci->units : "");
        brm_status st = decode(path, v, idx[c], &s->data[c], d);
        if (st != BRM_OK) return st;
    }
    s->in.channel_count = n;
    return BRM_OK;
}

static brm_status load_irradiance(const char *path, const brv_volume *v, const char *axis,
                                  brm_view_source *s, brm_diag *d)
{
    brm_vec3 nrm = brm_v3(0, 0, 0);
    BRM_CHECK(d, (axis[0] == '+' || axis[0] == '-') && axis[1] >= 'x' && axis[1] <= 'z' && axis[2] == '\0',
              BRM_E_USAGE, "--irradiance '%s' is not an axis; give +x, -x, +y, -y, +z or -z", axis);
    double sign = axis[0] == '+' ? 1.0 : -1.0;
    if (axis[1] == 'x') nrm.x = sign;
    else if (axis[1] == 'y') nrm.y = sign;
    else nrm.z = sign;

    static const char colours[3] = {'r', 'g', 'b'};
    int idx[3][9];
    for (int c = 0; c < 3; c++)
        for (int i = 0; i < 9; i++) {
            char nm[16];
            snprintf(nm, sizeof nm, "sh.%c%d", colours[c], i);
            idx[c][i] = brv_channel_find(v, nm);
            BRM_CHECK(d, idx[c][i] >= 0, BRM_E_USAGE,
                      "%s: no channel '%s'; --irradiance needs a probes volume with sh.r0..sh.b8", path, nm);
        }
    size_t n = brv_channel_size(v);
    float *coef = NULL;
    for (int c = 0; c < 3; c++) {
        s->data[c] = calloc(n ? n : 1, sizeof(float));
        BRM_CHECK(d, s->data[c] != NULL, BRM_E_NOMEM, "%s: out of memory", path);
        snprintf(s->name[c], sizeof s->name[c], "irradiance.%c", colours[c]);
        snprintf(s->units[c], sizeof s->units[c], "lux");
    }
    double *acc = calloc((n ? n : 1) * 9, sizeof *acc);
    BRM_CHECK(d, acc != NULL, BRM_E_NOMEM, "%s: out of memory", path);
    for (int c = 0; c < 3; c++) {
        for (int i = 0; i < 9; i++) {
            brm_status st = decode(path, v, idx[c][i], &coef, d);
            if (st != BRM_OK) {
                free(acc);
                return st;
            }
            for (size_t p = 0; p < n; p++) acc[p * 9 + (size_t)i] = coef[p];
            free(coef);
            coef = NULL;
        }
        for (size_t p = 0; p < n; p++) s->data[c][p] = (float)brm_sh9_irradiance(acc + p * 9, nrm);
    }
    free(acc);
    snprintf(s->label, sizeof s->label, "irradiance %s", axis);
    s->in.label = s->label;
    s->in.channel_count = 3;
    return BRM_OK;
}

brm_status brm_view_open(const char *path, const char *channels, const char *irradiance,
                         brm_view_source *out, brm_diag *d)
{
    memset(out, 0, sizeof *out);
    BRM_CHECK(d, (channels == NULL) != (irradiance == NULL), BRM_E_USAGE,
              "give either --channel or --irradiance");
    brv_volume *v = NULL;
    brv_result r = brv_open_file(path, NULL, &v);
    if (r != BRV_OK) return open_error(path, r, d);
    const brv_grid_info *g = brv_grid(v);
    brm_view_source s;
    memset(&s, 0, sizeof s);
    s.in.kind = g->kind;
    memcpy(s.in.n, g->cells, sizeof s.in.n);
    brm_status st = BRM_OK;
    if (g->kind == BRV_GRID_FRUSTUM && g->slice_depths != NULL) {
        s.slice_depths = malloc(((size_t)g->cells[2] + 1) * sizeof(double));
        if (s.slice_depths == NULL) st = brm_diag_error(d, BRM_E_NOMEM, "%s: out of memory", path);
        else memcpy(s.slice_depths, g->slice_depths, ((size_t)g->cells[2] + 1) * sizeof(double));
    }
    if (st == BRM_OK)
        st = channels ? load_channels(path, v, channels, &s, d) : load_irradiance(path, v, irradiance, &s, d);
    brv_free(v);
    if (st != BRM_OK) {
        brm_view_source_free(&s);
        return st;
    }
    *out = s;
    out->in.slice_depths = out->slice_depths;
    for (int c = 0; c < 3; c++) {
        out->in.data[c] = out->data[c];
        out->in.name[c] = out->name[c];
        out->in.units[c] = out->units[c];
    }
    if (out->label[0]) out->in.label = out->label;
    return BRM_OK;
}

void brm_view_source_free(brm_view_source *s)
{
    if (s == NULL) return;
    for (int c = 0; c < 3; c++) free(s->data[c]);
    free(s->slice_depths);
    memset(s, 0, sizeof *s);
}
