/* Preview speed: a 1280×720 picture of a target at 1 and 2 threads, split into the setup (ray
 * caster, the preview's shadow set with its optical-depth grids, decoding the volume) and the
 * pixels; the exact lighting path against the fast one at 320×180; and the same camera with
 * the scene's media taken out (no light loss through fog, no fog laid over), to show what the
 * fog costs.
 *
 *   build/bench/bench_preview [-j N [-r REPS]] [--save OUT.ppm] [--against OLD.ppm] [--sky-rays N]
 *                             [SCENE.json [TARGET [VOLUME.brv]]]
 *
 * Default: the demo scene's first frustum target. Without a volume the target is baked first
 * into a temporary file (not timed); a volume path that does not exist yet is baked into and
 * kept. World and probe targets get a camera from the middle of the target's box toward its
 * far corner. Times are wall seconds and, in brackets, process CPU seconds (every thread):
 * on a shared machine the CPU time of -j 1 is the steadier figure.
 *   -j N        only the fogged 1280x720 picture at N threads, REPS times (default 5), with
 *               the median of each figure
 *   --save      writes the (last) fogged 1280x720 picture as PPM
 *   --against   compares it with an earlier PPM of the same size: mean and largest
 *               difference of the 8-bit samples, and how many differ
 *   --sky-rays  the sky's occlusion from this many rays at every pixel, unfiltered (a
 *               converged picture to compare the fast estimate with) */
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

static uint32_t sky_rays; /* --sky-rays: 0, or rays per pixel, unfiltered */

static brm_preview render(const brm_scene *s, uint32_t t, const brv_volume *v, int threads, uint32_t width,
                          bool reference)
{
    const brm_target *tg = &s->targets[t];
    brm_preview_opts o;
    memset(&o, 0, sizeof o);
    o.width = width;
    o.threads = threads;
    o.reference = reference;
    o.sky_rays = reference ? 256 : sky_rays;
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

static void print_run(const char *what, int threads, const brm_preview *p)
{
    printf("  %-8s -j %d: %ux%u in %.3f s [%.3f] (setup %.3f s [%.3f], pixels %.3f s [%.3f], %.2f Mpixel/s)\n", what,
           threads, p->w, p->h, p->seconds, p->cpu_seconds, p->setup_seconds, p->setup_cpu_seconds,
           p->seconds - p->setup_seconds, p->cpu_seconds - p->setup_cpu_seconds,
           (double)p->w * p->h / (p->seconds - p->setup_seconds) * 1e-6);
}

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double median(double *v, int n)
{
    qsort(v, (size_t)n, sizeof *v, cmp_double);
    return n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

/* A P6 file's samples (maxval 255): whitespace-separated header, no comments expected. */
static uint8_t *read_ppm(const char *path, unsigned *w, unsigned *h)
{
    FILE *f = fopen(path, "rb");
    if (!f) return NULL;
    unsigned mv = 0;
    uint8_t *px = NULL;
    if (fscanf(f, "P6 %u %u %u", w, h, &mv) == 3 && mv == 255 && fgetc(f) != EOF) {
        size_t n = (size_t)*w * *h * 3;
        px = malloc(n ? n : 1);
        if (px && fread(px, 1, n, f) != n) free(px), px = NULL;
    }
    fclose(f);
    return px;
}

static void save_and_compare(const brm_preview *p, const char *save, const char *against)
{
    uint8_t *bytes;
    size_t len;
    brm_diag d;
    brm_diag_init(&d);
    if (brm_preview_encode(p, true, &bytes, &len, &d) != BRM_OK) die("encode", &d);
    if (save) {
        FILE *f = fopen(save, "wb");
        if (!f || fwrite(bytes, 1, len, f) != len || fclose(f) != 0) {
            fprintf(stderr, "bench_preview: cannot write %s\n", save);
            exit(1);
        }
    }
    if (against) {
        unsigned w, h;
        uint8_t *old = read_ppm(against, &w, &h);
        if (!old || w != p->w || h != p->h) {
            fprintf(stderr, "bench_preview: %s is not a %ux%u P6 picture\n", against, p->w, p->h);
            exit(1);
        }
        /* The new picture's samples are the last w·h·3 bytes of its encoding. */
        const uint8_t *now = bytes + len - (size_t)w * h * 3;
        size_t n = (size_t)w * h * 3, differ = 0;
        double sum = 0.0;
        int mx = 0;
        for (size_t i = 0; i < n; i++) {
            int dd = abs((int)now[i] - (int)old[i]);
            sum += dd;
            differ += dd != 0;
            if (dd > mx) mx = dd;
        }
        printf("  against %s (EV %.3f): mean |difference| %.4f levels, largest %d, %zu of %zu samples differ\n", against,
               p->exposure_ev, sum / (double)n, mx, differ, n);
        free(old);
    }
    free(bytes);
}

int main(int argc, char **argv)
{
    int only = 0, reps = 5;
    const char *save = NULL, *against = NULL;
    while (argc > 1 && argv[1][0] == '-') {
        if (strcmp(argv[1], "-j") == 0 && argc > 2) only = atoi(argv[2]);
        else if (strcmp(argv[1], "-r") == 0 && argc > 2) reps = atoi(argv[2]);
        else if (strcmp(argv[1], "--save") == 0 && argc > 2) save = argv[2];
        else if (strcmp(argv[1], "--against") == 0 && argc > 2) against = argv[2];
        else if (strcmp(argv[1], "--sky-rays") == 0 && argc > 2) sky_rays = (uint32_t)atoi(argv[2]);
        else {
            fprintf(stderr, "bench_preview: unknown option %s\n", argv[1]);
            return 1;
        }
        argc -= 2, argv += 2;
    }
    if (reps < 1) reps = 1;
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
    if (!vol_path || access(vol_path, F_OK) != 0) {
        if (!vol_path) snprintf(tmp, sizeof tmp, "/tmp/bench-preview-%d.brv", (int)getpid());
        brm_bake_opts bo;
        memset(&bo, 0, sizeof bo);
        bo.threads = 2;
        if (brm_bake_target(s, (uint32_t)t, &bo, vol_path ? vol_path : tmp, NULL, &d) != BRM_OK) die("bake", &d);
        if (!vol_path) vol_path = tmp;
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
    if (only > 0) {
        double m[6][64];
        if (reps > 64) reps = 64;
        for (int r = 0; r < reps; r++) {
            brm_preview p = render(s, (uint32_t)t, v, only, 1280, false);
            print_run("fogged", only, &p);
            m[0][r] = p.seconds, m[1][r] = p.setup_seconds, m[2][r] = p.seconds - p.setup_seconds;
            m[3][r] = p.cpu_seconds, m[4][r] = p.setup_cpu_seconds, m[5][r] = p.cpu_seconds - p.setup_cpu_seconds;
            if (r == reps - 1) save_and_compare(&p, save, against);
            brm_preview_free(&p);
        }
        printf("  median of %d at -j %d: %.3f s [%.3f] (setup %.3f s [%.3f], pixels %.3f s [%.3f])\n", reps, only,
               median(m[0], reps), median(m[3], reps), median(m[1], reps), median(m[4], reps), median(m[2], reps),
               median(m[5], reps));
        brv_free(v);
        if (tmp[0]) unlink(tmp);
        brm_scene_free(s);
        return 0;
    }
    for (int threads = 1; threads <= 2; threads++) {
        brm_preview p = render(s, (uint32_t)t, v, threads, 1280, false);
        print_run("fogged", threads, &p);
        if (threads == 2) save_and_compare(&p, save, against);
        brm_preview_free(&p);
    }
    /* The exact path (visibility by rays, transmittance marched, 256 sky rays at every pixel)
     * against the fast one, at 320×180 and 2 threads: pixels per second of each and the mean
     * difference. */
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
        print_run("no media", threads, &p);
        brm_preview_free(&p);
    }
    s->medium_count = media;
    brv_free(v);
    if (tmp[0]) unlink(tmp);
    brm_scene_free(s);
    return 0;
}
