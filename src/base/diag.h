/* Status codes and per-call diagnostics.
 *
 * Every fallible baker call returns a brm_status and, when given a brm_diag, records the first
 * error as one line: "file:line:col: json.path: what is wrong; what is expected". Warnings are
 * collected beside it. Nothing lives in global state, so loads and bakes on different threads
 * never see each other's messages. */
#ifndef BRM_DIAG_H
#define BRM_DIAG_H

#include <stddef.h>
#include <stdint.h>

/* X(name, exit code, text). The exit codes are the contract of SPEC.md:
 * 0 ok, 1 invalid input, 2 usage, 3 I/O or resource, 4 a check failed.
 * Append only: a shipped code keeps its number. */
#define BRM_STATUS_LIST(X)                                                  \
    X(BRM_OK, 0, "ok")                                                      \
    X(BRM_E_INPUT, 1, "invalid input")                                      \
    X(BRM_E_USAGE, 2, "usage error")                                        \
    X(BRM_E_IO, 3, "input/output failure")                                  \
    X(BRM_E_NOMEM, 3, "out of memory")                                      \
    X(BRM_E_BUDGET, 3, "over the memory budget")                            \
    X(BRM_E_INTERRUPTED, 3, "interrupted")                                  \
    X(BRM_E_CHECK, 4, "check failed")                                       \
    X(BRM_E_INTERNAL, 3, "internal error")

typedef enum brm_status {
#define BRM_X_ENUM(name, exitc, text) name,
    BRM_STATUS_LIST(BRM_X_ENUM)
#undef BRM_X_ENUM
    BRM_STATUS_MAX_ENUM
} brm_status;

const char *brm_status_text(brm_status s);
int brm_status_exit_code(brm_status s);

#define BRM_DIAG_MSG 2048
#define BRM_DIAG_MAX_WARN 64
#define BRM_DIAG_WARN_LEN 512

typedef struct brm_diag {
    brm_status status;              /* status of the first error, BRM_OK while none */
    char message[BRM_DIAG_MSG];     /* first error, one line, no trailing newline */
    uint32_t warning_count;         /* warnings kept (at most BRM_DIAG_MAX_WARN) */
    uint32_t warnings_dropped;      /* warnings beyond that */
    char warnings[BRM_DIAG_MAX_WARN][BRM_DIAG_WARN_LEN];
} brm_diag;

void brm_diag_init(brm_diag *d);
/* Records an error unless one is recorded already (the first error is the one users need).
 * Returns s, so `return brm_diag_error(d, BRM_E_INPUT, ...)` reads naturally. d may be NULL. */
brm_status brm_diag_error(brm_diag *d, brm_status s, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;
void brm_diag_warn(brm_diag *d, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;
/* Copies every warning of src into dst (e.g. from a target's diag into a report). */
void brm_diag_merge_warnings(brm_diag *dst, const brm_diag *src);

/* Check macro with the condition, the place and a reason at every call site. */
#define BRM_CHECK(d, cond, status, ...)                           \
    do {                                                          \
        if (!(cond)) return brm_diag_error((d), (status), __VA_ARGS__); \
    } while (0)

/* Checked size arithmetic for allocations: returns 0 on overflow. */
static inline int brm_mul_size(size_t a, size_t b, size_t *out)
{
    if (a != 0 && b > (size_t)-1 / a) return 0;
    *out = a * b;
    return 1;
}

#endif
