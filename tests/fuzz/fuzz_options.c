/* libFuzzer target: the log-reading option strings together with the log.
 * Build: CC=clang meson setup build-fuzz -Dfuzz=true && ninja -C build-fuzz
 * Run:   build-fuzz/tests/fuzz_options -max_len=4096 CORPUS_DIR
 * Input: three lines, then the log: the --columns list, the --map list
 * (each empty for none), and a line whose first byte is the delimiter
 * ('0' or none: detected) and whose second is the decimal mark ('.' or ',';
 * anything else: detected). tests/cli/test_corpus.py replays files named
 * options-* in this form through `packbook analyze`. */
#define _GNU_SOURCE
#include <gsl/gsl_errno.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "analyze.h"
#include "logread.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

/* The next line of the input as a new string (NULL when empty); advances. */
static char *take_line(const uint8_t **p, size_t *n)
{
    const uint8_t *nl = memchr(*p, '\n', *n);
    size_t len = nl ? (size_t)(nl - *p) : *n;
    char *s = len ? strndup((const char *)*p, len) : NULL;
    *p += nl ? len + 1 : len;
    *n -= nl ? len + 1 : len;
    return s;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    static int ready;
    if (!ready) {
        gsl_set_error_handler_off();
        ready = 1;
    }
    char *columns = take_line(&data, &size);
    char *map = take_line(&data, &size);
    char *dd = take_line(&data, &size);
    struct logread_opts ro = {0};
    ro.columns = columns;
    ro.map = map;
    /* the values the command line lets through (logopts.c) */
    if (dd && dd[0] != '0' && dd[0] != '"')
        ro.delimiter = dd[0];
    if (dd && dd[0] && (dd[1] == '.' || dd[1] == ','))
        ro.decimal = dd[1];
    FILE *fp = size ? fmemopen((void *)data, size, "rb") : NULL;
    if (fp) {
        struct logread_stats st;
        struct pb_error err = {0};
        struct series *s = logread_file(fp, "fuzz", &ro, &st, &err);
        fclose(fp);
        if (s) {
            struct analysis *a = analysis_new();
            struct analyze_opts ao = {0};
            if (a)
                analyze_series(s, &st, "fuzz", &ao, a, &err);
            analysis_free(a);
            series_free(s);
        }
    }
    free(columns);
    free(map);
    free(dd);
    return 0;
}
