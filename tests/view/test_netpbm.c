/* Our PPM and PFM files read back by Netpbm's own programs (pamfile, pfmtopam), found by
 * meson and passed as arguments. Netpbm is a required test tool (scripts/setup.sh installs
 * it): when meson did not find a program, its test FAILS rather than skips. */
#include "check.h"

#include <stdlib.h>
#include <string.h>

#include "view/render.h"

static const char *pamfile_path, *pfmtopam_path;

enum { NX = 6, NY = 4, NZ = 3 };

static float vol_r[NX * NY * NZ], vol_g[NX * NY * NZ], vol_b[NX * NY * NZ];

static brm_view_input input(uint32_t channels)
{
    for (int k = 0; k < NZ; k++)
        for (int j = 0; j < NY; j++)
            for (int i = 0; i < NX; i++) {
                int id = i + NX * (j + NY * k);
                vol_r[id] = (float)i / (NX - 1);   /* 0..1 across x */
                vol_g[id] = (float)j / (NY - 1);   /* 0..1 up y */
                vol_b[id] = 0.5f;
            }
    brm_view_input in;
    memset(&in, 0, sizeof in);
    in.kind = BRV_GRID_WORLD;
    in.n[0] = NX; in.n[1] = NY; in.n[2] = NZ;
    in.channel_count = channels;
    in.data[0] = vol_r; in.data[1] = vol_g; in.data[2] = vol_b;
    in.name[0] = "occupancy"; in.name[1] = "g"; in.name[2] = "b";
    in.units[0] = in.units[1] = in.units[2] = "";
    return in;
}

static void write_file(const char *path, const brm_view_result *r)
{
    FILE *f = fopen(path, "wb");
    assert_non_null(f);
    assert_int_equal(fwrite(r->bytes, 1, r->len, f), r->len);
    assert_int_equal(fclose(f), 0);
}

/* Runs a command and returns its whole stdout (malloc'd). */
static uint8_t *run(const char *cmd, size_t *len)
{
    FILE *p = popen(cmd, "r");
    assert_non_null(p);
    size_t cap = 1 << 16, n = 0;
    uint8_t *b = malloc(cap);
    size_t got;
    while ((got = fread(b + n, 1, cap - n - 1, p)) > 0) n += got;
    b[n] = '\0';
    assert_int_equal(pclose(p), 0);
    *len = n;
    return b;
}

static void require(const char *path, const char *name)
{
    if (path == NULL || path[0] == '\0') {
        print_error("%s was not found when the build was configured; install netpbm "
                    "(scripts/setup.sh) and reconfigure\n", name);
        fail();
    }
}

static void pamfile_should_accept_our_ppm(void **state)
{
    (void)state;
    require(pamfile_path, "pamfile");
    brm_view_input in = input(1);
    brm_view_options o;
    memset(&o, 0, sizeof o);
    o.axis = BRM_AXIS_Z;
    o.index = 1;
    brm_view_result r;
    assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
    write_file("view_netpbm.ppm", &r);
    char cmd[4200], want[128];
    snprintf(cmd, sizeof cmd, "'%s' view_netpbm.ppm", pamfile_path);
    size_t len;
    char *out = (char *)run(cmd, &len);
    /* Source: Netpbm pamfile(1) output for a raw PPM. */
    snprintf(want, sizeof want, "PPM raw, %u by %u  maxval 255", r.width, r.height);
    if (strstr(out, want) == NULL) {
        print_error("pamfile said: %s; expected: %s\n", out, want);
        fail();
    }
    free(out);
    brm_view_result_free(&r);
}

/* pfmtopam writes a PAM: header lines up to ENDHDR, then rows top to bottom; a sample is
 * round(value·255) with the default maxval (checked by hand on this machine's netpbm 11.01). */
static void pfmtopam_should_read_our_pfm_rows_in_the_same_order(void **state)
{
    (void)state;
    require(pfmtopam_path, "pfmtopam");
    for (uint32_t channels = 1; channels <= 3; channels += 2) {
        brm_view_input in = input(channels);
        brm_view_options o;
        memset(&o, 0, sizeof o);
        o.axis = BRM_AXIS_Z;
        o.index = 2;
        o.pfm = true;
        brm_view_result r;
        assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
        write_file("view_netpbm.pfm", &r);
        char cmd[4200];
        snprintf(cmd, sizeof cmd, "'%s' view_netpbm.pfm", pfmtopam_path);
        size_t len;
        uint8_t *out = run(cmd, &len);
        char want[96];
        snprintf(want, sizeof want, "WIDTH %d\nHEIGHT %d\nDEPTH %u\n", NX, NY, channels);
        assert_non_null(strstr((char *)out, want));
        assert_non_null(strstr((char *)out, channels == 3 ? "TUPLTYPE RGB" : "TUPLTYPE GRAYSCALE"));
        const char *end = strstr((char *)out, "ENDHDR\n");
        assert_non_null(end);
        const uint8_t *px = (const uint8_t *)end + 7;
        assert_int_equal((size_t)(out + len - px), (size_t)NX * NY * channels);
        /* Row 0 of the PAM is the top of the z-slice: y = NY − 1, green = 1. */
        for (uint32_t row = 0; row < NY; row++)
            for (uint32_t col = 0; col < NX; col++) {
                const uint8_t *s = px + (row * NX + col) * channels;
                long red = lround(255.0 * col / (NX - 1)), green = lround(255.0 * (NY - 1 - row) / (NY - 1));
                assert_true(labs((long)s[0] - red) <= 1);
                if (channels == 3) {
                    assert_true(labs((long)s[1] - green) <= 1);
                    assert_true(labs((long)s[2] - 128) <= 1);
                }
            }
        free(out);
        brm_view_result_free(&r);
    }
}

int main(int argc, char **argv)
{
    pamfile_path = argc > 1 ? argv[1] : "";
    pfmtopam_path = argc > 2 ? argv[2] : "";
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(pamfile_should_accept_our_ppm),
        cmocka_unit_test(pfmtopam_should_read_our_pfm_rows_in_the_same_order),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
