/* PPM and PFM encoders: headers and byte layout. Source for every layout check: Netpbm
 * ppm(5) and pfm(5) (Debian netpbm 11.01 man pages). */
#include "check.h"

#include <stdlib.h>
#include <string.h>

#include "view/image.h"
#include "view_test_util.h"

static void ppm_should_write_p6_header_and_rows_top_to_bottom(void **state)
{
    (void)state;
    const uint8_t bg[3] = {0, 0, 0};
    brm_image im = {0, 0, NULL};
    assert_int_equal(brm_image_alloc(&im, 3, 2, bg, NULL), BRM_OK);
    const uint8_t red[3] = {255, 0, 0}, blue[3] = {0, 0, 255};
    brm_image_put(&im, 0, 0, red);   /* top-left */
    brm_image_put(&im, 2, 1, blue);  /* bottom-right */
    uint8_t *b;
    size_t len;
    assert_int_equal(brm_ppm_encode(&im, &b, &len, NULL), BRM_OK);
    /* Source: Netpbm ppm(5) — "P6", whitespace, width, whitespace, height, whitespace, maxval,
     * exactly one whitespace, then rows top to bottom, R G B per pixel, 1 byte per sample. */
    const char *head = "P6\n3 2\n255\n";
    assert_int_equal(len, strlen(head) + 3 * 2 * 3);
    assert_memory_equal(b, head, strlen(head));
    const uint8_t *r = b + strlen(head);
    assert_int_equal(r[0], 255); assert_int_equal(r[1], 0); assert_int_equal(r[2], 0);
    for (int i = 3; i < 15; i++) assert_int_equal(r[i], 0);
    assert_int_equal(r[15], 0); assert_int_equal(r[16], 0); assert_int_equal(r[17], 255);
    parsed_image p;
    assert_true(parse_header(b, len, &p));
    assert_string_equal(p.magic, "P6");
    assert_int_equal(p.w, 3);
    assert_int_equal(p.h, 2);
    free(b);
    brm_image_free(&im);
}

static void pfm_should_store_rows_bottom_to_top_little_endian(void **state)
{
    (void)state;
    /* top row: 1, 2, 3; bottom row: 4, 5, 6 (held top to bottom) */
    const float px[6] = {1.0f, 2.0f, 3.0f, 4.0f, 5.0f, -0.5f};
    uint8_t *b;
    size_t len;
    assert_int_equal(brm_pfm_encode(px, 3, 2, 1, &b, &len, NULL), BRM_OK);
    /* Source: Netpbm pfm(5) — "Pf" grey, "w h", a negative scale for a little-endian raster,
     * each line ended by one whitespace; rows bottom to top, binary32 samples, no padding. */
    const char *head = "Pf\n3 2\n-1.0\n";
    assert_int_equal(len, strlen(head) + 6 * 4);
    assert_memory_equal(b, head, strlen(head));
    const uint8_t *r = b + strlen(head);
    /* First stored sample is the bottom-left one: 4.0f = 0x40800000, little-endian. */
    assert_int_equal(r[0], 0x00); assert_int_equal(r[1], 0x00);
    assert_int_equal(r[2], 0x80); assert_int_equal(r[3], 0x40);
    /* Bottom-right −0.5f = 0xBF000000. Source: IEEE 754 binary32 layout. */
    assert_int_equal(r[8], 0x00); assert_int_equal(r[11], 0xBF);
    assert_true(pfm_sample(r, 3) == 1.0f);   /* then the top row */
    assert_true(pfm_sample(r, 5) == 3.0f);
    parsed_image p;
    assert_true(parse_header(b, len, &p));
    assert_true(p.scale_or_maxval < 0.0);
    free(b);
}

static void pfm_should_interleave_three_samples_for_colour(void **state)
{
    (void)state;
    const float px[2 * 3] = {0.1f, 0.2f, 0.3f, 0.4f, 0.5f, 0.6f};   /* one row, two pixels */
    uint8_t *b;
    size_t len;
    assert_int_equal(brm_pfm_encode(px, 2, 1, 3, &b, &len, NULL), BRM_OK);
    const char *head = "PF\n2 1\n-1.0\n";   /* Source: Netpbm pfm(5), "PF" = colour */
    assert_int_equal(len, strlen(head) + 6 * 4);
    assert_memory_equal(b, head, strlen(head));
    for (int i = 0; i < 6; i++) assert_true(pfm_sample(b + strlen(head), (size_t)i) == px[i]);
    free(b);
}

static void image_should_refuse_oversized_and_empty_pictures(void **state)
{
    (void)state;
    const uint8_t bg[3] = {0, 0, 0};
    brm_image im = {0, 0, NULL};
    brm_diag d;
    brm_diag_init(&d);
    assert_int_equal(brm_image_alloc(&im, BRM_IMAGE_MAX_SIDE + 1, 4, bg, &d), BRM_E_USAGE);
    assert_non_null(strstr(d.message, "--scale"));
    assert_null(im.rgb);
    assert_int_equal(brm_image_alloc(&im, 0, 4, bg, NULL), BRM_E_USAGE);
}

static void blit_should_magnify_by_nearest_neighbour(void **state)
{
    (void)state;
    const uint8_t bg[3] = {9, 9, 9};
    const uint8_t src[2 * 3] = {10, 20, 30, 40, 50, 60};   /* 2×1 */
    brm_image im = {0, 0, NULL};
    assert_int_equal(brm_image_alloc(&im, 7, 4, bg, NULL), BRM_OK);
    brm_image_blit_scaled(&im, 1, 1, src, 2, 1, 3);
    for (uint32_t y = 0; y < 4; y++)
        for (uint32_t x = 0; x < 7; x++) {
            const uint8_t *p = im.rgb + 3 * (y * 7 + x);
            uint8_t want = 9;
            if (y >= 1 && y < 4 && x >= 1 && x < 4) want = 10;
            if (y >= 1 && y < 4 && x >= 4 && x < 7) want = 40;
            assert_int_equal(p[0], want);
        }
    brm_image_free(&im);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(ppm_should_write_p6_header_and_rows_top_to_bottom),
        cmocka_unit_test(pfm_should_store_rows_bottom_to_top_little_endian),
        cmocka_unit_test(pfm_should_interleave_three_samples_for_colour),
        cmocka_unit_test(image_should_refuse_oversized_and_empty_pictures),
        cmocka_unit_test(blit_should_magnify_by_nearest_neighbour),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
