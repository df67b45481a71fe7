/* Frustum and probe bakes at the sizes their issues name, on the demo scene's geometry:
 *
 *   build/bench/bench_targets [frustum|probes] [-j N] [-o OUT.brv] [nofog|fog] [lights9] [SCENE.json]
 *
 * (a part's name bakes that part only; the lights are set up the same way either way;
 * -j N runs that thread count only, -o keeps the frustum bake's file for comparing bytes;
 * nofog or fog runs that half of the probe part only, whose file -o then keeps)
 *
 * - frustum: 160×90×128 froxels, 4 samples, one sun and eight local lights of 15 m range spread
 *   through the frustum, all casting shadows, the scene's fog: froxel·light·samples per second
 *   and wall time (shadow maps included) at 1 and 2 threads;
 * - probes: a 32×8×32 lattice at 0.5 m, 256 rays, bounce on, lit by the demo's own lights (or
 *   with lights9 by the frustum part's nine), without fog and with it: probes and rays per second
 *   at 1 and 2 threads. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "bake/bake.h"
#include "scene/light.h"
#include "scene/media.h"
#include "scene/scene.h"
#include "bench_lights.h"

static brm_bake_stats run(const brm_scene *s, uint32_t t, int threads, const char *out)
{
    brm_bake_opts o;
    memset(&o, 0, sizeof o);
    o.threads = threads;
    brm_diag d;
    brm_diag_init(&d);
    brm_bake_stats st;
    if (brm_bake_target(s, t, &o, out, &st, &d) != BRM_OK) {
        fprintf(stderr, "bench_targets: %s\n", d.message);
        exit(1);
    }
    return st;
}

static int find(const brm_scene *s, brm_grid_kind k)
{
    for (uint32_t i = 0; i < s->target_count; i++)
        if (s->targets[i].grid == k) return (int)i;
    return -1;
}

int main(int argc, char **argv)
{
    int do_frustum = 1, do_probes = 1;
    if (argc > 1 && strcmp(argv[1], "frustum") == 0) do_probes = 0, argc--, argv++;
    else if (argc > 1 && strcmp(argv[1], "probes") == 0) do_frustum = 0, argc--, argv++;
    int th_lo = 1, th_hi = 2;
    const char *keep = NULL;
    while (argc > 2 && (strcmp(argv[1], "-j") == 0 || strcmp(argv[1], "-o") == 0)) {
        if (argv[1][1] == 'j') th_lo = th_hi = atoi(argv[2]);
        else keep = argv[2];
        argc -= 2, argv += 2;
    }
    if (th_lo < 1) th_lo = th_hi = 1;
    int fog_lo = 0, fog_hi = 1;   /* probes: nofog or fog runs that half only */
    if (argc > 1 && strcmp(argv[1], "nofog") == 0) fog_hi = 0, argc--, argv++;
    else if (argc > 1 && strcmp(argv[1], "fog") == 0) fog_lo = 1, argc--, argv++;
    int probe_lights9 = 0;        /* probes: lights9 lights them with the frustum part's nine */
    if (argc > 1 && strcmp(argv[1], "lights9") == 0) probe_lights9 = 1, argc--, argv++;
    const char *path = argc > 1 ? argv[1] : BRUME_SOURCE_ROOT "/scenes/saltworks-dusk.json";
    brm_diag d;
    brm_diag_init(&d);
    brm_scene *s = NULL;
    if (brm_scene_load(path, &s, &d) != BRM_OK) {
        fprintf(stderr, "bench_targets: %s\n", d.message);
        return 1;
    }
    char out[64];
    snprintf(out, sizeof out, "/tmp/bench-targets-%d.brv", (int)getpid());

    /* ---- frustum ---- */
    int f = find(s, BRM_GRID_FRUSTUM);
    if (f < 0) {
        fprintf(stderr, "bench_targets: the scene has no frustum target\n");
        return 1;
    }
    brm_target *ft = &s->targets[f];
    ft->cells[0] = 160, ft->cells[1] = 90, ft->cells[2] = 128, ft->samples = 4;
    /* The demo's own lights, for the probe part (issue: "over the demo scene"); the frustum part
     * gets the sun and eight point lights of bench_lights.h. */
    uint32_t demo_light_count = s->light_count;
    brm_light *demo_lights = malloc((demo_light_count ? demo_light_count : 1) * sizeof *demo_lights);
    if (!demo_lights) return 1;
    memcpy(demo_lights, s->lights, demo_light_count * sizeof *demo_lights);
    bench_frustum_lights(s, ft);
    if (do_frustum)
        printf("frustum %ux%ux%u, %u samples, 1 sun + 8 point lights (15 m), shadows on, fog of the demo\n",
               ft->cells[0], ft->cells[1], ft->cells[2], ft->samples);
    for (int th = th_lo; th <= th_hi && do_frustum; th++) {
        brm_bake_stats st = run(s, (uint32_t)f, th, keep ? keep : out);
        /* Evaluated: the lights the kernel ran after culling; nominal: every froxel, light and
         * sample (160·90·128·4·9), which culling does not change. */
        double nominal = (double)ft->cells[0] * ft->cells[1] * ft->cells[2] * ft->samples * 9;
        printf("  -j%d: %6.2f s (shadow maps %.2f s, froxels %.2f s), %6.2f M froxel-light-samples/s evaluated, "
               "%.2f M/s nominal (%.2f M/s nominal in the froxel phase)\n",
               th, st.seconds, st.shadow_seconds, st.seconds - st.shadow_seconds, st.light_samples / st.seconds / 1e6,
               nominal / st.seconds / 1e6, nominal / (st.seconds - st.shadow_seconds) / 1e6);
    }

    /* ---- probes ---- */
    int p = find(s, BRM_GRID_PROBES);
    if (p < 0) {
        fprintf(stderr, "bench_targets: the scene has no probe target\n");
        return 1;
    }
    brm_target *pt = &s->targets[p];
    pt->box.min = brm_v3(4.25, 0.5, 0.25);
    pt->box.max = brm_v3(4.25 + 31 * 0.5, 0.5 + 7 * 0.5, 0.25 + 31 * 0.5);
    pt->spacing_m = 0.5;
    pt->rays = 256;
    if (!probe_lights9) {
        memcpy(s->lights, demo_lights, demo_light_count * sizeof *demo_lights);
        s->light_count = demo_light_count;
    }
    free(demo_lights);
    uint32_t media = s->medium_count;
    for (int fog = fog_lo; fog <= fog_hi && do_probes; fog++) {
        s->medium_count = fog ? media : 0;
        printf("probes 32x8x32 at 0.5 m, 256 rays, bounce on, %u lights (%s), %s\n", s->light_count,
               probe_lights9 ? "the frustum part's sun and eight point lights" : "the demo's own",
               fog ? "with the demo's fog" : "without fog");
        for (int th = th_lo; th <= th_hi; th++) {
            brm_bake_stats st = run(s, (uint32_t)p, th, keep ? keep : out);
            /* Rays per second over the whole bake, and over the probe stage alone (the bake
             * without its shadow and optical-depth maps). */
            printf("  -j%d: %6.2f s (shadow maps %.2f s), %7.0f probes/s, %6.2f M rays/s (probe rays only; %.2f M/s in "
                   "the probe stage)\n",
                   th, st.seconds, st.shadow_seconds, st.cells / st.seconds, st.rays / st.seconds / 1e6,
                   st.rays / (st.seconds - st.shadow_seconds) / 1e6);
        }
    }
    s->medium_count = media;
    unlink(out);
    brm_scene_free(s);
    return 0;
}
