/* Warnings for legal but suspicious scenes (rules and thresholds in warnings.h). */
#include "bake/warnings.h"

#include <math.h>
#include <string.h>

#include "base/threads.h"
#include "scene/light.h"
#include "scene/media.h"
#include "shadow/shadow.h"
#include "shadow/shadow_internal.h" /* brm_shadowmap_plan: the map the bake will build, unbuilt */
#include "voxel/grid.h"
#include "voxel/voxelize.h"

static double min_edge(brm_vec3 c) { return fmin(c.x, fmin(c.y, c.z)); }
static double max_edge(brm_vec3 c) { return fmax(c.x, fmax(c.y, c.z)); }

brm_aabb brm_target_lit_bounds(const brm_scene *s, uint32_t t)
{
    brm_grid g;
    if (brm_grid_init(&g, &s->targets[t], NULL) != BRM_OK) return brm_aabb_empty();
    brm_aabb b = brm_grid_bounds(&g);
    if (g.kind == BRM_GRID_PROBES) {
        brm_aabb_union(&b, s->fog_bounds);
        for (uint32_t i = 0; i < s->object_count; i++) brm_aabb_union(&b, s->objects[i].bounds);
    }
    brm_grid_free(&g);
    return b;
}

bool brm_light_reaches_target(const brm_scene *s, uint32_t l, uint32_t t)
{
    brm_aabb b = brm_target_lit_bounds(s, t);
    if (!(b.min.x <= b.max.x)) return false;
    return brm_light_reaches(&s->lights[l], b);
}

void brm_scene_warnings(const brm_scene *s, brm_diag *d)
{
    for (uint32_t l = 0; l < s->light_count; l++) {
        bool any = false;
        for (uint32_t t = 0; t < s->target_count && !any; t++) any = brm_light_reaches_target(s, l, t);
        if (!any)
            brm_diag_warn(d, "%s: %s: the light reaches none of the %u target(s) (its range or cone misses them); "
                          "move it, widen \"range_m\" or the cone, or remove it",
                          s->path, s->lights[l].json_path, s->target_count);
    }
}

/* The cell size that the texel is compared with, and the one the samples rule uses. */
static void cell_sizes(const brm_grid *g, double *small, double *large)
{
    if (g->kind == BRM_GRID_FRUSTUM) {
        /* Froxels grow with depth; at the far plane they are widest across the image. */
        double wx = 2.0 * g->cam.far * g->tan_half_x / g->n[0], wy = 2.0 * g->cam.far * g->tan_half_y / g->n[1];
        double dz = g->slice_depths[g->n[2]] - g->slice_depths[g->n[2] - 1];
        *small = fmin(wx, wy);
        *large = fmax(fmax(wx, wy), dz);
        return;
    }
    *small = min_edge(g->cell);
    *large = max_edge(g->cell);
}

/* Fraction of a lattice of points over the target inside solid geometry. */
static double solid_fraction(const brm_scene *s, const brm_grid *g)
{
    if (s->object_count == 0) return 0.0;
    brm_solid_index *x = NULL;
    if (brm_solid_index_build(s, &x, NULL) != BRM_OK) return 0.0;
    uint32_t m[3];
    for (int a = 0; a < 3; a++) m[a] = g->n[a] < BRM_WARN_SOLID_LATTICE ? g->n[a] : BRM_WARN_SOLID_LATTICE;
    uint64_t in = 0, total = 0;
    for (uint32_t k = 0; k < m[2]; k++)
        for (uint32_t j = 0; j < m[1]; j++)
            for (uint32_t i = 0; i < m[0]; i++) {
                double f[3];
                uint32_t q[3] = {i, j, k};
                for (int a = 0; a < 3; a++) {
                    /* Probes: lattice points themselves; cells: their centres. */
                    uint32_t c = (uint32_t)(((uint64_t)q[a] * g->n[a]) / m[a]);
                    f[a] = g->kind == BRM_GRID_PROBES ? (double)c : (double)c + 0.5;
                }
                in += brm_solid_index_query(x, brm_grid_point(g, f[0], f[1], f[2])) ? 1 : 0;
                total++;
            }
    brm_solid_index_free(x);
    return total ? (double)in / (double)total : 0.0;
}

void brm_target_warnings(const brm_scene *s, uint32_t t, const brm_bake_opts *o, brm_diag *d)
{
    const brm_target *tg = &s->targets[t];
    brm_grid g;
    if (brm_grid_init(&g, tg, NULL) != BRM_OK) return;
    const brm_aabb gb = brm_grid_bounds(&g);
    const bool cells = g.kind != BRM_GRID_PROBES;

    if (cells && !brm_media_any_in(s, gb))
        brm_diag_warn(d, "%s: %s (\"%s\"): no fog anywhere inside the target (no medium reaches it%s); "
                      "add a medium that covers it or check \"fog_bounds\"",
                      s->path, tg->json_path, tg->name, s->medium_count ? "" : ": the scene has no media");

    double small = 0.0, large = 0.0;
    if (cells) cell_sizes(&g, &small, &large);

    /* The shadow maps the bake will build, planned with the same options (no rasterizing). */
    double fine_texel = HUGE_VAL; /* the finest map among shadowing lights that reach it */
    uint32_t fine_light = 0;
    if (cells && !o->reference && s->object_count > 0) {
        brm_shadow_opts so = {brm_target_lit_bounds(s, t), min_edge(g.kind == BRM_GRID_FRUSTUM ? brm_v3(0, 0, 0) : g.cell),
                              o->threads > 0 ? o->threads : brm_cpu_count(), false, NULL, false, 1.0};
        for (uint32_t l = 0; l < s->light_count; l++) {
            light_shadow ls;
            brm_shadowmap_plan(s, &so, &ls, &s->lights[l]);
            if (!ls.active || !ls.has_map) continue;
            if (ls.texel_size < fine_texel) {
                fine_texel = ls.texel_size;
                fine_light = l;
            }
            if (ls.texel_size > small * 1.001)
                brm_diag_warn(d, "%s: %s (\"%s\"): the shadow map of %s has texels of %.3g m, larger than the "
                              "target's cells (%.3g m): shadow edges finer than a texel are lost; raise "
                              "%s.shadow.resolution%s",
                              s->path, tg->json_path, tg->name, s->lights[l].json_path, ls.texel_size, small,
                              s->lights[l].json_path,
                              s->lights[l].shadow_resolution ? " or leave it out (automatic)" : " or use fewer cells");
        }
    }

    if (cells) {
        double frac = solid_fraction(s, &g);
        if (frac > BRM_WARN_SOLID_FRACTION)
            brm_diag_warn(d, "%s: %s (\"%s\"): the target is mostly inside solid geometry (%.0f %% of sampled "
                          "points); move or shrink its %s",
                          s->path, tg->json_path, tg->name, 100.0 * frac,
                          g.kind == BRM_GRID_FRUSTUM ? "camera" : "box");
    } else {
        double frac = solid_fraction(s, &g);
        if (frac > BRM_WARN_SOLID_FRACTION)
            brm_diag_warn(d, "%s: %s (\"%s\"): most probes are inside solid geometry (%.0f %% of sampled probes); "
                          "move or shrink the probe box, or set \"relocate\": true",
                          s->path, tg->json_path, tg->name, 100.0 * frac);
    }

    /* Common practice, no source: fewer than 4 jittered points per cell resolve a light shaft
     * narrower than the cell only by chance, so coarse cells need more samples. */
    if (cells && tg->samples < BRM_WARN_MIN_SAMPLES) {
        if (large > BRM_WARN_COARSE_CELL_M)
            brm_diag_warn(d, "%s: %s (\"%s\"): %u sample(s) per cell with cells up to %.3g m: light shafts "
                          "narrower than a cell alias; use \"samples\" >= %u or cells of at most %.3g m",
                          s->path, tg->json_path, tg->name, tg->samples, large, BRM_WARN_MIN_SAMPLES,
                          BRM_WARN_COARSE_CELL_M);
        else if (fine_texel < HUGE_VAL && large > BRM_WARN_TEXELS_PER_SHAFT * fine_texel)
            brm_diag_warn(d, "%s: %s (\"%s\"): %u sample(s) per cell with cells up to %.3g m, larger than the "
                          "%.3g m shadow texels of %s (over %.0f texels): shafts narrower than a cell alias; use \"samples\" >= %u",
                          s->path, tg->json_path, tg->name, tg->samples, large, fine_texel,
                          s->lights[fine_light].json_path, BRM_WARN_TEXELS_PER_SHAFT, BRM_WARN_MIN_SAMPLES);
    }
    brm_grid_free(&g);
}
