/* Small readers for the Netpbm files the view room writes, used by its tests only. They follow
 * the grammars of Netpbm ppm(5) and pfm(5) for the header forms our encoders produce. */
#ifndef BRM_VIEW_TEST_UTIL_H
#define BRM_VIEW_TEST_UTIL_H

#include <fcntl.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

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

/* Runs a command function (brm_cmd_slice, brm_cmd_preview, ...) with argv = {name, the
 * arguments of ap up to NULL}; its stderr goes through the file stderr_path into err (size n). */
static inline int run_command_v(int (*cmd)(int, char **), const char *name, const char *stderr_path, char *err,
                                size_t n, const char *first, va_list ap)
{
    char *argv[32];
    int argc = 0;
    argv[argc++] = (char *)name;
    for (const char *a = first; a != NULL && argc < 31; a = va_arg(ap, const char *)) argv[argc++] = (char *)a;
    argv[argc] = NULL;
    fflush(stdout);
    fflush(stderr);
    int saved = dup(2);
    int fd = open(stderr_path, O_CREAT | O_TRUNC | O_WRONLY, 0644);
    dup2(fd, 2);
    close(fd);
    int rc = cmd(argc, argv);
    fflush(stderr);
    dup2(saved, 2);
    close(saved);
    FILE *f = fopen(stderr_path, "rb");
    size_t got = f ? fread(err, 1, n - 1, f) : 0;
    err[got] = '\0';
    if (f) fclose(f);
    return rc;
}

#endif
