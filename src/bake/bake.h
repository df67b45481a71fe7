/* Baking one target: grid → occupancy → shadow maps → lighting per brick → .brv, streamed.
 *
 * Bricks are the unit of work: a brick's result depends only on the scene, the per-light maps
 * and its own index, so any number of workers give the same bytes. One writer appends the
 * bricks in brick order. The output is written to a temporary beside out_path and renamed only
 * when complete: a failed or interrupted bake leaves the previous file untouched. */
#ifndef BRM_BAKE_H
#define BRM_BAKE_H

#include <stdatomic.h>
#include <stdbool.h>
#include <stdint.h>

#include "scene/scene.h"

/* The bake revision: raised whenever the same inputs bake to different values (a fix or a
 * change of method in the baker), within one tool version as across them. It is part of every
 * target's input hash, so a build that upgrades brume re-bakes exactly what would now come out
 * differently, instead of keeping volumes baked the old way as up to date.
 * tests/bake/test_revision.c holds a digest of the values a fixed scene bakes to, and fails
 * when they change while this number does not.
 *   1  the baker up to this session's start
 *   2  lit surfaces no longer shadow themselves in the maps: probes' bounce light */
#define BRM_BAKE_REVISION 2

typedef void (*brm_progress_fn)(void *user, uint64_t done, uint64_t total);

typedef struct brm_bake_opts {
    int threads;                /* 0 = all cores */
    bool reference;             /* exact, slow: rays for visibility, marched transmittance */
    uint64_t max_memory;        /* bytes; 0 = half the machine's RAM */
    const atomic_int *cancel;   /* polled between bricks; NULL = never */
    brm_progress_fn progress;   /* called from the writer thread; may be NULL */
    void *progress_user;
} brm_bake_opts;

typedef struct brm_bake_stats {
    uint64_t cells;             /* cells (froxels, probes) baked */
    uint64_t bytes;             /* size of the written file */
    double seconds;             /* wall time of the whole bake */
    double shadow_seconds;      /* of which building shadow and optical-depth maps */
    uint64_t light_samples;     /* sample·light pairs evaluated (cell·light·samples) */
    uint64_t rays;              /* probes: rays traced from the probes */
    uint64_t estimated_memory;  /* the estimate checked against the budget */
} brm_bake_stats;

/* Bakes target t of s into out_path. BRM_E_BUDGET when the estimate exceeds the budget (the
 * message gives the cell count that would fit), BRM_E_INTERRUPTED when cancelled. */
brm_status brm_bake_target(const brm_scene *s, uint32_t t, const brm_bake_opts *o, const char *out_path,
                           brm_bake_stats *stats, brm_diag *d);

/* Estimated peak memory (bytes) of baking target t. */
uint64_t brm_bake_estimate_memory(const brm_scene *s, uint32_t t, const brm_bake_opts *o);

/* Estimated work: sample·light pairs (before culling by range). */
uint64_t brm_bake_estimate_work(const brm_scene *s, uint32_t t);

/* SHA-256 (hex) of everything target t's bake depends on: the scene's shared part, the target's
 * own part, every referenced file's content hash, the settings that change results and the tool
 * version. Stored in the volume's metadata; equal hashes mean the output is up to date. */
void brm_bake_input_hash(const brm_scene *s, uint32_t t, const brm_bake_opts *o, char hex[65]);

/* Half the physical memory (the default budget). */
uint64_t brm_default_memory_budget(void);

#endif
