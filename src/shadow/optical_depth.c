/* Optical depth through the media: the integrator shared by the reference march and the
 * precomputed per-light grids, and the grids themselves.
 *
 * tau = ∫ sigma_t ds along a path; transmittance = exp(−tau) (Beer–Lambert). sigma_t is zero
 * outside the fog bounds, so integrating "to where the path leaves the fog" is the same as
 * integrating to infinity; the integrator clips to the bounds itself. */
#include <immintrin.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "base/cpu.h"
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
            if (!(m->edge_fade_m > 0.0) && m->sigma_t > 0.0) mi->hard[mi->hard_count++] = m->box;
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
            /* Across paths the grid resolves the second-finest octave; what the finest one
             * adds is found by the build's check and refined there. */
            mi->feature_lateral = fmin(mi->feature_lateral, m->scale_m / (double)(1u << (oct > 1 ? oct - 2 : 0)));
            break;
        }
        default:
            break;
        }
    }
}

/* Extinction at q: exact, or with the noise factor from the fast path's table. */
static inline double sigma_at(const brm_scene *s, const media_info *mi, brm_vec3 q)
{
    return mi->noise_grid ? brm_media_extinction_tabulated(s, mi->noise_grid, q) : brm_media_extinction(s, q);
}

/* sigma~: extinction at q clamped into the fog bounds (continued outside them). */
static inline double sigma_cont(const brm_scene *s, const media_info *mi, brm_vec3 q)
{
    brm_aabb b = s->fog_bounds;
    return sigma_at(s, mi, brm_vmin(brm_vmax(q, b.min), b.max));
}

/* Composite Simpson over [a, b] with panels no longer than h (at least one); cont: integrate
 * sigma~ instead of sigma_t. */
#define SIMPSON_BATCH 1024u /* panels up to which the fast path's samples come in one batch */
static double simpson(const brm_scene *s, const media_info *mi, brm_vec3 p, brm_vec3 d, double a, double b, double h,
                      bool cont)
{
    double len = b - a;
    if (!(len > 0.0)) return 0.0;
    double np = ceil(len / h);
    uint32_t n = np < 1.0 ? 1u : np > 1e7 ? 10000000u : (uint32_t)np;
    double w = len / (double)n;
    if (mi->noise_grid && n <= SIMPSON_BATCH) {
        /* The fast path's marches (the noise from the table): the samples in one batch along
         * the line (brm_media_extinction_line; clamping into the fog bounds changes nothing
         * here: an integral without the continuation was clipped to them), the ends a
         * thousandth of a panel inside, far enough that a float position cannot cross a
         * jump there (moving an end by e changes the sum by about e·w·sigma'/6). */
        float f[2 * SIMPSON_BATCH + 1], fe[2];
        const double e = 1e-3 * w, te[2] = {a + e, b - e};
        brm_media_extinction_line(s, mi->noise_grid, p, d, a, 0.5 * w, 2 * n + 1, f);
        brm_media_extinction_points(s, mi->noise_grid, p, d, te, 2, fe);
        double sum = (double)fe[0] + (double)fe[1];
        for (uint32_t k = 0; k < n; k++) {
            sum += 4.0 * (double)f[2 * k + 1];
            if (k + 1 < n) sum += 2.0 * (double)f[2 * k + 2];
        }
        return sum * w / 6.0;
    }
    double (*sig)(const brm_scene *, const media_info *, brm_vec3) = cont ? sigma_cont : sigma_at;
    /* The ends are where the path crosses the fog bounds or a box face: sample a hair inside,
     * or rounding may put the sample on the wrong side of a jump in sigma_t. */
    double in = 1e-9 * len;
    double sum = sig(s, mi, brm_madd(p, d, a + in)) + sig(s, mi, brm_madd(p, d, b - in));
    for (uint32_t k = 0; k < n; k++) {
        double t0 = a + w * (double)k;
        sum += 4.0 * sig(s, mi, brm_madd(p, d, t0 + 0.5 * w));
        if (k + 1 < n) sum += 2.0 * sig(s, mi, brm_madd(p, d, t0 + w));
    }
    return sum * w / 6.0;
}

#define MAX_CUTS (4 + 4 * BRM_MAX_MEDIA + BRM_MAX_MEDIA)
/* Where a batched piece's end samples sit inside it, as a share of its length (fill_column). */
#define PIECE_END 1e-3

/* The places in (a, b), sorted, where sigma_t has a jump or a kink along p + t·d: box faces,
 * base planes, and (cont) the fog-bounds faces, where the continuation has kinks. */
static uint32_t line_cuts(const brm_scene *s, const media_info *mi, brm_vec3 p, brm_vec3 d, double a, double b,
                          bool cont, double *cut)
{
    brm_vec3 inv = brm_v3(1.0 / d.x, 1.0 / d.y, 1.0 / d.z);
    uint32_t nc = 0;
    for (uint32_t k = 0; k <= mi->box_count; k++) {
        if (k == mi->box_count && !cont) break;
        double c0, c1;
        if (brm_ray_aabb(p, inv, k < mi->box_count ? mi->boxes[k] : s->fog_bounds, a, b, &c0, &c1)) {
            if (c0 > a && c0 < b) cut[nc++] = c0;
            if (c1 > a && c1 < b) cut[nc++] = c1;
        }
    }
    for (uint32_t k = 0; k < mi->plane_count; k++) {
        if (d.y == 0.0) continue;
        double t = (mi->plane_y[k] - p.y) / d.y;
        if (t > a && t < b) cut[nc++] = t;
    }
    /* insertion sort: a handful of values, no comparator calls */
    for (uint32_t i = 1; i < nc; i++) {
        double x = cut[i];
        uint32_t j = i;
        for (; j > 0 && cut[j - 1] > x; j--) cut[j] = cut[j - 1];
        cut[j] = x;
    }
    return nc;
}

/* ∫ over [a, b] split at the cuts, composite Simpson on each piece. */
static double integrate_pieces(const brm_scene *s, const media_info *mi, brm_vec3 p, brm_vec3 d, double a, double b,
                               double h, bool cont)
{
    double cut[MAX_CUTS + 2];
    cut[0] = a;
    uint32_t nc = 1 + line_cuts(s, mi, p, d, a, b, cont, cut + 1);
    cut[nc++] = b;
    double tau = 0.0;
    for (uint32_t k = 0; k + 1 < nc; k++) tau += simpson(s, mi, p, d, cut[k], cut[k + 1], h, cont);
    return tau;
}

double brm_optical_depth_segment(const brm_scene *s, const media_info *mi, brm_vec3 p, brm_vec3 d, double t0,
                                 double t1, double h)
{
    if (!mi->any || !(t1 > t0)) return 0.0;
    brm_vec3 inv = brm_v3(1.0 / d.x, 1.0 / d.y, 1.0 / d.z);
    double a, b;
    if (!brm_ray_aabb(p, inv, s->fog_bounds, t0, t1, &a, &b) || !(b > a)) return 0.0;
    if (mi->only_uniform) h = HUGE_VAL; /* constant inside the bounds: one panel is exact */
    return integrate_pieces(s, mi, p, d, a, b, h, false);
}

/* Signed ∫ of sigma~ from t0 to t1 (negative when t1 < t0). */
static double continued_segment(const brm_scene *s, const media_info *mi, brm_vec3 p, brm_vec3 d, double t0, double t1,
                                double h)
{
    if (t1 < t0) return -continued_segment(s, mi, p, d, t1, t0, h);
    if (!(t1 > t0)) return 0.0;
    return integrate_pieces(s, mi, p, d, t0, t1, mi->only_uniform ? HUGE_VAL : h, true);
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
    v->og_inv[a] = 1.0 / v->og_step[a];
}

static void box_corners(brm_aabb b, brm_vec3 c[8])
{
    for (int i = 0; i < 8; i++)
        c[i] = brm_v3(i & 1 ? b.max.x : b.min.x, i & 2 ? b.max.y : b.min.y, i & 4 ? b.max.z : b.min.z);
}

/* Sets blk_cap from the grid size and returns what the blocks and their index take. */
static size_t block_bytes(shadow_view *v)
{
    size_t lat = (size_t)(v->og_n[0] - 1) * (v->og_n[1] - 1), r1 = BRM_OD_REFINE + 1;
    v->blk_cap = (uint32_t)((lat + BRM_OD_BLOCK_SHARE - 1) / BRM_OD_BLOCK_SHARE);
    size_t per = r1 * r1 * v->og_n[2] * 2 * sizeof(float) + (size_t)BRM_OD_REFINE * BRM_OD_REFINE * (v->og_n[2] - 1) +
                 sizeof(uint32_t) + (v->kind == BRM_VIEW_ORTHO ? 3 * r1 * r1 * sizeof(float) : 0);
    /* refine, blocks, corr, cell_clean, cell_quad */
    return lat * sizeof(int32_t) + v->blk_cap * per + lat * sizeof(int32_t) + lat * 2 * sizeof(uint16_t) +
           lat * 8 * sizeof(int32_t) + 32;
}

/* Sets the light's reserved correction pool (any of its views may draw on it: a cube's faces
 * see very different numbers of flagged paths) and returns what it takes. One view: one
 * correction per BRM_OD_CORR_SHARE lateral cells; a cube: one per BRM_OD_CORR_SHARE_CUBE of
 * all its faces' cells (measured on the demo's frustum with eight local lights: their faces
 * flagged 3000–4500 cells beyond the blocks before columns were cut at the fog's reach, a
 * twelfth of all is about 2500 of them; now 600–1500 cells a light are flagged in all). */
static size_t corr_bytes(light_shadow *ls)
{
    size_t lat = (size_t)(ls->views[0].og_n[0] - 1) * (ls->views[0].og_n[1] - 1);
    ls->corr_pool = (uint32_t)((lat + BRM_OD_CORR_SHARE - 1) / BRM_OD_CORR_SHARE);
    if (ls->view_count > 1)
        ls->corr_pool = (uint32_t)((lat * ls->view_count + BRM_OD_CORR_SHARE_CUBE - 1) / BRM_OD_CORR_SHARE_CUBE);
    return (size_t)ls->corr_pool * brm_od_corr_bytes(&ls->views[0]);
}

size_t brm_od_corr_bytes(const shadow_view *v)
{
    return (size_t)v->og_n[2] * BRM_OD_CORR_PTS * sizeof(float) + (v->og_n[2] - 1) + sizeof(int8_t) + sizeof(uint32_t);
}

size_t brm_od_plan(const brm_scene *s, const brm_shadow_opts *o, const media_info *mi, light_shadow *ls,
                   const brm_light *l)
{
    ls->has_od = ls->active && mi->any && brm_media_any_in(s, o->bounds);
    if (!ls->has_od) return 0;
    for (uint32_t k = 0; k < ls->view_count; k++) ls->views[k].hard_count = mi->hard_count, ls->views[k].hard = mi->hard;
    /* Lookups come from samples in fog, so the grid need cover only the target's part of the
     * fog bounds (a frustum's bounding box reaches far outside them; covering it all starved
     * the lateral resolution and sent most lookups to the fallback march). */
    brm_aabb gb = o->bounds;
    gb.min = brm_vmax(gb.min, s->fog_bounds.min);
    gb.max = brm_vmin(gb.max, s->fog_bounds.max);
    if (!(gb.min.x <= gb.max.x && gb.min.y <= gb.max.y && gb.min.z <= gb.max.z)) gb = o->bounds;
    brm_vec3 c[8];
    box_corners(gb, c);
    /* Spacing: optical depth varies across paths on the lateral feature scale and along a
     * path on the fine one; Hermite interpolation along the path (the derivative of tau is
     * sigma_t, stored too) makes half a feature per node ample. */
    double lat = mi->feature_lateral / 3.0, along = mi->feature / 2.0;
    const double budget = o->od_budget_scale > 0.0 ? fmin(o->od_budget_scale, 1.0) : 1.0;
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
        /* Over budget: coarsen across paths only. Along a path the Hermite steps must resolve
         * the finest feature (nothing checks them); across, the build's check and the blocks
         * take care of what a coarse spacing misses. */
        double tot = (double)n[0] * n[1] * n[2], cap = BRM_OD_MAX_NODES_ORTHO * budget;
        if (tot > cap) {
            double f = sqrt(cap / tot);
            for (int a = 0; a < 2; a++) n[a] = (uint32_t)fmax(8.0, floor(n[a] * f));
        }
        for (int a = 0; a < 3; a++) axis_set(v, a, lo[a], hi[a], n[a], true);
        for (int a = 0; a < 3; a++) {
            double fa = brm_vget(v->f, a);
            v->prefix_axis[a] = fa != 0.0;
            v->f_inv[a] = fa != 0.0 ? 1.0 / fa : 0.0;
        }
        v->cone_tan = HUGE_VAL;
        size_t bytes = ((size_t)n[0] * n[1] * n[2] * 2 + (size_t)3 * n[0] * n[1]) * sizeof(float) +
                       (size_t)n[0] * n[1] * (2 * sizeof(uint16_t) + sizeof(int64_t)) +
                       (size_t)(n[0] - 1) * (n[1] - 1) * (n[2] - 1) + block_bytes(v);
        return bytes + corr_bytes(ls);
    }
    brm_vec3 pos = l->position;
    double rmax = 1e-3;
    for (int i = 0; i < 8; i++) rmax = fmax(rmax, brm_len(brm_sub(c[i], pos)));
    if (l->range_m > 0.0 && l->range_m < rmax) rmax = l->range_m;
    double tan_half = ls->cube ? 1.0 : tan(l->outer_deg * BRM_PI / 180.0);
    /* Lateral spacing measured at the far end of the grid, where rays are furthest apart. */
    double sl = fmin(lat / rmax, 2.0 * tan_half / 32.0), sr = fmin(along, rmax / 16.0);
    uint32_t nl = axis_nodes(-tan_half, tan_half, sl, 4, 512), nr = axis_nodes(0.0, rmax, sr, 4, BRM_OD_MAX_DEPTH_NODES);
    double tot = (double)nl * nl * nr; /* the budget is per view: a cube's faces each get it */
    if (tot > BRM_OD_MAX_NODES * budget) nl = (uint32_t)fmax(8.0, floor(nl * sqrt(BRM_OD_MAX_NODES * budget / tot)));
    size_t bytes = 0;
    for (uint32_t k = 0; k < ls->view_count; k++) {
        shadow_view *v = &ls->views[k];
        axis_set(v, 0, -tan_half, tan_half, nl, true);
        axis_set(v, 1, -tan_half, tan_half, nl, true);
        axis_set(v, 2, 0.0, rmax, nr, false);
        v->cone_tan = !ls->cube && l->type == BRM_LIGHT_SPOT ? tan_half : HUGE_VAL;
        bytes += (size_t)nl * nl * nr * 2 * sizeof(float) + (size_t)nl * nl * (2 * sizeof(uint16_t) + sizeof(int64_t)) +
                 (size_t)(nl - 1) * (nl - 1) * (nr - 1) + block_bytes(v);
    }
    return bytes + corr_bytes(ls);
}

/* Depth where the line o + t·f crosses the plane of the fog-bounds face that light travelling
 * along f enters through on axis a. */
static double face_depth(const brm_scene *s, brm_vec3 o, brm_vec3 f, int a)
{
    double fa = brm_vget(f, a);
    double plane = fa > 0.0 ? brm_vget(s->fog_bounds.min, a) : brm_vget(s->fog_bounds.max, a);
    return (plane - brm_vget(o, a)) / fa;
}

/* The axis of the fog-bounds face the line o + t·f enters through (the last slab it enters),
 * or −1 when it misses the bounds. */
static int entry_face(const brm_scene *s, brm_vec3 o, brm_vec3 f)
{
    int best = -1;
    double tin = -HUGE_VAL, tout = HUGE_VAL;
    for (int a = 0; a < 3; a++) {
        double fa = brm_vget(f, a), oa = brm_vget(o, a);
        double lo = brm_vget(s->fog_bounds.min, a), hi = brm_vget(s->fog_bounds.max, a);
        if (fa == 0.0) {
            if (oa < lo || oa > hi) return -1;
            continue;
        }
        double t0 = ((fa > 0.0 ? lo : hi) - oa) / fa, t1 = ((fa > 0.0 ? hi : lo) - oa) / fa;
        if (t0 > tin) tin = t0, best = a;
        if (t1 < tout) tout = t1;
    }
    return tin <= tout ? best : -1;
}

/* The line of the column at lateral (x, y): origin and unit direction, the depth parameter
 * being the distance along it (ortho: f·o = 0, so it is f·p). */
static void column_line(const shadow_view *v, double x, double y, brm_vec3 *o, brm_vec3 *d)
{
    if (v->kind == BRM_VIEW_ORTHO) {
        *o = brm_add(brm_scale(v->u, x), brm_scale(v->v, y));
        *d = v->f;
    } else {
        *o = v->origin;
        *d = brm_norm(brm_add(v->f, brm_add(brm_scale(v->u, x), brm_scale(v->v, y))));
    }
}

/* Depth parameters where the column's path enters (*t_in) and leaves (*t_out) the fog
 * bounds; −HUGE_VAL and HUGE_VAL when it misses them. */
static void column_span(const brm_scene *s, const shadow_view *v, double x, double y, double *t_in, double *t_out)
{
    brm_vec3 o, d;
    column_line(v, x, y, &o, &d);
    brm_vec3 inv = brm_v3(1.0 / d.x, 1.0 / d.y, 1.0 / d.z);
    double t0, t1;
    if (!brm_ray_aabb(o, inv, s->fog_bounds, v->kind == BRM_VIEW_ORTHO ? -HUGE_VAL : 0.0, HUGE_VAL, &t0, &t1)) {
        *t_in = HUGE_VAL, *t_out = -HUGE_VAL;
        return;
    }
    *t_in = t0, *t_out = t1;
}

/* Why: a lookup at p reads the depth nodes either side of p in the four columns around p's
 * lateral cell, and p is inside the fog bounds. How far into a cell the bounds reach is the
 * largest depth of the polytope (the cell's prism or pyramid cut by the bounds), found at one
 * of its vertices: sampled here at the cell's corners, edge midpoints and centre, plus the
 * bounds' own corners that project into the cell; a node of margin covers what the samples
 * miss between them, and a miss beyond that only costs a march (the intervals past a
 * column's last node are flagged). Point lights of limited range inside a hall fill a third
 * to two thirds of their columns this way. Orthographic columns start late the same way,
 * a node before the smallest depth at which the bounds begin in the cells around them (a
 * point light's start at the light). */
void brm_od_plan_reach(const brm_scene *s, shadow_view *v)
{
    const uint32_t n0 = v->og_n[0], n1 = v->og_n[1], nk = v->og_n[2], m0 = 2 * n0 - 1, m1 = 2 * n1 - 1;
    size_t lat = (size_t)(n0 - 1) * (n1 - 1);
    double *e = malloc((size_t)m0 * m1 * 2 * sizeof *e), *reach = malloc(lat * 2 * sizeof *reach);
    if (!e || !reach) { /* no memory for the plan: fill every node */
        for (size_t c = 0; c < (size_t)n0 * n1; c++) v->od_first[c] = 0, v->od_last[c] = (uint16_t)(nk - 1);
        free(e);
        free(reach);
        return;
    }
    double *start = reach + lat; /* per cell: the smallest depth the bounds take in it */
    for (uint32_t j = 0; j < m1; j++)
        for (uint32_t i = 0; i < m0; i++) {
            size_t q = i + (size_t)m0 * j;
            column_span(s, v, v->og_lo[0] + v->og_step[0] * 0.5 * i, v->og_lo[1] + v->og_step[1] * 0.5 * j, &e[2 * q],
                        &e[2 * q + 1]);
        }
    for (uint32_t cj = 0; cj + 1 < n1; cj++)
        for (uint32_t ci = 0; ci + 1 < n0; ci++) {
            double r = -HUGE_VAL, r0 = HUGE_VAL;
            for (uint32_t b = 0; b <= 2; b++)
                for (uint32_t a = 0; a <= 2; a++) {
                    size_t q = 2 * ci + a + (size_t)m0 * (2 * cj + b);
                    r = fmax(r, e[2 * q + 1]);
                    r0 = fmin(r0, e[2 * q]);
                }
            reach[ci + (size_t)(n0 - 1) * cj] = r;
            start[ci + (size_t)(n0 - 1) * cj] = r0;
        }
    brm_vec3 bc[8];
    box_corners(s->fog_bounds, bc);
    for (int q = 0; q < 8; q++) {
        double x, y, t;
        if (v->kind == BRM_VIEW_ORTHO) {
            x = brm_dot(bc[q], v->u), y = brm_dot(bc[q], v->v), t = brm_dot(bc[q], v->f);
        } else {
            brm_vec3 dq = brm_sub(bc[q], v->origin);
            double zf = brm_dot(dq, v->f);
            if (!(zf > 0.0)) continue;
            x = brm_dot(dq, v->u) / zf, y = brm_dot(dq, v->v) / zf, t = brm_len(dq);
        }
        double fx = floor((x - v->og_lo[0]) / v->og_step[0]), fy = floor((y - v->og_lo[1]) / v->og_step[1]);
        /* on a cell boundary the corner belongs to the cells either side */
        for (int dj = -1; dj <= 0; dj++)
            for (int di = -1; di <= 0; di++) {
                double cx = fx + di, cy = fy + dj;
                if (cx >= 0.0 && cx < n0 - 1.0 && cy >= 0.0 && cy < n1 - 1.0) {
                    size_t c = (size_t)cx + (size_t)(n0 - 1) * (size_t)cy;
                    reach[c] = fmax(reach[c], t);
                    start[c] = fmin(start[c], t);
                }
            }
    }
    if (v->cone_tan < HUGE_VAL) /* a spot: nothing to fill where its cone is not */
        for (uint32_t cj = 0; cj + 1 < n1; cj++)
            for (uint32_t ci = 0; ci + 1 < n0; ci++) {
                double x0 = v->og_lo[0] + v->og_step[0] * ci, y0 = v->og_lo[1] + v->og_step[1] * cj;
                double nx = brm_clamp(0.0, x0, x0 + v->og_step[0]), ny = brm_clamp(0.0, y0, y0 + v->og_step[1]);
                if (nx * nx + ny * ny > v->cone_tan * v->cone_tan) reach[ci + (size_t)(n0 - 1) * cj] = -HUGE_VAL;
            }
    memset(v->od_last, 0, (size_t)n0 * n1 * sizeof *v->od_last);
    for (size_t c = 0; c < (size_t)n0 * n1; c++) v->od_first[c] = UINT16_MAX;
    for (uint32_t cj = 0; cj + 1 < n1; cj++)
        for (uint32_t ci = 0; ci + 1 < n0; ci++) {
            double r = reach[ci + (size_t)(n0 - 1) * cj], r0 = start[ci + (size_t)(n0 - 1) * cj];
            if (r == -HUGE_VAL) continue; /* the bounds miss the cell: nothing to fill for it */
            double k = floor((r - v->og_lo[2]) * v->og_inv[2]) + 2.0;
            double k0 = v->kind == BRM_VIEW_ORTHO ? floor((r0 - v->og_lo[2]) * v->og_inv[2]) - 1.0 : 0.0;
            uint16_t need = (uint16_t)(k < 0.0 ? 0.0 : k > nk - 1.0 ? nk - 1.0 : k);
            uint16_t need0 = (uint16_t)(k0 < 0.0 ? 0.0 : k0 > nk - 1.0 ? nk - 1.0 : k0);
            size_t c00 = ci + (size_t)n0 * cj, cn[4] = {c00, c00 + 1, c00 + n0, c00 + n0 + 1};
            for (int q = 0; q < 4; q++) {
                if (v->od_last[cn[q]] < need) v->od_last[cn[q]] = need;
                if (v->od_first[cn[q]] > need0) v->od_first[cn[q]] = need0;
            }
        }
    for (size_t c = 0; c < (size_t)n0 * n1; c++) /* columns no cell needs: node 0 only */
        if (v->od_first[c] > v->od_last[c]) v->od_first[c] = v->od_last[c] = 0;
    free(e);
    free(reach);
}

int brm_od_alloc(shadow_view *v)
{
    const size_t cols = (size_t)v->og_n[0] * v->og_n[1];
    v->od_col = malloc(cols * sizeof *v->od_col);
    if (!v->od_col) return 0;
    int64_t at = 0;
    for (size_t c = 0; c < cols; c++) {
        v->od_col[c] = at - (int64_t)v->od_first[c];
        at += (int64_t)v->od_last[c] - (int64_t)v->od_first[c] + 1;
    }
    v->od_nodes = (size_t)at;
    v->od = malloc((v->od_nodes ? v->od_nodes : 1) * 2 * sizeof *v->od);
    return v->od != NULL;
}

/* The depth intervals [*lo, *hi) of lateral cell (ci, cj) whose nodes are filled in all four
 * of its columns (empty when *lo ≥ *hi). */
static void cell_range(const shadow_view *v, uint32_t ci, uint32_t cj, uint32_t *lo, uint32_t *hi)
{
    size_t n0 = v->og_n[0], c00 = ci + n0 * cj, cn[4] = {c00, c00 + 1, c00 + n0, c00 + n0 + 1};
    uint32_t a = 0, b = UINT32_MAX;
    for (int q = 0; q < 4; q++) {
        if (v->od_first[cn[q]] > a) a = v->od_first[cn[q]];
        if (v->od_last[cn[q]] < b) b = v->od_last[cn[q]];
    }
    *lo = a, *hi = b;
}

/* Flags the intervals outside [lo, hi) of one cell's row of flags as unfilled. */
static void flag_unfilled(uint8_t *bad, uint32_t nk, uint32_t lo, uint32_t hi)
{
    for (uint32_t k = 0; k + 1 < nk; k++)
        if (k < lo || k >= hi) bad[k] = BRM_OD_UNFILLED;
}

/* One column of the grid at lateral (x, y): G and sigma~ at depth nodes first..last into col
 * (0 outside), G counted from node first, and for ortho views P_a for the faces marked in
 * need (0 for the others) into pre[3], up to node first. (Where a column starts changes G
 * and every P_a by one constant of opposite sign: P_a + G, all lookups and checks read, is
 * the same, and so is its interpolation, which is linear in the columns' values.) */
static void fill_column(const brm_scene *s, const media_info *mi, const shadow_view *v, double x, double y,
                        const bool need[3], uint32_t first, uint32_t last, float *col, float pre[3], bool packed)
{
    uint32_t nk = v->og_n[2];
    double h = fmax(mi->feature / 2.0, 1.0001 * v->og_step[2]);
    brm_vec3 diag = brm_sub(s->fog_bounds.max, s->fog_bounds.min);
    double reach = 2.0 * brm_len(diag) + (double)nk * v->og_step[2];
    brm_vec3 o, d;
    double t = v->og_lo[2] + v->og_step[2] * (double)first;
    if (v->kind == BRM_VIEW_ORTHO) {
        o = brm_add(brm_scale(v->u, x), brm_scale(v->v, y)); /* f·o = 0, so f·(o + t f) = t */
        d = v->f;
        for (int a = 0; a < 3; a++) {
            pre[a] = 0.0f;
            if (!v->prefix_axis[a] || !need[a]) continue;
            /* A face the light meets almost edge-on crosses far away: only paths that really
             * enter through it use the value, and those are shorter than the bounds'
             * diagonal, so the far end is cut there. */
            double za = brm_clamp(face_depth(s, o, d, a), t - reach, t + reach);
            pre[a] = (float)continued_segment(s, mi, o, d, za, t, h);
        }
    } else {
        o = v->origin;
        d = brm_norm(brm_add(v->f, brm_add(brm_scale(v->u, x), brm_scale(v->v, y))));
    }
    /* Walk the column: a segment with no cut inside that fits one Simpson panel reuses the
     * node values (two evaluations per node, all of them taken along the line in one batch:
     * node k at sample 2(k − first), the midpoints between); the others take the general
     * path. */
    double cut[MAX_CUTS];
    double tend = v->og_lo[2] + v->og_step[2] * (double)(nk - 1);
    uint32_t nc = line_cuts(s, mi, o, d, t, tend, true, cut), ci = 0;
    size_t c0 = 0; /* node k's G at col[2k − c0] */
    if (packed) { /* col holds nodes first..last only */
        if (first > last) return;
        c0 = 2 * (size_t)first;
    } else {
        if (first > last) {
            memset(col, 0, 2 * (size_t)nk * sizeof *col);
            return;
        }
        memset(col, 0, 2 * (size_t)first * sizeof *col);
        memset(col + 2 * (size_t)(last + 1), 0, 2 * (size_t)(nk - 1 - last) * sizeof *col);
    }
    float sg[2 * BRM_OD_MAX_DEPTH_NODES];
    brm_media_extinction_line(s, mi->noise_grid, o, d, t, 0.5 * v->og_step[2], 2 * (last - first) + 1, sg);
    const float *sk = sg - 2 * (size_t)first; /* sk[2k] at node k, sk[2k − 1] before it */
    double g = 0.0, sig = sk[2 * first];
    col[2 * (size_t)first - c0] = 0.0f;
    col[2 * (size_t)first + 1 - c0] = (float)sig;
    const double hs = mi->only_uniform ? HUGE_VAL : h;
    /* The segments with cuts inside: Simpson on the pieces between the column's cuts (the
     * cuts continued_segment would find over [t, t1], not searched again). A piece fits one
     * panel (it is shorter than a node step, the step no longer than h); its three samples
     * join one batch along the line. The ends are taken PIECE_END of the piece's length
     * inside it, so that a float position cannot fall across the jump at a hard box face
     * that bounds the piece; the slivers left at the ends count by the trapezoid rule:
     * exact for constant sigma~, off by O(PIECE_END²·len²·sigma~') otherwise. */
    double pa[2 * MAX_CUTS + 2], pb[2 * MAX_CUTS + 2], pt[3 * (2 * MAX_CUTS + 2)];
    uint32_t np = 0;
    {
        double ta = t;
        uint32_t cj = ci;
        for (uint32_t k = first + 1; k <= last && cj < nc && !mi->only_uniform; k++) {
            double t1 = v->og_lo[2] + v->og_step[2] * (double)k;
            if (!(cut[cj] < t1)) {
                ta = t1;
                continue;
            }
            double a = ta;
            for (; cj < nc && cut[cj] < t1; cj++)
                if (cut[cj] > a && np < 2 * MAX_CUTS + 1) pa[np] = a, pb[np++] = cut[cj], a = cut[cj];
            if (np < 2 * MAX_CUTS + 2) pa[np] = a, pb[np++] = t1;
            ta = t1;
        }
    }
    float pv[3 * (2 * MAX_CUTS + 2)];
    for (uint32_t q = 0; q < np; q++) {
        double e = PIECE_END * (pb[q] - pa[q]);
        pt[3 * q] = pa[q] + e, pt[3 * q + 1] = 0.5 * (pa[q] + pb[q]), pt[3 * q + 2] = pb[q] - e;
    }
    if (np) brm_media_extinction_points(s, mi->noise_grid, o, d, pt, 3 * np, pv);
    uint32_t pq = 0;
    for (uint32_t k = first + 1; k <= last; k++) {
        double t1 = v->og_lo[2] + v->og_step[2] * (double)k;
        bool clean = !(ci < nc && cut[ci] < t1) && t1 - t <= h;
        double s1 = sk[2 * k];
        if (clean && !mi->only_uniform) {
            g += (t1 - t) * (1.0 / 6.0) * (sig + 4.0 * (double)sk[2 * k - 1] + s1);
        } else {
            double a = t;
            bool more = true;
            while (more) {
                more = ci < nc && cut[ci] < t1;
                double b = more ? cut[ci++] : t1;
                if (more && !(b > a)) continue;
                double len = b - a;
                if (pq < np && pa[pq] == a && pb[pq] == b && len <= hs) {
                    double e = PIECE_END * len, f0 = pv[3 * pq], f1 = pv[3 * pq + 2];
                    g += (len - 2.0 * e) / 6.0 * (f0 + 4.0 * (double)pv[3 * pq + 1] + f1) + e * (f0 + f1);
                } else {
                    g += simpson(s, mi, o, d, a, b, hs, true); /* not batched (longer than a panel) */
                }
                if (pq < np && pa[pq] == a && pb[pq] == b) pq++;
                a = b;
            }
        }
        t = t1;
        sig = s1;
        col[2 * (size_t)k - c0] = (float)g;
        col[2 * (size_t)k + 1 - c0] = (float)sig;
    }
}

void brm_od_fill_row(const brm_scene *s, const media_info *mi, shadow_view *v, uint32_t j)
{
    double y = v->og_lo[1] + v->og_step[1] * (double)j;
    size_t plane = (size_t)v->og_n[0] * v->og_n[1];
    for (uint32_t i = 0; i < v->og_n[0]; i++) {
        double x = v->og_lo[0] + v->og_step[0] * (double)i;
        size_t cell = (size_t)i + (size_t)v->og_n[0] * j;
        bool need[3] = {false, false, false};
        if (v->kind == BRM_VIEW_ORTHO)
            /* Only the faces that paths near this column enter through are ever read. */
            for (int dj = -1; dj <= 1; dj++)
                for (int di = -1; di <= 1; di++) {
                    brm_vec3 on = brm_add(brm_scale(v->u, x + di * v->og_step[0]), brm_scale(v->v, y + dj * v->og_step[1]));
                    int e = entry_face(s, on, v->f);
                    if (e >= 0) need[e] = true;
                }
        float pre[3];
        fill_column(s, mi, v, x, y, need, v->od_first[cell], v->od_last[cell],
                    v->od + 2 * (size_t)(v->od_col[cell] + v->od_first[cell]), pre, true);
        if (v->kind == BRM_VIEW_ORTHO)
            for (int a = 0; a < 3; a++) v->prefix[a * plane + cell] = pre[a];
    }
}

/* Interpolation error of G (+ P) at the centre column of every lateral cell in row j, at each
 * depth node. Cells where it exceeds BRM_OD_CHECK_TAU are flagged: lookups there march. */
void brm_od_check_row(const brm_scene *s, const media_info *mi, shadow_view *v, uint32_t j, float *scratch)
{
    uint32_t nk = v->og_n[2], n0 = v->og_n[0];
    double y = v->og_lo[1] + v->og_step[1] * ((double)j + 0.5);
    size_t plane = (size_t)n0 * v->og_n[1];
    for (uint32_t i = 0; i + 1 < n0; i++) {
        double x = v->og_lo[0] + v->og_step[0] * ((double)i + 0.5);
        int e = -1;
        bool need[3] = {false, false, false};
        if (v->kind == BRM_VIEW_ORTHO) {
            e = entry_face(s, brm_add(brm_scale(v->u, x), brm_scale(v->v, y)), v->f);
            if (e >= 0) need[e] = true;
        }
        float pre[3];
        uint32_t lo, valid;
        cell_range(v, i, j, &lo, &valid);
        uint8_t *bad = v->od_bad + ((size_t)i + (size_t)(n0 - 1) * j) * (nk - 1);
        if (v->kind == BRM_VIEW_ORTHO && e < 0) {
            /* The centre path misses the bounds (the cell is on the edge of their shadow):
             * compare P + G with the face the corners' paths enter through (the columns'
             * G alone start at different nodes), or march when none of them enters. */
            for (int q = 0; q < 4 && e < 0; q++)
                e = entry_face(s, brm_add(brm_scale(v->u, x + (q & 1 ? 0.5 : -0.5) * v->og_step[0]),
                                          brm_scale(v->v, y + (q >> 1 ? 0.5 : -0.5) * v->og_step[1])),
                               v->f);
            if (e >= 0) need[e] = true;
        }
        if (lo >= valid || (v->kind == BRM_VIEW_ORTHO && e < 0)) {
            flag_unfilled(bad, nk, 0, 0);
            continue;
        }
        fill_column(s, mi, v, x, y, need, lo, valid, scratch, pre, false);
        size_t c00 = (size_t)i + (size_t)n0 * j, c[4] = {c00, c00 + 1, c00 + n0, c00 + n0 + 1};
        double p_int = 0.0, p_ex = 0.0;
        if (e >= 0) {
            for (int q = 0; q < 4; q++) p_int += 0.25 * v->prefix[e * plane + c[q]];
            p_ex = pre[e];
        }
        for (uint32_t k = 0; k + 1 < nk; k++) bad[k] = 0;
        for (uint32_t k = lo; k <= valid; k++) {
            double g_int = 0.0;
            for (int q = 0; q < 4; q++) g_int += 0.25 * v->od[2 * (size_t)(v->od_col[c[q]] + k)];
            double err = fabs((g_int + p_int) - ((double)scratch[2 * k] + p_ex));
            if (err > BRM_OD_CHECK_TAU) {
                if (k > 0) bad[k - 1] = 1;
                if (k + 1 < nk) bad[k] = 1;
            }
        }
        flag_unfilled(bad, nk, lo, valid);
    }
}

void brm_od_assign_blocks(shadow_view *v)
{
    uint32_t nk = v->og_n[2];
    size_t lat = (size_t)(v->og_n[0] - 1) * (v->og_n[1] - 1);
    v->blk_count = 0;
    for (size_t c = 0; c < lat; c++) {
        v->refine[c] = -1;
        if (v->blk_count == v->blk_cap) continue;
        const uint8_t *bad = v->od_bad + c * (nk - 1);
        for (uint32_t k = 0; k + 1 < nk; k++)
            if (bad[k] == 1) {
                v->blk_cell[v->blk_count] = (uint32_t)c;
                v->refine[c] = (int32_t)v->blk_count++;
                break;
            }
    }
}

void brm_od_fill_block(const brm_scene *s, const media_info *mi, shadow_view *v, uint32_t b, float *scratch)
{
    const uint32_t R = BRM_OD_REFINE, R1 = R + 1, nk = v->og_n[2];
    uint32_t cell = v->blk_cell[b], ci = cell % (v->og_n[0] - 1), cj = cell / (v->og_n[0] - 1);
    bool need[3] = {false, false, false};
    if (v->kind == BRM_VIEW_ORTHO)
        for (int dj = -1; dj <= 2; dj++)
            for (int di = -1; di <= 2; di++) {
                double x = v->og_lo[0] + v->og_step[0] * ((double)ci + di), y = v->og_lo[1] + v->og_step[1] * ((double)cj + dj);
                int e = entry_face(s, brm_add(brm_scale(v->u, x), brm_scale(v->v, y)), v->f);
                if (e >= 0) need[e] = true;
            }
    float *od = v->blk_od + 2 * (size_t)nk * R1 * R1 * b;
    uint32_t lo, valid; /* every column of the block starts at node lo */
    cell_range(v, ci, cj, &lo, &valid);
    for (uint32_t bj = 0; bj <= R; bj++)
        for (uint32_t bi = 0; bi <= R; bi++) {
            double x = v->og_lo[0] + v->og_step[0] * ((double)ci + (double)bi / R);
            double y = v->og_lo[1] + v->og_step[1] * ((double)cj + (double)bj / R);
            float pre[3];
            fill_column(s, mi, v, x, y, need, lo, valid, od + 2 * (size_t)nk * (bi + R1 * bj), pre, false);
            if (v->kind == BRM_VIEW_ORTHO)
                for (int a = 0; a < 3; a++) v->blk_pre[((size_t)b * 3 + a) * R1 * R1 + bi + R1 * bj] = pre[a];
        }
    /* The same check as for the base cells, at each sub-cell's centre. */
    for (uint32_t sj = 0; sj < R; sj++)
        for (uint32_t si = 0; si < R; si++) {
            double x = v->og_lo[0] + v->og_step[0] * ((double)ci + ((double)si + 0.5) / R);
            double y = v->og_lo[1] + v->og_step[1] * ((double)cj + ((double)sj + 0.5) / R);
            int e = -1;
            bool nd[3] = {false, false, false};
            if (v->kind == BRM_VIEW_ORTHO) {
                e = entry_face(s, brm_add(brm_scale(v->u, x), brm_scale(v->v, y)), v->f);
                if (e >= 0) nd[e] = true;
            }
            float pre[3];
            fill_column(s, mi, v, x, y, nd, lo, valid, scratch, pre, false);
            size_t q0 = si + R1 * sj, q[4] = {q0, q0 + 1, q0 + R1, q0 + R1 + 1};
            double p_int = 0.0, p_ex = 0.0;
            if (e >= 0) {
                for (int k = 0; k < 4; k++) p_int += 0.25 * v->blk_pre[((size_t)b * 3 + e) * R1 * R1 + q[k]];
                p_ex = pre[e];
            }
            uint8_t *bad = v->blk_bad + ((size_t)b * R * R + si + R * sj) * (nk - 1);
            memset(bad, 0, nk - 1);
            for (uint32_t k = lo; k <= valid; k++) {
                double g_int = 0.0;
                for (int m = 0; m < 4; m++) g_int += 0.25 * od[2 * ((size_t)nk * q[m] + k)];
                if (fabs((g_int + p_int) - ((double)scratch[2 * k] + p_ex)) > BRM_OD_CHECK_TAU) {
                    if (k > 0) bad[k - 1] = 1;
                    if (k + 1 < nk) bad[k] = 1;
                }
            }
            flag_unfilled(bad, nk, lo, valid);
        }
}

/* ---- cell corrections --------------------------------------------------------------
 *
 * Why corrections and not more blocks: a block costs (R+1)² = 25 columns to fill and 16 to
 * check, and 25·og_n[2]·2 floats; a correction costs 9 columns (5 taken, 4 to check) and
 * 5·og_n[2] floats. A correction stores, per depth node, what bilinear interpolation misses
 * (exact minus interpolated G + P) at the cell's centre and at its four edge midpoints; the
 * corners are grid nodes, where it misses nothing. At lookup the misses are interpolated
 * biquadratically (the Lagrange basis on 0, ½, 1 per axis, corners 0), so an error that is
 * quadratic across the cell, as smooth optical depth is at this scale, is removed exactly.
 * A kink crossing the cell is not quadratic: the build re-checks the corrected value at the
 * four quarter points for every node, and the flagged intervals where it still misses
 * BRM_OD_CHECK_TAU keep marching. On an edge the correction depends only on that edge's
 * midpoint, which a corrected neighbour shares: two corrected cells meet continuously. */

int brm_od_assign_corrections(shadow_view *v)
{
    uint32_t nk = v->og_n[2];
    size_t lat = (size_t)(v->og_n[0] - 1) * (v->og_n[1] - 1);
    v->corr_count = 0;
    for (size_t c = 0; c < lat; c++) {
        v->corr[c] = -1;
        if (v->corr_count == v->corr_cap || v->refine[c] >= 0) continue;
        const uint8_t *bad = v->od_bad + c * (nk - 1);
        for (uint32_t k = 0; k + 1 < nk; k++)
            if (bad[k] == 1) {
                v->corr[c] = (int32_t)v->corr_count++;
                break;
            }
    }
    size_t n = v->corr_count ? v->corr_count : 1;
    v->corr_cell = malloc(n * sizeof *v->corr_cell);
    v->corr_dg = malloc(n * nk * BRM_OD_CORR_PTS * sizeof(float));
    v->corr_on = malloc(n * (nk - 1));
    v->corr_face = malloc(n);
    if (!v->corr_cell || !v->corr_dg || !v->corr_on || !v->corr_face) return 0;
    for (size_t c = 0; c < lat; c++)
        if (v->corr[c] >= 0) v->corr_cell[v->corr[c]] = (uint32_t)c;
    return 1;
}

/* The entry face of the path at lateral (x, y) (ortho), −1 for persp or a miss. */
static int lateral_face(const brm_scene *s, const shadow_view *v, double x, double y)
{
    if (v->kind != BRM_VIEW_ORTHO) return -1;
    return entry_face(s, brm_add(brm_scale(v->u, x), brm_scale(v->v, y)), v->f);
}

/* The points a correction is taken at, in cell units: centre, then the edge midpoints
 * y = 0, y = 1, x = 0, x = 1. */
static const double corr_x[BRM_OD_CORR_PTS] = {0.5, 0.5, 0.5, 0.0, 1.0},
                    corr_y[BRM_OD_CORR_PTS] = {0.5, 0.0, 1.0, 0.5, 0.5};

/* The weights of the five stored misses at (x, y) in cell units. */
static void corr_weights(double x, double y, double w[BRM_OD_CORR_PTS])
{
    double x0 = 2.0 * (x - 0.5) * (x - 1.0), xm = 4.0 * x * (1.0 - x), x1 = 2.0 * x * (x - 0.5);
    double y0 = 2.0 * (y - 0.5) * (y - 1.0), ym = 4.0 * y * (1.0 - y), y1 = 2.0 * y * (y - 0.5);
    w[0] = xm * ym;
    w[1] = xm * y0;
    w[2] = xm * y1;
    w[3] = x0 * ym;
    w[4] = x1 * ym;
}

void brm_od_fill_correction(const brm_scene *s, const media_info *mi, shadow_view *v, uint32_t c, float *scratch)
{
    const uint32_t nk = v->og_n[2], n0 = v->og_n[0], NP = BRM_OD_CORR_PTS;
    uint32_t cell = v->corr_cell[c], ci = cell % (n0 - 1), cj = cell / (n0 - 1);
    size_t plane = (size_t)n0 * v->og_n[1], c00 = (size_t)ci + (size_t)n0 * cj;
    size_t cn[4] = {c00, c00 + 1, c00 + n0, c00 + n0 + 1};
    float *dg = v->corr_dg + (size_t)c * nk * NP, *fail = scratch + 2 * (size_t)nk;
    uint8_t *on = v->corr_on + (size_t)c * (nk - 1);
    uint32_t lo, valid;
    cell_range(v, ci, cj, &lo, &valid);
    memset(on, 0, nk - 1);
    for (uint32_t k = 0; k < nk * NP; k++) dg[k] = 0.0f;
    for (uint32_t k = 0; k < nk; k++) fail[k] = 0.0f;
    double xc = v->og_lo[0] + v->og_step[0] * ((double)ci + 0.5), yc = v->og_lo[1] + v->og_step[1] * ((double)cj + 0.5);
    int e = lateral_face(s, v, xc, yc);
    v->corr_face[c] = (int8_t)e;
    if (v->kind == BRM_VIEW_ORTHO && e < 0) return; /* no face to take P from: keep marching */
    bool need[3] = {false, false, false};
    if (e >= 0) need[e] = true;
    /* Points 0–4 take the misses; 5–8 (the quarter points) check the corrected value. */
    static const double qx[4] = {0.25, 0.75, 0.25, 0.75}, qy[4] = {0.25, 0.25, 0.75, 0.75};
    for (uint32_t q = 0; q < NP + 4; q++) {
        double px = q < NP ? corr_x[q] : qx[q - NP], py = q < NP ? corr_y[q] : qy[q - NP];
        double x = v->og_lo[0] + v->og_step[0] * ((double)ci + px), y = v->og_lo[1] + v->og_step[1] * ((double)cj + py);
        if (lateral_face(s, v, x, y) != e) { /* another face there: keep marching */
            memset(on, 0, nk - 1);
            return;
        }
        float pre[3];
        fill_column(s, mi, v, x, y, need, lo, valid, scratch, pre, false);
        double wb[4] = {(1.0 - px) * (1.0 - py), px * (1.0 - py), (1.0 - px) * py, px * py}, wc[BRM_OD_CORR_PTS];
        corr_weights(px, py, wc);
        double p_int = 0.0, p_ex = 0.0;
        if (e >= 0) {
            for (int m = 0; m < 4; m++) p_int += wb[m] * v->prefix[e * plane + cn[m]];
            p_ex = pre[e];
        }
        for (uint32_t k = lo; k <= valid; k++) {
            double g_int = 0.0;
            for (int m = 0; m < 4; m++) g_int += wb[m] * v->od[2 * (size_t)(v->od_col[cn[m]] + k)];
            double miss = ((double)scratch[2 * k] + p_ex) - (g_int + p_int);
            if (q < NP) {
                dg[(size_t)k * NP + q] = (float)miss;
            } else {
                double corr = 0.0;
                for (uint32_t m = 0; m < NP; m++) corr += wc[m] * (double)dg[(size_t)k * NP + m];
                if (fabs(miss - corr) > BRM_OD_CHECK_TAU) fail[k] = 1.0f;
            }
        }
    }
    /* The flagged intervals whose both nodes pass with the correction stop marching. */
    uint8_t *bad = v->od_bad + (size_t)cell * (nk - 1);
    for (uint32_t k = 0; k + 1 < nk; k++)
        if (bad[k] == 1 && fail[k] == 0.0f && fail[k + 1] == 0.0f) {
            bad[k] = 0;
            on[k] = 1;
        }
}

void brm_od_finish(shadow_view *v)
{
    const uint32_t nk = v->og_n[2];
    size_t lat = (size_t)(v->og_n[0] - 1) * (v->og_n[1] - 1);
    v->cell_clean = malloc(lat * 2 * sizeof *v->cell_clean);
    if (!v->cell_clean) return;
    for (size_t c = 0; c < lat; c++) {
        uint32_t k0 = 0, k = 0;
        if (v->refine[c] < 0) {
            const uint8_t *bad = v->od_bad + c * (nk - 1);
            int32_t cr = v->corr[c];
            const uint8_t *on = cr >= 0 ? v->corr_on + (size_t)cr * (nk - 1) : NULL;
            while (k0 + 1 < nk && bad[k0] == BRM_OD_UNFILLED) k0++;
            k = k0;
            while (k + 1 < nk && !bad[k] && !(on && on[k])) k++;
        }
        v->cell_clean[2 * c] = (uint16_t)k0;
        v->cell_clean[2 * c + 1] = (uint16_t)k;
    }
    /* the batch's records, 32-byte aligned (one cache line each); node indices fit in 32
     * bits (a view holds at most a few million nodes, od_col ≥ −BRM_OD_MAX_DEPTH_NODES) */
    const uint32_t n0 = v->og_n[0], nc0 = n0 - 1;
    if (v->od_nodes > (size_t)INT32_MAX - BRM_OD_MAX_DEPTH_NODES) return;
    v->cell_quad = aligned_alloc(32, lat * 8 * sizeof *v->cell_quad);
    if (!v->cell_quad) return;
    for (size_t c = 0; c < lat; c++) {
        const size_t c00 = c % nc0 + (c / nc0) * n0;
        int32_t *r = v->cell_quad + 8 * c;
        r[0] = (int32_t)v->od_col[c00], r[1] = (int32_t)v->od_col[c00 + 1];
        r[2] = (int32_t)v->od_col[c00 + n0], r[3] = (int32_t)v->od_col[c00 + n0 + 1];
        r[4] = v->cell_clean[2 * c], r[5] = v->cell_clean[2 * c + 1], r[6] = r[7] = 0;
    }
}

/* G (and for face ≥ 0 the prefix P_face) at grid coordinates (x, y, z): cubic Hermite in z
 * (values G, slopes sigma~), bilinear across paths, in the cell's block when it has one.
 * Returns 0 outside the grid or in a flagged cell. */
/* Grid coordinates of (x, y, z): the cell c and the weights w in it; 0 outside the grid. */
#define OD_INLINE_EVAL __attribute__((always_inline)) static inline
static inline int grid_cell(const shadow_view *v, double x, double y, double z, uint32_t c[3], double w[3])
{
    double f[3] = {(x - v->og_lo[0]) * v->og_inv[0], (y - v->og_lo[1]) * v->og_inv[1], (z - v->og_lo[2]) * v->og_inv[2]};
    for (int a = 0; a < 3; a++) {
        double lim = (double)(v->og_n[a] - 1);
        if (!(f[a] >= 0.0 && f[a] <= lim)) return 0;
        double fl = (double)(uint32_t)f[a]; /* floor: f ≥ 0 */
        if (fl > lim - 1.0) fl = lim - 1.0;
        c[a] = (uint32_t)fl;
        w[a] = f[a] - fl;
    }
    return 1;
}

/* Whether depth interval c[2] of lateral cell c needs nothing but its four base columns. */
static inline int cell_is_clean(const shadow_view *v, const uint32_t c[3])
{
    size_t lat = c[0] + (size_t)(v->og_n[0] - 1) * c[1];
    return v->cell_clean && c[2] >= v->cell_clean[2 * lat] && c[2] < v->cell_clean[2 * lat + 1];
}

/* G (and for face ≥ 0 the prefix into *p_out) of a clean cell: the common case, the four
 * base columns and nothing else to read. In single precision (the nodes are floats; the
 * weights' rounding, under 1e-7 relative, moves G by a few 1e-7 against the 0.003 the build
 * checks): bilinear across the columns first, each node pair (G_k, sigma_k, G_k+1,
 * sigma_k+1) a vector of four, then the Hermite basis once. */
OD_INLINE_EVAL double clean_eval(const shadow_view *v, const uint32_t c[3], const double w[3], int face, double *p_out)
{
    const uint32_t n0 = v->og_n[0];
    const float t = (float)w[2], t2 = t * t, t3 = t2 * t, hz = (float)v->og_step[2];
    const float hb[4] = {2.0f * t3 - 3.0f * t2 + 1.0f, (t3 - 2.0f * t2 + t) * hz, -2.0f * t3 + 3.0f * t2,
                         (t3 - t2) * hz};
    const float wx = (float)w[0], wy = (float)w[1];
    const float wq[4] = {(1.0f - wx) * (1.0f - wy), wx * (1.0f - wy), (1.0f - wx) * wy, wx * wy};
    const size_t c00 = c[0] + (size_t)n0 * c[1];
    const int64_t *oc = v->od_col + c00;
    const float *n00 = v->od + 2 * (size_t)(oc[0] + c[2]), *n10 = v->od + 2 * (size_t)(oc[1] + c[2]);
    const float *n01 = v->od + 2 * (size_t)(oc[n0] + c[2]), *n11 = v->od + 2 * (size_t)(oc[n0 + 1] + c[2]);
    float a[4];
    for (int q = 0; q < 4; q++) a[q] = wq[0] * n00[q] + wq[1] * n10[q] + wq[2] * n01[q] + wq[3] * n11[q];
    if (face >= 0) {
        const float *pr = v->prefix + (size_t)face * n0 * v->og_n[1] + c00;
        *p_out = (double)(wq[0] * pr[0] + wq[1] * pr[1] + wq[2] * pr[n0] + wq[3] * pr[n0 + 1]);
    } else if (p_out) {
        *p_out = 0.0;
    }
    return (double)(a[0] * hb[0] + a[1] * hb[1] + a[2] * hb[2] + a[3] * hb[3]);
}

static int grid_eval(const shadow_view *v, double x, double y, double z, int face, double *g_out, double *p_out)
{
    uint32_t c[3];
    double w[3];
    if (!grid_cell(v, x, y, z, c, w)) return 0;
    if (cell_is_clean(v, c)) {
        *g_out = clean_eval(v, c, w, face, p_out);
        return 1;
    }
    const uint32_t nk = v->og_n[2], n0 = v->og_n[0];
    size_t lat = c[0] + (size_t)(n0 - 1) * c[1];
    const float *col[4], *pre[4] = {NULL, NULL, NULL, NULL};
    const uint8_t *bad;
    int32_t b = v->refine ? v->refine[lat] : -1;
    double wx = w[0], wy = w[1];
    const float *dg = NULL;
    if (b < 0) {
        bad = v->od_bad + lat * (nk - 1);
        int32_t cr = v->corr ? v->corr[lat] : -1;
        if (cr >= 0 && v->corr_on[(size_t)cr * (nk - 1) + c[2]]) {
            /* The correction is what makes this interval good, and it was taken with the
             * centre's entry face: another face marches. */
            if (v->corr_face[cr] != face) return 0;
            dg = v->corr_dg + ((size_t)cr * nk + c[2]) * BRM_OD_CORR_PTS;
        }
        for (int q = 0; q < 4; q++) {
            size_t cc = (c[0] + (uint32_t)(q & 1)) + (size_t)n0 * (c[1] + (uint32_t)(q >> 1));
            col[q] = v->od + 2 * (size_t)(v->od_col[cc] + c[2]); /* read only when not flagged */
            if (face >= 0) pre[q] = v->prefix + (size_t)face * n0 * v->og_n[1] + cc;
        }
    } else {
        const uint32_t R = BRM_OD_REFINE, R1 = R + 1;
        double sx = wx * R, sy = wy * R;
        uint32_t si = (uint32_t)fmin(floor(sx), R - 1.0), sj = (uint32_t)fmin(floor(sy), R - 1.0);
        wx = sx - si, wy = sy - sj;
        bad = v->blk_bad + ((size_t)b * R * R + si + R * sj) * (nk - 1);
        for (int q = 0; q < 4; q++) {
            size_t cc = (size_t)b * R1 * R1 + (si + (uint32_t)(q & 1)) + R1 * (sj + (uint32_t)(q >> 1));
            col[q] = v->blk_od + 2 * ((size_t)nk * cc + c[2]);
            if (face >= 0) pre[q] = v->blk_pre + ((size_t)b * 3 + (size_t)face) * R1 * R1 + (cc - (size_t)b * R1 * R1);
        }
    }
    if (bad[c[2]]) return 0;
    double t = w[2], t2 = t * t, t3 = t2 * t, hz = v->og_step[2];
    double h00 = 2 * t3 - 3 * t2 + 1, h10 = (t3 - 2 * t2 + t) * hz, h01 = -2 * t3 + 3 * t2, h11 = (t3 - t2) * hz;
    double g = 0.0, pp = 0.0;
    for (int q = 0; q < 4; q++) {
        const float *n = col[q]; /* nodes c[2] and c[2] + 1 */
        double wq = (q & 1 ? wx : 1.0 - wx) * (q >> 1 ? wy : 1.0 - wy);
        g += wq * (h00 * n[0] + h10 * n[1] + h01 * n[2] + h11 * n[3]);
        if (face >= 0) pp += wq * *pre[q];
    }
    if (dg) {
        double wc[BRM_OD_CORR_PTS], c0 = 0.0, c1 = 0.0;
        corr_weights(wx, wy, wc);
        for (uint32_t m = 0; m < BRM_OD_CORR_PTS; m++) c0 += wc[m] * dg[m], c1 += wc[m] * dg[BRM_OD_CORR_PTS + m];
        g += (1.0 - t) * c0 + t * c1;
    }
    *g_out = g;
    if (p_out) *p_out = pp;
    return 1;
}

/* Whether the depth interval of grid point (x, y, z) may hold a hard box face crossed by one
 * of the columns of its lateral cell (shadow_view.hard): the box spanned by the four corner
 * columns' segments over the interval (their eight ends; a cone's segments bulge out of
 * that by at most r·(angle²)/2, allowed for) meets a hard box's surface, i.e. meets the box
 * without lying inside it. Conservative: the lookup then marches. */
static int near_hard_face(const shadow_view *v, double x, double y, double z)
{
    uint32_t c[3];
    double q[3] = {x, y, z};
    for (int a = 0; a < 3; a++) {
        double f = (q[a] - v->og_lo[a]) * v->og_inv[a], lim = (double)(v->og_n[a] - 1);
        f = f < 0.0 ? 0.0 : f > lim ? lim : f;
        double fl = (double)(uint32_t)f;
        if (fl > lim - 1.0) fl = lim - 1.0;
        c[a] = (uint32_t)fl;
    }
    brm_aabb span = brm_aabb_empty();
    double r1 = v->og_lo[2] + v->og_step[2] * (c[2] + 1.0);
    for (int k = 0; k < 8; k++) {
        double cx = v->og_lo[0] + v->og_step[0] * (c[0] + (double)(k & 1));
        double cy = v->og_lo[1] + v->og_step[1] * (c[1] + (double)((k >> 1) & 1));
        double cz = v->og_lo[2] + v->og_step[2] * (c[2] + (double)(k >> 2));
        brm_vec3 w = v->kind == BRM_VIEW_ORTHO
                         ? brm_add(brm_add(brm_scale(v->u, cx), brm_scale(v->v, cy)), brm_scale(v->f, cz))
                         : brm_madd(v->origin, brm_norm(brm_add(v->f, brm_add(brm_scale(v->u, cx), brm_scale(v->v, cy)))), cz);
        brm_aabb_grow(&span, w);
    }
    double e = 1e-6 * (1.0 + fabs(r1));
    if (v->kind != BRM_VIEW_ORTHO) e += r1 * (v->og_step[0] * v->og_step[0] + v->og_step[1] * v->og_step[1]);
    span.min = brm_sub(span.min, brm_v3(e, e, e));
    span.max = brm_add(span.max, brm_v3(e, e, e));
    for (uint32_t b = 0; b < v->hard_count; b++) {
        const brm_aabb h = v->hard[b];
        if (!brm_aabb_overlaps(span, h)) continue;
        bool inside = span.min.x > h.min.x && span.max.x < h.max.x && span.min.y > h.min.y && span.max.y < h.max.y &&
                      span.min.z > h.min.z && span.max.z < h.max.z;
        if (!inside) return 1;
    }
    return 0;
}

/* Ortho: p inside the fog bounds. */
static inline int lookup_ortho(const brm_scene *s, const shadow_view *v, brm_vec3 p, double *tau)
{
    const brm_aabb fb = s->fog_bounds;
    /* The face p's path toward the light leaves the fog through: the nearest one back along
     * f (distances by the stored reciprocals of f's components). */
    int best = -1;
    double tb = HUGE_VAL;
    for (int a = 0; a < 3; a++) {
        double fa = brm_vget(v->f, a);
        if (fa == 0.0) continue;
        double plane = fa > 0.0 ? brm_vget(fb.min, a) : brm_vget(fb.max, a);
        double ta = (brm_vget(p, a) - plane) * v->f_inv[a]; /* distance back to the plane, ≥ 0 */
        if (ta < tb) tb = ta, best = a;
    }
    if (best < 0) return 0;
    double g, pre;
    const double x = brm_dot(p, v->u), y = brm_dot(p, v->v), z = brm_dot(p, v->f);
    if (!grid_eval(v, x, y, z, best, &g, &pre)) return 0;
    if (v->hard_count && near_hard_face(v, x, y, z)) return 0;
    double t = pre + g;
    *tau = t > 0.0 ? t : 0.0;
    return 1;
}

/* Persp: d = p − v->origin, p inside the fog bounds. One reciprocal for both tan coordinates. */
static inline int lookup_persp(const brm_scene *s, const shadow_view *v, brm_vec3 d, double *tau)
{
    const double zf = brm_dot(d, v->f);
    if (!(zf > 0.0)) return 0;
    const double iz = 1.0 / zf, r2 = brm_dot(d, d), r = sqrt(r2);
    const double x = brm_dot(d, v->u) * iz, y = brm_dot(d, v->v) * iz;
    double g;
    if (!grid_eval(v, x, y, r, -1, &g, NULL)) return 0;
    if (v->hard_count && near_hard_face(v, x, y, r)) return 0;
    const brm_aabb fb = s->fog_bounds;
    if (!brm_aabb_contains(fb, v->origin)) {
        /* The light is outside the fog: subtract what G holds before the path enters it. */
        const double ir = 1.0 / r;
        brm_vec3 dir = brm_scale(d, ir), inv = brm_v3(1.0 / dir.x, 1.0 / dir.y, 1.0 / dir.z);
        double t0, t1, g0;
        if (!brm_ray_aabb(v->origin, inv, fb, 0.0, r, &t0, &t1)) return 0;
        if (!grid_eval(v, x, y, t0, -1, &g0, NULL)) return 0;
        if (v->hard_count && near_hard_face(v, x, y, t0)) return 0;
        g -= g0;
    }
    *tau = g > 0.0 ? g : 0.0;
    return 1;
}

int brm_od_lookup(const brm_scene *s, const shadow_view *v, brm_vec3 p, double *tau)
{
    if (!brm_aabb_contains(s->fog_bounds, p)) return 0;
    if (v->kind == BRM_VIEW_ORTHO) return lookup_ortho(s, v, p, tau);
    return lookup_persp(s, v, brm_sub(p, v->origin), tau);
}

int brm_od_lookup_light(const brm_scene *s, const light_shadow *ls, brm_vec3 p, double *tau)
{
    if (!brm_aabb_contains(s->fog_bounds, p)) return 0;
    const shadow_view *v = &ls->views[0];
    if (v->kind == BRM_VIEW_ORTHO) return lookup_ortho(s, v, p, tau);
    const brm_vec3 d = brm_sub(p, v->origin);
    if (ls->cube) { /* brm_shadow_pick_view's rule, on the d the projection needs anyway */
        const double ax = fabs(d.x), ay = fabs(d.y), az = fabs(d.z);
        v = &ls->views[ax >= ay && ax >= az ? (d.x >= 0 ? 0 : 1) : ay >= az ? (d.y >= 0 ? 2 : 3) : (d.z >= 0 ? 4 : 5)];
    }
    return lookup_persp(s, v, d, tau);
}

/* ---- batches ------------------------------------------------------------------------ */

#define OD_BATCH 32
#define OD_INLINE __attribute__((always_inline)) static inline

/* Pass 3 of the batch for four clean lookups at once (AVX2): clean_eval's single-precision
 * arithmetic, the prefix, the clamp and brm_exp_neg, each operation the scalar one in the
 * same order on four lanes, so the bits are the scalar path's. The node quads are
 * combined per lane (bilinear across the four columns), transposed, and the Hermite basis
 * taken across lanes; the prefixes likewise. at: the four node indices of each lookup, pr:
 * its prefix at column (i, j) (NULL: no prefix, pre = 0, tau = max(g, 0)). */
__attribute__((target("avx2"))) static void eval4_avx2(const shadow_view *const *vv, const double (*ww)[3],
                                                      const size_t (*at)[4], const float *const *pr, double out[4])
{
    __m128 a[4], pq[4];
    const __m256d w0 = _mm256_set_pd(ww[3][0], ww[2][0], ww[1][0], ww[0][0]);
    const __m256d w1 = _mm256_set_pd(ww[3][1], ww[2][1], ww[1][1], ww[0][1]);
    const __m256d w2 = _mm256_set_pd(ww[3][2], ww[2][2], ww[1][2], ww[0][2]);
    const __m128 one = _mm_set1_ps(1.0f), wx = _mm256_cvtpd_ps(w0), wy = _mm256_cvtpd_ps(w1);
    const __m128 ux = _mm_sub_ps(one, wx), uy = _mm_sub_ps(one, wy);
    const __m128 q0 = _mm_mul_ps(ux, uy), q1 = _mm_mul_ps(wx, uy), q2 = _mm_mul_ps(ux, wy), q3 = _mm_mul_ps(wx, wy);
#define OD_LANE(l)                                                                                                   \
    do {                                                                                                             \
        const float *od = vv[l]->od;                                                                                 \
        const __m128 n00 = _mm_loadu_ps(od + 2 * at[l][0]), n10 = _mm_loadu_ps(od + 2 * at[l][1]);                   \
        const __m128 n01 = _mm_loadu_ps(od + 2 * at[l][2]), n11 = _mm_loadu_ps(od + 2 * at[l][3]);                   \
        __m128 x = _mm_mul_ps(_mm_shuffle_ps(q0, q0, _MM_SHUFFLE(l, l, l, l)), n00);                                 \
        x = _mm_add_ps(x, _mm_mul_ps(_mm_shuffle_ps(q1, q1, _MM_SHUFFLE(l, l, l, l)), n10));                        \
        x = _mm_add_ps(x, _mm_mul_ps(_mm_shuffle_ps(q2, q2, _MM_SHUFFLE(l, l, l, l)), n01));                        \
        a[l] = _mm_add_ps(x, _mm_mul_ps(_mm_shuffle_ps(q3, q3, _MM_SHUFFLE(l, l, l, l)), n11));                     \
        if (pr[l]) {                                                                                                 \
            const size_t n0 = vv[l]->og_n[0];                                                                        \
            pq[l] = _mm_loadh_pi(_mm_loadl_pi(_mm_setzero_ps(), (const __m64 *)(const void *)pr[l]),             \
                                 (const __m64 *)(const void *)(pr[l] + n0)); /* __m64 may alias */            \
        } else {                                                                                                     \
            pq[l] = _mm_setzero_ps();                                                                                \
        }                                                                                                            \
    } while (0)
    OD_LANE(0);
    OD_LANE(1);
    OD_LANE(2);
    OD_LANE(3);
#undef OD_LANE
    const __m128 hz = _mm_set_ps((float)vv[3]->og_step[2], (float)vv[2]->og_step[2], (float)vv[1]->og_step[2],
                                 (float)vv[0]->og_step[2]);
    _MM_TRANSPOSE4_PS(a[0], a[1], a[2], a[3]);
    const __m128 t = _mm256_cvtpd_ps(w2), t2 = _mm_mul_ps(t, t), t3 = _mm_mul_ps(t2, t);
    const __m128 h0 = _mm_add_ps(_mm_sub_ps(_mm_mul_ps(_mm_set1_ps(2.0f), t3), _mm_mul_ps(_mm_set1_ps(3.0f), t2)), one);
    const __m128 h1 = _mm_mul_ps(_mm_add_ps(_mm_sub_ps(t3, _mm_mul_ps(_mm_set1_ps(2.0f), t2)), t), hz);
    const __m128 h2 = _mm_add_ps(_mm_mul_ps(_mm_set1_ps(-2.0f), t3), _mm_mul_ps(_mm_set1_ps(3.0f), t2));
    const __m128 h3 = _mm_mul_ps(_mm_sub_ps(t3, t2), hz);
    __m128 g = _mm_mul_ps(a[0], h0);
    g = _mm_add_ps(g, _mm_mul_ps(a[1], h1));
    g = _mm_add_ps(g, _mm_mul_ps(a[2], h2));
    g = _mm_add_ps(g, _mm_mul_ps(a[3], h3));
    _MM_TRANSPOSE4_PS(pq[0], pq[1], pq[2], pq[3]);
    __m128 pp = _mm_mul_ps(q0, pq[0]);
    pp = _mm_add_ps(pp, _mm_mul_ps(q1, pq[1]));
    pp = _mm_add_ps(pp, _mm_mul_ps(q2, pq[2]));
    pp = _mm_add_ps(pp, _mm_mul_ps(q3, pq[3]));
    /* tau = pre + g, clamped below at 0 (max_pd returns 0 unless the sum is > 0) */
    const __m256d tau = _mm256_max_pd(_mm256_add_pd(_mm256_cvtps_pd(pp), _mm256_cvtps_pd(g)), _mm256_setzero_pd());
    /* brm_exp_neg on four lanes */
    const __m256d magic = _mm256_set1_pd(0x1.8p52), x = _mm256_sub_pd(_mm256_setzero_pd(), tau);
    const __m256d kd = _mm256_add_pd(_mm256_mul_pd(x, _mm256_set1_pd(46.166241308446828)), magic);
    const __m256i kb = _mm256_castpd_si256(kd);
    const __m256d nn = _mm256_sub_pd(kd, magic);
    const __m256d r = _mm256_sub_pd(x, _mm256_mul_pd(nn, _mm256_set1_pd(0.021660849392498290)));
    const __m256i j = _mm256_and_si256(kb, _mm256_set1_epi64x(31));
    /* (e << 52) mod 2^64 keeps only bits 5..16 of the low word: the same whatever its sign */
    const __m256i e52 = _mm256_slli_epi64(_mm256_srli_epi64(kb, 5), 52);
    __m256d pl = _mm256_mul_pd(r, _mm256_set1_pd(1.0 / 24.0));
    pl = _mm256_add_pd(_mm256_set1_pd(1.0 / 6.0), pl);
    pl = _mm256_mul_pd(r, pl);
    pl = _mm256_add_pd(_mm256_set1_pd(0.5), pl);
    pl = _mm256_mul_pd(_mm256_mul_pd(r, r), pl);
    pl = _mm256_add_pd(_mm256_add_pd(_mm256_set1_pd(1.0), r), pl);
    const __m256i tb = _mm256_i64gather_epi64((const long long *)brm_exp2_32, j, 8);
    const __m256d sc = _mm256_castsi256_pd(_mm256_add_epi64(tb, e52));
    const __m256d res = _mm256_mul_pd(sc, pl);
    const __m256d lim = _mm256_cmp_pd(tau, _mm256_set1_pd(700.0), _CMP_LT_OQ); /* 0 for tau ≥ 700 */
    _mm256_storeu_pd(out, _mm256_and_pd(res, lim));
}

/* Pass 1 of the batch for one point: the view, the grid cell c and weights w as
 * brm_od_lookup_light takes them; 1 when the point is in a usable view's grid (its slot
 * written, the cell's clean run and column offsets fetched ahead). */
OD_INLINE uint32_t locate1(const light_shadow *ls, const brm_aabb *fb, const double plane[3], const int usable[6],
                           const brm_vec3 q, uint32_t idx, const int vec, const shadow_view **vs, uint32_t c[3],
                           double w[3], int *fs, uint32_t *ls_idx)
{
    if (!brm_aabb_contains(*fb, q)) return 0;
    const shadow_view *v = &ls->views[0];
    double x, y, z;
    int e = -1;
    if (v->kind == BRM_VIEW_ORTHO) {
        if (!usable[0]) return 0;
        double tb = HUGE_VAL;
        for (int a = 0; a < 3; a++) {
            if (v->f_inv[a] == 0.0) continue;
            double ta = (brm_vget(q, a) - plane[a]) * v->f_inv[a];
            if (ta < tb) tb = ta, e = a;
        }
        if (e < 0) return 0;
        x = brm_dot(q, v->u), y = brm_dot(q, v->v), z = brm_dot(q, v->f);
    } else {
        const brm_vec3 d = brm_sub(q, v->origin);
        uint32_t k = 0;
        if (ls->cube) {
            const double ax = fabs(d.x), ay = fabs(d.y), az = fabs(d.z);
            k = ax >= ay && ax >= az ? (d.x >= 0 ? 0u : 1u) : ay >= az ? (d.y >= 0 ? 2u : 3u) : (d.z >= 0 ? 4u : 5u);
        }
        if (!usable[k]) return 0;
        v = &ls->views[k];
        const double zf = brm_dot(d, v->f);
        if (!(zf > 0.0)) return 0;
        const double iz = 1.0 / zf, r2 = brm_dot(d, d);
        x = brm_dot(d, v->u) * iz, y = brm_dot(d, v->v) * iz, z = sqrt(r2);
    }
    /* grid_cell, with the floor by the instruction where there is one */
    const double f[3] = {(x - v->og_lo[0]) * v->og_inv[0], (y - v->og_lo[1]) * v->og_inv[1],
                         (z - v->og_lo[2]) * v->og_inv[2]};
    int inside = 1;
    for (int a = 0; a < 3; a++) {
        double lim = (double)(v->og_n[a] - 1);
        inside &= f[a] >= 0.0 && f[a] <= lim;
    }
    if (!inside) return 0;
    for (int a = 0; a < 3; a++) {
        double lim = (double)(v->og_n[a] - 1);
        double fl = vec ? __builtin_floor(f[a]) : (double)(uint32_t)f[a]; /* the same: 0 ≤ f < 2^32 */
        if (fl > lim - 1.0) fl = lim - 1.0;
        c[a] = (uint32_t)fl;
        w[a] = f[a] - fl;
    }
    __builtin_prefetch(v->cell_quad + 8 * (c[0] + (size_t)(v->og_n[0] - 1) * c[1]));
    *vs = v, *fs = e, *ls_idx = idx;
    return 1;
}

/* locate1 for four points at once (AVX2), the same operations lane by lane. A cube's four
 * points usually share a face; when they do not, each takes locate1. Returns the slots
 * written. */
__attribute__((target("avx2"))) static uint32_t locate4_avx2(const light_shadow *ls, const brm_aabb *fb,
                                                            const double plane[3], const int usable[6],
                                                            const brm_vec3 *q, uint32_t idx, const shadow_view **vs,
                                                            uint32_t (*c)[3], double (*w)[3], int *fs, uint32_t *li)
{
    /* the four points' coordinates by three loads and a 4 x 3 transpose:
     * (x0 y0 z0 x1) (y1 z1 x2 y2) (z2 x3 y3 z3) */
    _Static_assert(sizeof(brm_vec3) == 3 * sizeof(double), "brm_vec3 is three packed doubles");
    const double *qd = &q[0].x;
    const __m256d ra = _mm256_loadu_pd(qd), rb = _mm256_loadu_pd(qd + 4), rc = _mm256_loadu_pd(qd + 8);
    const __m256d m1 = _mm256_permute2f128_pd(ra, rb, 0x30); /* x0 y0 x2 y2 */
    const __m256d m2 = _mm256_permute2f128_pd(ra, rc, 0x21); /* z0 x1 z2 x3 */
    const __m256d m3 = _mm256_permute2f128_pd(rb, rc, 0x30); /* y1 z1 y3 z3 */
    const __m256d qx = _mm256_shuffle_pd(m1, m2, 0xA), qy = _mm256_shuffle_pd(m1, m3, 0x5),
                  qz = _mm256_shuffle_pd(m2, m3, 0xA);
#define BC(x) _mm256_set1_pd(x)
#define DOT(ax, ay, az, b) _mm256_add_pd(_mm256_add_pd(_mm256_mul_pd(ax, BC((b).x)), _mm256_mul_pd(ay, BC((b).y))), \
                                         _mm256_mul_pd(az, BC((b).z)))
    __m256d in = _mm256_and_pd(_mm256_cmp_pd(qx, BC(fb->min.x), _CMP_GE_OQ), _mm256_cmp_pd(qx, BC(fb->max.x), _CMP_LE_OQ));
    in = _mm256_and_pd(in, _mm256_and_pd(_mm256_cmp_pd(qy, BC(fb->min.y), _CMP_GE_OQ),
                                         _mm256_cmp_pd(qy, BC(fb->max.y), _CMP_LE_OQ)));
    in = _mm256_and_pd(in, _mm256_and_pd(_mm256_cmp_pd(qz, BC(fb->min.z), _CMP_GE_OQ),
                                         _mm256_cmp_pd(qz, BC(fb->max.z), _CMP_LE_OQ)));
    int inm = _mm256_movemask_pd(in);
    if (!inm) return 0;
    const shadow_view *v = &ls->views[0];
    __m256d x, y, z, ev = BC(-1.0);
    if (v->kind == BRM_VIEW_ORTHO) {
        if (!usable[0]) return 0;
        __m256d tb = BC(HUGE_VAL);
        const __m256d qa[3] = {qx, qy, qz};
        for (int a = 0; a < 3; a++) {
            if (v->f_inv[a] == 0.0) continue;
            const __m256d ta = _mm256_mul_pd(_mm256_sub_pd(qa[a], BC(plane[a])), BC(v->f_inv[a]));
            const __m256d lt = _mm256_cmp_pd(ta, tb, _CMP_LT_OQ);
            tb = _mm256_blendv_pd(tb, ta, lt);
            ev = _mm256_blendv_pd(ev, BC((double)a), lt);
        }
        inm &= _mm256_movemask_pd(_mm256_cmp_pd(ev, BC(0.0), _CMP_GE_OQ));
        x = DOT(qx, qy, qz, v->u), y = DOT(qx, qy, qz, v->v), z = DOT(qx, qy, qz, v->f);
    } else {
        const __m256d dx = _mm256_sub_pd(qx, BC(v->origin.x)), dy = _mm256_sub_pd(qy, BC(v->origin.y)),
                      dz = _mm256_sub_pd(qz, BC(v->origin.z));
        uint32_t k = 0;
        if (ls->cube) {
            const __m256d sgn = BC(-0.0);
            const __m256d ax = _mm256_andnot_pd(sgn, dx), ay = _mm256_andnot_pd(sgn, dy), az = _mm256_andnot_pd(sgn, dz);
            const int mx = _mm256_movemask_pd(_mm256_and_pd(_mm256_cmp_pd(ax, ay, _CMP_GE_OQ), _mm256_cmp_pd(ax, az, _CMP_GE_OQ)));
            const int my = _mm256_movemask_pd(_mm256_cmp_pd(ay, az, _CMP_GE_OQ));
            const int sx = _mm256_movemask_pd(_mm256_cmp_pd(dx, BC(0.0), _CMP_GE_OQ));
            const int sy = _mm256_movemask_pd(_mm256_cmp_pd(dy, BC(0.0), _CMP_GE_OQ));
            const int sz = _mm256_movemask_pd(_mm256_cmp_pd(dz, BC(0.0), _CMP_GE_OQ));
            uint32_t kl[4], first = 1, same = 1;
            for (int l = 0; l < 4; l++) {
                const int b = 1 << l;
                kl[l] = mx & b ? (sx & b ? 0u : 1u) : my & b ? (sy & b ? 2u : 3u) : (sz & b ? 4u : 5u);
                if (!(inm & b)) continue;
                if (first) k = kl[l], first = 0;
                else same &= kl[l] == k;
            }
            if (!same) {
                uint32_t nw = 0;
                for (int l = 0; l < 4; l++)
                    nw += locate1(ls, fb, plane, usable, q[l], idx + (uint32_t)l, 1, vs + nw, c[nw], w[nw], fs + nw, li + nw);
                return nw;
            }
        }
        if (!usable[k]) return 0;
        v = &ls->views[k];
        const __m256d zf = DOT(dx, dy, dz, v->f);
        inm &= _mm256_movemask_pd(_mm256_cmp_pd(zf, BC(0.0), _CMP_GT_OQ));
        if (!inm) return 0;
        const __m256d iz = _mm256_div_pd(BC(1.0), zf);
        const __m256d r2 = _mm256_add_pd(_mm256_add_pd(_mm256_mul_pd(dx, dx), _mm256_mul_pd(dy, dy)), _mm256_mul_pd(dz, dz));
        x = _mm256_mul_pd(DOT(dx, dy, dz, v->u), iz), y = _mm256_mul_pd(DOT(dx, dy, dz, v->v), iz);
        z = _mm256_sqrt_pd(r2);
    }
#undef DOT
    const __m256d xa[3] = {x, y, z};
    int32_t ca[3][4];
    double wa[3][4];
    for (int a = 0; a < 3; a++) {
        const __m256d f = _mm256_mul_pd(_mm256_sub_pd(xa[a], BC(v->og_lo[a])), BC(v->og_inv[a]));
        const double lim = (double)(v->og_n[a] - 1);
        inm &= _mm256_movemask_pd(_mm256_and_pd(_mm256_cmp_pd(f, BC(0.0), _CMP_GE_OQ), _mm256_cmp_pd(f, BC(lim), _CMP_LE_OQ)));
        __m256d fl = _mm256_floor_pd(f);
        fl = _mm256_blendv_pd(fl, BC(lim - 1.0), _mm256_cmp_pd(fl, BC(lim - 1.0), _CMP_GT_OQ));
        _mm_storeu_si128((__m128i *)(void *)ca[a], _mm256_cvttpd_epi32(fl)); /* 0 ≤ fl < 2^31 where used */
        _mm256_storeu_pd(wa[a], _mm256_sub_pd(f, fl));
    }
#undef BC
    double e4[4];
    _mm256_storeu_pd(e4, ev);
    const size_t n0 = v->og_n[0];
    uint32_t nw = 0;
    for (int l = 0; l < 4; l++) {
        if (!(inm & (1 << l))) continue;
        for (int a = 0; a < 3; a++) c[nw][a] = (uint32_t)ca[a][l], w[nw][a] = wa[a][l];
        __builtin_prefetch(v->cell_quad + 8 * (c[nw][0] + (n0 - 1) * c[nw][1]));
        vs[nw] = v, fs[nw] = (int)e4[l], li[nw] = idx + (uint32_t)l;
        nw++;
    }
    return nw;
}

/* The batch's body, compiled twice (below): for the base instruction set and for AVX2, where
 * the floors are one instruction and the conversions carry no false dependencies. Both do
 * brm_od_lookup_light's and brm_exp_neg's operations in their order, without contraction
 * (ISO C: no fused multiply-adds), so they give the same bits. `vec` selects the floor. */
OD_INLINE void od_batch_body(const brm_scene *s, const light_shadow *ls, const brm_vec3 *p, uint32_t n, double *out,
                             uint8_t *slow, const int vec)
{
    const brm_aabb fb = s->fog_bounds;
    memset(slow, 1, n);
    const shadow_view *v0 = &ls->views[0];
    const int ortho = v0->kind == BRM_VIEW_ORTHO;
    /* What holds for the whole light: a light outside the fog needs two grid reads a lookup
     * (the scalar path); a view with hard faces or without its clean runs takes the general
     * path for every point it gets. */
    if (!ortho && !brm_aabb_contains(fb, v0->origin)) return;
    int usable[6] = {0, 0, 0, 0, 0, 0}, any = 0;
    for (uint32_t k = 0; k < ls->view_count; k++)
        any |= usable[k] = !ls->views[k].hard_count && ls->views[k].cell_quad != NULL;
    if (!any) return;
    /* ortho: the entry face is fixed per point by the three planes back along f */
    double plane[3] = {0.0, 0.0, 0.0};
    for (int a = 0; a < 3 && ortho; a++) {
        double fa = brm_vget(v0->f, a);
        plane[a] = fa > 0.0 ? brm_vget(fb.min, a) : brm_vget(fb.max, a);
    }
    for (uint32_t i0 = 0; i0 < n; i0 += OD_BATCH) {
        const uint32_t m = n - i0 < OD_BATCH ? n - i0 : OD_BATCH;
        const shadow_view *vv[OD_BATCH + 3];
        uint32_t cc[OD_BATCH][3];
        double ww[OD_BATCH + 3][3];
        int face[OD_BATCH];
        uint32_t live[OD_BATCH], nl = 0;
        /* Pass 1: the view, the grid cell and weights, as brm_od_lookup_light takes them;
         * the cell's clean run and column offsets are fetched ahead. */
        uint32_t i = 0;
        if (vec)
            for (; i + 4 <= m; i += 4)
                nl += locate4_avx2(ls, &fb, plane, usable, p + i0 + i, i0 + i, vv + nl, cc + nl, ww + nl, face + nl,
                                   live + nl);
        for (; i < m; i++)
            nl += locate1(ls, &fb, plane, usable, p[i0 + i], i0 + i, vec, vv + nl, cc[nl], ww[nl], face + nl, live + nl);
        /* Pass 2: clean cells only (the others take the scalar path); their nodes fetched. */
        uint32_t nk = 0;
        size_t at[OD_BATCH + 3][4];
        const float *pre_at[OD_BATCH + 3];
        for (uint32_t j = 0; j < nl; j++) {
            const shadow_view *v = vv[j];
            const size_t n0 = v->og_n[0];
            const int32_t *r = v->cell_quad + 8 * (cc[j][0] + (n0 - 1) * cc[j][1]);
            const int32_t k = (int32_t)cc[j][2];
            if (!(k >= r[4] && k < r[5])) continue;
            for (int q = 0; q < 4; q++) {
                at[nk][q] = (size_t)(r[q] + k);
                __builtin_prefetch(v->od + 2 * at[nk][q]); /* one node pair in eight crosses a line */
            }
            pre_at[nk] = face[j] >= 0 ? v->prefix + (size_t)face[j] * n0 * v->og_n[1] + cc[j][0] + n0 * cc[j][1] : NULL;
            if (pre_at[nk]) __builtin_prefetch(pre_at[nk]);
            if (nk != j) {
                vv[nk] = v, face[nk] = face[j], live[nk] = live[j];
                if (!vec) memcpy(cc[nk], cc[j], sizeof cc[j]); /* the AVX2 evaluation reads at[] instead */
                memcpy(ww[nk], ww[j], sizeof ww[j]);
            }
            nk++;
        }
        /* Pass 3: brm_od_lookup_light's arithmetic and brm_shadow_transmittance's exp. */
        uint32_t j0 = 0;
        if (vec && nk) {
            /* a short last group repeats its last lookup */
            for (uint32_t j = nk; j < ((nk + 3) & ~3u); j++) {
                vv[j] = vv[nk - 1], pre_at[j] = pre_at[nk - 1];
                memcpy(ww[j], ww[nk - 1], sizeof ww[j]);
                memcpy(at[j], at[nk - 1], sizeof at[j]);
            }
            for (; j0 < nk; j0 += 4) {
                double o4[4];
                eval4_avx2(vv + j0, (const double(*)[3])(ww + j0), (const size_t(*)[4])(at + j0), pre_at + j0, o4);
                for (uint32_t l = 0; l < 4 && j0 + l < nk; l++) out[live[j0 + l]] = o4[l], slow[live[j0 + l]] = 0;
            }
        }
        for (uint32_t j = j0; j < nk; j++) {
            double pre = 0.0, g = clean_eval(vv[j], cc[j], ww[j], face[j], &pre), tau;
            if (face[j] >= 0) {
                double t = pre + g;
                tau = t > 0.0 ? t : 0.0;
            } else {
                tau = g > 0.0 ? g : 0.0;
            }
            out[live[j]] = brm_exp_neg(tau);
            slow[live[j]] = 0;
        }
    }
}

__attribute__((target("avx2"))) static void od_batch_avx2(const brm_scene *s, const light_shadow *ls,
                                                          const brm_vec3 *p, uint32_t n, double *out, uint8_t *slow)
{
    od_batch_body(s, ls, p, n, out, slow, 1);
}

static void od_batch_base(const brm_scene *s, const light_shadow *ls, const brm_vec3 *p, uint32_t n, double *out,
                          uint8_t *slow)
{
    od_batch_body(s, ls, p, n, out, slow, 0);
}

void brm_od_transmittance_batch_isa(const brm_scene *s, const light_shadow *ls, const brm_vec3 *p, uint32_t n,
                                    double *out, uint8_t *slow, int simd)
{
    (simd && brm_cpu_avx2() ? od_batch_avx2 : od_batch_base)(s, ls, p, n, out, slow);
}

void brm_od_transmittance_batch(const brm_scene *s, const light_shadow *ls, const brm_vec3 *p, uint32_t n,
                                double *out, uint8_t *slow)
{
    brm_od_transmittance_batch_isa(s, ls, p, n, out, slow, 1);
}
