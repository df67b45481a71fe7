/* The shadow set: plans and builds every light's depth maps and optical-depth grids for one
 * target, and answers the per-sample questions of the lighting kernel (shadow.h). */
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "base/threads.h"
#include "scene/media.h"
#include "shadow/shadow_internal.h"

/* Rows of a depth map one work item rasterizes: small enough to share a single map between
 * threads, large enough that walking the triangle list per band stays cheap. */
#define RASTER_BAND 64u

static double scene_scale(const brm_scene *s, const brm_shadow_opts *o)
{
    brm_aabb b = o->bounds;
    if (s->fog_bounds.min.x <= s->fog_bounds.max.x) brm_aabb_union(&b, s->fog_bounds);
    for (uint32_t k = 0; k < s->object_count; k++) brm_aabb_union(&b, s->objects[k].bounds);
    double d = brm_len(brm_sub(b.max, b.min));
    return isfinite(d) && d > 0.0 ? d : 1.0;
}

static bool needs_bvh(const brm_scene *s, const brm_shadow_opts *o)
{
    return s->object_count > 0 && (o->reference || s->sky.present);
}

/* Plans every light; returns the bytes the maps and grids need. */
static size_t plan_all(const brm_scene *s, const brm_shadow_opts *o, const media_info *mi, light_shadow *ls)
{
    size_t bytes = 0;
    for (uint32_t l = 0; l < s->light_count; l++) {
        brm_shadowmap_plan(s, o, &ls[l], &s->lights[l]);
        if (o->reference) { /* rays and marches: no maps, no grids */
            ls[l].has_map = false;
            ls[l].has_od = false;
            continue;
        }
        if (ls[l].has_map)
            bytes += (size_t)ls[l].view_count * ls[l].views[0].res * ls[l].views[0].res * sizeof(float);
        bytes += brm_od_plan(s, o, mi, &ls[l], &s->lights[l]);
    }
    return bytes;
}

size_t brm_shadows_memory(const brm_scene *s, const brm_shadow_opts *o)
{
    media_info mi;
    brm_media_info_init(s, &mi);
    size_t bytes = sizeof(brm_shadow_set);
    if (s->light_count) {
        light_shadow *ls = calloc(s->light_count, sizeof *ls);
        if (!ls) return (size_t)-1;
        bytes += s->light_count * sizeof *ls + plan_all(s, o, &mi, ls);
        free(ls);
    }
    if (needs_bvh(s, o) && !o->bvh) bytes += brm_bvh_memory(s);
    bytes += brm_sky_cache_memory(s, o);
    if (!o->reference) bytes += brm_noise_grid_memory(s);
    return bytes;
}

typedef struct build_item {
    uint32_t light, view, row;
} build_item;

typedef struct build_ctx {
    brm_shadow_set *ss;
    build_item *items;
} build_ctx;

static void raster_item(void *ctx, uint32_t item, int worker)
{
    (void)worker;
    build_ctx *c = ctx;
    build_item *it = &c->items[item];
    shadow_view *v = &c->ss->lights[it->light].views[it->view];
    uint32_t r1 = it->row + RASTER_BAND < v->res ? it->row + RASTER_BAND : v->res;
    brm_shadowmap_raster_rows(c->ss->scene, v, it->row, r1);
}

static void od_item(void *ctx, uint32_t item, int worker)
{
    (void)worker;
    build_ctx *c = ctx;
    build_item *it = &c->items[item];
    brm_od_fill_row(c->ss->scene, &c->ss->media, &c->ss->lights[it->light].views[it->view], it->row);
}

static void block_item(void *ctx, uint32_t item, int worker)
{
    (void)worker;
    build_ctx *c = ctx;
    build_item *it = &c->items[item];
    shadow_view *v = &c->ss->lights[it->light].views[it->view];
    float *scratch = malloc((size_t)v->og_n[2] * 2 * sizeof(float));
    if (!scratch) { /* no block after all: the cell keeps its flags and marches */
        v->refine[v->blk_cell[it->row]] = -1;
        return;
    }
    brm_od_fill_block(c->ss->scene, &c->ss->media, v, it->row, scratch);
    free(scratch);
}

static void corr_item(void *ctx, uint32_t item, int worker)
{
    (void)worker;
    build_ctx *c = ctx;
    build_item *it = &c->items[item];
    shadow_view *v = &c->ss->lights[it->light].views[it->view];
    float *scratch = malloc((size_t)v->og_n[2] * 3 * sizeof(float));
    if (!scratch) { /* no correction after all: the cell keeps its flags and marches */
        memset(v->corr_on + (size_t)it->row * (v->og_n[2] - 1), 0, v->og_n[2] - 1);
        return;
    }
    brm_od_fill_correction(c->ss->scene, &c->ss->media, v, it->row, scratch);
    free(scratch);
}

static void od_check_item(void *ctx, uint32_t item, int worker)
{
    (void)worker;
    build_ctx *c = ctx;
    build_item *it = &c->items[item];
    shadow_view *v = &c->ss->lights[it->light].views[it->view];
    if (it->row + 1 >= v->og_n[1]) return;
    float *scratch = malloc((size_t)v->og_n[2] * 2 * sizeof(float));
    if (!scratch) { /* cannot check: flag the row so its lookups march (correct, slower) */
        memset(v->od_bad + (size_t)(v->og_n[0] - 1) * it->row * (v->og_n[2] - 1), 1,
               (size_t)(v->og_n[0] - 1) * (v->og_n[2] - 1));
        return;
    }
    brm_od_check_row(c->ss->scene, &c->ss->media, v, it->row, scratch);
    free(scratch);
}

/* One item per view: the depth reach of its grid columns, or its map's depth-range tiles. */
typedef struct view_job {
    const brm_scene *s;
    shadow_view **views;
    int *ok;
} view_job;

static void reach_item(void *ctx, uint32_t item, int worker)
{
    (void)worker;
    view_job *j = ctx;
    brm_od_plan_reach(j->s, j->views[item]);
}

static void tiles_item(void *ctx, uint32_t item, int worker)
{
    (void)worker;
    view_job *j = ctx;
    j->ok[item] = brm_shadowmap_tiles(j->views[item]);
}

/* Runs fn once per view (with od_only, per view that has a grid); 0 when interrupted or
 * when an item reported failure in ok. */
static int run_views(brm_shadow_set *ss, bool od_only, brm_item_fn fn, int threads)
{
    uint32_t n = 0;
    for (uint32_t l = 0; l < ss->light_count; l++) n += ss->lights[l].view_count;
    shadow_view **views = malloc(((size_t)n + 1) * sizeof *views);
    int *ok = malloc(((size_t)n + 1) * sizeof *ok);
    if (!views || !ok) {
        free(views);
        free(ok);
        return 0;
    }
    n = 0;
    for (uint32_t l = 0; l < ss->light_count; l++)
        for (uint32_t k = 0; k < ss->lights[l].view_count; k++)
            if (!od_only || ss->lights[l].has_od) views[n] = &ss->lights[l].views[k], ok[n++] = 1;
    view_job j = {ss->scene, views, ok};
    int good = brm_parallel_for(n, threads, fn, &j, &brm_interrupted) == n;
    for (uint32_t i = 0; i < n; i++) good = good && ok[i];
    free(views);
    free(ok);
    return good;
}

static uint32_t blocks_of(const shadow_view *v) { return v->blk_count; }
static uint32_t corrections_of(const shadow_view *v) { return v->corr_count; }

/* Runs fn on one work item per (light, view, i < count(view)) of the views with grids, listed
 * in light and view order (so results do not depend on which thread takes which). */
static brm_status run_per_view(brm_shadow_set *ss, uint32_t total, uint32_t (*count)(const shadow_view *),
                               brm_item_fn fn, int threads, brm_diag *d)
{
    build_item *items = calloc((size_t)total + 1, sizeof *items);
    if (!items) return brm_diag_error(d, BRM_E_NOMEM, "shadows: out of memory");
    uint32_t ni = 0;
    for (uint32_t l = 0; l < ss->light_count; l++)
        for (uint32_t k = 0; k < ss->lights[l].view_count; k++)
            if (ss->lights[l].has_od)
                for (uint32_t i = 0; i < count(&ss->lights[l].views[k]); i++) items[ni++] = (build_item){l, k, i};
    uint32_t ran = brm_parallel_for(total, threads, fn, &(build_ctx){ss, items}, &brm_interrupted);
    free(items);
    if (ran != total) return brm_diag_error(d, BRM_E_INTERRUPTED, "shadows: interrupted while building the light maps");
    return BRM_OK;
}

const double brm_exp2_32[32] = { /* 2^(j/32), correctly rounded */
    0x1.0000000000000p+0, 0x1.059b0d3158574p+0, 0x1.0b5586cf9890fp+0, 0x1.11301d0125b51p+0, 0x1.172b83c7d517bp+0,
    0x1.1d4873168b9aap+0, 0x1.2387a6e756238p+0, 0x1.29e9df51fdee1p+0, 0x1.306fe0a31b715p+0, 0x1.371a7373aa9cbp+0,
    0x1.3dea64c123422p+0, 0x1.44e086061892dp+0, 0x1.4bfdad5362a27p+0, 0x1.5342b569d4f82p+0, 0x1.5ab07dd485429p+0,
    0x1.6247eb03a5585p+0, 0x1.6a09e667f3bcdp+0, 0x1.71f75e8ec5f74p+0, 0x1.7a11473eb0187p+0, 0x1.82589994cce13p+0,
    0x1.8ace5422aa0dbp+0, 0x1.93737b0cdc5e5p+0, 0x1.9c49182a3f090p+0, 0x1.a5503b23e255dp+0, 0x1.ae89f995ad3adp+0,
    0x1.b7f76f2fb5e47p+0, 0x1.c199bdd85529cp+0, 0x1.cb720dcef9069p+0, 0x1.d5818dcfba487p+0, 0x1.dfc97337b9b5fp+0,
    0x1.ea4afa2a490dap+0, 0x1.f50765b6e4540p+0};

static double process_cpu(void)
{
    struct timespec t;
    if (clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &t) != 0) return 0.0;
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

const char *const brm_shadow_phase_names[BRM_SHADOW_PHASES] = {
    "noise table", "plan", "rasterize", "grid rows", "grid checks", "map tiles", "blocks", "corrections", "sky"};

brm_status brm_shadows_build(const brm_scene *s, const brm_shadow_opts *o, brm_shadow_set **out, brm_diag *d)
{
    BRM_CHECK(d, s && o && out, BRM_E_INTERNAL, "shadows: missing scene, options or output");
    double t_start = brm_now(), c_start = process_cpu();
    brm_shadow_set *ss = calloc(1, sizeof *ss);
    BRM_CHECK(d, ss, BRM_E_NOMEM, "shadows: out of memory");
    ss->scene = s;
    ss->opts = *o;
    brm_media_info_init(s, &ss->media);
    double scale = scene_scale(s, o);
    ss->eps = 1e-7 * scale;
    double step = fmin(o->cell_size > 0.0 ? o->cell_size : HUGE_VAL, ss->media.feature);
    ss->ref_step = (isfinite(step) ? step : scale / 64.0) / 4.0;
    ss->fast_step = isfinite(ss->media.feature) ? ss->media.feature / 2.0 : HUGE_VAL;
    ss->light_count = s->light_count;
    brm_status st = BRM_OK;
    build_item *items = NULL;
    if (!o->reference && ss->media.any) {
        /* The optical-depth grids integrate thousands of paths: they read the noise factor
         * from a table; the reference (and brm_shadow_transmittance_march) evaluate it. */
        st = brm_noise_grid_build(s, o->threads > 0 ? o->threads : 1, &ss->noise_grid, d);
        if (st != BRM_OK) goto fail;
        if (ss->noise_grid.f) ss->media.noise_grid = &ss->noise_grid;
    }
    double t_phase = brm_now(), c_phase = process_cpu();
    ss->phase_seconds[0] = t_phase - t_start;
    ss->phase_cpu[0] = c_phase - c_start;
#define PHASE_END(i)                                   \
    do {                                               \
        double t_now_ = brm_now(), c_now_ = process_cpu(); \
        ss->phase_seconds[i] += t_now_ - t_phase;      \
        ss->phase_cpu[i] += c_now_ - c_phase;          \
        t_phase = t_now_, c_phase = c_now_;            \
    } while (0)
    if (s->light_count) {
        ss->lights = calloc(s->light_count, sizeof *ss->lights);
        if (!ss->lights) {
            st = brm_diag_error(d, BRM_E_NOMEM, "shadows: out of memory");
            goto fail;
        }
    }
    ss->bytes = sizeof *ss + s->light_count * sizeof *ss->lights + plan_all(s, o, &ss->media, ss->lights);

    /* Allocate, and list the work: depth-map bands, then optical-depth rows. */
    uint32_t n_raster = 0, n_od = 0;
    for (uint32_t l = 0; l < s->light_count; l++) {
        light_shadow *ls = &ss->lights[l];
        for (uint32_t k = 0; k < ls->view_count; k++) {
            shadow_view *v = &ls->views[k];
            if (ls->has_map) {
                v->depth = malloc((size_t)v->res * v->res * sizeof(float));
                n_raster += (v->res + RASTER_BAND - 1) / RASTER_BAND;
            }
            if (ls->has_od) {
                if (v->kind == BRM_VIEW_ORTHO) v->prefix = malloc((size_t)3 * v->og_n[0] * v->og_n[1] * sizeof(float));
                size_t lat = (size_t)(v->og_n[0] - 1) * (v->og_n[1] - 1), r1 = BRM_OD_REFINE + 1;
                v->od_bad = calloc(lat * (v->og_n[2] - 1), 1);
                v->refine = malloc(lat * sizeof *v->refine);
                v->blk_cell = malloc((size_t)v->blk_cap * sizeof *v->blk_cell);
                v->corr = malloc(lat * sizeof *v->corr);
                v->od_last = malloc((size_t)v->og_n[0] * v->og_n[1] * sizeof *v->od_last);
                v->od_first = malloc((size_t)v->og_n[0] * v->og_n[1] * sizeof *v->od_first);
                (void)r1;
                if (!v->refine || !v->blk_cell || !v->corr || !v->od_last || !v->od_first) {
                    st = brm_diag_error(d, BRM_E_NOMEM, "shadows: out of memory for %s's optical-depth grid",
                                        s->lights[l].json_path);
                    goto fail;
                }
                n_od += v->og_n[1];
            }
            if ((ls->has_map && !v->depth) || (ls->has_od && (!v->od_bad || (v->kind == BRM_VIEW_ORTHO && !v->prefix)))) {
                st = brm_diag_error(d, BRM_E_NOMEM, "shadows: out of memory for %s's maps (%zu bytes planned)",
                                    s->lights[l].json_path, ss->bytes);
                goto fail;
            }
        }
    }
    items = calloc((size_t)n_raster + n_od + 1, sizeof *items);
    if (!items) {
        st = brm_diag_error(d, BRM_E_NOMEM, "shadows: out of memory");
        goto fail;
    }
    uint32_t ni = 0;
    for (uint32_t l = 0; l < s->light_count; l++)
        for (uint32_t k = 0; k < ss->lights[l].view_count; k++)
            if (ss->lights[l].has_map)
                for (uint32_t r = 0; r < ss->lights[l].views[k].res; r += RASTER_BAND) items[ni++] = (build_item){l, k, r};
    for (uint32_t l = 0; l < s->light_count; l++)
        for (uint32_t k = 0; k < ss->lights[l].view_count; k++)
            if (ss->lights[l].has_od)
                for (uint32_t r = 0; r < ss->lights[l].views[k].og_n[1]; r++) items[ni++] = (build_item){l, k, r};

    build_ctx ctx = {ss, items};
    int threads = o->threads > 0 ? o->threads : 1;
    if (!run_views(ss, true, reach_item, threads)) {
        st = atomic_load(&brm_interrupted) ? brm_diag_error(d, BRM_E_INTERRUPTED, "shadows: interrupted while planning the light maps")
                                           : brm_diag_error(d, BRM_E_NOMEM, "shadows: out of memory");
        goto fail;
    }
    /* The node arrays, packed to each column's reach (the plan counted whole columns). */
    for (uint32_t l = 0; l < s->light_count; l++)
        for (uint32_t k = 0; k < ss->lights[l].view_count && ss->lights[l].has_od; k++) {
            shadow_view *v = &ss->lights[l].views[k];
            if (!brm_od_alloc(v)) {
                st = brm_diag_error(d, BRM_E_NOMEM, "shadows: out of memory for %s's optical-depth grid",
                                    s->lights[l].json_path);
                goto fail;
            }
            ss->bytes -= ((size_t)v->og_n[0] * v->og_n[1] * v->og_n[2] - v->od_nodes) * 2 * sizeof(float);
        }
    PHASE_END(1);
    bool ran_all = brm_parallel_for(n_raster, threads, raster_item, &ctx, &brm_interrupted) == n_raster;
    PHASE_END(2);
    ran_all = ran_all && brm_parallel_for(n_od, threads, od_item, &(build_ctx){ss, items + n_raster}, &brm_interrupted) == n_od;
    PHASE_END(3);
    ran_all = ran_all &&
              brm_parallel_for(n_od, threads, od_check_item, &(build_ctx){ss, items + n_raster}, &brm_interrupted) == n_od;
    PHASE_END(4);
    if (!ran_all) {
        st = brm_diag_error(d, BRM_E_INTERRUPTED, "shadows: interrupted while building the light maps");
        goto fail;
    }
    free(items);
    items = NULL;
    if (!run_views(ss, false, tiles_item, threads)) {
        st = atomic_load(&brm_interrupted) ? brm_diag_error(d, BRM_E_INTERRUPTED, "shadows: interrupted while building the light maps")
                                           : brm_diag_error(d, BRM_E_NOMEM, "shadows: out of memory");
        goto fail;
    }
    PHASE_END(5);

    /* The flagged cells: corrections first, from the light's pool in view order
     * (deterministic); then blocks for the cells a correction did not make good (or that
     * got none). A correction takes 9 columns against a block's 41 and on the demo's
     * lights clears every flag of 85–100 % of its cells (bench_shadow), so blocks are left
     * for the cells that need them. Both stay within what the estimate reserved. */
    uint32_t n_blk = 0, n_corr = 0;
    for (uint32_t l = 0; l < s->light_count; l++) {
        light_shadow *ls = &ss->lights[l];
        if (!ls->has_od) continue;
        size_t cb = brm_od_corr_bytes(&ls->views[0]), pool = ls->corr_pool, used = 0;
        for (uint32_t k = 0; k < ls->view_count; k++) {
            shadow_view *v = &ls->views[k];
            size_t lat = (size_t)(v->og_n[0] - 1) * (v->og_n[1] - 1);
            for (size_t c = 0; c < lat; c++) v->refine[c] = -1;
            v->corr_cap = (uint32_t)(pool - used);
            if (!brm_od_assign_corrections(v)) {
                st = brm_diag_error(d, BRM_E_NOMEM, "shadows: out of memory for %s's optical-depth grid",
                                    s->lights[l].json_path);
                goto fail;
            }
            used += v->corr_count;
            n_corr += v->corr_count;
        }
        /* The estimate counted corr_pool corrections: count the unused ones out. */
        ss->bytes -= (pool - used) * cb;
    }
    PHASE_END(1);
    if ((st = run_per_view(ss, n_corr, corrections_of, corr_item, threads, d)) != BRM_OK) goto fail;
    PHASE_END(7);
    for (uint32_t l = 0; l < s->light_count; l++)
        for (uint32_t k = 0; k < ss->lights[l].view_count; k++)
            if (ss->lights[l].has_od) {
                shadow_view *v = &ss->lights[l].views[k];
                brm_od_assign_blocks(v);
                n_blk += v->blk_count;
                size_t nb = v->blk_count ? v->blk_count : 1, r1 = BRM_OD_REFINE + 1;
                v->blk_od = malloc(nb * r1 * r1 * v->og_n[2] * 2 * sizeof(float));
                v->blk_bad = malloc(nb * BRM_OD_REFINE * BRM_OD_REFINE * (v->og_n[2] - 1));
                if (v->kind == BRM_VIEW_ORTHO) v->blk_pre = malloc(nb * 3 * r1 * r1 * sizeof(float));
                if (!v->blk_od || !v->blk_bad || (v->kind == BRM_VIEW_ORTHO && !v->blk_pre)) {
                    st = brm_diag_error(d, BRM_E_NOMEM, "shadows: out of memory for %s's optical-depth grid",
                                        s->lights[l].json_path);
                    goto fail;
                }
                /* The estimate reserved every block the cap allows: count the unused ones out. */
                size_t per = r1 * r1 * v->og_n[2] * 2 * sizeof(float) +
                             (size_t)BRM_OD_REFINE * BRM_OD_REFINE * (v->og_n[2] - 1) +
                             (v->kind == BRM_VIEW_ORTHO ? 3 * r1 * r1 * sizeof(float) : 0);
                ss->bytes -= (size_t)(v->blk_cap - v->blk_count) * per;
            }
    PHASE_END(1);
    if ((st = run_per_view(ss, n_blk, blocks_of, block_item, threads, d)) != BRM_OK) goto fail;
    PHASE_END(6);
    for (uint32_t l = 0; l < s->light_count; l++)
        for (uint32_t k = 0; k < ss->lights[l].view_count; k++)
            if (ss->lights[l].has_od) brm_od_finish(&ss->lights[l].views[k]);

    /* Sky. */
    ss->sky_present = s->sky.present;
    brm_sky_projection(&s->sky, ss->sky_proj);
    ss->sky_trace = s->sky.present && s->object_count > 0;
    ss->sky_rays = o->reference ? BRM_SKY_RAYS_REFERENCE : BRM_SKY_RAYS;

    ss->bvh = o->bvh;
    if (needs_bvh(s, o) && !ss->bvh) {
        st = brm_bvh_build(s, &ss->own_bvh, d);
        if (st != BRM_OK) goto fail;
        ss->bvh = ss->own_bvh;
        ss->bytes += brm_bvh_memory(s);
    }
    /* The reference uses the same sky cache: it exists to check the light maps and the
     * optical-depth grids, and the cache is checked against traced rays on its own. */
    if (ss->sky_trace && !o->no_sky_cache) {
        st = brm_sky_cache_build(ss, threads, d);
        if (st != BRM_OK) goto fail;
        ss->bytes += brm_sky_cache_memory(s, o);
    }
    PHASE_END(8);
#undef PHASE_END
    ss->build_seconds = brm_now() - t_start;
    *out = ss;
    return BRM_OK;

fail:
    free(items);
    brm_shadows_free(ss);
    return st;
}

void brm_shadows_free(brm_shadow_set *ss)
{
    if (!ss) return;
    for (uint32_t l = 0; l < ss->light_count && ss->lights; l++)
        for (uint32_t k = 0; k < 6; k++) {
            free(ss->lights[l].views[k].depth);
            free(ss->lights[l].views[k].tile_min);
            free(ss->lights[l].views[k].tile_max);
            free(ss->lights[l].views[k].od);
            free(ss->lights[l].views[k].od_col);
            free(ss->lights[l].views[k].prefix);
            free(ss->lights[l].views[k].od_bad);
            free(ss->lights[l].views[k].od_last);
            free(ss->lights[l].views[k].od_first);
            free(ss->lights[l].views[k].cell_clean);
            free(ss->lights[l].views[k].cell_quad);
            free(ss->lights[l].views[k].refine);
            free(ss->lights[l].views[k].blk_cell);
            free(ss->lights[l].views[k].blk_od);
            free(ss->lights[l].views[k].blk_pre);
            free(ss->lights[l].views[k].blk_bad);
            free(ss->lights[l].views[k].corr);
            free(ss->lights[l].views[k].corr_cell);
            free(ss->lights[l].views[k].corr_dg);
            free(ss->lights[l].views[k].corr_on);
            free(ss->lights[l].views[k].corr_face);
        }
    free(ss->lights);
    brm_sky_cache_free(&ss->sky_grid);
    brm_noise_grid_free(&ss->noise_grid);
    brm_bvh_free(ss->own_bvh);
    free(ss);
}

double brm_shadows_build_seconds(const brm_shadow_set *ss) { return ss->build_seconds; }

void brm_shadows_set_sky_rays(brm_shadow_set *ss, uint32_t rays)
{
    ss->sky_rays = rays < 1 ? 1 : rays > 4096 ? 4096 : rays;
}
size_t brm_shadows_bytes(const brm_shadow_set *ss) { return ss->bytes; }

void brm_shadows_drop_sky_cache(brm_shadow_set *ss) { brm_sky_cache_free(&ss->sky_grid); }

/* Unit direction from p toward light l and the distance to it (HUGE_VAL for directional). */
static brm_vec3 toward(const brm_light *l, brm_vec3 p, double *dist)
{
    if (l->type == BRM_LIGHT_DIRECTIONAL) {
        *dist = HUGE_VAL;
        return brm_scale(brm_norm(l->direction), -1.0);
    }
    brm_vec3 t = brm_sub(l->position, p);
    *dist = brm_len(t);
    return *dist > 0.0 ? brm_scale(t, 1.0 / *dist) : brm_v3(0, 1, 0);
}

/* Rays over the reference's filter footprint: the points of the Fibonacci lattice with
 * F_11 = 89 points and generator F_10 = 55 (Niederreiter 1992; Sloan & Joe 1994), which has no
 * rows for a straight shadow edge to line up with (a 5×5 grid gave steps of 0.2 there). */
#define REF_FILTER_N 89
#define REF_FILTER_G 55

/* With a surface normal (non-NULL n), each footprint point is moved along its ray onto the
 * surface's plane through p: the filter then spreads over the receiving surface, as a map's
 * filter does with its slope-scaled bias, instead of reaching below a surface the light meets at
 * an angle and finding the surface itself in the way. */
static double reference_visibility_on(const brm_shadow_set *ss, uint32_t l, brm_vec3 p, const brm_vec3 *n)
{
    const brm_light *light = &ss->scene->lights[l];
    const light_shadow *ls = &ss->lights[l];
    double dist;
    brm_vec3 dir = toward(light, p, &dist);
    if (ls->view_count == 0 || ls->softness <= 0.0) {
        double tmax = isfinite(dist) ? dist - ss->eps : HUGE_VAL;
        return brm_bvh_occluded(ss->bvh, p, dir, ss->eps, tmax) ? 0.0 : 1.0;
    }
    const shadow_view *v = brm_shadow_pick_view(ls, p);
    double half = ls->softness * v->texel, scale = 1.0;
    if (v->kind == BRM_VIEW_PERSP) {
        scale = brm_dot(brm_sub(p, v->origin), v->f); /* tan units to metres at p's depth */
        if (scale <= 0.0) scale = 0.0;
    }
    int lit = 0;
    for (int i = 0; i < REF_FILTER_N; i++) {
            double fx = (i + 0.5) / REF_FILTER_N, fy = ((double)((i * REF_FILTER_G) % REF_FILTER_N) + 0.5) / REF_FILTER_N;
            double a = half * (2.0 * fx - 1.0) * scale;
            double b = half * (2.0 * fy - 1.0) * scale;
            brm_vec3 q = brm_add(p, brm_add(brm_scale(v->u, a), brm_scale(v->v, b)));
            double qd;
            brm_vec3 qdir = toward(light, q, &qd);
            if (n) {
                double dn = brm_dot(qdir, *n);
                if (dn > 1e-6) {
                    double t = -brm_dot(brm_sub(q, p), *n) / dn;
                    q = brm_madd(q, qdir, t);
                    qdir = toward(light, q, &qd);
                }
            }
            double tmax = isfinite(qd) ? qd - ss->eps : HUGE_VAL;
            if (!brm_bvh_occluded(ss->bvh, q, qdir, ss->eps, tmax)) lit++;
        }
    return (double)lit / REF_FILTER_N;
}

static double reference_visibility(const brm_shadow_set *ss, uint32_t l, brm_vec3 p)
{
    return reference_visibility_on(ss, l, p, NULL);
}

int brm_shadow_classify(const brm_shadow_set *ss, uint32_t l, brm_aabb b)
{
    const brm_light *light = &ss->scene->lights[l];
    if (!light->shadow || ss->scene->object_count == 0) return 1;
    if (ss->opts.reference) return -1;
    const light_shadow *ls = &ss->lights[l];
    if (!ls->has_map) return 1;
    const shadow_view *v = &ls->views[0];
    if (ls->cube) {
        /* One face must see the whole box (its eight corners pick the same face). */
        v = NULL;
        for (int c = 0; c < 8; c++) {
            brm_vec3 p = brm_v3(c & 1 ? b.max.x : b.min.x, c & 2 ? b.max.y : b.min.y, c & 4 ? b.max.z : b.min.z);
            const shadow_view *w = brm_shadow_pick_view(ls, p);
            if (v && w != v) return -1;
            v = w;
        }
    }
    return brm_shadowmap_classify(v, b, ls->softness);
}

double brm_shadow_visibility(const brm_shadow_set *ss, uint32_t l, brm_vec3 p)
{
    const brm_light *light = &ss->scene->lights[l];
    if (!light->shadow || ss->scene->object_count == 0) return 1.0;
    if (ss->opts.reference) return reference_visibility(ss, l, p);
    const light_shadow *ls = &ss->lights[l];
    if (!ls->has_map) return 1.0;
    return brm_shadowmap_pcf(brm_shadow_pick_view(ls, p), p, ls->softness);
}

/* A map lookup for a point p of a surface of normal n, moved toward the light: a filter of
 * half width `softness` texels reaches softness + 1 texels sideways (with the bilinear step),
 * and over that reach a surface at angle theta to the light's rays climbs tan(theta) times as
 * far in depth, more than the maps' bias (sized for fog), so a lit surface would shadow
 * itself. The lookup moves that far toward the light, the receiver-side counterpart of the
 * slope-scaled bias (common practice, no source); tan capped at 4. */
static brm_vec3 lift_toward_light(const light_shadow *ls, const brm_light *light, brm_vec3 p, brm_vec3 n,
                                  double softness)
{
    double dist;
    brm_vec3 to = toward(light, p, &dist);
    double c = brm_dot(n, to);
    if (!(c > 0.0)) return p;
    const shadow_view *v = brm_shadow_pick_view(ls, p);
    double texel = v->kind == BRM_VIEW_ORTHO ? v->texel : v->texel * fmax(brm_dot(brm_sub(p, v->origin), v->f), 0.0);
    double tn = fmin(sqrt(fmax(0.0, 1.0 - c * c)) / c, 4.0);
    double lift = (softness + 1.0) * texel * tn;
    if (isfinite(dist)) lift = fmin(lift, 0.5 * dist);
    return brm_madd(p, to, lift);
}

double brm_shadow_visibility_surface(const brm_shadow_set *ss, uint32_t l, brm_vec3 p, brm_vec3 n)
{
    const brm_light *light = &ss->scene->lights[l];
    if (!light->shadow || ss->scene->object_count == 0) return 1.0;
    if (ss->opts.reference) return reference_visibility_on(ss, l, p, &n);
    const light_shadow *ls = &ss->lights[l];
    if (!ls->has_map) return 1.0;
    p = lift_toward_light(ls, light, p, n, ls->softness);
    return brm_shadowmap_pcf(brm_shadow_pick_view(ls, p), p, ls->softness);
}

double brm_shadow_visibility_surface_sharp(const brm_shadow_set *ss, uint32_t l, brm_vec3 p, brm_vec3 n)
{
    const brm_light *light = &ss->scene->lights[l];
    if (!light->shadow || ss->scene->object_count == 0) return 1.0;
    if (ss->opts.reference) return brm_shadow_visibility_sharp(ss, l, p);
    const light_shadow *ls = &ss->lights[l];
    if (!ls->has_map) return 1.0;
    p = lift_toward_light(ls, light, p, n, 0.5);
    return brm_shadowmap_pcf(brm_shadow_pick_view(ls, p), p, 0.5);
}

double brm_shadow_visibility_sharp(const brm_shadow_set *ss, uint32_t l, brm_vec3 p)
{
    const brm_light *light = &ss->scene->lights[l];
    if (!light->shadow || ss->scene->object_count == 0) return 1.0;
    if (ss->opts.reference) {
        double dist;
        brm_vec3 dir = toward(light, p, &dist);
        double tmax = isfinite(dist) ? dist - ss->eps : HUGE_VAL;
        return brm_bvh_occluded(ss->bvh, p, dir, ss->eps, tmax) ? 0.0 : 1.0;
    }
    const light_shadow *ls = &ss->lights[l];
    if (!ls->has_map) return 1.0;
    return brm_shadowmap_pcf(brm_shadow_pick_view(ls, p), p, 0.5);
}

/* Reference: composite Simpson from p toward the light, to the light or the fog-bounds exit. */
double brm_shadow_transmittance_march(const brm_shadow_set *ss, uint32_t l, brm_vec3 p)
{
    if (!ss->media.any) return 1.0;
    double dist;
    brm_vec3 dir = toward(&ss->scene->lights[l], p, &dist);
    media_info exact = ss->media;
    exact.noise_grid = NULL;
    return exp(-brm_optical_depth_segment(ss->scene, &exact, p, dir, 0.0, dist, ss->ref_step));
}

double brm_shadow_transmittance(const brm_shadow_set *ss, uint32_t l, brm_vec3 p)
{
    if (!ss->media.any) return 1.0;
    const light_shadow *ls = &ss->lights[l];
    double tau;
    if (ls->has_od && brm_od_lookup_light(ss->scene, ls, p, &tau)) return brm_exp_neg(tau);
    if (ss->opts.reference) return brm_shadow_transmittance_march(ss, l, p);
    /* Outside the grid or in a cell the build flagged: march, at the step the grids were
     * built with (Simpson at half the finest feature is well inside 1 %). */
    double dist;
    brm_vec3 dir = toward(&ss->scene->lights[l], p, &dist);
    return exp(-brm_optical_depth_segment(ss->scene, &ss->media, p, dir, 0.0, dist, ss->fast_step));
}

void brm_shadow_transmittance_batch(const brm_shadow_set *ss, uint32_t l, const brm_vec3 *p, uint32_t n, double *out)
{
    const light_shadow *ls = &ss->lights[l];
    if (!ss->media.any || !ls->has_od || ss->opts.reference) {
        for (uint32_t i = 0; i < n; i++) out[i] = brm_shadow_transmittance(ss, l, p[i]);
        return;
    }
    uint8_t slow[256];
    for (uint32_t i0 = 0; i0 < n; i0 += 256) {
        uint32_t m = n - i0 < 256 ? n - i0 : 256;
        brm_od_transmittance_batch(ss->scene, ls, p + i0, m, out + i0, slow);
        for (uint32_t i = 0; i < m; i++)
            if (slow[i]) out[i0 + i] = brm_shadow_transmittance(ss, l, p[i0 + i]);
    }
}

double brm_shadow_texel_size(const brm_shadow_set *ss, uint32_t l)
{
    const light_shadow *ls = &ss->lights[l];
    return ls->has_map ? ls->texel_size : 0.0;
}
