#define _POSIX_C_SOURCE 200809L /* fdopen */
#include <errno.h>
#include <fcntl.h>
#include <getopt.h>
#include <limits.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include "../core/numparse.h"
#include "cmd.h"

int cmd_parse_double(const char *opt, const char *val, double lo, double hi, double *out,
                     struct pb_error *err)
{
    /* the log's number reader, not strtod: no hex ("0x10"), no "inf"/"nan", no locale */
    double v = 0;
    if (num_parse(val, strlen(val), '.', &v) != NUM_OK || !(v >= lo && v <= hi)) {
        pb_error_set(err, PB_EUSAGE, "%s: expected a number from %g to %g, got '%s'", opt, lo, hi,
                     val);
        return -1;
    }
    *out = v;
    return 0;
}

int cmd_keyword(const char *opt, const char *val, const char *const *words, struct pb_error *err)
{
    for (int k = 0; words[k]; k++)
        if (strcasecmp(words[k], val) == 0)
            return k;
    char list[256] = "";
    size_t used = 0;
    for (int k = 0; words[k] && used < sizeof list; k++) {
        const char *sep = k == 0 ? "" : words[k + 1] ? ", " : " or ";
        int n = snprintf(list + used, sizeof list - used, "%s%s", sep, words[k]);
        used += n > 0 ? (size_t)n : 0;
    }
    pb_error_set(err, PB_EUSAGE, "%s: expected %s, got '%s'", opt, list, val);
    return -1;
}

int cmd_parse_int(const char *opt, const char *val, int lo, int hi, int *out, struct pb_error *err)
{
    char *end = NULL;
    errno = 0;
    long v = strtol(val, &end, 10);
    if (end == val || *end != '\0' || errno == ERANGE || v < lo || v > hi) {
        pb_error_set(err, PB_EUSAGE, "%s: expected a whole number from %d to %d, got '%s'", opt, lo,
                     hi, val);
        return -1;
    }
    *out = (int)v;
    return 0;
}

FILE *cmd_open_log(const char *path, struct pb_error *err)
{
    struct stat sb;
    if (stat(path, &sb) == 0 && S_ISDIR(sb.st_mode)) {
        pb_error_set(err, PB_EINPUT,
                     "'%s' is a folder, not a log (import takes a folder; analyze, plot and "
                     "predict read one log)",
                     path);
        return NULL;
    }
    /* a named pipe with no writer would block open() for ever: open without
     * waiting, then read normally (no writer reads as an empty log) */
    int fd = open(path, O_RDONLY | O_NOCTTY | O_NONBLOCK);
    if (fd < 0) {
        pb_error_set(err, PB_EINPUT, "cannot open '%s': %s", path, strerror(errno));
        return NULL;
    }
    int fl = fcntl(fd, F_GETFL);
    FILE *fp = fl >= 0 && fcntl(fd, F_SETFL, fl & ~O_NONBLOCK) == 0 ? fdopen(fd, "rb") : NULL;
    if (!fp) {
        pb_error_set(err, PB_EINPUT, "cannot open '%s': %s", path, strerror(errno));
        close(fd);
    }
    return fp;
}

enum pb_code cmd_finish_stdout(struct pb_error *err)
{
    if (fflush(stdout) != 0 || ferror(stdout))
        return pb_error_set(err, PB_EOUTPUT, "cannot write the output");
    return PB_OK;
}

enum pb_code cmd_bad_option(const char *verb, int argc, char **argv, struct pb_error *err)
{
    const char *arg = optind - 1 < argc && optind > 0 ? argv[optind - 1] : "?";
    if (optopt)
        return pb_error_set(err, PB_EUSAGE,
                            "%s: option '%s' is unknown or needs a value (see "
                            "'packbook %s --help')",
                            verb, arg, verb);
    return pb_error_set(err, PB_EUSAGE, "%s: unknown option '%s' (see 'packbook %s --help')", verb,
                        arg, verb);
}

int cmd_cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static double stage_t0_ms = -1.0;

static void stage_print(void *ctx, const char *stage)
{
    (void)ctx;
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    double now_ms = 1e3 * (double)t.tv_sec + 1e-6 * (double)t.tv_nsec;
    if (stage_t0_ms < 0.0)
        stage_t0_ms = now_ms;
    fprintf(stderr, "stage %s %.3f\n", stage, now_ms - stage_t0_ms);
}

const struct stage_hook *cmd_stage_hook(void)
{
    static const struct stage_hook hook = {stage_print, NULL};
    return getenv("PACKBOOK_STAGES") ? &hook : NULL;
}
