/* Every brick is one standard zstd frame (RFC 8878) with its checksum: the stock `zstd -d`
 * command decodes each one to the same payload as the library's own decompression.
 * usage: test_zstd_frames ZSTD */
#include <stdlib.h>
#include <zstd.h>

#include "check.h"
#include "fixture.h"
#include "volume/brv_internal.h"

static const char *zstd_cmd;

static void every_brick_should_decode_with_the_zstd_command(void **state)
{
    (void)state;
    brv_channel_desc ch[5] = {{"extinction", "1/m", BRV_ENCODING_F16},
                              {"occupancy", "", BRV_ENCODING_F32},
                              {"inscatter.r", "cd/m2/m", BRV_ENCODING_RGB9E5},
                              {"inscatter.g", "cd/m2/m", BRV_ENCODING_RGB9E5},
                              {"inscatter.b", "cd/m2/m", BRV_ENCODING_RGB9E5}};
    brv_write_desc d = fixture_world(40, 20, 18, ch, 5); /* 3 x 2 x 2 bricks, clipped ones too */
    size_t size;
    brv_result r;
    uint8_t *buf = fixture_write(&d, fixture_smooth, NULL, &size, &r);
    assert_non_null(buf);
    const uint8_t *bt = buf + brv_rd64(buf + 32) + BRV_TABLES_FIXED + 5 * BRV_CHANNEL_ENTRY;
    char dir[] = "/tmp/brv_zstd_XXXXXX";
    assert_non_null(mkdtemp(dir));
    char in[256], out[256], cmd[1024];
    snprintf(in, sizeof in, "%s/brick.zst", dir);
    snprintf(out, sizeof out, "%s/brick.raw", dir);
    for (uint32_t b = 0; b < 12; b++) {
        const uint8_t *frame = buf + brv_rd64(bt + 16 * b);
        size_t cs = brv_rd32(bt + 16 * b + 8);
        /* Standard frame magic 0xFD2FB528 (RFC 8878 §3.1.1), little-endian. */
        assert_int_equal(brv_rd32(frame), 0xFD2FB528u);
        /* Frame_Header_Descriptor bit 2: Content_Checksum_flag. */
        assert_true(frame[4] & 0x04);
        FILE *f = fopen(in, "wb");
        assert_non_null(f);
        assert_int_equal(fwrite(frame, 1, cs, f), cs);
        fclose(f);
        snprintf(cmd, sizeof cmd, "'%s' -d -q -f -c '%s' > '%s'", zstd_cmd, in, out);
        assert_int_equal(system(cmd), 0);
        f = fopen(out, "rb");
        assert_non_null(f);
        static uint8_t theirs[1 << 20], ours[1 << 20];
        size_t n = fread(theirs, 1, sizeof theirs, f);
        fclose(f);
        size_t m = ZSTD_decompress(ours, sizeof ours, frame, cs);
        assert_false(ZSTD_isError(m));
        assert_int_equal(n, m);
        assert_memory_equal(theirs, ours, n);
        assert_true(n > 5 * 4); /* five groups' headers at least */
    }
    remove(in);
    remove(out);
    remove(dir);
    free(buf);
}

int main(int argc, char **argv)
{
    zstd_cmd = argc > 1 ? argv[1] : "zstd";
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(every_brick_should_decode_with_the_zstd_command),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
