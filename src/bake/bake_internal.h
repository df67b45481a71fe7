/* Internals shared by the bakers of the three grid kinds (not part of the library's API). */
#ifndef BRM_BAKE_INTERNAL_H
#define BRM_BAKE_INTERNAL_H

#include "bake/bake.h"
#include "brume/brv_write.h"
#include "shadow/shadow.h"
#include "voxel/bvh.h"
#include "voxel/grid.h"

/* A unit is what one worker computes at once: a brick (world, probes) or a column of bricks
 * along depth (frustum, whose integration runs front to back). Its output holds its bricks one
 * after another, each channel-major over the brick's clipped extent, at a stride of
 * BRM_BRICK³ × channel_count floats. Units run in parallel; the bricks are written in unit
 * order by one writer, so the file does not depend on the thread count. */
typedef struct brm_plan {
    uint32_t channel_count;
    brv_channel_desc channels[40];
    uint32_t unit_count;
    uint32_t bricks_per_unit;
    void (*compute)(void *ctx, uint32_t unit, int worker, float *out);
    uint32_t (*brick_of)(const brm_grid *g, uint32_t unit, uint32_t i);
    void *ctx;
} brm_plan;

void brm_plan_channel(brm_plan *pl, const char *name, const char *units, brv_encoding e);
uint32_t brm_plan_brick_is_unit(const brm_grid *g, uint32_t unit, uint32_t i);

/* Runs the plan and writes the volume to out_path atomically. */
brm_status brm_run_plan(const brm_scene *s, uint32_t t, const brm_bake_opts *o, const brm_grid *g,
                        const brm_plan *pl, const char *out_path, brm_bake_stats *stats, brm_diag *d);

/* The probe baker (probes.c), given the scene's ray caster and the shadow set. */
brm_status brm_bake_probes(const brm_scene *s, uint32_t t, const brm_bake_opts *o, const brm_grid *g,
                           const brm_bvh *bvh, const brm_shadow_set *ss, const char *out_path,
                           brm_bake_stats *stats, brm_diag *d);

/* Bytes the probe baker allocates beyond the grid, maps and ray caster (its surface cache). */
uint64_t brm_probes_memory(const brm_scene *s, uint32_t t, const brm_grid *g, const brm_bake_opts *o);

#endif
