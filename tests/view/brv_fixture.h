/* Writes small .brv volumes for the view room's tests with the project's writer. */
#ifndef BRM_VIEW_BRV_FIXTURE_H
#define BRM_VIEW_BRV_FIXTURE_H

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "brume/brv_write.h"

/* channels[c] holds a whole channel (x fastest). Returns 1 on success. */
static inline int write_volume(const char *path, brv_grid_kind kind, const uint32_t n[3],
                               const double *depths, uint32_t count, const char *const *names,
                               const char *const *units, const float *const *channels)
{
    brv_channel_desc cd[64];
    for (uint32_t c = 0; c < count; c++) {
        cd[c].name = names[c];
        cd[c].units = units[c];
        cd[c].encoding = BRV_ENCODING_F32;
    }
    brv_write_desc desc;
    memset(&desc, 0, sizeof desc);
    desc.kind = kind;
    memcpy(desc.cells, n, sizeof desc.cells);
    desc.brick_size = 4;
    for (int a = 0; a < 3; a++) {
        desc.bounds_min[a] = 0.0;
        desc.bounds_max[a] = n[a];
    }
    if (kind == BRV_GRID_FRUSTUM) {
        desc.slice_depths = depths;
        desc.camera.look_at[2] = -1.0;
        desc.camera.up[1] = 1.0;
        desc.camera.fov_y_deg = 60.0;
        desc.camera.aspect = 1.0;
        desc.camera.near_m = depths[0];
        desc.camera.far_m = depths[n[2]];
    }
    desc.channel_count = count;
    desc.channels = cd;
    FILE *f = fopen(path, "w+b");
    if (f == NULL) return 0;
    brv_writer *w = NULL;
    int ok = brv_writer_create(f, &desc, &w) == BRV_OK;
    uint32_t bs = 4, nb[3];
    for (int a = 0; a < 3; a++) nb[a] = (n[a] + bs - 1) / bs;
    float *buf = malloc(sizeof(float) * count * bs * bs * bs);
    for (uint32_t b = 0; ok && b < nb[0] * nb[1] * nb[2]; b++) {
        uint32_t lo[3] = {(b % nb[0]) * bs, (b / nb[0] % nb[1]) * bs, (b / (nb[0] * nb[1])) * bs}, ext[3];
        for (int a = 0; a < 3; a++) ext[a] = lo[a] + bs > n[a] ? n[a] - lo[a] : bs;
        size_t m = (size_t)ext[0] * ext[1] * ext[2];
        for (uint32_t c = 0; c < count; c++)
            for (uint32_t z = 0; z < ext[2]; z++)
                for (uint32_t y = 0; y < ext[1]; y++)
                    for (uint32_t x = 0; x < ext[0]; x++)
                        buf[c * m + x + ext[0] * (y + ext[1] * z)] =
                            channels[c][(lo[0] + x) + n[0] * ((lo[1] + y) + (size_t)n[1] * (lo[2] + z))];
        ok = brv_writer_put_brick(w, b, buf) == BRV_OK;
    }
    if (ok) ok = brv_writer_finish(w) == BRV_OK;
    brv_writer_free(w);
    free(buf);
    if (fclose(f) != 0) ok = 0;
    return ok;
}

#endif
