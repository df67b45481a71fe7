/* Preview speed: a 1280×720 picture of a target at 1 and 2 threads, split into the setup (ray
 * caster, the preview's shadow set with its optical-depth grids, decoding the volume) and the
 * pixels; the exact lighting path against the fast one at 320×180; and the same camera with
 * the scene's media taken out (no light loss through fog, no fog laid over), to show what the
 * fog costs.
 *
 *   build/bench/bench_preview [SCENE.json [TARGET [VOLUME.brv]]]
 *
 * Default: the demo scene's first frustum target. Without a volume the target is baked first
 * into a temporary file (not timed). World and probe targets get a camera from the middle of
 * the target's box toward its far corner. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "bake/bake.h"
#include "base/threads.h"
#include "brume/brv.h"
#include "scene/media.h"
#include "scene/scene.h"
#include "view/preview.h"

static void die(const char *what, const brm_diag *d)
{
    fprintf(stderr, "bench_preview: %s: %s\n", what, d->message);
    exit(1);
}

static brm_preview render(const brm_scene *s, uint32_t t, const brv_volume *v, int threads, uint32_t width,
                          bool reference)
{
    const brm_target *tg = &s->targets[t];
    brm_preview_opts o;
    memset(&o, 0, sizeof o);
    o.width = width;
    o.threads = threads;
    o.reference = reference;
    if (tg->grid != BRM_GRID_FRUSTUM) {
        o.camera_set = true;
        o.from = brm_scale(brm_add(tg->box.min, tg->box.max), 0.5);
        o.look_at = tg->box.max;
        o.aspect = 16.0 / 9.0;
    } else {
        o.height = width * 9 / 16;
    }
    brm_preview p;
    brm_diag d;
    brm_diag_init(&d);
    if (brm_preview_render(s, t, v, "volume", &o, &p, &d) != BRM_OK) die("preview", &d);
    return p;
}

int main(int argc, char **argv)
{
    const char *path = argc > 1 ? argv[1] : BRUME_SOURCE_ROOT "/scenes/saltworks-dusk.json";
    brm_scene *s = NULL;
    brm_diag d;
    brm_diag_init(&d);
    if (brm_scene_load(path, &s, &d) != BRM_OK) die(path, &d);
    int t = -1;
    for (uint32_t i = 0; i < s->target_count && t < 0; i++)
        if (argc > 2 ? strcmp(s->targets[i].name, argv[2]) == 0 : s->targets[i].grid == BRM_GRID_FRUSTUM) t = (int)i;
    if (t < 0) {
        fprintf(stderr, "bench_preview: no such target\n");
        return 1;
    }
    char tmp[64] = "";
    const char *vol_path = argc > 3 ? argv[3] : NULL;
    if (!vol_path) {
        snprintf(tmp, sizeof tmp, "/tmp/bench-preview-%d.brv", (int)getpid());
        brm_bake_opts bo;
        memset(&bo, 0, sizeof bo);
        bo.threads = 2;
        if (brm_bake_target(s, (uint32_t)t, &bo, tmp, NULL, &d) != BRM_OK) die("bake", &d);
        vol_path = tmp;
    }
    brv_volume *v = NULL;
    if (brv_open_file(vol_path, NULL, &v) != BRV_OK) {
        fprintf(stderr, "bench_preview: cannot open %s\n", vol_path);
        return 1;
    }
    const brm_target *tg = &s->targets[t];
    printf("scene %s, target %s (%s), %u lights%s, %u media, %u triangles\n", s->name, tg->name,
           tg->grid == BRM_GRID_WORLD ? "world" : tg->grid == BRM_GRID_FRUSTUM ? "frustum" : "probes", s->light_count,
           s->sky.present ? " + sky" : "", s->medium_count, s->tri_count);
    for (int threads = 1; threads <= 2; threads++) {
        brm_preview p = render(s, (uint32_t)t, v, threads, 1280, false);
        printf("  fogged   -j %d: %ux%u in %.3f s (setup %.3f s, pixels %.3f s, %.2f Mpixel/s)\n", threads, p.w, p.h,
               p.seconds, p.setup_seconds, p.seconds - p.setup_seconds,
               (double)p.w * p.h / (p.seconds - p.setup_seconds) * 1e-6);
        brm_preview_free(&p);
    }
    /* The exact path (visibility by rays, transmittance marched) against the fast one, at
     * 320×180 and 2 threads: pixels per second of each and the largest difference. */
    {
        brm_preview f = render(s, (uint32_t)t, v, 2, 320, false), r = render(s, (uint32_t)t, v, 2, 320, true);
        double fr = (double)f.w * f.h / (f.seconds - f.setup_seconds), rr = (double)r.w * r.h / (r.seconds - r.setup_seconds);
        double sum = 0.0, dsum = 0.0;
        for (size_t i = 0; i < (size_t)f.w * f.h * 3; i++) sum += r.fog[i], dsum += fabs((double)f.fog[i] - r.fog[i]);
        printf("  exact path -j 2 at 320x180: %.3f s pixels (fast %.3f s): fast is %.1fx; mean |fast - exact| = %.2f %% of the mean\n",
               r.seconds - r.setup_seconds, f.seconds - f.setup_seconds, fr / rr, 100.0 * dsum / (sum > 0 ? sum : 1));
        brm_preview_free(&f);
        brm_preview_free(&r);
    }
    /* The same scene without media: plain shading, no fog volume. */
    uint32_t media = s->medium_count;
    s->medium_count = 0;
    if (brm_media_prepare(s, &d) != BRM_OK) die("media", &d);
    for (int threads = 1; threads <= 2; threads++) {
        brm_preview p = render(s, (uint32_t)t, NULL, threads, 1280, false);
        printf("  no media -j %d: %ux%u in %.3f s (setup %.3f s, pixels %.3f s, %.2f Mpixel/s)\n", threads, p.w, p.h,
               p.seconds, p.setup_seconds, p.seconds - p.setup_seconds,
               (double)p.w * p.h / (p.seconds - p.setup_seconds) * 1e-6);
        brm_preview_free(&p);
    }
    s->medium_count = media;
    brv_free(v);
    if (tmp[0]) unlink(tmp);
    brm_scene_free(s);
    return 0;
}
