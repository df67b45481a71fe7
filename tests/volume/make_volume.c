/* Writes small volumes for the command-line and example tests (invented data):
 *   make_volume world|world-b|world-wide|frustum|probes OUT.brv
 * world-b is world with channel "extinction" raised by 0.01 everywhere (for diff); world-wide
 * has other cells (not comparable). */
#include <stdio.h>
#include <string.h>

#include "fixture.h"

static float world_b(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    return fixture_smooth(c, x, y, z, user) + (c == 0 ? 0.01f : 0.0f);
}

int main(int argc, char **argv)
{
    if (argc != 3) {
        fprintf(stderr, "usage: make_volume world|world-b|world-wide|frustum|probes OUT.brv\n");
        return 2;
    }
    const char *kind = argv[1];
    brv_channel_desc ch[5] = {{"extinction", "1/m", BRV_ENCODING_F32},
                              {"occupancy", "", BRV_ENCODING_F16},
                              {"inscatter.r", "cd/m2/m", BRV_ENCODING_RGB9E5},
                              {"inscatter.g", "cd/m2/m", BRV_ENCODING_RGB9E5},
                              {"inscatter.b", "cd/m2/m", BRV_ENCODING_RGB9E5}};
    brv_write_desc d = fixture_world(20, 10, 12, ch, 5);
    d.metadata = "{\"brume\":1,\"scene\":\"test-yard\",\"target\":\"yard\",\"tool\":\"brume test\"}";
    d.metadata_len = strlen(d.metadata);
    fixture_field f = fixture_smooth;
    double depths[13];
    if (strcmp(kind, "world-b") == 0) f = world_b;
    else if (strcmp(kind, "world-wide") == 0) d.cells[0] = 21;
    else if (strcmp(kind, "frustum") == 0) {
        d.kind = BRV_GRID_FRUSTUM;
        for (int k = 0; k <= 12; k++) depths[k] = 0.5 * pow(100.0 / 0.5, k / 12.0);
        d.slice_depths = depths;
        d.camera = (brv_camera){{0, 2, 10}, {0, 2, 0}, {0, 1, 0}, 60, 2.0, 0.5, 100};
        ch[0].name = "transmittance";
        ch[0].units = "";
    } else if (strcmp(kind, "probes") == 0) {
        d.kind = BRV_GRID_PROBES;
        d.cells[0] = 5, d.cells[1] = 3, d.cells[2] = 4;
    } else if (strcmp(kind, "world") != 0) {
        fprintf(stderr, "make_volume: unknown kind '%s'\n", kind);
        return 2;
    }
    size_t size;
    brv_result r;
    uint8_t *buf = fixture_write(&d, f, NULL, &size, &r);
    if (!buf) {
        fprintf(stderr, "make_volume: %s\n", brv_result_text(r));
        return 1;
    }
    FILE *o = fopen(argv[2], "wb");
    int ok = o && fwrite(buf, 1, size, o) == size;
    if (o && fclose(o) != 0) ok = 0;
    free(buf);
    if (!ok) {
        fprintf(stderr, "make_volume: cannot write %s\n", argv[2]);
        return 3;
    }
    return 0;
}
