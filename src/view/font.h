/* A tiny built-in bitmap font for legends: 5×7 glyphs of our own drawing, advance 6 pixels,
 * line height 9. Covers digits, the letters A–Z (lower case is drawn as upper case), space and
 * . , - + = : / ( ) _ % ' #. Any other byte draws as a hollow box. */
#ifndef BRM_VIEW_FONT_H
#define BRM_VIEW_FONT_H

#include <stdint.h>

#include "view/image.h"

#define BRM_FONT_W 5
#define BRM_FONT_H 7
#define BRM_FONT_ADVANCE 6
#define BRM_FONT_LINE 9

/* The glyph for c into rows[7] (top to bottom, bit 4 = leftmost column); returns 0 and a
 * hollow box when c is not in the font. */
int brm_font_glyph(char c, uint8_t rows[7]);

/* Width in pixels of s drawn at integer scale (no trailing gap). */
uint32_t brm_font_width(const char *s, uint32_t scale);

/* Draws s with its top-left at (x, y), each font pixel a scale×scale square. */
void brm_font_draw(brm_image *im, int64_t x, int64_t y, const char *s, uint32_t scale,
                   const uint8_t rgb[3]);

#endif
