#include "pb_error.h"

#include <stdio.h>
#include <string.h>

enum pb_code pb_error_set(struct pb_error *err, enum pb_code code, const char *fmt, ...)
{
    if (!err)
        return code;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(err->msg, sizeof err->msg, fmt, ap);
    va_end(ap);
    err->code = code;
    return code;
}

void pb_error_prefix(struct pb_error *err, const char *fmt, ...)
{
    if (!err)
        return;
    char head[PB_ERRMSG_MAX];
    char old[PB_ERRMSG_MAX];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(head, sizeof head, fmt, ap);
    va_end(ap);
    memcpy(old, err->msg, sizeof old);
    snprintf(err->msg, sizeof err->msg, "%.200s: %.300s", head, old);
}

const char *pb_strerror(enum pb_code code)
{
    switch (code) {
    case PB_OK:
        return "ok";
    case PB_EUSAGE:
        return "usage error";
    case PB_EINPUT:
        return "unusable input";
    case PB_ENOMEM:
        return "out of memory";
    case PB_ENUMERIC:
        return "numerical failure";
    case PB_EOUTPUT:
        return "cannot write output";
    case PB_ESTORE:
        return "history store error";
    }
    return "unknown error";
}

int pb_exit_status(enum pb_code code)
{
    switch (code) {
    case PB_OK:
        return PB_EXIT_OK;
    case PB_EUSAGE:
        return PB_EXIT_USAGE;
    case PB_EINPUT:
        return PB_EXIT_INPUT;
    case PB_ESTORE:
        return PB_EXIT_STORE;
    case PB_ENOMEM:
    case PB_ENUMERIC:
    case PB_EOUTPUT:
        return PB_EXIT_INTERNAL;
    }
    return PB_EXIT_INTERNAL;
}
