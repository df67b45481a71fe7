#include "view/render.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "view/font.h"
#include "view/image.h"
#include "view/tone.h"

static const uint8_t BG[3] = {22, 22, 26};        /* legend and sheet background */
static const uint8_t INK[3] = {232, 232, 228};    /* text */
static const uint8_t NAN_RGB[3] = {255, 0, 255};  /* a value that is not finite */

static bool is_signed_name(const char *name)
{
    /* dir.<c><m> (m = 0..3) and sh.<c><m> (m = 0..8): coefficient 0 is band 0, the rest are
     * bands 1 and 2, whose values change sign with direction. */
    const char *p = NULL;
    if (strncmp(name, "dir.", 4) == 0) p = name + 4;
    else if (strncmp(name, "sh.", 3) == 0) p = name + 3;
    if (p == NULL || p[0] == '\0' || p[1] < '0' || p[1] > '9' || p[2] != '\0') return false;
    return p[1] != '0';
}

brm_view_mode brm_view_mode_for(const char *name, const char *units)
{
    if (name != NULL && is_signed_name(name)) return BRM_VIEW_MODE_SIGNED;
    if (units != NULL && (strstr(units, "cd/m2") != NULL || strstr(units, "lux") != NULL))
        return BRM_VIEW_MODE_RADIANCE;
    return BRM_VIEW_MODE_SCALAR;
}

static bool unit_range_name(const char *name)
{
    return name != NULL && (strcmp(name, "occupancy") == 0 || strcmp(name, "transmittance") == 0 ||
                            strcmp(name, "validity") == 0);
}

/* %g with 4 significant digits, "-0" written as "0". */
static void fmt_num(char *buf, size_t cap, double v)
{
    if (v == 0.0) v = 0.0;
    snprintf(buf, cap, "%.4g", v);
}

typedef struct sheet {
    uint32_t w, h;          /* one slice, cells */
    uint32_t count;         /* slices shown */
    uint32_t first;         /* index of the first */
    uint32_t cols, rows;
    float *vals;            /* [count][channel][w·h] */
} sheet;

static brm_status make_pfm(const brm_view_input *in, const brm_view_options *opt, const sheet *sh,
                           brm_view_result *res, brm_diag *d)
{
    uint32_t s = opt->scale ? opt->scale : 1, nc = in->channel_count;
    uint64_t W64 = (uint64_t)sh->cols * sh->w * s, H64 = (uint64_t)sh->rows * sh->h * s;
    BRM_CHECK(d, W64 <= BRM_IMAGE_MAX_SIDE && H64 <= BRM_IMAGE_MAX_SIDE, BRM_E_USAGE,
              "image would be %llux%llu pixels, over the limit of %u per side; use a smaller --scale",
              (unsigned long long)W64, (unsigned long long)H64, BRM_IMAGE_MAX_SIDE);
    uint32_t W = (uint32_t)W64, H = (uint32_t)H64;
    float *px = calloc((size_t)W * H * nc, sizeof *px);
    BRM_CHECK(d, px != NULL, BRM_E_NOMEM, "out of memory for a %ux%u PFM", W, H);
    size_t plane = (size_t)sh->w * sh->h;
    for (uint32_t t = 0; t < sh->count; t++) {
        uint32_t ox = (t % sh->cols) * sh->w * s, oy = (t / sh->cols) * sh->h * s;
        for (uint32_t y = 0; y < sh->h * s; y++)
            for (uint32_t x = 0; x < sh->w * s; x++)
                for (uint32_t c = 0; c < nc; c++)
                    px[((size_t)(oy + y) * W + ox + x) * nc + c] =
                        sh->vals[((size_t)t * nc + c) * plane + (size_t)(y / s) * sh->w + x / s];
    }
    brm_status st = brm_pfm_encode(px, W, H, nc, &res->bytes, &res->len, d);
    free(px);
    if (st != BRM_OK) return st;
    res->width = W;
    res->height = H;
    res->scale = s;
    res->tile_pitch_x = sh->w * s;
    res->tile_pitch_y = sh->h * s;
    res->columns = sh->cols;
    return BRM_OK;
}

typedef struct colouring {
    brm_view_mode mode;
    double k;               /* radiance: exposure multiplier */
    double lo, hi;          /* scalar: range; signed: −m..m */
    uint8_t (*lut)[3];      /* scalar, signed: the map's BRM_COLORMAP_STEPS entries */
} colouring;

static void colour_of(const colouring *cl, const float *v, uint32_t nc, uint8_t rgb[3])
{
    for (uint32_t c = 0; c < nc; c++)
        if (!isfinite(v[c])) {
            memcpy(rgb, NAN_RGB, 3);
            return;
        }
    switch (cl->mode) {
    case BRM_VIEW_MODE_RADIANCE:
        if (nc == 3)
            for (int c = 0; c < 3; c++) rgb[c] = brm_srgb_byte(brm_tone(cl->k * v[c]));
        else
            rgb[0] = rgb[1] = rgb[2] = brm_srgb_byte(brm_tone(cl->k * v[0]));
        break;
    case BRM_VIEW_MODE_SIGNED:
        memcpy(rgb, cl->lut[brm_colormap_entry(0.5 * (v[0] / cl->hi + 1.0))], 3);
        break;
    default:
        memcpy(rgb, cl->lut[brm_colormap_entry((v[0] - cl->lo) / (cl->hi - cl->lo))], 3);
        break;
    }
}

static brm_status choose_colouring(const brm_view_input *in, const brm_view_options *opt,
                                   const sheet *sh, colouring *cl, brm_diag *d)
{
    uint32_t nc = in->channel_count;
    size_t plane = (size_t)sh->w * sh->h, total = plane * sh->count;
    memset(cl, 0, sizeof *cl);
    if (nc == 3) {
        for (uint32_t c = 0; c < 3; c++)
            BRM_CHECK(d, !is_signed_name(in->name[c]), BRM_E_USAGE,
                      "channel '%s' holds signed SH coefficients and cannot be a colour component; "
                      "slice it on its own", in->name[c]);
        cl->mode = BRM_VIEW_MODE_RADIANCE;
    } else {
        cl->mode = in->signed_values ? BRM_VIEW_MODE_SIGNED : brm_view_mode_for(in->name[0], in->units[0]);
    }
    if (opt->range_set)
        BRM_CHECK(d, isfinite(opt->range_lo) && isfinite(opt->range_hi) && opt->range_lo < opt->range_hi,
                  BRM_E_USAGE, "--range %g,%g is empty; give LO,HI with LO < HI", opt->range_lo, opt->range_hi);

    if (cl->mode == BRM_VIEW_MODE_RADIANCE) {
        if (opt->exposure_set) {
            BRM_CHECK(d, isfinite(opt->exposure_ev) && fabs(opt->exposure_ev) <= 64.0, BRM_E_USAGE,
                      "--exposure %g is out of range; give an EV between -64 and 64", opt->exposure_ev);
            cl->k = exp2(opt->exposure_ev);
        } else {
            /* Per cell the brightest component, so no colour saturates earlier than its peers. */
            float *lv = malloc((total ? total : 1) * sizeof *lv);
            BRM_CHECK(d, lv != NULL, BRM_E_NOMEM, "out of memory");
            for (uint32_t t = 0; t < sh->count; t++)
                for (size_t i = 0; i < plane; i++) {
                    float m = sh->vals[(size_t)t * nc * plane + i];
                    for (uint32_t c = 1; c < nc; c++) {
                        float x = sh->vals[((size_t)t * nc + c) * plane + i];
                        if (x > m || !(m == m)) m = x;
                    }
                    lv[(size_t)t * plane + i] = m;
                }
            cl->k = brm_auto_exposure(lv, total);
            free(lv);
        }
        cl->lo = 0.0;
        cl->hi = 19.0 / cl->k;   /* the value that tone-maps to 0.95 */
        return BRM_OK;
    }

    double lo = INFINITY, hi = -INFINITY, am = 0.0;
    for (size_t i = 0; i < total; i++) {
        double v = sh->vals[i];
        if (!isfinite(v)) continue;
        if (v < lo) lo = v;
        if (v > hi) hi = v;
        if (fabs(v) > am) am = fabs(v);
    }
    if (cl->mode == BRM_VIEW_MODE_SIGNED) {
        double m = opt->range_set ? fmax(fabs(opt->range_lo), fabs(opt->range_hi)) : am;
        if (!(m > 0.0)) m = 1.0;
        cl->lo = -m;
        cl->hi = m;
        return BRM_OK;
    }
    if (opt->range_set) {
        lo = opt->range_lo;
        hi = opt->range_hi;
    } else if (unit_range_name(in->name[0])) {
        lo = 0.0;
        hi = 1.0;
    } else if (!(lo <= hi)) {
        lo = 0.0;
        hi = 1.0;
    } else if (hi == lo) {
        hi = lo + (lo == 0.0 ? 1.0 : fabs(lo));
    }
    cl->lo = lo;
    cl->hi = hi;
    return BRM_OK;
}

static void bar_colour(const colouring *cl, double u, uint8_t rgb[3])
{
    switch (cl->mode) {
    case BRM_VIEW_MODE_RADIANCE:
        rgb[0] = rgb[1] = rgb[2] = brm_srgb_byte(brm_tone(cl->k * cl->hi * u));
        break;
    case BRM_VIEW_MODE_SIGNED:
        brm_diverging(2.0 * u - 1.0, rgb);
        break;
    default:
        brm_falsecolor(u, rgb);
        break;
    }
}

static brm_status make_ppm(const brm_view_input *in, const brm_view_options *opt, const sheet *sh,
                           brm_view_result *res, brm_diag *d)
{
    colouring cl;
    brm_status st = choose_colouring(in, opt, sh, &cl, d);
    if (st != BRM_OK) return st;
    uint32_t nc = in->channel_count, lng = sh->w > sh->h ? sh->w : sh->h;
    uint32_t s = opt->scale;
    if (s == 0) {
        uint32_t want = opt->all ? 64 : 256;
        s = (want + lng - 1) / lng;
        if (s < 1) s = 1;
    }
    uint64_t tw = (uint64_t)sh->w * s, th = (uint64_t)sh->h * s;
    BRM_CHECK(d, (uint64_t)sh->cols * tw <= BRM_IMAGE_MAX_SIDE && (uint64_t)sh->rows * th <= BRM_IMAGE_MAX_SIDE,
              BRM_E_USAGE, "image would be over %u pixels per side; use a smaller --scale", BRM_IMAGE_MAX_SIDE);

    /* Pixels per font pixel: 1, or 2 on wide pictures so the text stays readable. */
    uint32_t fs = (uint64_t)sh->cols * tw >= 640 ? 2 : 1;
    uint32_t line = BRM_FONT_LINE * fs, gap = opt->all ? 3 * fs : 0, label = opt->all ? line + fs : 0;
    uint32_t pitch_x = (uint32_t)tw + gap, pitch_y = label + (uint32_t)th + gap;
    uint32_t content_w = sh->cols * pitch_x - gap, content_h = sh->rows * pitch_y - gap;

    /* Legend text. */
    char caption[512], depth[128] = "", lo_s[32], hi_s[32], mid_s[48] = "";
    char names[256] = "";
    if (in->label != NULL) snprintf(names, sizeof names, "%s", in->label);
    else
        for (uint32_t c = 0; c < nc; c++) {
            size_t u = strlen(names);
            snprintf(names + u, sizeof names - u, "%s%s", c ? "," : "", in->name[c]);
        }
    char where[64];
    char ax = brm_axis_letter(opt->axis);
    if (opt->all) snprintf(where, sizeof where, "%c=0-%u", ax, in->n[opt->axis] - 1);
    else snprintf(where, sizeof where, "%c=%u of 0-%u", ax, opt->index, in->n[opt->axis] - 1);
    const char *units = in->units[0] != NULL ? in->units[0] : "";
    if (units[0]) snprintf(caption, sizeof caption, "%s  %s  (%s)", names, where, units);
    else snprintf(caption, sizeof caption, "%s  %s", names, where);
    if (in->kind == BRV_GRID_FRUSTUM && in->slice_depths != NULL) {
        const double *sd = in->slice_depths;
        double a = sd[0], b = sd[in->n[2]];
        if (opt->axis == BRM_AXIS_Z && !opt->all) {
            a = sd[opt->index];
            b = sd[opt->index + 1];
        }
        char as[32], bs[32];
        fmt_num(as, sizeof as, a);
        fmt_num(bs, sizeof bs, b);
        snprintf(depth, sizeof depth, "depth %s-%s m", as, bs);
    }
    fmt_num(lo_s, sizeof lo_s, cl.lo);
    fmt_num(hi_s, sizeof hi_s, cl.hi);
    if (cl.mode == BRM_VIEW_MODE_RADIANCE) {
        snprintf(mid_s, sizeof mid_s, "ev %+.2f", log2(cl.k));
        if (mid_s[3] == '-' && strcmp(mid_s + 4, "0.00") == 0) snprintf(mid_s, sizeof mid_s, "ev +0.00");
    } else if (cl.mode == BRM_VIEW_MODE_SIGNED) {
        snprintf(mid_s, sizeof mid_s, "0");
    }

    uint32_t m = 4 * fs, W = content_w, H = content_h;
    uint32_t legend_h = 0;
    if (!opt->no_legend) {
        uint32_t tw_cap = brm_font_width(caption, fs) + 2 * m;
        uint32_t tw_dep = brm_font_width(depth, fs) + 2 * m;
        /* the middle text is centred: room for it plus twice the wider end value */
        uint32_t end_w = brm_font_width(lo_s, fs) > brm_font_width(hi_s, fs) ? brm_font_width(lo_s, fs)
                                                                              : brm_font_width(hi_s, fs);
        uint32_t tw_num = 2 * end_w + brm_font_width(mid_s, fs) + 2 * m + 24 * fs;
        if (W < tw_cap) W = tw_cap;
        if (W < tw_dep) W = tw_dep;
        if (W < tw_num) W = tw_num;
        if (W < 128) W = 128;
        legend_h = m + line + (depth[0] ? line : 0) + 10 * fs + 2 * fs + line + m;
        H += legend_h;
    }

    uint8_t (*lut)[3] = NULL;
    if (cl.mode != BRM_VIEW_MODE_RADIANCE) {
        lut = malloc(sizeof *lut * BRM_COLORMAP_STEPS);
        BRM_CHECK(d, lut != NULL, BRM_E_NOMEM, "out of memory");
        for (uint32_t e = 0; e < BRM_COLORMAP_STEPS; e++) {
            if (cl.mode == BRM_VIEW_MODE_SIGNED) brm_diverging_entry(e, lut[e]);
            else brm_falsecolor_entry(e, lut[e]);
        }
        cl.lut = lut;
    }
    brm_image im = {0, 0, NULL};
    st = brm_image_alloc(&im, W, H, BG, d);
    if (st != BRM_OK) {
        free(lut);
        return st;
    }
    size_t plane = (size_t)sh->w * sh->h;
    uint8_t *tile = malloc(plane * 3);
    if (tile == NULL) {
        brm_image_free(&im);
        free(lut);
        return brm_diag_error(d, BRM_E_NOMEM, "out of memory");
    }
    for (uint32_t t = 0; t < sh->count; t++) {
        for (size_t i = 0; i < plane; i++) {
            float v[3];
            for (uint32_t c = 0; c < nc; c++) v[c] = sh->vals[((size_t)t * nc + c) * plane + i];
            colour_of(&cl, v, nc, tile + 3 * i);
        }
        uint32_t ox = (t % sh->cols) * pitch_x, oy = (t / sh->cols) * pitch_y;
        if (opt->all) {
            char num[16];
            snprintf(num, sizeof num, "%u", sh->first + t);
            brm_font_draw(&im, ox + fs, oy, num, fs, INK);
        }
        brm_image_blit_scaled(&im, ox, oy + label, tile, sh->w, sh->h, s);
    }
    free(tile);

    if (!opt->no_legend) {
        int64_t y = content_h + m;
        brm_font_draw(&im, m, y, caption, fs, INK);
        y += line;
        if (depth[0]) {
            brm_font_draw(&im, m, y, depth, fs, INK);
            y += line;
        }
        uint32_t bw = W - 2 * m;
        for (uint32_t x = 0; x < bw; x++) {
            uint8_t rgb[3];
            bar_colour(&cl, bw > 1 ? (double)x / (bw - 1) : 0.0, rgb);
            brm_image_fill_rect(&im, m + x, y, 1, 10 * fs, rgb);
        }
        y += 10 * fs + 2 * fs;
        brm_font_draw(&im, m, y, lo_s, fs, INK);
        brm_font_draw(&im, (int64_t)W - m - brm_font_width(hi_s, fs), y, hi_s, fs, INK);
        if (mid_s[0]) brm_font_draw(&im, ((int64_t)W - brm_font_width(mid_s, fs)) / 2, y, mid_s, fs, INK);
    }

    free(lut);
    st = brm_ppm_encode(&im, &res->bytes, &res->len, d);
    brm_image_free(&im);
    if (st != BRM_OK) return st;
    res->width = W;
    res->height = H;
    res->mode = cl.mode;
    res->exposure_ev = cl.mode == BRM_VIEW_MODE_RADIANCE ? log2(cl.k) : 0.0;
    res->range_lo = cl.lo;
    res->range_hi = cl.hi;
    res->scale = s;
    res->slice_x = 0;
    res->slice_y = label;
    res->tile_pitch_x = pitch_x;
    res->tile_pitch_y = pitch_y;
    res->columns = sh->cols;
    return BRM_OK;
}

brm_status brm_view_render(const brm_view_input *in, const brm_view_options *opt,
                           brm_view_result *out, brm_diag *d)
{
    BRM_CHECK(d, opt->axis == BRM_AXIS_X || opt->axis == BRM_AXIS_Y || opt->axis == BRM_AXIS_Z,
              BRM_E_USAGE, "axis must be x, y or z");
    BRM_CHECK(d, in->channel_count == 1 || in->channel_count == 3, BRM_E_USAGE,
              "give one channel, or three for a colour image (got %u)", in->channel_count);
    BRM_CHECK(d, in->n[0] > 0 && in->n[1] > 0 && in->n[2] > 0, BRM_E_INPUT, "the volume is empty");
    BRM_CHECK(d, opt->scale <= 64, BRM_E_USAGE, "--scale %u is too large; give 1 to 64", opt->scale);
    uint32_t depth = in->n[opt->axis];
    BRM_CHECK(d, opt->all || opt->index < depth, BRM_E_USAGE,
              "index %u is out of range; the volume has %u slices along %c (0..%u)", opt->index, depth,
              brm_axis_letter(opt->axis), depth - 1);

    sheet sh;
    memset(&sh, 0, sizeof sh);
    brm_slice_dims(in->n, opt->axis, &sh.w, &sh.h);
    sh.count = opt->all ? depth : 1;
    sh.first = opt->all ? 0 : opt->index;
    sh.cols = 1;
    while ((uint64_t)sh.cols * sh.cols < sh.count) sh.cols++;
    sh.rows = (sh.count + sh.cols - 1) / sh.cols;
    size_t plane = (size_t)sh.w * sh.h, n;
    BRM_CHECK(d, brm_mul_size(plane, (size_t)sh.count * in->channel_count, &n), BRM_E_NOMEM, "volume too large");
    sh.vals = malloc((n ? n : 1) * sizeof *sh.vals);
    BRM_CHECK(d, sh.vals != NULL, BRM_E_NOMEM, "out of memory for %zu slice values", n);
    for (uint32_t t = 0; t < sh.count; t++)
        for (uint32_t c = 0; c < in->channel_count; c++)
            brm_slice_extract(in->data[c], in->n, opt->axis, sh.first + t,
                              sh.vals + ((size_t)t * in->channel_count + c) * plane);

    brm_view_result res;
    memset(&res, 0, sizeof res);
    brm_status st = opt->pfm ? make_pfm(in, opt, &sh, &res, d) : make_ppm(in, opt, &sh, &res, d);
    free(sh.vals);
    if (st == BRM_OK) *out = res;
    return st;
}

void brm_view_result_free(brm_view_result *r)
{
    if (r == NULL) return;
    free(r->bytes);
    r->bytes = NULL;
    r->len = 0;
}
