/* Small readers for the Netpbm files the view room writes, used by its tests only. They follow
 * the grammars of Netpbm ppm(5) and pfm(5) for the header forms our encoders produce. */
#ifndef BRM_VIEW_TEST_UTIL_H
#define BRM_VIEW_TEST_UTIL_H

#include <stdint.h>
#include <stdlib.h>
#include <string.h>

typedef struct parsed_image {
    char magic[3];
    uint32_t w, h;
    double scale_or_maxval;
    size_t raster;           /* offset of the first raster byte */
} parsed_image;

/* Parses "<magic>\n<w> <h>\n<third>\n" (third: maxval for P6, scale for PF/Pf). Returns 0 on a
 * malformed header. */
static inline int parse_header(const uint8_t *b, size_t len, parsed_image *p)
{
    char tmp[96];
    size_t n = len < sizeof tmp - 1 ? len : sizeof tmp - 1;
    memcpy(tmp, b, n);
    tmp[n] = '\0';
    int used = 0;
    unsigned w, h;
    double third;
    if (sscanf(tmp, "%2s %u %u %lf%n", p->magic, &w, &h, &third, &used) != 4) return 0;
    if ((size_t)used >= n || tmp[used] != '\n') return 0;   /* exactly one whitespace */
    p->w = w;
    p->h = h;
    p->scale_or_maxval = third;
    p->raster = (size_t)used + 1;
    return 1;
}

/* Little-endian binary32 sample s of a PFM raster, independent of the host byte order. */
static inline float pfm_sample(const uint8_t *raster, size_t s)
{
    const uint8_t *q = raster + 4 * s;
    uint32_t u = (uint32_t)q[0] | (uint32_t)q[1] << 8 | (uint32_t)q[2] << 16 | (uint32_t)q[3] << 24;
    float f;
    memcpy(&f, &u, 4);
    return f;
}

#endif
