/* Ray caster speed: closest-hit and any-hit rays per second on one core, over a scene of a
 * few thousand triangles (triangulated spheres and boxes on a ground slab) and a few analytic
 * spheres. Run: build/bench/bench_bvh [rays] [SCENE.json]: with a scene file, its geometry
 * instead, rays from random points in its fog bounds. */
#include <stdio.h>
#include <stdlib.h>

#include "base/threads.h"
#include "scene/scene.h"
#include "voxel/bvh.h"
#include "../tests/voxel/fixture.h"

int main(int argc, char **argv)
{
    long rays = argc > 1 ? atol(argv[1]) : 2000000;
    if (rays < 1) rays = 1;
    fx_scene f;
    fx_init(&f);
    uint64_t rng = 2024;
    brm_scene *file = NULL;
    if (argc > 2) {
        brm_diag dg;
        brm_diag_init(&dg);
        if (brm_scene_load(argv[2], &file, &dg) != BRM_OK) {
            fprintf(stderr, "bench_bvh: %s\n", dg.message);
            return 1;
        }
    }
    const brm_scene *sc = file ? file : &f.s;
    fx_box(&f, brm_v3(-40, -1, -40), brm_v3(40, 0, 40));
    for (int i = 0; i < 8; i++)
        fx_uv_sphere(&f, brm_v3(fx_range(&rng, -30, 30), 3, fx_range(&rng, -30, 30)), 3.0, 32);
    for (int i = 0; i < 60; i++) {
        brm_vec3 c = brm_v3(fx_range(&rng, -35, 35), 0, fx_range(&rng, -35, 35));
        fx_box(&f, brm_sub(c, brm_v3(1, 0, 1)), brm_add(c, brm_v3(1, fx_range(&rng, 1, 8), 1)));
    }
    for (int i = 0; i < 4; i++) fx_sphere(&f, brm_v3(fx_range(&rng, -30, 30), 6, fx_range(&rng, -30, 30)), 2.0);
    brm_bvh *b = NULL;
    double t0 = brm_now();
    if (brm_bvh_build(sc, &b, NULL) != BRM_OK) return 1;
    double t_build = brm_now() - t0;

    brm_vec3 *o = malloc(sizeof *o * 4096), *d = malloc(sizeof *d * 4096);
    for (int i = 0; i < 4096; i++) {
        if (file) {
            brm_aabb fb = file->fog_bounds;
            o[i] = brm_v3(fx_range(&rng, fb.min.x, fb.max.x), fx_range(&rng, fb.min.y, fb.max.y),
                          fx_range(&rng, fb.min.z, fb.max.z));
        } else {
            o[i] = brm_v3(fx_range(&rng, -38, 38), fx_range(&rng, 0.5, 10), fx_range(&rng, -38, 38));
        }
        d[i] = fx_dir(&rng);
    }
    /* Each query timed on the tree's traversal and on the reference one (one child box at a
     * time), and their answers compared ray by ray: they must agree exactly. */
    long hits = 0, hits_ref = 0, occl = 0, occl_ref = 0, differ = 0;
    t0 = brm_now();
    for (long r = 0; r < rays; r++) {
        brm_hit h;
        hits += brm_bvh_intersect(b, o[r & 4095], d[(r * 7 + (r >> 12)) & 4095], 0, HUGE_VAL, &h);
    }
    double t_closest = brm_now() - t0;
    t0 = brm_now();
    for (long r = 0; r < rays; r++) {
        brm_hit h;
        hits_ref += brm_bvh_intersect_reference(b, o[r & 4095], d[(r * 7 + (r >> 12)) & 4095], 0, HUGE_VAL, &h);
    }
    double t_closest_ref = brm_now() - t0;
    t0 = brm_now();
    for (long r = 0; r < rays; r++)
        occl += brm_bvh_occluded(b, o[r & 4095], d[(r * 7 + (r >> 12)) & 4095], 0, 30.0);
    double t_any = brm_now() - t0;
    t0 = brm_now();
    for (long r = 0; r < rays; r++)
        occl_ref += brm_bvh_occluded_reference(b, o[r & 4095], d[(r * 7 + (r >> 12)) & 4095], 0, 30.0);
    double t_any_ref = brm_now() - t0;
    long check = rays < 200000 ? rays : 200000;
    for (long r = 0; r < check; r++) {
        brm_vec3 ro = o[r & 4095], rd = d[(r * 7 + (r >> 12)) & 4095];
        brm_hit h1, h2;
        int a = brm_bvh_intersect(b, ro, rd, 0, HUGE_VAL, &h1), c = brm_bvh_intersect_reference(b, ro, rd, 0, HUGE_VAL, &h2);
        if (a != c || (a && (h1.t != h2.t || h1.tri != h2.tri || h1.object != h2.object))) differ++;
        if (brm_bvh_occluded(b, ro, rd, 0, 30.0) != brm_bvh_occluded_reference(b, ro, rd, 0, 30.0)) differ++;
    }
    if (file) printf("scene %s: %u triangles, %u objects; build %.2f ms\n", argv[2], sc->tri_count, sc->object_count,
                     t_build * 1e3);
    else printf("scene: %u triangles, 4 analytic spheres; build %.2f ms\n", f.s.tri_count, t_build * 1e3);
    printf("closest hit: %ld rays in %.3f s = %.2f Mrays/s (%.1f %% hit); reference traversal %.2f Mrays/s\n", rays,
           t_closest, rays / t_closest * 1e-6, 100.0 * hits / rays, rays / t_closest_ref * 1e-6);
    printf("any hit (tmax 30 m): %ld rays in %.3f s = %.2f Mrays/s (%.1f %% blocked); reference traversal %.2f "
           "Mrays/s\n",
           rays, t_any, rays / t_any * 1e-6, 100.0 * occl / rays, rays / t_any_ref * 1e-6);
    printf("answers against the reference traversal: %ld of %ld rays differ%s\n", differ, 2 * check,
           hits == hits_ref && occl == occl_ref ? "" : " (and the timed counts differ)");
    free(o);
    free(d);
    brm_bvh_free(b);
    fx_free(&f);
    brm_scene_free(file);
    return differ || hits != hits_ref || occl != occl_ref;
}
