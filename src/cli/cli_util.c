#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "cli/cli.h"

void brm_cli_error(const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fputs("brume: ", stderr);
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
    va_end(ap);
}

int brm_cli_usage(const char *cmd, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fprintf(stderr, "brume %s: ", cmd);
    vfprintf(stderr, fmt, ap);
    fprintf(stderr, "\nTry 'brume %s --help'.\n", cmd);
    va_end(ap);
    return BRM_EXIT_USAGE;
}

int brm_cli_opt(const char *cmd, int argc, char **argv, int *i, const char *name, const char **val)
{
    const char *a = argv[*i];
    size_t n = strlen(name);
    if (strncmp(a, name, n) != 0) return 0;
    if (a[n] == '=') {
        *val = a + n + 1;
        return 1;
    }
    if (a[n] != '\0') return 0;
    if (*i + 1 >= argc) {
        brm_cli_usage(cmd, "option %s needs a value", name);
        return -1;
    }
    *i += 1;
    *val = argv[*i];
    return 1;
}

bool brm_cli_flag(char **argv, int i, const char *name) { return strcmp(argv[i], name) == 0; }

bool brm_cli_ends_with(const char *s, const char *suffix)
{
    size_t a = strlen(s), b = strlen(suffix);
    return a >= b && strcasecmp(s + a - b, suffix) == 0;
}

bool brm_cli_parse_double(const char *s, double *out)
{
    if (s == NULL || *s == '\0') return false;
    char *end;
    errno = 0;
    double v = strtod(s, &end);
    if (*end != '\0' || errno == ERANGE || !isfinite(v)) return false;
    *out = v;
    return true;
}

bool brm_cli_parse_u32(const char *s, uint32_t *out)
{
    if (s == NULL || *s < '0' || *s > '9') return false;
    char *end;
    errno = 0;
    unsigned long long v = strtoull(s, &end, 10);
    if (*end != '\0' || errno == ERANGE || v > 0xffffffffull) return false;
    *out = (uint32_t)v;
    return true;
}

bool brm_cli_parse_size(const char *s, uint64_t *out)
{
    if (s == NULL || *s < '0' || *s > '9') return false;
    char *end;
    errno = 0;
    unsigned long long v = strtoull(s, &end, 10);
    if (errno == ERANGE) return false;
    unsigned shift = 0;
    if (*end == 'K' || *end == 'k') shift = 10;
    else if (*end == 'M' || *end == 'm') shift = 20;
    else if (*end == 'G' || *end == 'g') shift = 30;
    else if (*end == 'T' || *end == 't') shift = 40;
    if (shift) {
        end++;
        if (*end == 'i' || *end == 'B') end++; /* accept KiB / KB spellings */
        if (*end == 'B') end++;
    }
    if (*end != '\0') return false;
    if (shift && v > (0xffffffffffffffffull >> shift)) return false;
    *out = (uint64_t)v << shift;
    return true;
}
