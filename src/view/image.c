#include "view/image.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

brm_status brm_image_alloc(brm_image *im, uint32_t w, uint32_t h, const uint8_t fill[3], brm_diag *d)
{
    BRM_CHECK(d, w > 0 && h > 0, BRM_E_USAGE, "image size %ux%u is empty", w, h);
    BRM_CHECK(d, w <= BRM_IMAGE_MAX_SIDE && h <= BRM_IMAGE_MAX_SIDE, BRM_E_USAGE,
              "image would be %ux%u pixels, over the limit of %u per side; use a smaller --scale",
              w, h, BRM_IMAGE_MAX_SIDE);
    size_t n;
    BRM_CHECK(d, brm_mul_size((size_t)w * h, 3, &n), BRM_E_NOMEM, "image %ux%u too large", w, h);
    uint8_t *p = malloc(n);
    BRM_CHECK(d, p != NULL, BRM_E_NOMEM, "out of memory for a %ux%u image", w, h);
    for (size_t i = 0; i < (size_t)w * h; i++) memcpy(p + 3 * i, fill, 3);
    im->w = w;
    im->h = h;
    im->rgb = p;
    return BRM_OK;
}

void brm_image_free(brm_image *im)
{
    if (im == NULL) return;
    free(im->rgb);
    im->rgb = NULL;
    im->w = im->h = 0;
}

void brm_image_put(brm_image *im, int64_t x, int64_t y, const uint8_t rgb[3])
{
    if (x < 0 || y < 0 || x >= (int64_t)im->w || y >= (int64_t)im->h) return;
    memcpy(im->rgb + 3 * ((size_t)y * im->w + (size_t)x), rgb, 3);
}

void brm_image_fill_rect(brm_image *im, int64_t x, int64_t y, int64_t w, int64_t h, const uint8_t rgb[3])
{
    int64_t x0 = x < 0 ? 0 : x, y0 = y < 0 ? 0 : y;
    int64_t x1 = x + w > (int64_t)im->w ? (int64_t)im->w : x + w;
    int64_t y1 = y + h > (int64_t)im->h ? (int64_t)im->h : y + h;
    for (int64_t yy = y0; yy < y1; yy++)
        for (int64_t xx = x0; xx < x1; xx++) memcpy(im->rgb + 3 * ((size_t)yy * im->w + (size_t)xx), rgb, 3);
}

void brm_image_blit_scaled(brm_image *im, int64_t x, int64_t y, const uint8_t *src, uint32_t sw,
                           uint32_t sh, uint32_t scale)
{
    for (uint32_t r = 0; r < sh; r++)
        for (uint32_t c = 0; c < sw; c++)
            brm_image_fill_rect(im, x + (int64_t)c * scale, y + (int64_t)r * scale, scale, scale,
                                src + 3 * ((size_t)r * sw + c));
}

brm_status brm_ppm_encode(const brm_image *im, uint8_t **out, size_t *len, brm_diag *d)
{
    char head[64];
    int hn = snprintf(head, sizeof head, "P6\n%u %u\n255\n", im->w, im->h);
    size_t body = (size_t)im->w * im->h * 3;
    uint8_t *p = malloc((size_t)hn + body);
    BRM_CHECK(d, p != NULL, BRM_E_NOMEM, "out of memory for a %ux%u PPM", im->w, im->h);
    memcpy(p, head, (size_t)hn);
    memcpy(p + hn, im->rgb, body);
    *out = p;
    *len = (size_t)hn + body;
    return BRM_OK;
}

brm_status brm_pfm_encode(const float *px, uint32_t w, uint32_t h, uint32_t comps, uint8_t **out,
                          size_t *len, brm_diag *d)
{
    BRM_CHECK(d, comps == 1 || comps == 3, BRM_E_INTERNAL, "PFM needs 1 or 3 samples per pixel, not %u", comps);
    char head[64];
    int hn = snprintf(head, sizeof head, "%s\n%u %u\n-1.0\n", comps == 1 ? "Pf" : "PF", w, h);
    size_t samples = (size_t)w * h * comps;
    size_t body;
    BRM_CHECK(d, brm_mul_size(samples, 4, &body), BRM_E_NOMEM, "PFM %ux%u too large", w, h);
    uint8_t *p = malloc((size_t)hn + body);
    BRM_CHECK(d, p != NULL, BRM_E_NOMEM, "out of memory for a %ux%u PFM", w, h);
    memcpy(p, head, (size_t)hn);
    uint8_t *q = p + hn;
    size_t row = (size_t)w * comps;
    for (uint32_t r = 0; r < h; r++) {
        const float *src = px + (size_t)(h - 1 - r) * row;   /* bottom row first */
        for (size_t i = 0; i < row; i++) {
            uint32_t u;
            memcpy(&u, &src[i], 4);
            *q++ = (uint8_t)(u & 0xffu);
            *q++ = (uint8_t)((u >> 8) & 0xffu);
            *q++ = (uint8_t)((u >> 16) & 0xffu);
            *q++ = (uint8_t)(u >> 24);
        }
    }
    *out = p;
    *len = (size_t)hn + body;
    return BRM_OK;
}
