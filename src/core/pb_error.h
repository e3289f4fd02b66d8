/* pb_error: the one error type carried from the core up to main.c.
 *
 * Owns: the error codes, their exit statuses and a fixed-size message
 * buffer. Core functions fill a `struct pb_error` and return its code;
 * they never print. main.c prints `packbook: <msg>` once and exits with
 * pb_exit_status(code). */
#ifndef PB_ERROR_H
#define PB_ERROR_H

#include <stdarg.h>

enum pb_code {
    PB_OK = 0,
    PB_EUSAGE,   /* bad command line */
    PB_EINPUT,   /* input unreadable or not a log we can use */
    PB_ENOMEM,   /* out of memory */
    PB_ENUMERIC, /* a numerical routine failed */
    PB_EOUTPUT,  /* writing the output failed */
    PB_ESTORE,   /* history store error (reserved for the store) */
};

/* Documented exit statuses (man page, EXIT STATUS). */
enum pb_exit {
    PB_EXIT_OK = 0,
    PB_EXIT_SOME_FAILED = 1,
    PB_EXIT_USAGE = 2,
    PB_EXIT_INPUT = 3,
    PB_EXIT_STORE = 4,
    PB_EXIT_INTERNAL = 5,
};

#define PB_ERRMSG_MAX 512

struct pb_error {
    enum pb_code code;
    char msg[PB_ERRMSG_MAX];
};

/* Sets err (if not NULL) to code and a printf-style message; returns code. */
enum pb_code pb_error_set(struct pb_error *err, enum pb_code code, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

/* Prepends "prefix: " to an existing message (e.g. the file name). */
void pb_error_prefix(struct pb_error *err, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));

/* Short fixed description of a code. */
const char *pb_strerror(enum pb_code code);

/* Exit status for a code. */
int pb_exit_status(enum pb_code code);

#endif
