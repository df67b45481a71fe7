/* Small volumes for the volume room's tests: smooth analytic fields written through the real
 * writer into memory (via a temporary FILE). Invented data, for tests only. */
#ifndef BRV_TEST_FIXTURE_H
#define BRV_TEST_FIXTURE_H

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "brume/brv.h"
#include "brume/brv_write.h"

typedef float (*fixture_field)(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user);

/* A smooth field: exponential height falloff times soft blobs, per channel a different mix. */
static inline float fixture_smooth(uint32_t c, uint32_t x, uint32_t y, uint32_t z, void *user)
{
    (void)user;
    double fx = x * 0.05, fy = y * 0.07, fz = z * 0.04;
    double v = exp(-fy * 0.8) * (1.0 + 0.5 * sin(fx + c) * cos(fz * 1.3)) + 0.1 * c;
    return (float)v;
}

/* Writes a whole volume; data from field(c, x, y, z). Returns the bytes (malloc) and size, or
 * NULL with *res set. */
static inline uint8_t *fixture_write(const brv_write_desc *desc, fixture_field field, void *user, size_t *size,
                                     brv_result *res)
{
    FILE *f = tmpfile();
    brv_writer *w = NULL;
    brv_result r = f ? brv_writer_create(f, desc, &w) : BRV_E_IO;
    uint32_t bs = desc->brick_size ? desc->brick_size : 16;
    uint32_t nb[3];
    for (int a = 0; a < 3; a++) nb[a] = (desc->cells[a] + bs - 1) / bs;
    float *buf = malloc(sizeof(float) * bs * bs * bs * desc->channel_count);
    for (uint32_t b = 0; r == BRV_OK && b < nb[0] * nb[1] * nb[2]; b++) {
        uint32_t o[3] = {(b % nb[0]) * bs, (b / nb[0] % nb[1]) * bs, (b / (nb[0] * nb[1])) * bs}, e[3];
        for (int a = 0; a < 3; a++) e[a] = desc->cells[a] - o[a] < bs ? desc->cells[a] - o[a] : bs;
        size_t n = (size_t)e[0] * e[1] * e[2];
        for (uint32_t c = 0; c < desc->channel_count; c++)
            for (uint32_t z = 0; z < e[2]; z++)
                for (uint32_t y = 0; y < e[1]; y++)
                    for (uint32_t x = 0; x < e[0]; x++)
                        buf[c * n + x + e[0] * (y + e[1] * z)] = field(c, o[0] + x, o[1] + y, o[2] + z, user);
        r = brv_writer_put_brick(w, b, buf);
    }
    if (r == BRV_OK) r = brv_writer_finish(w);
    if (r != BRV_OK && w) fprintf(stderr, "fixture: %s: %s\n", brv_result_text(r), brv_writer_error(w));
    brv_writer_free(w);
    free(buf);
    uint8_t *out = NULL;
    if (r == BRV_OK) {
        long n = ftell(f);
        out = malloc(n > 0 ? (size_t)n : 1);
        rewind(f);
        if (!out || fread(out, 1, (size_t)n, f) != (size_t)n) r = BRV_E_IO;
        *size = (size_t)n;
    }
    if (f) fclose(f);
    if (r != BRV_OK) {
        free(out);
        out = NULL;
    }
    if (res) *res = r;
    return out;
}

/* A world description with the given channels. */
static inline brv_write_desc fixture_world(uint32_t nx, uint32_t ny, uint32_t nz, const brv_channel_desc *ch,
                                           uint32_t nch)
{
    brv_write_desc d;
    memset(&d, 0, sizeof d);
    d.kind = BRV_GRID_WORLD;
    d.cells[0] = nx;
    d.cells[1] = ny;
    d.cells[2] = nz;
    for (int a = 0; a < 3; a++) {
        d.bounds_min[a] = -1.0 - a;
        d.bounds_max[a] = 3.0 + a;
    }
    d.channels = ch;
    d.channel_count = nch;
    return d;
}

#endif
