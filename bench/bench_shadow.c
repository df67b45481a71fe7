/* Shadow room benchmark: build cost of the depth maps and optical-depth grids, and the cost of
 * each per-sample query (visibility, transmittance, sky) against the exact paths it replaces
 * (BVH rays, the fine march). A yard scene of our own: ground, boxes, a sphere, a thin wall,
 * a roof outside the target; height + box + noise fog; sun, spot and point light.
 * Then the demo scene's two bake benchmarks, shadow side only: the world target "hall" with the
 * scene's five lights, and the 160×90×128 frustum with one sun and eight 15 m point lights of
 * bench_targets.c: build time (wall, and CPU seconds of the whole process, which at one thread
 * is the figure that a busy machine disturbs least), what the grids look like, and the cost
 * of the kernel's lookups at points spread like its samples, with the worst transmittance
 * error against the exact march.
 * Run: build/bench/bench_shadow [threads] [yard|hall|frustum|all] */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <math.h>

#include "base/threads.h"
#include "scene/light.h"
#include "scene/media.h"
#include "shadow/shadow.h"
#include "shadow/shadow_internal.h"
#include "voxel/bvh.h"
#include "voxel/grid.h"
#include "bench_lights.h"

static uint64_t rng_state = 1;
static double unif(void)
{
    uint64_t z = (rng_state += 0x9E3779B97F4A7C15ull);
    z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
    z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
    return (double)((z ^ (z >> 31)) >> 11) * (1.0 / 9007199254740992.0);
}

static void add_box(brm_scene *s, brm_vec3 lo, brm_vec3 hi)
{
    static const int q[6][4] = {{0, 4, 6, 2}, {1, 3, 7, 5}, {0, 1, 5, 4}, {2, 6, 7, 3}, {0, 2, 3, 1}, {4, 5, 7, 6}};
    brm_object *o = &s->objects[s->object_count];
    memset(o, 0, sizeof *o);
    o->shape = BRM_SHAPE_BOX;
    o->bounds.min = lo, o->bounds.max = hi;
    o->first_tri = s->tri_count;
    o->closed = true;
    for (int k = 0; k < 6; k++) {
        brm_vec3 c[4];
        for (int m = 0; m < 4; m++) {
            int i = q[k][m];
            c[m] = brm_v3(i & 1 ? hi.x : lo.x, i & 2 ? hi.y : lo.y, i & 4 ? hi.z : lo.z);
        }
        int tri[2][3] = {{0, 1, 2}, {0, 2, 3}};
        for (int t = 0; t < 2; t++) {
            brm_tri *tr = &s->tris[s->tri_count++];
            for (int m = 0; m < 3; m++) tr->v[m] = c[tri[t][m]];
            tr->object = s->object_count;
            o->tri_count++;
        }
    }
    s->object_count++;
}

static brm_scene *yard(void)
{
    brm_scene *s = calloc(1, sizeof *s);
    s->objects = calloc(16, sizeof *s->objects);
    s->tris = calloc(256, sizeof *s->tris);
    s->lights = calloc(3, sizeof *s->lights);
    s->media = calloc(3, sizeof *s->media);
    s->fog_bounds = (brm_aabb){{-40, -2, -40}, {40, 30, 40}};
    add_box(s, brm_v3(-40, -1, -40), brm_v3(40, 0, 40));
    add_box(s, brm_v3(-5, 0, -3), brm_v3(-2, 4, 1));
    add_box(s, brm_v3(2, 1, 2), brm_v3(4.5, 2.5, 6));
    add_box(s, brm_v3(-1, 0, 4), brm_v3(3, 5, 4.05));
    add_box(s, brm_v3(-30, 14, -30), brm_v3(-6, 14.2, 30));
    brm_object *sp = &s->objects[s->object_count++];
    sp->shape = BRM_SHAPE_SPHERE;
    sp->center = brm_v3(3, 3.5, -4), sp->radius = 1.5;
    sp->bounds = (brm_aabb){{1.5, 2, -5.5}, {4.5, 5, -2.5}};
    for (int k = 0; k < 3; k++) {
        brm_light *l = &s->lights[k];
        l->color = brm_v3(1, 1, 1), l->shadow = true, l->softness_texels = 1.5, l->intensity_cd = 1000;
        l->illuminance_lux = 1000;
    }
    s->light_count = 3;
    s->lights[0].type = BRM_LIGHT_DIRECTIONAL, s->lights[0].direction = brm_norm(brm_v3(0.4, -1, 0.3));
    s->lights[1].type = BRM_LIGHT_SPOT, s->lights[1].position = brm_v3(2, 12, -3);
    s->lights[1].direction = brm_norm(brm_v3(-0.1, -1, 0.2)), s->lights[1].inner_deg = 25, s->lights[1].outer_deg = 35;
    s->lights[1].cos_inner = cos(25 * BRM_PI / 180), s->lights[1].cos_outer = cos(35 * BRM_PI / 180);
    s->lights[2].type = BRM_LIGHT_POINT, s->lights[2].position = brm_v3(-3, 4, 2), s->lights[2].range_m = 30;
    s->medium_count = 3;
    s->media[0].type = BRM_MEDIUM_HEIGHT, s->media[0].sigma_t = 0.08, s->media[0].base_y = 0.5;
    s->media[0].scale_height_m = 4;
    s->media[1].type = BRM_MEDIUM_BOX, s->media[1].sigma_t = 0.2, s->media[1].edge_fade_m = 1;
    s->media[1].box = (brm_aabb){{-6, 0, -3}, {2, 5, 6}};
    s->media[2].type = BRM_MEDIUM_NOISE, s->media[2].scale_m = 6, s->media[2].octaves = 4, s->media[2].seed = 7;
    s->media[2].strength = 0.6;
    for (int k = 0; k < 2; k++) s->media[k].albedo = brm_v3(0.9, 0.9, 0.9), s->media[k].phase.model = BRM_PHASE_ISOTROPIC;
    s->sky.present = true;
    s->sky.zenith = brm_v3(1, 2, 4), s->sky.horizon = brm_v3(3, 3, 3), s->sky.ground = brm_v3(0.3, 0.3, 0.3);
    brm_diag d;
    brm_diag_init(&d);
    if (brm_media_prepare(s, &d) != BRM_OK) exit(1);
    return s;
}

#define N_QUERY 200000

static int yard_bench(int threads)
{
    brm_scene *s = yard();
    brm_aabb target = {{-10, 0.05, -10}, {10, 8, 10}};
    brm_diag d;
    brm_diag_init(&d);
    brm_bvh *bvh = NULL;
    if (brm_bvh_build(s, &bvh, &d) != BRM_OK) return 1;
    brm_shadow_opts o = {target, 0.25, threads, false, bvh, false, 1.0};
    brm_shadow_set *ss = NULL;
    if (brm_shadows_build(s, &o, &ss, &d) != BRM_OK) return 1;
    printf("target 20 x 8 x 20 m, 0.25 m cells (80 x 32 x 80 = 204800), 3 lights, height + box + noise fog\n");
    printf("build (%d thread%s): %.3f s, %.1f MiB (estimate %.1f MiB)\n", threads, threads > 1 ? "s" : "",
           brm_shadows_build_seconds(ss), brm_shadows_bytes(ss) / 1048576.0, brm_shadows_memory(s, &o) / 1048576.0);
    for (uint32_t l = 0; l < 3; l++) {
        const light_shadow *ls = &ss->lights[l];
        size_t cells = 0, bad = 0;
        for (uint32_t k = 0; k < ls->view_count; k++) {
            const shadow_view *v = &ls->views[k];
            size_t n = (size_t)(v->og_n[0] - 1) * (v->og_n[1] - 1) * (v->og_n[2] - 1);
            cells += n;
            for (size_t i = 0; i < n; i++) bad += v->od_bad[i] == 1;
        }
        uint32_t blocks = 0, inside = 0, miss = 0;
        for (uint32_t k = 0; k < ls->view_count; k++) blocks += ls->views[k].blk_count;
        for (int i = 0; i < 20000; i++) {
            brm_vec3 p = brm_v3(-10 + 20 * unif(), 0.05 + 7.95 * unif(), -10 + 20 * unif());
            const brm_light *L = &s->lights[l];
            if (L->type == BRM_LIGHT_SPOT && brm_dot(brm_norm(brm_sub(p, L->position)), L->direction) < L->cos_outer)
                continue;
            double tau;
            inside++;
            miss += !brm_od_lookup(s, brm_shadow_pick_view(ls, p), p, &tau);
        }
        printf("light %u: map %u^2 x %u, grid %u x %u x %u x %u, %.2f %% of cells flagged, %u blocks; %.2f %% of "
               "lit lookups march\n",
               l, ls->views[0].res, ls->view_count, ls->views[0].og_n[0], ls->views[0].og_n[1], ls->views[0].og_n[2],
               ls->view_count, 100.0 * (double)bad / (double)cells, blocks, 100.0 * miss / (double)inside);
    }
    brm_vec3 *pts = malloc(N_QUERY * sizeof *pts);
    for (int i = 0; i < N_QUERY; i++)
        pts[i] = brm_v3(-10 + 20 * unif(), 0.05 + 7.95 * unif(), -10 + 20 * unif());
    volatile double sink = 0;
    static const char *names[3] = {"sun", "spot", "point"};
    brm_vec3 *cone = malloc(N_QUERY * sizeof *cone); /* the spot's lit points: the kernel asks only there */
    for (int i = 0, n = 0; n < N_QUERY; i++) {
        brm_vec3 p = pts[i % N_QUERY];
        if (i >= N_QUERY) p = brm_v3(-10 + 20 * unif(), 0.05 + 7.95 * unif(), -10 + 20 * unif());
        if (brm_dot(brm_norm(brm_sub(p, s->lights[1].position)), s->lights[1].direction) >= s->lights[1].cos_outer)
            cone[n++] = p;
    }
    for (uint32_t l = 0; l < 3; l++) {
        brm_vec3 *pts_l = l == 1 ? cone : pts;
        double t0 = brm_now();
        for (int i = 0; i < N_QUERY; i++) sink += brm_shadow_visibility(ss, l, pts_l[i]);
        double tv = (brm_now() - t0) / N_QUERY * 1e9;
        t0 = brm_now();
        for (int i = 0; i < N_QUERY; i++) sink += brm_shadow_transmittance(ss, l, pts_l[i]);
        double tt = (brm_now() - t0) / N_QUERY * 1e9;
        int nr = N_QUERY / 100;
        t0 = brm_now();
        for (int i = 0; i < nr; i++) {
            double dist;
            brm_vec3 dir = l == 0 ? brm_scale(s->lights[0].direction, -1.0) : brm_sub(s->lights[l].position, pts_l[i]);
            dist = l == 0 ? HUGE_VAL : brm_len(dir);
            if (l) dir = brm_scale(dir, 1.0 / dist);
            sink += brm_bvh_occluded(bvh, pts_l[i], dir, 1e-6, dist);
        }
        double tr = (brm_now() - t0) / nr * 1e9;
        t0 = brm_now();
        for (int i = 0; i < nr; i++) sink += brm_shadow_transmittance_march(ss, l, pts_l[i]);
        double tm = (brm_now() - t0) / nr * 1e9;
        printf("%-5s visibility %6.1f ns (BVH ray %7.1f ns)   transmittance %6.1f ns (march %9.1f ns)\n", names[l], tv,
               tr, tt, tm);
    }
    double t0 = brm_now();
    for (int i = 0; i < N_QUERY / 10; i++) {
        double out[3][4];
        brm_sky_incident(ss, pts[i], (uint32_t)i, out);
        sink += out[0][0];
    }
    printf("sky (8 rays) %.1f ns per call\n", (brm_now() - t0) / (N_QUERY / 10) * 1e9);
    t0 = brm_now();
    for (int i = 0; i < N_QUERY; i++) sink += brm_media_extinction(s, pts[i]);
    printf("for scale: one brm_media_extinction %.1f ns\n", (brm_now() - t0) / N_QUERY * 1e9);
    brm_shadows_free(ss);
    brm_bvh_free(bvh);
    brm_scene_free(s);
    free(pts);
    free(cone);
    return sink == 12345.678 ? 1 : 0;
}

/* ---- the demo scene's targets ---------------------------------------------------------- */

static double cpu_seconds(void)
{
    struct timespec t;
    clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

#define N_DEMO_QUERY 100000
#define N_DEMO_CHECK 1500

static int demo_bench(int threads, bool frustum)
{
    const char *path = BRUME_SOURCE_ROOT "/scenes/saltworks-dusk.json";
    brm_diag d;
    brm_diag_init(&d);
    brm_scene *s = NULL;
    if (brm_scene_load(path, &s, &d) != BRM_OK) {
        fprintf(stderr, "bench_shadow: %s\n", d.message);
        return 1;
    }
    int t = -1;
    for (uint32_t i = 0; i < s->target_count && t < 0; i++)
        if (s->targets[i].grid == (frustum ? BRM_GRID_FRUSTUM : BRM_GRID_WORLD)) t = (int)i;
    if (t < 0) return 1;
    brm_target *tg = &s->targets[t];
    if (frustum) {
        tg->cells[0] = 160, tg->cells[1] = 90, tg->cells[2] = 128, tg->samples = 4;
        bench_frustum_lights(s, tg);
    }
    brm_grid g;
    if (brm_grid_init(&g, tg, &d) != BRM_OK) return 1;
    brm_bvh *bvh = NULL;
    if (brm_bvh_build(s, &bvh, &d) != BRM_OK) return 1;
    double e = fmin(g.cell.x, fmin(g.cell.y, g.cell.z)); /* as the baker passes it */
    brm_shadow_opts o = {brm_grid_bounds(&g), e, threads, false, bvh, false, 1.0};
    brm_shadow_set *ss = NULL;
    double c0 = cpu_seconds();
    if (brm_shadows_build(s, &o, &ss, &d) != BRM_OK) {
        fprintf(stderr, "bench_shadow: %s\n", d.message);
        return 1;
    }
    double cpu = cpu_seconds() - c0;
    printf("demo %s %ux%ux%u, %u lights: build (%d thread%s) %.3f s wall, %.3f s CPU, %.1f MiB (estimate %.1f MiB)\n",
           frustum ? "frustum" : "world", g.n[0], g.n[1], g.n[2], s->light_count, threads, threads > 1 ? "s" : "",
           brm_shadows_build_seconds(ss), cpu, brm_shadows_bytes(ss) / 1048576.0, brm_shadows_memory(s, &o) / 1048576.0);
    printf("  phases (wall s):");
    for (int k = 0; k < BRM_SHADOW_PHASES; k++) printf(" %s %.3f%s", brm_shadow_phase_names[k], ss->phase_seconds[k],
                                                       k + 1 < BRM_SHADOW_PHASES ? "," : "\n");
    printf("  phases (CPU s): ");
    for (int k = 0; k < BRM_SHADOW_PHASES; k++) printf(" %s %.3f%s", brm_shadow_phase_names[k], ss->phase_cpu[k],
                                                       k + 1 < BRM_SHADOW_PHASES ? "," : "\n");
    /* Sample points in the order the kernel takes them: brick by brick (bricks spread evenly
     * over the target), cell by cell inside, one jittered point per cell. */
    brm_vec3 *pts = malloc(N_DEMO_QUERY * sizeof *pts);
    if (!pts) return 1;
    uint32_t nb = brm_grid_brick_count(&g), per = BRM_BRICK * BRM_BRICK * BRM_BRICK;
    uint32_t want = (N_DEMO_QUERY + per - 1) / per;
    int np = 0;
    for (uint32_t w = 0; w < want && np < N_DEMO_QUERY; w++) {
        uint32_t lo[3], hi[3];
        brm_grid_brick_range(&g, (uint32_t)((uint64_t)w * nb / want), lo, hi);
        for (uint32_t k = lo[2]; k < hi[2]; k++)
            for (uint32_t j = lo[1]; j < hi[1]; j++)
                for (uint32_t i = lo[0]; i < hi[0] && np < N_DEMO_QUERY; i++)
                    pts[np++] = brm_grid_point(&g, i + unif(), j + unif(), k + unif());
    }
    volatile double sink = 0;
    double tv_all = 0, tt_all = 0, tb_all = 0, tbh_all = 0;
    uint64_t n_all = 0;
    for (uint32_t l = 0; l < s->light_count; l++) {
        const light_shadow *ls = &ss->lights[l];
        const brm_light *L = &s->lights[l];
        /* the points the kernel would ask: inside the light's reach (range, cone) */
        brm_vec3 *q = malloc(N_DEMO_QUERY * sizeof *q);
        int nq = 0;
        for (int i = 0; i < np; i++) {
            brm_vec3 to;
            double dist;
            if (brm_light_illuminance(L, pts[i], &to, &dist) > 0.0 && brm_aabb_contains(s->fog_bounds, pts[i])) q[nq++] = pts[i];
        }
        if (nq == 0 || !ls->active) {
            free(q);
            continue;
        }
        size_t cells = 0, bad = 0;
        uint32_t blocks = 0, corrs = 0;
        for (uint32_t k = 0; k < ls->view_count && ls->has_od; k++) {
            const shadow_view *v = &ls->views[k];
            size_t n = (size_t)(v->og_n[0] - 1) * (v->og_n[1] - 1) * (v->og_n[2] - 1);
            cells += n;
            for (size_t i = 0; i < n; i++) bad += v->od_bad[i] == 1;
            blocks += v->blk_count;
            corrs += v->corr_count;
        }
        int miss = 0;
        for (int i = 0; i < nq; i++) {
            double tau;
            miss += !ls->has_od || !brm_od_lookup(s, brm_shadow_pick_view(ls, q[i]), q[i], &tau);
        }
        /* CPU time, the best of three passes: the machine may be shared */
        double tv = HUGE_VAL, tt = HUGE_VAL;
        for (int rep = 0; rep < 3; rep++) {
            double t0 = cpu_seconds();
            for (int i = 0; i < nq; i++) sink += brm_shadow_visibility(ss, l, q[i]);
            tv = fmin(tv, cpu_seconds() - t0);
            t0 = cpu_seconds();
            for (int i = 0; i < nq; i++) sink += brm_shadow_transmittance(ss, l, q[i]);
            tt = fmin(tt, cpu_seconds() - t0);
        }
        /* the same lookups in batches of 256 (brm_shadow_transmittance_batch), which must
         * give the same bits */
        double tb = HUGE_VAL;
        double *tbuf = malloc((size_t)nq * sizeof *tbuf);
        if (!tbuf) return 1;
        for (int rep = 0; rep < 3; rep++) {
            double t0 = cpu_seconds();
            for (int i = 0; i < nq; i += 256) brm_shadow_transmittance_batch(ss, l, q + i, nq - i < 256 ? (uint32_t)(nq - i) : 256u, tbuf + i);
            tb = fmin(tb, cpu_seconds() - t0);
        }
        /* each batch twice in a row: the second time its reads come from the caches, so
         * (twice − once) is the lookups' cost without the misses */
        double tb2 = HUGE_VAL;
        for (int rep = 0; rep < 3; rep++) {
            double t0 = cpu_seconds();
            for (int i = 0; i < nq; i += 256)
                for (int twice = 0; twice < 2; twice++)
                    brm_shadow_transmittance_batch(ss, l, q + i, nq - i < 256 ? (uint32_t)(nq - i) : 256u, tbuf + i);
            tb2 = fmin(tb2, cpu_seconds() - t0);
        }
        tbh_all += tb2 - tb;
        int differ = 0;
        for (int i = 0; i < nq; i++) differ += tbuf[i] != brm_shadow_transmittance(ss, l, q[i]);
        free(tbuf);
        if (differ) {
            fprintf(stderr, "bench_shadow: light %u: %d batch transmittances differ from single lookups\n", l, differ);
            return 1;
        }
        tb_all += tb;
        tv_all += tv, tt_all += tt, n_all += (uint64_t)nq;
        double worst = 0.0;
        int nc = nq < N_DEMO_CHECK ? nq : N_DEMO_CHECK;
        for (int i = 0; i < nc; i++) {
            brm_vec3 p = q[(size_t)i * (size_t)nq / (size_t)nc];
            double a = brm_shadow_transmittance(ss, l, p), b = brm_shadow_transmittance_march(ss, l, p);
            worst = fmax(worst, fabs(a - b) / b);
        }
        printf("  light %u (%s): map %u^2 x %u, grid %u x %u x %u, %.2f %% flagged, %u blocks, %u corrections; "
               "%.2f %% of lookups march; visibility %.1f ns, transmittance %.1f ns, worst |T - T_march|/T %.4f %%\n",
               l, L->type == BRM_LIGHT_DIRECTIONAL ? "sun" : L->type == BRM_LIGHT_SPOT ? "spot" : "point", ls->views[0].res,
               ls->view_count, ls->views[0].og_n[0], ls->views[0].og_n[1], ls->views[0].og_n[2],
               cells ? 100.0 * (double)bad / (double)cells : 0.0, blocks, corrs, 100.0 * miss / nq, tv / nq * 1e9,
               tt / nq * 1e9, 100.0 * worst);
        free(q);
    }
    printf("  all lights: visibility %.1f ns, transmittance %.1f ns per lookup (mean); in batches of 256 %.1f ns "
           "(%.1f ns with the batch's data in the caches), the same values\n",
           tv_all / (double)n_all * 1e9, tt_all / (double)n_all * 1e9, tb_all / (double)n_all * 1e9,
           tbh_all / (double)n_all * 1e9);
    free(pts);
    brm_shadows_free(ss);
    brm_bvh_free(bvh);
    brm_grid_free(&g);
    brm_scene_free(s);
    return sink == 12345.678 ? 1 : 0;
}

int main(int argc, char **argv)
{
    int threads = argc > 1 ? atoi(argv[1]) : 1;
    const char *which = argc > 2 ? argv[2] : "all";
    bool all = strcmp(which, "all") == 0;
    int rc = 0;
    if (all || strcmp(which, "yard") == 0) rc |= yard_bench(threads);
    if (all || strcmp(which, "hall") == 0) rc |= demo_bench(threads, false);
    if (all || strcmp(which, "frustum") == 0) rc |= demo_bench(threads, true);
    return rc;
}
