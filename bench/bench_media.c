/* Media throughput: how many density evaluations per second the inner loops can make.
 * Scene: uniform + height + soft box, with and without a 4-octave noise medium, and the full
 * per-sample call (brm_media_eval + brm_media_scatter_phase), and brm_media_eval alone against
 * its batch (brm_media_eval_batch, scalar and AVX2 fBm). One thread; points sweep the fog
 * bounds on a fixed lattice, so runs are comparable. Then the fast path's tabulated noise:
 * building its lattice (1 and 2 threads) and the tabulated extinction along straight paths
 * through the fog, as the optical-depth builds query it. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <math.h>
#include <time.h>

#include "scene/media.h"
#include "scene/phase.h"

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return t.tv_sec + t.tv_nsec * 1e-9;
}

static brm_scene *make_scene(int with_noise)
{
    brm_scene *s = calloc(1, sizeof *s);
    s->media = calloc(4, sizeof *s->media);
    brm_medium *m = s->media;
    m[0].type = BRM_MEDIUM_UNIFORM;
    m[0].sigma_t = 0.02;
    m[0].albedo = brm_v3(0.9, 0.9, 0.9);
    m[0].phase = (brm_phase){BRM_PHASE_HENYEY_GREENSTEIN, 0.3, 0, 0};
    m[1].type = BRM_MEDIUM_HEIGHT;
    m[1].sigma_t = 0.08;
    m[1].scale_height_m = 4.0;
    m[1].albedo = brm_v3(0.8, 0.8, 0.9);
    m[1].phase.model = BRM_PHASE_ISOTROPIC;
    m[2].type = BRM_MEDIUM_BOX;
    m[2].box = (brm_aabb){{4, 0, 4}, {12, 5, 10}};
    m[2].sigma_t = 0.2;
    m[2].edge_fade_m = 1.0;
    m[2].albedo = brm_v3(0.95, 0.95, 0.95);
    m[2].phase = (brm_phase){BRM_PHASE_TWO_LOBE, 0.7, -0.3, 0.8};
    m[3].type = BRM_MEDIUM_NOISE;
    m[3].scale_m = 6.0;
    m[3].octaves = 4;
    m[3].seed = 7;
    m[3].strength = 0.6;
    s->medium_count = with_noise ? 4 : 3;
    s->fog_bounds = (brm_aabb){{0, 0, 0}, {24, 8, 16}};
    brm_media_prepare(s, NULL);
    return s;
}

#define N 64  /* 64³ = 262144 points per pass */

static void run(const char *label, brm_scene *s, int mode)
{
    volatile double sink = 0.0;
    long evals = 0;
    double t0 = now(), t;
    do {
        for (int k = 0; k < N; k++)
            for (int j = 0; j < N; j++)
                for (int i = 0; i < N; i++) {
                    brm_vec3 p = brm_v3((i + 0.5) * 24.0 / N, (j + 0.5) * 8.0 / N, (k + 0.5) * 16.0 / N);
                    if (mode == 0) {
                        sink += brm_media_extinction(s, p);
                    } else if (mode == 2) {
                        brm_media_point mp;
                        brm_media_eval(s, p, &mp);
                        sink += mp.sigma_t;
                    } else if (mode >= 3) {
                        /* batches of 256 points, as the kernel batches take them */
                        static brm_vec3 pts[256];
                        static brm_media_point mp[256];
                        const int at = (i + N * j) & 255;
                        pts[at] = p;
                        if (at == 255) {
                            brm_media_eval_batch_simd(s, pts, 256, mp, mode - 3);
                            sink += mp[17].sigma_t;
                        }
                    } else {
                        brm_media_point mp;
                        brm_media_eval(s, p, &mp);
                        brm_vec3 sp = brm_media_scatter_phase(s, &mp, 0.3);
                        sink += mp.sigma_t + sp.x;
                    }
                }
        evals += (long)N * N * N;
        t = now() - t0;
    } while (t < 1.0);
    printf("%-44s %8.2f M evaluations/s (%.1f ns each)\n", label, evals / t * 1e-6, t / evals * 1e9);
    (void)sink;
}

static void run_table(brm_scene *s)
{
    brm_noise_grid g;
    for (int th = 1; th <= 2; th++) {
        double t0 = now();
        int reps = 0;
        do {
            if (brm_noise_grid_build(s, th, &g, NULL) != BRM_OK) exit(1);
            reps++;
            if (now() - t0 < 1.0) brm_noise_grid_free(&g);
            else break;
        } while (1);
        double t = (now() - t0) / reps;
        printf("noise table %ux%ux%u nodes, -j%d: %44.3f s (%.1f ns a node)\n", g.n[0], g.n[1], g.n[2], th, t,
               t / ((double)g.n[0] * g.n[1] * g.n[2]) * 1e9 * th);
        if (th == 1) {
            /* Paths: 4096 straight lines across the bounds, 1024 points each. */
            volatile double sink = 0.0;
            long evals = 0;
            double t1 = now(), tt;
            do {
                for (int r = 0; r < 4096; r++) {
                    brm_vec3 a = brm_v3((r % 64) * 24.0 / 64, 8.0 - (r / 64) * 0.01, (r / 64) * 16.0 / 64);
                    brm_vec3 dir = brm_v3(0.5, -0.8, 0.33);
                    for (int q = 0; q < 1024; q++) sink += brm_media_extinction_tabulated(s, &g, brm_madd(a, dir, q * 0.01));
                }
                evals += 4096L * 1024;
                tt = now() - t1;
            } while (tt < 1.0);
            printf("%-44s %8.2f M evaluations/s (%.1f ns each)\n", "tabulated extinction along paths, 4 media", evals / tt * 1e-6,
                   tt / evals * 1e9);
            /* The same paths in one batch call each (brm_media_extinction_line, as the
             * optical-depth columns take them), and how far it is from the point calls. */
            static float line[1024];
            double worst = 0.0;
            for (int r = 0; r < 4096; r += 7) {
                brm_vec3 a = brm_v3((r % 64) * 24.0 / 64, 8.0 - (r / 64) * 0.01, (r / 64) * 16.0 / 64);
                brm_vec3 dir = brm_v3(0.5, -0.8, 0.33);
                brm_media_extinction_line(s, &g, a, dir, 0.0, 0.01, 1024, line);
                for (int q = 0; q < 1024; q++) {
                    brm_vec3 p = brm_madd(a, dir, q * 0.01);
                    p = brm_vmin(brm_vmax(p, s->fog_bounds.min), s->fog_bounds.max);
                    double e = brm_media_extinction_tabulated(s, &g, p);
                    double dev = fabs((double)line[q] - e) / (e + 1e-9);
                    if (dev > worst) worst = dev;
                }
            }
            for (int step = 0; step < 2; step++) {
                const double dt = step ? 0.078 : 0.01;
                evals = 0;
                t1 = now();
                do {
                    for (int r = 0; r < 4096; r++) {
                        brm_vec3 a = brm_v3((r % 64) * 24.0 / 64, 8.0 - (r / 64) * 0.01, (r / 64) * 16.0 / 64);
                        brm_vec3 dir = brm_v3(0.5, -0.8, 0.33);
                        brm_media_extinction_line(s, &g, a, dir, 0.0, dt, 1024, line);
                        sink += line[r & 1023];
                    }
                    evals += 4096L * 1024;
                    tt = now() - t1;
                } while (tt < 1.0);
                printf("%-44s %8.2f M evaluations/s (%.1f ns each)%s", step ? "the same in batches, steps of 0.078 m"
                                                                             : "the same in batches (extinction_line)",
                       evals / tt * 1e-6, tt / evals * 1e9, step ? "\n" : "");
                if (!step) printf(", worst relative difference %.2e\n", worst);
            }
            (void)sink;
        }
        brm_noise_grid_free(&g);
    }
}

int main(void)
{
    brm_scene *a = make_scene(0), *b = make_scene(1);
    run("extinction, 3 media", a, 0);
    run("extinction, 3 media + noise (4 octaves)", b, 0);
    run("eval + scatter_phase, 3 media", a, 1);
    run("eval + scatter_phase, 3 media + noise", b, 1);
    /* The exact media alone, point by point and in batches (the same bits): the scalar fBm,
     * then the four-wide one where the processor has AVX2. */
    run("eval, 3 media + noise", b, 2);
    run("eval_batch (scalar fBm), 3 media + noise", b, 3);
    run("eval_batch (AVX2 fBm), 3 media + noise", b, 4);
    run("eval_batch (AVX2 fBm), 3 media", a, 4);
    run_table(b);
    brm_scene_free(a);
    brm_scene_free(b);
    return 0;
}
