/* Voxelizer speed on a yard-like scene (a ground slab, 60 boxes, 8 triangulated spheres of
 * about 900 triangles each, 4 analytic spheres, an open canopy sheet), for the demo's grid size
 * and a large one. Run: build/bench/bench_voxelize [threads]. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "base/threads.h"
#include "voxel/voxelize.h"
#include "../tests/voxel/fixture.h"

static void run(const brm_scene *s, uint32_t nx, uint32_t ny, uint32_t nz, int threads)
{
    brm_target t;
    memset(&t, 0, sizeof t);
    strcpy(t.json_path, "bench");
    t.grid = BRM_GRID_WORLD;
    t.box.min = brm_v3(-40, -1, -40);
    t.box.max = brm_v3(40, 15, 40);
    t.cells[0] = nx;
    t.cells[1] = ny;
    t.cells[2] = nz;
    brm_grid g;
    if (brm_grid_init(&g, &t, NULL) != BRM_OK) exit(1);
    brm_occupancy o;
    double t0 = brm_now();
    if (brm_voxelize(s, &g, threads, &o, NULL) != BRM_OK) exit(1);
    double dt = brm_now() - t0;
    size_t surf = 0, in = 0;
    for (size_t c = 0; c < brm_grid_cells(&g); c++) {
        surf += o.state[c] == BRM_CELL_SURFACE;
        in += o.state[c] == BRM_CELL_INTERIOR;
    }
    printf("%ux%ux%u, %d thread(s): %.3f s (%zu surface, %zu interior cells, %.0f MB)\n", nx, ny, nz, threads,
           dt, surf, in, brm_voxelize_memory(&g) / 1e6);
    brm_occupancy_free(&o);
    brm_grid_free(&g);
}

int main(int argc, char **argv)
{
    int threads = argc > 1 ? atoi(argv[1]) : 1;
    fx_scene f;
    fx_init(&f);
    uint64_t rng = 2024;
    fx_box(&f, brm_v3(-40, -1, -40), brm_v3(40, 0, 40));
    for (int i = 0; i < 8; i++)
        fx_uv_sphere(&f, brm_v3(fx_range(&rng, -30, 30), 3, fx_range(&rng, -30, 30)), 3.0, 32);
    for (int i = 0; i < 60; i++) {
        brm_vec3 c = brm_v3(fx_range(&rng, -35, 35), 0, fx_range(&rng, -35, 35));
        fx_box(&f, brm_sub(c, brm_v3(1, 0, 1)), brm_add(c, brm_v3(1, fx_range(&rng, 1, 8), 1)));
    }
    for (int i = 0; i < 4; i++) fx_sphere(&f, brm_v3(fx_range(&rng, -30, 30), 6, fx_range(&rng, -30, 30)), 2.0);
    uint32_t canopy = fx_object(&f, BRM_SHAPE_MESH);
    f.s.objects[canopy].closed = false;
    fx_tri(&f, canopy, brm_v3(-20, 9, -20), brm_v3(20, 10, -20), brm_v3(20, 11, 20));
    fx_tri(&f, canopy, brm_v3(-20, 9, -20), brm_v3(20, 11, 20), brm_v3(-20, 10, 20));
    printf("scene: %u triangles (%u in boxes, done analytically)\n", f.s.tri_count, 61 * 12);
    run(&f.s, 128, 32, 128, threads);
    run(&f.s, 512, 128, 512, threads);
    fx_free(&f);
    return 0;
}
