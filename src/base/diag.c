#include "base/diag.h"

#include <stdarg.h>
#include <stdio.h>
#include <string.h>

static const struct {
    int exit_code;
    const char *text;
} status_info[] = {
#define BRM_X_INFO(name, exitc, text) {exitc, text},
    BRM_STATUS_LIST(BRM_X_INFO)
#undef BRM_X_INFO
};

const char *brm_status_text(brm_status s)
{
    if ((unsigned)s >= BRM_STATUS_MAX_ENUM) return "unknown status";
    return status_info[s].text;
}

int brm_status_exit_code(brm_status s)
{
    if ((unsigned)s >= BRM_STATUS_MAX_ENUM) return 3;
    return status_info[s].exit_code;
}

void brm_diag_init(brm_diag *d)
{
    d->status = BRM_OK;
    d->message[0] = '\0';
    d->warning_count = 0;
    d->warnings_dropped = 0;
}

brm_status brm_diag_error(brm_diag *d, brm_status s, const char *fmt, ...)
{
    if (d == NULL || d->status != BRM_OK) return s;
    d->status = s;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(d->message, sizeof d->message, fmt, ap);
    va_end(ap);
    return s;
}

void brm_diag_warn(brm_diag *d, const char *fmt, ...)
{
    if (d == NULL) return;
    if (d->warning_count >= BRM_DIAG_MAX_WARN) {
        d->warnings_dropped++;
        return;
    }
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(d->warnings[d->warning_count], BRM_DIAG_WARN_LEN, fmt, ap);
    va_end(ap);
    d->warning_count++;
}

void brm_diag_merge_warnings(brm_diag *dst, const brm_diag *src)
{
    for (uint32_t i = 0; i < src->warning_count; i++) brm_diag_warn(dst, "%s", src->warnings[i]);
    dst->warnings_dropped += src->warnings_dropped;
}
