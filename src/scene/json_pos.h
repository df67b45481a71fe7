/* Positions in JSON text, which cJSON does not keep: a small structural scanner over the raw
 * bytes that knows the JSON path (`targets[1].cells[2]`) of every key and value. Used to put
 * line:column on messages about values found after parsing, and to explain syntax errors.
 * Internal to the scene room. */
#ifndef BRM_JSON_POS_H
#define BRM_JSON_POS_H

#include <stdbool.h>
#include <stddef.h>

/* Byte offset of the nth (1-based) occurrence of path in text (the key itself when at_key,
 * else its value; "" is the root value). Falls back to the nearest enclosing path that exists,
 * and to 0. */
size_t brm_json_offset(const char *text, size_t len, const char *path, int nth, bool at_key);

/* Structural check: on the first problem returns false with its offset, the path of the value
 * being read there (path_out, "" for the root) and what was expected there. */
bool brm_json_check(const char *text, size_t len, size_t *err_off, char *path_out, size_t path_cap,
                    const char **expected);

/* 1-based line and column (in code points) of a byte offset. */
void brm_json_line_col(const char *text, size_t len, size_t off, unsigned *line, unsigned *col);

/* Offset of the first byte that is not well-formed UTF-8 (RFC 3629: no overlongs, no
 * surrogates, nothing above U+10FFFF) or is NUL, or len when all is well. */
size_t brm_utf8_check(const char *text, size_t len);

#endif
