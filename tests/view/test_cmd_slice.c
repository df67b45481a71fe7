/* The slice command end to end: .brv written by the project's writer → brume slice → the
 * PPM/PFM bytes, exit codes and messages of SPEC.md. Files go to the current folder. */
#include "check.h"

#include <fcntl.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "base/sh.h"
#include "brv_fixture.h"
#include "cli/cli.h"
#include "view/tone.h"
#include "view_test_util.h"

enum { NX = 5, NY = 3, NZ = 6 };
static const char *WORLD = "view_cmd_world.brv";
static const char *PROBES = "view_cmd_probes.brv";
static const char *FRUSTUM = "view_cmd_frustum.brv";
static char err_text[8192];

static float value_at(uint32_t i, uint32_t j, uint32_t k) { return (float)(i + 10 * j + 100 * k); }

/* Runs brume slice with the NULL-terminated arguments; stderr is captured in err_text. */
static int run(const char *first, ...)
{
    va_list ap;
    va_start(ap, first);
    int rc = run_command_v(brm_cmd_slice, "slice", "view_cmd_stderr.txt", err_text, sizeof err_text, first, ap);
    va_end(ap);
    return rc;
}

static uint8_t *slurp(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    if (f == NULL) return NULL;
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    uint8_t *b = malloc((size_t)n + 1);
    *len = fread(b, 1, (size_t)n, f);
    fclose(f);
    return b;
}

static int setup(void **state)
{
    (void)state;
    const uint32_t n[3] = {NX, NY, NZ};
    size_t cells = NX * NY * NZ;
    float *e = malloc(cells * sizeof *e), *r = malloc(cells * sizeof *r), *g = malloc(cells * sizeof *g),
          *b = malloc(cells * sizeof *b);
    for (uint32_t k = 0; k < NZ; k++)
        for (uint32_t j = 0; j < NY; j++)
            for (uint32_t i = 0; i < NX; i++) {
                size_t id = i + NX * (j + NY * k);
                e[id] = value_at(i, j, k);
                r[id] = 1.0f;
                g[id] = 0.5f;
                b[id] = 0.25f;
            }
    const char *names[4] = {"extinction", "inscatter.r", "inscatter.g", "inscatter.b"};
    const char *units[4] = {"1/m", "cd/m2/m", "cd/m2/m", "cd/m2/m"};
    const float *ch[4] = {e, r, g, b};
    if (!write_volume(WORLD, BRV_GRID_WORLD, n, NULL, 4, names, units, ch)) return -1;
    const double depths[NZ + 1] = {0.5, 1, 2, 4, 8, 16, 32};
    if (!write_volume(FRUSTUM, BRV_GRID_FRUSTUM, n, depths, 1, names, units, ch)) return -1;

    /* Probes: red sees a constant environment L = 1 (L00 = 4π·Y00 = 2√π, the rest 0); green
     * sees a directional light of unit irradiance from +z (L_lm = Y_lm(+z)); blue is dark. */
    const uint32_t pn[3] = {2, 2, 2};
    static float sh[27][8];
    static char nm[27][12];
    const char *pnames[27], *punits[27];
    const float *pch[27];
    double yz[9];
    brm_sh9(brm_v3(0, 0, 1), yz);
    for (int c = 0; c < 3; c++)
        for (int i = 0; i < 9; i++) {
            int ci = c * 9 + i;
            snprintf(nm[ci], sizeof nm[ci], "sh.%c%d", "rgb"[c], i);
            pnames[ci] = nm[ci];
            punits[ci] = "cd/m2";
            for (int p = 0; p < 8; p++)
                sh[ci][p] = c == 0 ? (i == 0 ? (float)(2.0 * sqrt(BRM_PI)) : 0.0f) : c == 1 ? (float)yz[i] : 0.0f;
            pch[ci] = sh[ci];
        }
    if (!write_volume(PROBES, BRV_GRID_PROBES, pn, NULL, 27, pnames, punits, pch)) return -1;
    free(e); free(r); free(g); free(b);
    return 0;
}

static void slice_should_write_an_oriented_pfm_from_a_volume(void **state)
{
    (void)state;
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "x", "--index", "3", "-o",
                         "view_cmd_x3.pfm", NULL), 0);
    size_t len = 0;
    uint8_t *b = slurp("view_cmd_x3.pfm", &len);
    assert_non_null(b);
    parsed_image p;
    assert_true(parse_header(b, len, &p));
    assert_string_equal(p.magic, "Pf");
    assert_int_equal(p.w, NZ);   /* x-slice: z to the right */
    assert_int_equal(p.h, NY);   /* y up */
    assert_int_equal(len, p.raster + 4u * NZ * NY);
    /* Source: Netpbm pfm(5) — first stored row is the bottom one (y = 0). */
    for (uint32_t s = 0; s < NY; s++)
        for (uint32_t c = 0; c < NZ; c++) assert_true(pfm_sample(b + p.raster, s * NZ + c) == value_at(3, s, c));
    free(b);
}

static void slice_should_write_a_ppm_whose_cells_carry_their_colours(void **state)
{
    (void)state;
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "y", "--index", "2", "--range",
                         "0,600", "--scale", "3", "-o", "view_cmd_y2.ppm", NULL), 0);
    size_t len = 0;
    uint8_t *b = slurp("view_cmd_y2.ppm", &len);
    parsed_image p;
    assert_true(parse_header(b, len, &p));
    assert_string_equal(p.magic, "P6");
    assert_int_equal(len, p.raster + 3u * p.w * p.h);
    /* y-slice: x right, z up; 3 px per cell; row 0 is the top (z = NZ − 1). */
    for (uint32_t row = 0; row < NZ; row++)
        for (uint32_t col = 0; col < NX; col++) {
            uint8_t want[3];
            brm_falsecolor(value_at(col, 2, NZ - 1 - row) / 600.0, want);
            const uint8_t *px = b + p.raster + 3 * ((size_t)(row * 3 + 1) * p.w + col * 3 + 1);
            assert_memory_equal(px, want, 3);
        }
    free(b);
}

static void slice_should_make_colour_from_three_channels(void **state)
{
    (void)state;
    assert_int_equal(run(WORLD, "--channel", "inscatter.r,inscatter.g,inscatter.b", "--axis", "z",
                         "--index", "0", "--exposure", "0", "-o", "view_cmd_rgb.ppm", NULL), 0);
    size_t len = 0;
    uint8_t *b = slurp("view_cmd_rgb.ppm", &len);
    parsed_image p;
    assert_true(parse_header(b, len, &p));
    const uint8_t *px = b + p.raster;
    assert_int_equal(px[0], brm_srgb_byte(0.5));        /* 1/(1+1) */
    assert_int_equal(px[1], brm_srgb_byte(1.0 / 3.0));  /* 0.5/1.5 */
    assert_int_equal(px[2], brm_srgb_byte(0.2));        /* 0.25/1.25 */
    free(b);
}

static void unknown_channel_should_list_the_available_ones(void **state)
{
    (void)state;
    assert_int_equal(run(WORLD, "--channel", "density", "--axis", "z", "--index", "0", "-o",
                         "view_cmd_bad.ppm", NULL), BRM_EXIT_USAGE);
    assert_non_null(strstr(err_text, "no channel 'density'"));
    assert_non_null(strstr(err_text, "extinction, inscatter.r, inscatter.g, inscatter.b"));
    assert_int_equal(access("view_cmd_bad.ppm", F_OK), -1);   /* no output */
}

static void usage_errors_should_exit_2_with_the_fix(void **state)
{
    (void)state;
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "z", "--index", "6", "-o", "view_cmd_bad.ppm", NULL), 2);
    assert_non_null(strstr(err_text, "0..5"));
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "w", "--index", "0", "-o", "view_cmd_bad.ppm", NULL), 2);
    assert_non_null(strstr(err_text, "give x, y or z"));
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "z", "--index", "0", "-o", "view_cmd_bad.png", NULL), 2);
    assert_non_null(strstr(err_text, ".ppm or .pfm"));
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "z", "-o", "view_cmd_bad.ppm", NULL), 2);
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "z", "--index", "0", "--all", "-o", "view_cmd_bad.ppm", NULL), 2);
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "z", "--index", "0", NULL), 2);
    assert_int_equal(run(WORLD, "--channel", "extinction,inscatter.r", "--axis", "z", "--index", "0", "-o", "view_cmd_bad.ppm", NULL), 2);
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "z", "--index", "-1", "-o", "view_cmd_bad.ppm", NULL), 2);
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "z", "--index", "0", "--scale", "0", "-o", "view_cmd_bad.ppm", NULL), 2);
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "z", "--index", "0", "--bogus", "-o", "view_cmd_bad.ppm", NULL), 2);
    assert_int_equal(run(WORLD, "--irradiance", "+x", "--axis", "z", "--index", "0", "-o", "view_cmd_bad.ppm", NULL), 2);
    assert_non_null(strstr(err_text, "sh.r0"));
    assert_int_equal(access("view_cmd_bad.ppm", F_OK), -1);
    assert_int_equal(run("--help", NULL), 0);
}

static void corrupt_volume_should_exit_1_and_keep_the_previous_output(void **state)
{
    (void)state;
    FILE *f = fopen("view_cmd_keep.ppm", "wb");
    fputs("previous", f);
    fclose(f);
    f = fopen("view_cmd_garbage.brv", "wb");
    fputs("this is not a volume at all, just some bytes of text", f);
    fclose(f);
    assert_int_equal(run("view_cmd_garbage.brv", "--channel", "extinction", "--axis", "z", "--index", "0",
                         "-o", "view_cmd_keep.ppm", NULL), BRM_EXIT_INPUT);
    assert_non_null(strstr(err_text, "view_cmd_garbage.brv"));
    /* a truncated copy of a good volume */
    size_t len = 0;
    uint8_t *b = slurp(WORLD, &len);
    f = fopen("view_cmd_trunc.brv", "wb");
    fwrite(b, 1, len / 2, f);
    fclose(f);
    free(b);
    assert_int_equal(run("view_cmd_trunc.brv", "--channel", "extinction", "--axis", "z", "--index", "0",
                         "-o", "view_cmd_keep.ppm", NULL), BRM_EXIT_INPUT);
    b = slurp("view_cmd_keep.ppm", &len);
    assert_int_equal(len, 8);
    assert_memory_equal(b, "previous", 8);
    free(b);
    assert_int_equal(run("view_cmd_missing.brv", "--channel", "extinction", "--axis", "z", "--index", "0",
                         "-o", "view_cmd_keep.ppm", NULL), BRM_EXIT_IO);
    assert_int_equal(run(WORLD, "--channel", "extinction", "--axis", "z", "--index", "0",
                         "-o", "view_cmd_no_such_dir/out.ppm", NULL), BRM_EXIT_IO);
}

static void irradiance_should_follow_ramamoorthi_hanrahan(void **state)
{
    (void)state;
    const char *axes[3] = {"+z", "-z", "+x"};
    /* Source: Ramamoorthi & Hanrahan 2001 via REFERENCES.md §3: a constant environment L = 1
     * gives E = π for every normal; a unit directional light along +z, reconstructed at L2,
     * gives E = 17/16 facing it, 1/16 facing away and 3/32 at 90°. */
    const double green[3] = {17.0 / 16.0, 1.0 / 16.0, 3.0 / 32.0};
    for (int a = 0; a < 3; a++) {
        assert_int_equal(run(PROBES, "--irradiance", axes[a], "--axis", "z", "--index", "1", "-o",
                             "view_cmd_irr.pfm", NULL), 0);
        size_t len = 0;
        uint8_t *b = slurp("view_cmd_irr.pfm", &len);
        parsed_image p;
        assert_true(parse_header(b, len, &p));
        assert_string_equal(p.magic, "PF");
        assert_int_equal(p.w, 2);
        assert_int_equal(p.h, 2);
        for (size_t px = 0; px < 4; px++) {
            assert_near(pfm_sample(b + p.raster, px * 3 + 0), BRM_PI, 1e-5, 0);
            assert_near(pfm_sample(b + p.raster, px * 3 + 1), green[a], 1e-6, 0);
            assert_near(pfm_sample(b + p.raster, px * 3 + 2), 0.0, 0, 0);
        }
        free(b);
    }
    assert_int_equal(run(PROBES, "--irradiance", "x", "--axis", "z", "--index", "0", "-o", "view_cmd_irr.ppm", NULL), 2);
    assert_int_equal(run(PROBES, "--irradiance", "+y", "--axis", "y", "--all", "-o", "view_cmd_irr.ppm", NULL), 0);
}

static void frustum_slice_should_render(void **state)
{
    (void)state;
    assert_int_equal(run(FRUSTUM, "--channel", "extinction", "--axis", "z", "--index", "5", "-o",
                         "view_cmd_fr.ppm", NULL), 0);
    assert_int_equal(run(FRUSTUM, "--channel", "extinction", "--axis", "x", "--all", "-o",
                         "view_cmd_fr_sheet.ppm", NULL), 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(slice_should_write_an_oriented_pfm_from_a_volume),
        cmocka_unit_test(slice_should_write_a_ppm_whose_cells_carry_their_colours),
        cmocka_unit_test(slice_should_make_colour_from_three_channels),
        cmocka_unit_test(unknown_channel_should_list_the_available_ones),
        cmocka_unit_test(usage_errors_should_exit_2_with_the_fix),
        cmocka_unit_test(corrupt_volume_should_exit_1_and_keep_the_previous_output),
        cmocka_unit_test(irradiance_should_follow_ramamoorthi_hanrahan),
        cmocka_unit_test(frustum_slice_should_render),
    };
    return cmocka_run_group_tests(tests, setup, NULL);
}
