/* Optical depth through the media: the integrator shared by the reference march and the
 * precomputed per-light grids, and the grids themselves.
 *
 * tau = ∫ sigma_t ds along a path; transmittance = exp(−tau) (Beer–Lambert). sigma_t is zero
 * outside the fog bounds, so integrating "to where the path leaves the fog" is the same as
 * integrating to infinity; the integrator clips to the bounds itself. */
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "scene/media.h"
#include "shadow/shadow_internal.h"

void brm_media_info_init(const brm_scene *s, media_info *mi)
{
    memset(mi, 0, sizeof *mi);
    mi->feature = HUGE_VAL;
    mi->feature_lateral = HUGE_VAL;
    mi->only_uniform = true;
    mi->any = s->medium_count > 0 && brm_media_any_in(s, s->fog_bounds);
    for (uint32_t k = 0; k < s->medium_count; k++) {
        const brm_medium *m = &s->media[k];
        switch (m->type) {
        case BRM_MEDIUM_HEIGHT:
            mi->only_uniform = false;
            mi->feature = fmin(mi->feature, m->scale_height_m);
            mi->feature_lateral = fmin(mi->feature_lateral, m->scale_height_m);
            mi->plane_y[mi->plane_count++] = m->base_y;
            break;
        case BRM_MEDIUM_BOX:
            mi->only_uniform = false;
            mi->boxes[mi->box_count++] = m->box;
            if (m->edge_fade_m > 0.0) {
                mi->feature = fmin(mi->feature, m->edge_fade_m);
                mi->feature_lateral = fmin(mi->feature_lateral, m->edge_fade_m);
                brm_aabb in = m->box;
                brm_vec3 f = brm_v3(m->edge_fade_m, m->edge_fade_m, m->edge_fade_m);
                in.min = brm_add(in.min, f);
                in.max = brm_sub(in.max, f);
                /* The fade is smooth but has a kink where it reaches full strength. */
                if (in.min.x < in.max.x && in.min.y < in.max.y && in.min.z < in.max.z) mi->boxes[mi->box_count++] = in;
            }
            break;
        case BRM_MEDIUM_NOISE: {
            mi->only_uniform = false;
            uint32_t oct = m->octaves ? m->octaves : 1;
            if (oct > 30) oct = 30;
            mi->feature = fmin(mi->feature, m->scale_m / (double)(1u << (oct - 1)));
            /* Finer octaves average out along a path: the second octave sets the lateral scale. */
            mi->feature_lateral = fmin(mi->feature_lateral, m->scale_m / (oct > 1 ? 2.0 : 1.0));
            break;
        }
        default:
            break;
        }
    }
}

/* Composite Simpson over [a, b] with panels no longer than h (at least one). */
static double simpson(const brm_scene *s, brm_vec3 p, brm_vec3 d, double a, double b, double h)
{
    double len = b - a;
    if (!(len > 0.0)) return 0.0;
    double np = ceil(len / h);
    uint32_t n = np < 1.0 ? 1u : np > 1e7 ? 10000000u : (uint32_t)np;
    double w = len / (double)n;
    double sum = brm_media_extinction(s, brm_madd(p, d, a)) + brm_media_extinction(s, brm_madd(p, d, b));
    for (uint32_t k = 0; k < n; k++) {
        double t0 = a + w * (double)k;
        sum += 4.0 * brm_media_extinction(s, brm_madd(p, d, t0 + 0.5 * w));
        if (k + 1 < n) sum += 2.0 * brm_media_extinction(s, brm_madd(p, d, t0 + w));
    }
    return sum * w / 6.0;
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

double brm_optical_depth_segment(const brm_scene *s, const media_info *mi, brm_vec3 p, brm_vec3 d, double t0,
                                 double t1, double h)
{
    if (!mi->any || !(t1 > t0)) return 0.0;
    brm_vec3 inv = brm_v3(1.0 / d.x, 1.0 / d.y, 1.0 / d.z);
    double a, b;
    if (!brm_ray_aabb(p, inv, s->fog_bounds, t0, t1, &a, &b) || !(b > a)) return 0.0;
    if (mi->only_uniform) h = HUGE_VAL; /* constant inside the bounds: one panel is exact */
    double cut[2 + 4 * BRM_MAX_MEDIA + BRM_MAX_MEDIA];
    uint32_t nc = 0;
    cut[nc++] = a;
    cut[nc++] = b;
    for (uint32_t k = 0; k < mi->box_count; k++) {
        double c0, c1;
        if (brm_ray_aabb(p, inv, mi->boxes[k], a, b, &c0, &c1)) {
            if (c0 > a && c0 < b) cut[nc++] = c0;
            if (c1 > a && c1 < b) cut[nc++] = c1;
        }
    }
    for (uint32_t k = 0; k < mi->plane_count; k++) {
        if (d.y == 0.0) continue;
        double t = (mi->plane_y[k] - p.y) / d.y;
        if (t > a && t < b) cut[nc++] = t;
    }
    qsort(cut, nc, sizeof cut[0], cmp_double);
    double tau = 0.0;
    for (uint32_t k = 0; k + 1 < nc; k++) tau += simpson(s, p, d, cut[k], cut[k + 1], h);
    return tau;
}

/* ---- grids ------------------------------------------------------------------------- */

/* Nodes over [a, b] at about `step`, one node of margin each side, within [lo_n, hi_n]. */
static uint32_t axis_nodes(double a, double b, double step, uint32_t lo_n, uint32_t hi_n)
{
    double n = ceil((b - a) / step) + 3.0;
    if (!(n >= lo_n)) return lo_n;
    if (n > hi_n) return hi_n;
    return (uint32_t)n;
}

static void axis_set(shadow_view *v, int a, double lo, double hi, uint32_t n, bool margin)
{
    v->og_n[a] = n;
    if (margin) {
        double st = (hi - lo) / (double)(n - 3);
        if (!(st > 0.0)) st = 1e-6;
        v->og_step[a] = st;
        v->og_lo[a] = lo - st;
    } else {
        double st = (hi - lo) / (double)(n - 2); /* one node of margin above only */
        if (!(st > 0.0)) st = 1e-6;
        v->og_step[a] = st;
        v->og_lo[a] = lo;
    }
}

static void box_corners(brm_aabb b, brm_vec3 c[8])
{
    for (int i = 0; i < 8; i++)
        c[i] = brm_v3(i & 1 ? b.max.x : b.min.x, i & 2 ? b.max.y : b.min.y, i & 4 ? b.max.z : b.min.z);
}

size_t brm_od_plan(const brm_scene *s, const brm_shadow_opts *o, const media_info *mi, light_shadow *ls,
                   const brm_light *l)
{
    ls->has_od = ls->active && mi->any && brm_media_any_in(s, o->bounds);
    if (!ls->has_od) return 0;
    brm_vec3 c[8];
    box_corners(o->bounds, c);
    /* Spacing: optical depth varies across paths on the lateral feature scale and along a
     * path on the fine one; Hermite interpolation along the path (the derivative of tau is
     * sigma_t, stored too) makes half a feature per node ample. */
    double lat = mi->feature_lateral / 6.0, along = mi->feature / 2.0;
    if (l->type == BRM_LIGHT_DIRECTIONAL) {
        shadow_view *v = &ls->views[0];
        double lo[3] = {HUGE_VAL, HUGE_VAL, HUGE_VAL}, hi[3] = {-HUGE_VAL, -HUGE_VAL, -HUGE_VAL};
        for (int i = 0; i < 8; i++) {
            double x[3] = {brm_dot(c[i], v->u), brm_dot(c[i], v->v), brm_dot(c[i], v->f)};
            for (int a = 0; a < 3; a++) lo[a] = fmin(lo[a], x[a]), hi[a] = fmax(hi[a], x[a]);
        }
        double ext = fmax(fmax(hi[0] - lo[0], hi[1] - lo[1]), 1e-6);
        double sl = fmin(lat, ext / 32.0), sz = fmin(along, fmax(hi[2] - lo[2], 1e-6) / 16.0);
        uint32_t n[3];
        for (int a = 0; a < 3; a++) n[a] = axis_nodes(lo[a], hi[a], a < 2 ? sl : sz, 4, 512);
        double tot = (double)n[0] * n[1] * n[2];
        if (tot > BRM_OD_MAX_NODES) {
            double f = cbrt(BRM_OD_MAX_NODES / tot);
            for (int a = 0; a < 3; a++) n[a] = (uint32_t)fmax(4.0, floor(n[a] * f));
        }
        for (int a = 0; a < 3; a++) axis_set(v, a, lo[a], hi[a], n[a], true);
        return (size_t)n[0] * n[1] * n[2] * 2 * sizeof(float);
    }
    brm_vec3 pos = l->position;
    double rmax = 1e-3;
    for (int i = 0; i < 8; i++) rmax = fmax(rmax, brm_len(brm_sub(c[i], pos)));
    if (l->range_m > 0.0 && l->range_m < rmax) rmax = l->range_m;
    double tan_half = ls->cube ? 1.0 : tan(l->outer_deg * BRM_PI / 180.0);
    /* Lateral spacing measured at the far end of the grid, where rays are furthest apart. */
    double sl = fmin(lat / rmax, 2.0 * tan_half / 32.0), sr = fmin(along, rmax / 16.0);
    uint32_t nl = axis_nodes(-tan_half, tan_half, sl, 4, 512), nr = axis_nodes(0.0, rmax, sr, 4, 1024);
    double tot = (double)nl * nl * nr * ls->view_count;
    if (tot > BRM_OD_MAX_NODES) {
        double f = cbrt(BRM_OD_MAX_NODES / tot);
        nl = (uint32_t)fmax(4.0, floor(nl * f));
        nr = (uint32_t)fmax(4.0, floor(nr * f));
    }
    size_t bytes = 0;
    for (uint32_t k = 0; k < ls->view_count; k++) {
        shadow_view *v = &ls->views[k];
        axis_set(v, 0, -tan_half, tan_half, nl, true);
        axis_set(v, 1, -tan_half, tan_half, nl, true);
        axis_set(v, 2, 0.0, rmax, nr, false);
        bytes += (size_t)nl * nl * nr * 2 * sizeof(float);
    }
    return bytes;
}

void brm_od_fill_row(const brm_scene *s, const media_info *mi, shadow_view *v, uint32_t j)
{
    uint32_t nk = v->og_n[2];
    double h = mi->feature / 2.0;
    double y = v->og_lo[1] + v->og_step[1] * (double)j;
    for (uint32_t i = 0; i < v->og_n[0]; i++) {
        double x = v->og_lo[0] + v->og_step[0] * (double)i;
        float *col = v->od + 2 * ((size_t)nk * ((size_t)i + (size_t)v->og_n[0] * j));
        brm_vec3 o, d;
        double tau, t = v->og_lo[2];
        if (v->kind == BRM_VIEW_ORTHO) {
            o = brm_add(brm_scale(v->u, x), brm_scale(v->v, y)); /* f·o = 0, so f·(o + t f) = t */
            d = v->f;
            tau = brm_optical_depth_segment(s, mi, o, d, -HUGE_VAL, t, h);
        } else {
            o = v->origin;
            d = brm_norm(brm_add(v->f, brm_add(brm_scale(v->u, x), brm_scale(v->v, y))));
            tau = 0.0; /* t starts at the light */
        }
        for (uint32_t k = 0; k < nk; k++) {
            if (k > 0) {
                double t1 = v->og_lo[2] + v->og_step[2] * (double)k;
                tau += brm_optical_depth_segment(s, mi, o, d, t, t1, h);
                t = t1;
            }
            col[2 * k] = (float)tau;
            col[2 * k + 1] = (float)brm_media_extinction(s, brm_madd(o, d, t));
        }
    }
}

/* Cubic Hermite in the path parameter (values tau, slopes sigma_t), bilinear across paths. */
int brm_od_lookup(const shadow_view *v, brm_vec3 p, double *tau)
{
    double x, y, z;
    if (v->kind == BRM_VIEW_ORTHO) {
        x = brm_dot(p, v->u), y = brm_dot(p, v->v), z = brm_dot(p, v->f);
    } else {
        brm_vec3 d = brm_sub(p, v->origin);
        double zf = brm_dot(d, v->f);
        if (!(zf > 0.0)) return 0;
        x = brm_dot(d, v->u) / zf, y = brm_dot(d, v->v) / zf, z = brm_len(d);
    }
    double f[3] = {(x - v->og_lo[0]) / v->og_step[0], (y - v->og_lo[1]) / v->og_step[1],
                   (z - v->og_lo[2]) / v->og_step[2]};
    uint32_t c[3];
    double w[3];
    for (int a = 0; a < 3; a++) {
        double lim = (double)(v->og_n[a] - 1);
        if (!(f[a] >= 0.0 && f[a] <= lim)) return 0;
        double fl = floor(f[a]);
        if (fl > lim - 1.0) fl = lim - 1.0;
        c[a] = (uint32_t)fl;
        w[a] = f[a] - fl;
    }
    double t = w[2], t2 = t * t, t3 = t2 * t, hz = v->og_step[2];
    double h00 = 2 * t3 - 3 * t2 + 1, h10 = (t3 - 2 * t2 + t) * hz, h01 = -2 * t3 + 3 * t2, h11 = (t3 - t2) * hz;
    double acc = 0.0;
    for (int q = 0; q < 4; q++) {
        uint32_t i = c[0] + (uint32_t)(q & 1), j = c[1] + (uint32_t)(q >> 1);
        const float *n = v->od + 2 * ((size_t)v->og_n[2] * ((size_t)i + (size_t)v->og_n[0] * j) + c[2]);
        double val = h00 * n[0] + h10 * n[1] + h01 * n[2] + h11 * n[3];
        double wq = (q & 1 ? w[0] : 1.0 - w[0]) * (q >> 1 ? w[1] : 1.0 - w[1]);
        acc += wq * val;
    }
    *tau = acc > 0.0 ? acc : 0.0;
    return 1;
}
