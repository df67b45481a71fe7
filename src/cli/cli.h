/* Command-line front end: one file per command, each thin — parse flags, call the library,
 * report. Every command takes argv with argv[0] = the command name and returns the exit status
 * of SPEC.md: 0 ok, 1 invalid input, 2 usage, 3 I/O or resource, 4 a check failed. */
#ifndef BRM_CLI_H
#define BRM_CLI_H

#include <stdbool.h>
#include <stdint.h>

enum {
    BRM_EXIT_OK = 0,
    BRM_EXIT_INPUT = 1,
    BRM_EXIT_USAGE = 2,
    BRM_EXIT_IO = 3,
    BRM_EXIT_CHECK = 4
};

int brm_cmd_check(int argc, char **argv);
int brm_cmd_bake(int argc, char **argv);
int brm_cmd_info(int argc, char **argv);
int brm_cmd_verify(int argc, char **argv);
int brm_cmd_export(int argc, char **argv);
int brm_cmd_slice(int argc, char **argv);
int brm_cmd_diff(int argc, char **argv);
int brm_cmd_preview(int argc, char **argv);

/* "brume: <message>" on stderr. */
void brm_cli_error(const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 1, 2)))
#endif
    ;
/* "brume CMD: <message>\nTry 'brume CMD --help'." on stderr; returns BRM_EXIT_USAGE. */
int brm_cli_usage(const char *cmd, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

/* Option helpers for the hand-written parsers: --name VALUE or --name=VALUE.
 * brm_cli_opt returns 1 and sets *val when argv[*i] is option `name`, advancing *i past a
 * separate value; returns -1 (after printing a usage error) when the value is missing. */
int brm_cli_opt(const char *cmd, int argc, char **argv, int *i, const char *name, const char **val);
bool brm_cli_flag(char **argv, int i, const char *name);
/* Whether s ends in suffix, ignoring case (".PPM" counts as ".ppm"). */
bool brm_cli_ends_with(const char *s, const char *suffix);
/* In a parser's loop over argv (with `int i` the index and `int r` in scope): takes option
 * `name` into the const char *var and continues the loop, or returns BRM_EXIT_USAGE from the
 * command when its value is missing. */
#define BRM_CLI_TAKE(cmd, name, var)                                     \
    if ((r = brm_cli_opt(cmd, argc, argv, &i, name, &var)) != 0) {       \
        if (r < 0) return BRM_EXIT_USAGE;                                \
        continue;                                                        \
    }
/* Strict number parsing: the whole string, finite. Return false on junk. */
bool brm_cli_parse_double(const char *s, double *out);
bool brm_cli_parse_u32(const char *s, uint32_t *out);
/* "512M", "2G", "1048576" → bytes. */
bool brm_cli_parse_size(const char *s, uint64_t *out);

#endif
