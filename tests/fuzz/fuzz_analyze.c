/* libFuzzer target: any bytes through the log reader and the analysis.
 * Build: CC=clang meson setup build-fuzz -Dfuzz=true && ninja -C build-fuzz
 * Run:   build-fuzz/tests/fuzz_analyze -max_len=65536 CORPUS_DIR
 * The first byte picks options (header-less layout, sign, decimal, a
 * one-sample minimum as plot sets it), so the fuzzer reaches those paths
 * too; the per-sample rows the figures draw are made as well. */
#define _GNU_SOURCE
#include <gsl/gsl_errno.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>

#include "analyze.h"
#include "logread.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static void count_row(void *ctx, const struct sample_row *r)
{
    size_t *n = ctx;
    *n += r->t_s >= 0; /* touch the row */
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    static int ready;
    if (!ready) {
        gsl_set_error_handler_off();
        ready = 1;
    }
    if (size < 1)
        return 0;
    uint8_t sel = data[0];
    data++;
    size--;
    FILE *fp = fmemopen((void *)data, size, "rb");
    if (!fp)
        return 0;
    struct logread_opts ro = {0};
    if (sel & 1)
        ro.columns = "time_s,voltage_v,current_a,cell1_v,cell2_v";
    if (sel & 2)
        ro.sign = SIGN_DISCHARGE_NEGATIVE;
    if (sel & 4)
        ro.decimal = ',';
    if (sel & 8) {
        ro.have_adc = 1;
        ro.adc_a_per_count = 0.0885;
    }
    if (sel & 128)
        ro.min_samples = 1; /* plot draws a log of one sample */
    struct logread_stats st;
    struct pb_error err = {0};
    size_t rows = 0;
    struct series *s = logread_file(fp, "fuzz", &ro, &st, &err);
    fclose(fp);
    if (s) {
        struct analysis *a = analysis_new();
        struct analyze_opts ao = {
            .chemistry = (sel >> 4) % 4, .cells = (sel & 16) ? 2 : 0, .plain_fit = (sel >> 6) & 1};
        if (a && analyze_series(s, &st, "fuzz", &ao, a, &err) == PB_OK)
            analyze_rows(s, a, (sel & 32) ? 5000.0 : 0.0, count_row, &rows);
        analysis_free(a);
        series_free(s);
    }
    return 0;
}
