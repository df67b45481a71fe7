/* Bake throughput of a world target: cell·light·samples per second at 1 and 2 threads, the
 * exact reference path's throughput at equal samples, and the process's peak memory.
 *
 *   build/bench/bench_bake [SCENE.json [TARGET]]     (default: the demo scene's first world target)
 *
 * The reference path runs on the same target with its cells divided by 4 per axis (it is slow
 * by design); throughputs are per nominal cell·light·sample (every cell, sample and light,
 * culled or not), so the ratio compares like with like. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <unistd.h>

#include "bake/bake.h"
#include "base/threads.h"
#include "scene/scene.h"

static double run(const brm_scene *s, uint32_t t, int threads, bool reference, const char *out, brm_bake_stats *st)
{
    brm_bake_opts o;
    memset(&o, 0, sizeof o);
    o.threads = threads;
    o.reference = reference;
    brm_diag d;
    brm_diag_init(&d);
    if (brm_bake_target(s, t, &o, out, st, &d) != BRM_OK) {
        fprintf(stderr, "bench_bake: %s\n", d.message);
        exit(1);
    }
    /* Nominal cell·light·samples: every cell, sample and light, whether the kernel ran the light
     * or culling skipped it (the work asked for, the same for the fast and the reference path). */
    const brm_target *tg = &s->targets[t];
    double nominal = (double)tg->cells[0] * tg->cells[1] * tg->cells[2] * tg->samples * s->light_count;
    return nominal / st->seconds;
}

int main(int argc, char **argv)
{
    const char *path = argc > 1 ? argv[1] : BRUME_SOURCE_ROOT "/scenes/saltworks-dusk.json";
    brm_scene *s = NULL;
    brm_diag d;
    brm_diag_init(&d);
    if (brm_scene_load(path, &s, &d) != BRM_OK) {
        fprintf(stderr, "bench_bake: %s\n", d.message);
        return 1;
    }
    int t = -1;
    for (uint32_t i = 0; i < s->target_count; i++)
        if ((argc > 2 && strcmp(s->targets[i].name, argv[2]) == 0) || (argc <= 2 && s->targets[i].grid == BRM_GRID_WORLD)) {
            t = (int)i;
            break;
        }
    if (t < 0) {
        fprintf(stderr, "bench_bake: no such world target\n");
        return 1;
    }
    brm_target *tg = &s->targets[t];
    char out[64];
    snprintf(out, sizeof out, "/tmp/bench-bake-%d.brv", (int)getpid());
    printf("scene %s, target %s: %ux%ux%u cells, %u samples, %u lights%s\n", s->name, tg->name, tg->cells[0], tg->cells[1],
           tg->cells[2], tg->samples, s->light_count, s->sky.present ? " + sky" : "");
    brm_bake_stats a, b, r;
    double r1 = run(s, (uint32_t)t, 1, false, out, &a);
    double r2 = run(s, (uint32_t)t, 2, false, out, &b);
    /* Per core including the maps, and the lighting phase alone (the bake without its shadow,
     * optical-depth and sky maps). */
    printf("fast -j1: %8.3f s (shadow maps %.3f s), %6.2f M cell-light-samples/s (%.2f M/s in the lighting phase); "
           "%.2f M evaluated after culling\n",
           a.seconds, a.shadow_seconds, r1 / 1e6, r1 * a.seconds / (a.seconds - a.shadow_seconds) / 1e6,
           (double)a.light_samples / 1e6);
    printf("fast -j2: %8.3f s (shadow maps %.3f s), %6.2f M cell-light-samples/s, %.2f M per core, speed-up %.2fx\n",
           b.seconds, b.shadow_seconds, r2 / 1e6, r2 / 2e6, a.seconds / b.seconds);
    for (int ax = 0; ax < 3; ax++) tg->cells[ax] = tg->cells[ax] / 4 ? tg->cells[ax] / 4 : 1;
    double rr = run(s, (uint32_t)t, 1, true, out, &r);
    printf("reference -j1 (%ux%ux%u cells): %8.3f s, %6.3f M cell-light-samples/s; fast path %.1fx faster per "
           "cell-light-sample\n",
           tg->cells[0], tg->cells[1], tg->cells[2], r.seconds, rr / 1e6, r1 / rr);
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    printf("peak memory (whole process): %.1f MiB; estimate for the full target: %.1f MiB\n", ru.ru_maxrss / 1024.0,
           a.estimated_memory / 1048576.0);
    printf("output: %.1f KiB\n", a.bytes / 1024.0);
    unlink(out);
    brm_scene_free(s);
    return 0;
}
