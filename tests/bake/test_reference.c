/* The fast path (shadow maps, optical-depth maps) against the exact reference (rays through the
 * BVH, finely marched transmittance) on the demo scene at reduced resolution. */
#include <math.h>
#include <stdio.h>

#include "bake_util.h"
#include "voxel/grid.h"

#ifndef DEMO_SCENE
#error "DEMO_SCENE must name the demo scene file"
#endif

static void fast_path_should_match_reference_on_the_demo_scene(void **state)
{
    (void)state;
    brm_diag d;
    brm_diag_init(&d);
    brm_scene *s = NULL;
    assert_int_equal(brm_scene_load(DEMO_SCENE, &s, &d), BRM_OK);
    int t = -1;
    for (uint32_t i = 0; i < s->target_count && t < 0; i++)
        if (s->targets[i].grid == BRM_GRID_WORLD) t = (int)i;
    assert_true(t >= 0);
    brm_target *tg = &s->targets[t];
    /* The demo's own cell size, over a part of its hall by the west windows where the sun's
     * shafts, the skylights' patches, a lamp and the ground fog all are: the whole hall would
     * take the reference minutes. */
    brm_vec3 cell = {(tg->box.max.x - tg->box.min.x) / tg->cells[0], (tg->box.max.y - tg->box.min.y) / tg->cells[1],
                     (tg->box.max.z - tg->box.min.z) / tg->cells[2]};
    const uint32_t want[3] = {30, 20, 30};
    brm_vec3 lo = {tg->box.min.x, tg->box.min.y, tg->box.min.z + 4.0};
    tg->box.min = lo;
    tg->box.max = brm_v3(lo.x + want[0] * cell.x, lo.y + want[1] * cell.y, lo.z + want[2] * cell.z);
    for (int a = 0; a < 3; a++) tg->cells[a] = want[a];
    tg->encoding = BRM_ENCODING_F32;
    char *dir = temp_dir(), fast_p[128], ref_p[128];
    snprintf(fast_p, sizeof fast_p, "%s/fast.brv", dir);
    snprintf(ref_p, sizeof ref_p, "%s/ref.brv", dir);
    brv_volume *vf = bake_to(s, (uint32_t)t, 2, false, fast_p);
    brv_volume *vr = bake_to(s, (uint32_t)t, 2, true, ref_p);
    const uint32_t nx = tg->cells[0], ny = tg->cells[1], nz = tg->cells[2];
    const char *names[3] = {"inscatter.r", "inscatter.g", "inscatter.b"};
    for (int c = 0; c < 3; c++) {
        float *f = read_channel(vf, names[c]), *r = read_channel(vr, names[c]);
        size_t n = (size_t)nx * ny * nz;
        double sum = 0, se = 0;
        for (size_t i = 0; i < n; i++) {
            sum += r[i];
            se += (f[i] - r[i]) * (double)(f[i] - r[i]);
        }
        double mean = sum / n, rmse = sqrt(se / n);
        /* An edge cell: a neighbour's reference value differs by more than a quarter (a shadow
         * boundary or a surface crosses it or its neighbours). Common practice, no source. */
        size_t off = 0, away = 0;
        for (uint32_t k = 0; k < nz; k++)
            for (uint32_t j = 0; j < ny; j++)
                for (uint32_t i = 0; i < nx; i++) {
                    size_t q = i + (size_t)nx * (j + (size_t)ny * k);
                    bool edge = false;
                    const int nb[6][3] = {{1, 0, 0}, {-1, 0, 0}, {0, 1, 0}, {0, -1, 0}, {0, 0, 1}, {0, 0, -1}};
                    for (int m = 0; m < 6 && !edge; m++) {
                        int a = (int)i + nb[m][0], b = (int)j + nb[m][1], e = (int)k + nb[m][2];
                        if (a < 0 || b < 0 || e < 0 || a >= (int)nx || b >= (int)ny || e >= (int)nz) continue;
                        double o = r[(size_t)a + nx * ((size_t)b + (size_t)ny * (size_t)e)];
                        if (fabs(o - r[q]) > 0.25 * fmax(fabs(o), fabs(r[q]))) edge = true;
                    }
                    if (edge) continue;
                    away++;
                    if (fabs(f[q] - r[q]) > 0.10 * r[q] + 1e-3 * mean) off++;
                }
        printf("# %s: mean %.4g, RMSE %.4g (%.2f %% of the mean), %zu of %zu cells away from edges off by > 10 %%\n",
               names[c], mean, rmse, 100 * rmse / mean, off, away);
        /* The acceptance bounds: RMSE within 3 % of the mean, no cell away from shadow
         * edges off by more than 10 %. */
        assert_true(rmse <= 0.03 * mean);
        assert_int_equal(off, 0);
        assert_true(away > n / 3);
        free(f);
        free(r);
    }
    brv_free(vf);
    brv_free(vr);
    unlink(fast_p);
    unlink(ref_p);
    rmdir(dir);
    free(dir);
    brm_scene_free(s);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(fast_path_should_match_reference_on_the_demo_scene),
    };
    return cmocka_run_group_tests_name("bake-reference", tests, NULL, NULL);
}
