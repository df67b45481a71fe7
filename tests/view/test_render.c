/* Slice pictures: orientation of every axis in PFM and PPM, legends, sheets, errors. */
#include "check.h"

#include <stdlib.h>
#include <string.h>

#include "view/font.h"
#include "view/render.h"
#include "view/slice.h"
#include "view/tone.h"
#include "view_test_util.h"

enum { NX = 4, NY = 3, NZ = 5 };   /* all different, so a transposed slice shows */

/* A volume whose values encode their coordinates: v = i + 10 j + 100 k. */
static float *coord_volume(void)
{
    float *v = malloc(sizeof(float) * NX * NY * NZ);
    for (int k = 0; k < NZ; k++)
        for (int j = 0; j < NY; j++)
            for (int i = 0; i < NX; i++) v[i + NX * (j + NY * k)] = (float)(i + 10 * j + 100 * k);
    return v;
}

static brm_view_input scalar_input(const float *v)
{
    brm_view_input in;
    memset(&in, 0, sizeof in);
    in.kind = BRV_GRID_WORLD;
    in.n[0] = NX; in.n[1] = NY; in.n[2] = NZ;
    in.channel_count = 1;
    in.data[0] = v;
    in.name[0] = "extinction";
    in.units[0] = "1/m";
    return in;
}

/* Expected value at image (col, row), row 0 = top, by SPEC.md's slice orientation:
 * z-slice x right, y up; y-slice x right, z up; x-slice z right, y up. */
static float expected(brm_axis axis, uint32_t index, uint32_t col, uint32_t row)
{
    switch (axis) {
    case BRM_AXIS_Z: return (float)(col + 10 * (NY - 1 - row) + 100 * index);
    case BRM_AXIS_Y: return (float)(col + 10 * index + 100 * (NZ - 1 - row));
    default:         return (float)(index + 10 * (NY - 1 - row) + 100 * col);
    }
}

static void slice_should_orient_each_axis_as_the_spec_says(void **state)
{
    (void)state;
    float *v = coord_volume();
    const uint32_t n[3] = {NX, NY, NZ};
    const uint32_t want_w[3] = {NZ, NX, NX}, want_h[3] = {NY, NZ, NY};
    for (int a = 0; a < 3; a++) {
        uint32_t w, h;
        brm_slice_dims(n, (brm_axis)a, &w, &h);
        assert_int_equal(w, want_w[a]);
        assert_int_equal(h, want_h[a]);
        float out[NX * NZ];
        brm_slice_extract(v, n, (brm_axis)a, 2, out);
        for (uint32_t r = 0; r < h; r++)
            for (uint32_t c = 0; c < w; c++) assert_true(out[r * w + c] == expected((brm_axis)a, 2, c, r));
    }
    free(v);
}

static void pfm_slice_should_store_bottom_row_first_for_every_axis(void **state)
{
    (void)state;
    float *v = coord_volume();
    brm_view_input in = scalar_input(v);
    for (int a = 0; a < 3; a++) {
        brm_view_options o;
        memset(&o, 0, sizeof o);
        o.axis = (brm_axis)a;
        o.index = 1;
        o.pfm = true;
        brm_view_result r;
        assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
        parsed_image p;
        assert_true(parse_header(r.bytes, r.len, &p));
        assert_string_equal(p.magic, "Pf");
        assert_true(p.scale_or_maxval == -1.0);
        uint32_t w = a == 0 ? NZ : NX, h = a == 1 ? NZ : NY;
        assert_int_equal(p.w, w);
        assert_int_equal(p.h, h);
        assert_int_equal(r.len, p.raster + 4u * w * h);
        /* Source: Netpbm pfm(5): rows are stored bottom to top. Stored row s is image row
         * h − 1 − s (image row 0 = top). */
        for (uint32_t s = 0; s < h; s++)
            for (uint32_t c = 0; c < w; c++)
                assert_true(pfm_sample(r.bytes + p.raster, (size_t)s * w + c) ==
                            expected((brm_axis)a, 1, c, h - 1 - s));
        brm_view_result_free(&r);
    }
    free(v);
}

static void ppm_slice_should_show_every_cell_in_place_with_its_colour(void **state)
{
    (void)state;
    float *v = coord_volume();
    brm_view_input in = scalar_input(v);
    for (int a = 0; a < 3; a++) {
        brm_view_options o;
        memset(&o, 0, sizeof o);
        o.axis = (brm_axis)a;
        o.index = 2;
        o.range_set = true;
        o.range_lo = 0.0;
        o.range_hi = 500.0;
        brm_view_result r;
        assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
        assert_int_equal(r.mode, BRM_VIEW_MODE_SCALAR);
        parsed_image p;
        assert_true(parse_header(r.bytes, r.len, &p));
        assert_string_equal(p.magic, "P6");
        assert_true(p.scale_or_maxval == 255.0);
        assert_int_equal(p.w, r.width);
        assert_int_equal(p.h, r.height);
        assert_int_equal(r.len, p.raster + 3u * p.w * p.h);
        uint32_t w = a == 0 ? NZ : NX, h = a == 1 ? NZ : NY;
        /* automatic magnification: long side at least 256 px */
        uint32_t lng = w > h ? w : h;
        assert_int_equal(r.scale, (256 + lng - 1) / lng);
        assert_true(r.height > h * r.scale);   /* a legend below */
        for (uint32_t y = 0; y < h * r.scale; y++)
            for (uint32_t x = 0; x < w * r.scale; x++) {
                uint8_t want[3];
                brm_falsecolor(expected((brm_axis)a, 2, x / r.scale, y / r.scale) / 500.0, want);
                const uint8_t *px = r.bytes + p.raster + 3 * ((size_t)(r.slice_y + y) * p.w + r.slice_x + x);
                assert_memory_equal(px, want, 3);
            }
        brm_view_result_free(&r);
    }
    free(v);
}

static void index_out_of_range_should_name_the_range(void **state)
{
    (void)state;
    float *v = coord_volume();
    brm_view_input in = scalar_input(v);
    brm_view_options o;
    memset(&o, 0, sizeof o);
    o.axis = BRM_AXIS_Z;
    o.index = NZ;
    brm_view_result r;
    memset(&r, 0, sizeof r);
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_view_render(&in, &o, &r, &d), BRM_E_USAGE);
    assert_non_null(strstr(d.message, "0..4"));
    assert_null(r.bytes);
    o.axis = BRM_AXIS_MAX_ENUM;
    o.index = 0;
    brm_diag_init(&d);
    assert_int_equal(brm_view_render(&in, &o, &r, &d), BRM_E_USAGE);
    assert_non_null(strstr(d.message, "x, y or z"));
    free(v);
}

static void scalar_range_should_follow_the_slice_or_the_unit_interval(void **state)
{
    (void)state;
    float *v = coord_volume();
    brm_view_input in = scalar_input(v);
    brm_view_options o;
    memset(&o, 0, sizeof o);
    o.axis = BRM_AXIS_Z;
    o.index = 3;
    brm_view_result r;
    assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
    assert_near(r.range_lo, 300.0, 0, 0);            /* min of slice z=3: 0 + 0 + 300 */
    assert_near(r.range_hi, 3 + 20 + 300.0, 0, 0);   /* max: i=3, j=2 */
    brm_view_result_free(&r);
    in.name[0] = "transmittance";
    assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
    assert_near(r.range_lo, 0.0, 0, 0);
    assert_near(r.range_hi, 1.0, 0, 0);
    brm_view_result_free(&r);
    free(v);
}

static void radiance_should_tonemap_to_grey_with_zero_black(void **state)
{
    (void)state;
    float v[NX * NY * NZ];
    for (int i = 0; i < NX * NY * NZ; i++) v[i] = (float)(i % 7);
    brm_view_input in = scalar_input(v);
    in.name[0] = "inscatter.g";
    in.units[0] = "cd/m2/m";
    brm_view_options o;
    memset(&o, 0, sizeof o);
    o.axis = BRM_AXIS_Z;
    o.index = 0;
    o.exposure_set = true;
    o.exposure_ev = -1.0;   /* k = 0.5 */
    o.no_legend = true;
    brm_view_result r;
    assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
    assert_int_equal(r.mode, BRM_VIEW_MODE_RADIANCE);
    assert_near(r.exposure_ev, -1.0, 1e-12, 0);
    assert_int_equal(r.height, NY * r.scale);   /* no legend */
    parsed_image p;
    assert_true(parse_header(r.bytes, r.len, &p));
    for (uint32_t row = 0; row < NY; row++)
        for (uint32_t col = 0; col < NX; col++) {
            float x = v[col + NX * (NY - 1 - row)];
            uint8_t g = brm_srgb_byte(brm_tone(0.5 * x));
            const uint8_t *px = r.bytes + p.raster + 3 * ((size_t)row * r.scale * p.w + col * r.scale);
            assert_int_equal(px[0], g);
            assert_int_equal(px[1], g);
            assert_int_equal(px[2], g);
            if (x == 0.0f) assert_int_equal(g, 0);
        }
    brm_view_result_free(&r);
}

static void three_channels_should_make_rgb_and_refuse_signed_ones(void **state)
{
    (void)state;
    float rr[NX * NY * NZ], gg[NX * NY * NZ], bb[NX * NY * NZ];
    for (int i = 0; i < NX * NY * NZ; i++) {
        rr[i] = 1.0f;
        gg[i] = 0.25f;
        bb[i] = 0.0f;
    }
    brm_view_input in = scalar_input(rr);
    in.channel_count = 3;
    in.data[1] = gg;
    in.data[2] = bb;
    in.name[0] = "inscatter.r"; in.name[1] = "inscatter.g"; in.name[2] = "inscatter.b";
    in.units[0] = in.units[1] = in.units[2] = "cd/m2/m";
    brm_view_options o;
    memset(&o, 0, sizeof o);
    o.axis = BRM_AXIS_Y;
    o.index = 1;
    brm_view_result r;
    assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
    /* auto exposure: the 99th percentile of per-cell maxima (all 1) at tone 0.8 → k = 4 */
    assert_near(r.exposure_ev, 2.0, 1e-12, 0);
    parsed_image p;
    assert_true(parse_header(r.bytes, r.len, &p));
    const uint8_t *px = r.bytes + p.raster;
    assert_int_equal(px[0], brm_srgb_byte(0.8));
    assert_int_equal(px[1], brm_srgb_byte(brm_tone(1.0)));
    assert_int_equal(px[2], 0);
    brm_view_result_free(&r);

    o.pfm = true;
    assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
    assert_true(parse_header(r.bytes, r.len, &p));
    assert_string_equal(p.magic, "PF");
    assert_true(pfm_sample(r.bytes + p.raster, 0) == 1.0f);
    assert_true(pfm_sample(r.bytes + p.raster, 1) == 0.25f);
    assert_true(pfm_sample(r.bytes + p.raster, 2) == 0.0f);
    brm_view_result_free(&r);

    in.name[1] = "dir.g1";
    o.pfm = false;
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_view_render(&in, &o, &r, &d), BRM_E_USAGE);
    assert_non_null(strstr(d.message, "dir.g1"));
}

static void signed_channel_should_use_the_diverging_map(void **state)
{
    (void)state;
    float v[NX * NY * NZ];
    for (int i = 0; i < NX * NY * NZ; i++) v[i] = (i % 2) ? 2.0f : -1.0f;
    brm_view_input in = scalar_input(v);
    in.name[0] = "dir.r3";
    in.units[0] = "cd/m2/m";
    assert_int_equal(brm_view_mode_for("dir.r3", "cd/m2/m"), BRM_VIEW_MODE_SIGNED);
    assert_int_equal(brm_view_mode_for("dir.r0", "cd/m2/m"), BRM_VIEW_MODE_RADIANCE);
    assert_int_equal(brm_view_mode_for("sh.b8", "cd/m2"), BRM_VIEW_MODE_SIGNED);
    assert_int_equal(brm_view_mode_for("validity", ""), BRM_VIEW_MODE_SCALAR);
    brm_view_options o;
    memset(&o, 0, sizeof o);
    o.axis = BRM_AXIS_Z;
    brm_view_result r;
    assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
    assert_int_equal(r.mode, BRM_VIEW_MODE_SIGNED);
    assert_near(r.range_lo, -2.0, 0, 0);
    assert_near(r.range_hi, 2.0, 0, 0);
    parsed_image p;
    assert_true(parse_header(r.bytes, r.len, &p));
    /* bottom-left of a z-slice is cell (0, 0, 0) = −1 → diverging(−0.5) */
    uint8_t want[3];
    brm_diverging(-0.5, want);
    const uint8_t *px = r.bytes + p.raster + 3 * ((size_t)(NY * r.scale - 1) * p.w);
    assert_memory_equal(px, want, 3);
    brm_view_result_free(&r);
}

static void sheet_should_tile_every_slice_with_its_index(void **state)
{
    (void)state;
    float *v = coord_volume();
    brm_view_input in = scalar_input(v);
    brm_view_options o;
    memset(&o, 0, sizeof o);
    o.axis = BRM_AXIS_Z;
    o.all = true;
    o.scale = 8;
    o.range_set = true;
    o.range_lo = 0.0;
    o.range_hi = 500.0;
    brm_view_result r;
    assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
    assert_int_equal(r.columns, 3);   /* 5 tiles: ceil(sqrt 5) = 3 columns, 2 rows */
    parsed_image p;
    assert_true(parse_header(r.bytes, r.len, &p));
    for (uint32_t t = 0; t < NZ; t++) {
        uint32_t ox = (t % 3) * r.tile_pitch_x, oy = (t / 3) * r.tile_pitch_y + r.slice_y;
        /* the tile's top-left cell is (0, NY−1, t) */
        uint8_t want[3];
        brm_falsecolor(expected(BRM_AXIS_Z, t, 0, 0) / 500.0, want);
        assert_memory_equal(r.bytes + p.raster + 3 * ((size_t)oy * p.w + ox), want, 3);
        /* its label band holds ink (the index digits) */
        int ink = 0;
        for (uint32_t y = oy - r.slice_y; y < oy; y++)
            for (uint32_t x = ox; x < ox + 12; x++)
                if (r.bytes[p.raster + 3 * ((size_t)y * p.w + x)] > 200) ink++;
        assert_true(ink > 4);
    }
    brm_view_result_free(&r);

    o.pfm = true;
    o.scale = 0;
    assert_int_equal(brm_view_render(&in, &o, &r, NULL), BRM_OK);
    assert_true(parse_header(r.bytes, r.len, &p));
    assert_int_equal(p.w, 3 * NX);
    assert_int_equal(p.h, 2 * NY);
    /* tile 4 sits at column 1, row 1 (bottom row of tiles); its bottom-left cell (0,0,4) is the
     * first sample of stored row 0 at x = NX; tile slots past the last are 0 */
    assert_true(pfm_sample(r.bytes + p.raster, NX) == 400.0f);
    assert_true(pfm_sample(r.bytes + p.raster, 2 * NX) == 0.0f);
    /* stored row 2·NY − 1 is the top row of tile 0: cell (0, NY−1, 0) */
    assert_true(pfm_sample(r.bytes + p.raster, (size_t)(2 * NY - 1) * 3 * NX) == 20.0f);
    brm_view_result_free(&r);
    free(v);
}

static void frustum_legend_should_widen_for_its_depth_line(void **state)
{
    (void)state;
    float *v = coord_volume();
    brm_view_input in = scalar_input(v);
    const double depths[NZ + 1] = {0.3, 0.6, 1.2, 2.4, 4.8, 9.6};
    brm_view_options o;
    memset(&o, 0, sizeof o);
    o.axis = BRM_AXIS_Z;
    o.index = 2;
    brm_view_result a, b;
    assert_int_equal(brm_view_render(&in, &o, &a, NULL), BRM_OK);
    in.kind = BRV_GRID_FRUSTUM;
    in.slice_depths = depths;
    assert_int_equal(brm_view_render(&in, &o, &b, NULL), BRM_OK);
    /* one more text line ("depth 1.2-2.4 m") in the frustum legend */
    assert_int_equal(b.height, a.height + BRM_FONT_LINE);
    brm_view_result_free(&a);
    brm_view_result_free(&b);
    free(v);
}

static void render_should_be_deterministic(void **state)
{
    (void)state;
    float *v = coord_volume();
    brm_view_input in = scalar_input(v);
    brm_view_options o;
    memset(&o, 0, sizeof o);
    o.axis = BRM_AXIS_X;
    o.all = true;
    brm_view_result a, b;
    assert_int_equal(brm_view_render(&in, &o, &a, NULL), BRM_OK);
    assert_int_equal(brm_view_render(&in, &o, &b, NULL), BRM_OK);
    assert_int_equal(a.len, b.len);
    assert_memory_equal(a.bytes, b.bytes, a.len);
    brm_view_result_free(&a);
    brm_view_result_free(&b);
    free(v);
}

static void font_should_cover_the_legend_characters(void **state)
{
    (void)state;
    const char *need = "0123456789abcdefghijklmnopqrstuvwxyz .,-+=:/()_%'#";
    for (const char *c = need; *c; c++) {
        uint8_t rows[7];
        assert_int_equal(brm_font_glyph(*c, rows), 1);
        int lit = 0;
        for (int r = 0; r < 7; r++) lit += rows[r] != 0;
        if (*c != ' ') assert_true(lit > 0);
        for (int r = 0; r < 7; r++) assert_true(rows[r] < 32);   /* 5 columns */
    }
    uint8_t rows[7];
    assert_int_equal(brm_font_glyph('@', rows), 0);   /* not in the font: a box */
    assert_int_equal(rows[0], 0x1f);
    assert_int_equal(brm_font_width("e+03", 2), (4 * 6 - 1) * 2);
    /* distinct glyphs for characters that are easy to confuse */
    uint8_t a[7], b[7];
    brm_font_glyph('0', a); brm_font_glyph('o', b);
    assert_memory_not_equal(a, b, 7);
    brm_font_glyph('5', a); brm_font_glyph('s', b);
    assert_memory_not_equal(a, b, 7);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(slice_should_orient_each_axis_as_the_spec_says),
        cmocka_unit_test(pfm_slice_should_store_bottom_row_first_for_every_axis),
        cmocka_unit_test(ppm_slice_should_show_every_cell_in_place_with_its_colour),
        cmocka_unit_test(index_out_of_range_should_name_the_range),
        cmocka_unit_test(scalar_range_should_follow_the_slice_or_the_unit_interval),
        cmocka_unit_test(radiance_should_tonemap_to_grey_with_zero_black),
        cmocka_unit_test(three_channels_should_make_rgb_and_refuse_signed_ones),
        cmocka_unit_test(signed_channel_should_use_the_diverging_map),
        cmocka_unit_test(sheet_should_tile_every_slice_with_its_index),
        cmocka_unit_test(frustum_legend_should_widen_for_its_depth_line),
        cmocka_unit_test(render_should_be_deterministic),
        cmocka_unit_test(font_should_cover_the_legend_characters),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
