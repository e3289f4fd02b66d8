/* logread: dialects, header mapping and the places named in messages.
 * Inputs are small in-memory logs; the expected values are the logs' own
 * numbers after the unit in the header (mV -> V, ms -> s, SI prefixes). */
#define _GNU_SOURCE
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>
#include <dirent.h>
#include <pthread.h>
#include <signal.h>
#include <sys/stat.h>
#include <unistd.h>

#include "logread.h"
#include "testutil.h"

static struct series *read_text(const char *text, const struct logread_opts *o,
                                struct logread_stats *st, struct pb_error *err)
{
    FILE *fp = fmemopen((void *)text, strlen(text), "r");
    assert_non_null(fp);
    struct series *s = logread_file(fp, "mem.csv", o, st, err);
    fclose(fp);
    return s;
}

static void test_semicolon_decimal_comma_ms_mv(void **state)
{
    (void)state;
    const char *text = "\xEF\xBB\xBF# logger 7\r\nt_ms;vbat_mV;ibat_mA\r\n0;16800;1500,5\r\n"
                       "100;16790;2500,0\r\n200;16780;3000,0\r\n";
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(st.delimiter, ';');
    assert_int_equal(st.decimal, ',');
    assert_int_equal(st.bom, 1);
    assert_int_equal(st.comment_lines, 1);
    assert_int_equal(st.header_line, 2);
    assert_int_equal(s->n, 3);
    check_close(s->t_s[2], 0.2, 1e-12, "ms to s");
    check_close(s->v_v[0], 16.8, 1e-12, "mV to V");
    check_close(s->i_a[0], 1.5005, 1e-12, "mA with decimal comma to A");
    series_free(s);
}

static void test_tab_quotes_trailing_empty(void **state)
{
    (void)state;
    const char *text =
        "\"Time(s)\"\t\"Voltage(V)\"\t\"Current(A)\"\t\n1\t\"4.1\"\t2\t\n2\t4.0\t3\t\n";
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(st.delimiter, '\t');
    assert_int_equal(s->n, 2);
    check_close(s->v_v[0], 4.1, 0.0, "quoted number");
    check_close(s->t_s[1], 1.0, 0.0, "times relative to the first sample");
    series_free(s);
}

static void test_counts_and_places(void **state)
{
    (void)state;
    const char *text = "time_s,voltage_v,current_a\n"
                       "0,16.0,1\n"
                       "1,abc,1\n" /* line 3 col 2: bad number */
                       "2,nan,1\n" /* line 4 col 2: non-finite */
                       "2.5,,1\n"  /* line 5 col 2: empty */
                       "3,16.0\n"  /* line 6: short */
                       "4,15.9,2\n"
                       "4,15.9,2\n"   /* line 8: duplicate time */
                       "5,15.8,2,9\n" /* line 9: extra field */
                       "6,15.7";      /* line 10: truncated */
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->n, 3);
    assert_int_equal(st.bad_number.count, 1);
    assert_int_equal(st.bad_number.first_line, 3);
    assert_int_equal(st.bad_number.first_column, 2);
    assert_int_equal(st.nonfinite.first_line, 4);
    assert_int_equal(st.empty_field.first_line, 5);
    assert_int_equal(st.short_row.count, 2);
    assert_int_equal(st.short_row.first_line, 6);
    assert_int_equal(st.duplicate_time.first_line, 8);
    assert_int_equal(st.long_row.first_line, 9);
    assert_int_equal(st.truncated_last_line, 1);
    series_free(s);
}

/* Times strictly increasing, starting at 0 (the series invariant). */
static void check_increasing(const struct series *s)
{
    check_close(s->t_s[0], 0.0, 0.0, "first time");
    for (size_t k = 1; k < s->n; k++)
        if (!(s->t_s[k] > s->t_s[k - 1]))
            fail_msg("t_s[%zu] = %g after %g", k, s->t_s[k], s->t_s[k - 1]);
}

static void test_stray_rows_dropped_with_place(void **state)
{
    (void)state;
    /* line 4 is behind its neighbours, line 7 ahead of them: both lone rows */
    const char *text = "voltage_v,time_s\n16,0\n16,1\n16,0.5\n16,2\n16,3\n16,99\n16,4\n16,5\n";
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->n, 6);
    check_increasing(s);
    check_close(s->t_s[5], 5.0, 0.0, "times as logged: no segment");
    assert_int_equal(st.stray_time.count, 2);
    assert_int_equal(st.stray_time.first_line, 4);
    assert_int_equal(st.stray_time.first_column, 2);
    assert_int_equal(st.clock_restart.count, 0);
    assert_int_equal(st.kept, 6);
    assert_int_equal(s->line[4], 8); /* the row after the one ahead */
    assert_true(s->nseg <= 1);
    assert_int_equal(logread_dropped(&st), 2);
    series_free(s);
}

static void test_first_row_ahead_is_a_stray(void **state)
{
    (void)state;
    /* a logger's first row carries a time from before it was set (line 2): the rows
     * after go on from below it, so it is the stray, not a one-row segment */
    const char *text = "time_s,voltage_v\n5000,16\n10,16\n11,16\n12.5,16\n";
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->n, 3);
    check_increasing(s);
    check_close(s->t_s[2], 2.5, 1e-12, "times from the first kept sample");
    assert_int_equal(st.stray_time.count, 1);
    assert_int_equal(st.stray_time.first_line, 2);
    assert_int_equal(st.clock_restart.count, 0);
    assert_int_equal(s->line[0], 3);
    assert_true(s->nseg <= 1);
    series_free(s);

    /* the same with Unix times: the start is the first kept sample's */
    const char *epoch = "time,voltage_v\n1800000000,16\n1714557600,16\n1714557601,16\n";
    s = read_text(epoch, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->n, 2);
    assert_int_equal(s->has_epoch, 1);
    check_close(s->start_epoch_s, 1714557600.0, 0.0, "start of the kept samples");
    series_free(s);
}

static void test_restart_makes_segments(void **state)
{
    (void)state;
    /* the clock restarts at line 5 and again at line 8 (to a time within the
     * segment before, so they overlap in time): three segments, none lost */
    const char *text = "time_s,voltage_v,current_a\n"
                       "10,16,2\n11,16,2\n12,16,2\n" /* lines 2-4 */
                       "0,16,2\n1,16,2\n2,16,2\n"    /* lines 5-7 */
                       "0.5,16,2\n1.5,16,2\n2.5,16,2\n";
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->n, 9);
    check_increasing(s);
    assert_int_equal(st.clock_restart.count, 2);
    assert_int_equal(st.clock_restart.first_line, 5);
    assert_int_equal(st.clock_restart.first_column, 1);
    assert_int_equal(st.stray_time.count, 0);
    assert_int_equal(s->nseg, 3);
    assert_int_equal(s->seg_start[0], 0);
    assert_int_equal(s->seg_start[1], 3);
    assert_int_equal(s->seg_start[2], 6);
    assert_int_equal(series_is_joint(s, 3), 1);
    assert_int_equal(series_is_joint(s, 6), 1);
    assert_int_equal(series_is_joint(s, 4), 0);
    assert_int_equal(series_is_joint(s, 0), 0);
    /* within a segment the logged steps stay; the joint is a placeholder of a
     * thousandth of the step before it (series.h) */
    check_close(s->t_s[4] - s->t_s[3], 1.0, 1e-12, "step in segment 2");
    check_close(s->t_s[3] - s->t_s[2], 1e-3, 1e-12, "joint placeholder");
    check_close(s->t_s[8] - s->t_s[6], 2.0, 1e-12, "steps in segment 3");
    assert_int_equal(s->line[6], 8);
    series_free(s);
}

static void test_time_that_is_not_a_clock(void **state)
{
    (void)state;
    /* a column that goes back on every other row: refused, naming the first place */
    char text[4096] = "time_s,voltage_v\n";
    for (int k = 0; k < 60; k++) {
        char row[32];
        snprintf(row, sizeof row, "%d,16\n", k % 2 ? k : 100 - k);
        strcat(text, row);
    }
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    assert_null(read_text(text, &o, &st, &err));
    assert_int_equal(err.code, PB_EINPUT);
    /* the first row, 100, is ahead of the 1, 98, 3 ... after it: the first stray */
    assert_non_null(strstr(err.msg, "mem.csv:2:1:"));
    assert_non_null(strstr(err.msg, "goes back at"));
}

static void test_glitches_dropped_with_place(void **state)
{
    (void)state;
    /* 4 cells: a 0 V pack reading (line 4), a 1e38 current sentinel (line 6,
     * any pack), 1.2 V for 4 cells (0.3 V/cell, line 7), 1500 A on a 5000 mAh
     * pack (300 C, line 8) and a cell at 9 V (line 9); 900 A (180 C) stays */
    const char *text = "time_s,voltage_v,current_a,cell1_v\n"
                       "0,16.0,10,4.0\n1,15.9,10,4.0\n"
                       "2,0,10,4.0\n"
                       "3,15.8,10,4.0\n"
                       "4,15.8,3.4e38,4.0\n"
                       "5,1.2,10,4.0\n"
                       "6,15.7,1500,4.0\n"
                       "7,15.7,10,9.0\n"
                       "8,15.6,900,3.9\n9,15.6,10,3.9\n";
    struct logread_opts o = {.cells = 4, .rated_mah = 5000};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->n, 5);
    assert_int_equal(st.glitch_voltage.count, 3);
    assert_int_equal(st.glitch_voltage.first_line, 4);
    assert_int_equal(st.glitch_voltage.first_column, 2);
    assert_int_equal(st.glitch_current.count, 2);
    assert_int_equal(st.glitch_current.first_line, 6);
    assert_int_equal(st.glitch_current.first_column, 3);
    check_close(s->i_a[3], 900.0, 0.0, "180 C stays");
    assert_int_equal(logread_dropped(&st), 5);
    series_free(s);

    /* unknown pack: only the sentinel and what no number of cells explains */
    struct logread_opts u = {0};
    s = read_text(text, &u, &st, &err);
    assert_non_null(s);
    assert_int_equal(st.glitch_current.count, 1); /* 1500 A may be a big pack */
    assert_int_equal(st.glitch_voltage.count, 2); /* 0 V and the 9 V cell */
    series_free(s);
}

static void test_voltage_spike_is_not_a_crossing(void **state)
{
    (void)state;
    /* line 4: 3 V between 16.4 and 16.3 V at a steady 10 A: dropped; line 7:
     * 12.5 V with the current at 90 A for that sample: a real sag, kept; line
     * 9: 12.0 V at 10 A, then the load goes off (0 A) and the voltage is back:
     * kept, as at the cut-off of NASA PCoE B0007 cycle 14 (2.24, 1.79 V at 2 A,
     * then 2.75 V at rest) */
    const char *text = "time_s,voltage_v,current_a\n"
                       "0,16.5,10\n1,16.4,10\n"
                       "2,3.0,10\n"
                       "3,16.3,10\n4,16.3,10\n"
                       "5,12.5,90\n"
                       "6,16.2,10\n7,16.2,10\n"
                       "8,12.0,10\n9,16.4,0\n";
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->n, 9);
    assert_int_equal(st.glitch_spike.count, 1);
    assert_int_equal(st.glitch_spike.first_line, 4);
    assert_int_equal(st.glitch_spike.first_column, 2);
    check_close(s->v_v[4], 12.5, 0.0, "the sag under load stays");
    series_free(s);
}

/* A long log (its spike pass split between two threads at the middle
 * sample): a spike on either side of the split, or on it, is found, and a
 * log without one keeps every sample and is judged discharge-negative from
 * counts made in that pass. The expected values are the logs' own: one
 * 3 V sample among 16.4-16.8 V ones (falling) at a steady current. */
static void test_spikes_on_a_long_log(void **state)
{
    (void)state;
    const int rows = 200000;
    size_t cap = (size_t)rows * 32 + 64;
    char *text = malloc(cap);
    assert_non_null(text);
    const int spikes[] = {0, rows / 2 - 1, rows / 2, rows / 2 + 1, rows - 3, 77777};
    for (size_t t = 0; t < sizeof spikes / sizeof *spikes; t++) {
        size_t len = (size_t)snprintf(text, cap, "time_s,voltage_v,current_a\n");
        for (int k = 0; k < rows; k++) /* spike 0: none, a discharge logged negative */
            len += (size_t)snprintf(text + len, cap - len, "%d.5,%.6f,%s10\n", k,
                                    spikes[t] && k == spikes[t] ? 3.0 : 16.8 - k * 2e-6,
                                    spikes[t] ? "" : "-");
        struct logread_opts o = {0};
        struct logread_stats st;
        struct pb_error err = {0};
        FILE *fp = fmemopen(text, len, "r");
        assert_non_null(fp);
        struct series *s = logread_file(fp, "long.csv", &o, &st, &err);
        fclose(fp);
        assert_non_null(s);
        if (spikes[t]) {
            assert_int_equal(s->n, rows - 1);
            assert_int_equal(st.glitch_spike.count, 1);
            assert_int_equal(st.glitch_spike.first_line, spikes[t] + 2); /* header, 0-based */
            assert_int_equal(st.sign_flipped, 0);
        } else {
            assert_int_equal(s->n, rows);
            assert_int_equal(st.glitch_spike.count, 0);
            assert_int_equal(st.sign_flipped, 1);
            check_close(s->i_a[rows / 2], 10.0, 0.0, "flipped to discharge-positive");
        }
        series_free(s);
    }
    free(text);
}

static void test_headerless_needs_columns(void **state)
{
    (void)state;
    const char *text = "0,16.0,2\n1,15.9,3\n2,15.8,4\n";
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    assert_null(read_text(text, &o, &st, &err));
    assert_non_null(strstr(err.msg, "--columns"));
    o.columns = "time_s,voltage_v,current_a";
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->n, 3);
    series_free(s);
}

static void test_epoch_and_iso(void **state)
{
    (void)state;
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text("time,voltage\n946684800.5,4\n946684801.5,4\n", &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->has_epoch, 1);
    check_close(s->start_epoch_s, 946684800.5, 1e-6, "epoch start");
    check_close(s->t_s[1], 1.0, 1e-9, "epoch relative");
    series_free(s);
    s = read_text("timestamp,voltage\n2000-01-01T00:00:00Z,4\n2000-01-01T00:00:00.5Z,4\n", &o, &st,
                  &err);
    assert_non_null(s);
    assert_int_equal(st.time_is_iso, 1);
    check_close(s->start_epoch_s, 946684800.0, 1e-6, "ISO start (POSIX epoch)");
    check_close(s->t_s[1], 0.5, 1e-9, "ISO fraction");
    series_free(s);
    s = read_text("time,voltage\n946684800000,4\n946684800250,4\n", &o, &st, &err);
    assert_non_null(s);
    check_close(s->t_s[1], 0.25, 1e-9, "epoch milliseconds");
    series_free(s);
}

static void test_cells_and_sign(void **state)
{
    (void)state;
    /* discharge logged negative, voltage falling: auto flips the sign */
    const char *text = "time_s,current_a,cell1_v,cell2_v\n0,-10,4.1,4.0\n1,-12,4.0,3.9\n"
                       "2,-11,3.9,3.8\n3,-10,3.85,3.75\n";
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->ncells, 2);
    assert_int_equal(st.voltage_from_cells, 1);
    assert_int_equal(st.sign_flipped, 1);
    check_close(s->v_v[0], 8.1, 1e-12, "pack voltage as the sum of cells");
    check_close(s->i_a[1], 12.0, 0.0, "flipped current");
    series_free(s);
}

static void test_adc_sense_chain(void **state)
{
    (void)state;
    /* common practice: 14000:1 sense ratio into 510 ohm gives 510/14000 =
     * 0.0364 V per A; a 10-bit ADC at 3.3 V has 3.3/1024 V per count, so
     * 0.0885 A per count (about 0.089) */
    double a = logread_adc_a_per_count(10, 3.3, 14000.0, 510.0);
    check_close(a, 0.089, 0.0006, "A per count, sense chain (common practice)");
    check_close(510.0 / 14000.0, 0.036, 0.0005, "V per A (common practice)");
    struct logread_opts o = {.have_adc = 1, .adc_a_per_count = a, .adc_offset_counts = 12};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s =
        read_text("time_s,voltage_v,current_adc\n0,16,12\n1,16,112\n", &o, &st, &err);
    assert_non_null(s);
    check_close(s->i_a[1], 100 * a, 1e-12, "counts minus offset times scale");
    series_free(s);
}

static void test_field_too_long(void **state)
{
    (void)state;
    size_t n = 200000;
    char *text = malloc(n + 64);
    strcpy(text, "time_s,voltage_v\n0,");
    size_t at = strlen(text);
    memset(text + at, '7', n);
    strcpy(text + at + n, "\n");
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    assert_null(read_text(text, &o, &st, &err));
    assert_non_null(strstr(err.msg, "mem.csv:2:2:"));
    assert_non_null(strstr(err.msg, "longer than"));
    free(text);
}

/* ---- the fast path and libcsv read the same ---------------------------- */

static int same_doubles(const double *a, const double *b, size_t n)
{
    return (!a && !b) || (a && b && memcmp(a, b, n * sizeof *a) == 0);
}

/* Where a log is read from: memory (fmemopen), a regular file, a pipe (no
 * seeking, reads that return what the writer has written so far). */
enum source { SRC_MEMORY, SRC_FILE, SRC_PIPE };

struct pipe_writer {
    int fd;
    const char *text;
    size_t len;
};

static void *write_all(void *va)
{
    struct pipe_writer *w = va;
    size_t at = 0;
    while (at < w->len) {
        /* odd sizes, so reads end anywhere */
        size_t n = w->len - at < 4093 ? w->len - at : 4093;
        ssize_t done = write(w->fd, w->text + at, n);
        if (done <= 0)
            break; /* the reader stopped early (EPIPE: SIGPIPE is ignored) */
        at += (size_t)done;
    }
    close(w->fd);
    return NULL;
}

static struct series *read_from(const char *text, size_t len, enum source src,
                                const struct logread_opts *o, struct logread_stats *st,
                                struct pb_error *err)
{
    struct series *s;
    if (src == SRC_PIPE) {
        int fd[2];
        assert_int_equal(pipe(fd), 0);
        struct pipe_writer w = {fd[1], text, len};
        pthread_t t;
        assert_int_equal(pthread_create(&t, NULL, write_all, &w), 0);
        FILE *fp = fdopen(fd[0], "r");
        assert_non_null(fp);
        s = logread_file(fp, "f.csv", o, st, err);
        fclose(fp);
        pthread_join(t, NULL);
        return s;
    }
    FILE *fp;
    if (src == SRC_FILE || len == 0) {
        fp = tmpfile();
        assert_non_null(fp);
        assert_int_equal(fwrite(text, 1, len, fp), len);
        rewind(fp);
    } else {
        fp = fmemopen((void *)text, len, "r");
    }
    assert_non_null(fp);
    s = logread_file(fp, "f.csv", o, st, err);
    fclose(fp);
    return s;
}

/* Reads text both ways (numeric and plain lines split by the reader itself,
 * past the first block parsed by either thread or both, or every line
 * through libcsv from memory) and fails unless the series, the counted
 * events and the error are the same bit for bit. */
static void check_paths_agree_from(const char *text, size_t len, const char *what,
                                   const struct logread_opts *base, enum source src)
{
    static const int splits[] = {LOGREAD_SPLIT_BOTH, LOGREAD_SPLIT_THREAD, LOGREAD_SPLIT_READER};
    for (size_t sp = 0; sp < sizeof splits / sizeof *splits; sp++) {
        struct logread_opts o[2] = {*base, *base};
        o[0].ahead_split = splits[sp];
        o[1].no_fast_path = 1;
        struct logread_stats st[2];
        struct pb_error err[2] = {{0}, {0}};
        struct series *s[2];
        for (int k = 0; k < 2; k++)
            s[k] = read_from(text, len, k == 0 ? src : SRC_MEMORY, &o[k], &st[k], &err[k]);
        if (memcmp(&st[0], &st[1], sizeof st[0]) != 0 || strcmp(err[0].msg, err[1].msg) != 0 ||
            err[0].code != err[1].code || !s[0] != !s[1])
            fail_msg("%s: the two read paths differ (split %d, source %d: %s | %s)", what,
                     splits[sp], (int)src, err[0].msg, err[1].msg);
        if (s[0]) {
            const struct series *a = s[0], *b = s[1];
            int same = a->n == b->n && a->ncells == b->ncells && a->nseg == b->nseg &&
                       a->has_epoch == b->has_epoch && a->start_epoch_s == b->start_epoch_s &&
                       same_doubles(a->t_s, b->t_s, a->n) && same_doubles(a->v_v, b->v_v, a->n) &&
                       same_doubles(a->i_a, b->i_a, a->n) &&
                       same_doubles(a->temp_c, b->temp_c, a->n) &&
                       memcmp(a->line, b->line, a->n * sizeof *a->line) == 0 &&
                       (a->nseg == 0 ||
                        memcmp(a->seg_start, b->seg_start, a->nseg * sizeof *a->seg_start) == 0);
            for (int c = 0; same && c < a->ncells; c++)
                same = same_doubles(a->cell_v[c], b->cell_v[c], a->n);
            if (!same)
                fail_msg("%s: the two read paths give different series (split %d, source %d)", what,
                         splits[sp], (int)src);
        }
        series_free(s[0]);
        series_free(s[1]);
    }
}

static void check_paths_agree(const char *text, size_t len, const char *what,
                              const struct logread_opts *base)
{
    check_paths_agree_from(text, len, what, base, SRC_MEMORY);
}

static size_t check_dir(const char *dir)
{
    size_t files = 0;
    DIR *d = opendir(dir);
    if (!d)
        fail_msg("cannot open %s", dir);
    struct dirent *e;
    while ((e = readdir(d))) {
        if (e->d_name[0] == '.')
            continue;
        char path[4096];
        snprintf(path, sizeof path, "%s/%s", dir, e->d_name);
        struct stat sb;
        if (stat(path, &sb) != 0)
            continue;
        if (S_ISDIR(sb.st_mode)) {
            files += check_dir(path);
            continue;
        }
        FILE *fp = fopen(path, "rb");
        assert_non_null(fp);
        char *text = malloc((size_t)sb.st_size + 1);
        assert_non_null(text);
        size_t len = fread(text, 1, (size_t)sb.st_size, fp);
        fclose(fp);
        if (len > 0) {
            /* as the CLI reads them, and with a pack's cells and rating (glitch limits) */
            struct logread_opts plain = {0}, rated = {.cells = 4, .rated_mah = 5000};
            check_paths_agree(text, len, path, &plain);
            check_paths_agree(text, len, path, &rated);
            files++;
        }
        free(text);
    }
    closedir(d);
    return files;
}

static void test_fast_path_same_on_tiny_files(void **state)
{
    (void)state;
    static const char *tiny[] = {
        "",
        "\n",
        "time_s,voltage_v,current_a",
        "time_s,voltage_v,current_a\n",
        "time_s,voltage_v,current_a\n0,16.1,2",
        "time_s,voltage_v,current_a\n0,16.1,2\n",
        "time_s,voltage_v,current_a\r\n0,16.1,2\r\n1,16.0,2\r\n",
        "time_s,voltage_v,current_a\r0,16.1,2\r1,16.0,2\r",
        "time_s,voltage_v,current_a\n0,16.1,2\n1,16.0,2\n1,16.0,2\n0.5,16.0,2\n2,16,2",
        "time_s,voltage_v,current_a\n# c\n\n0,16.1,2\n1,,2\n2,16.0\n3,16,2,4\n4,1e1,2\n5,16,2\n",
        "time_ms,voltage_mv,current_ma\n0,16100,2000\n100,16000,2000\n",
        "t,v,i\n1700000000.5,16.1,2\n1700000001.5,16.0,2\n"};
    for (size_t k = 0; k < sizeof tiny / sizeof *tiny; k++) {
        struct logread_opts plain = {0};
        check_paths_agree_from(tiny[k], strlen(tiny[k]), tiny[k], &plain, SRC_FILE);
        check_paths_agree_from(tiny[k], strlen(tiny[k]), tiny[k], &plain, SRC_PIPE);
    }
}

static void test_fast_path_same_on_every_file(void **state)
{
    (void)state;
    size_t files = check_dir(TEST_DATA_DIR) + check_dir(TEST_DATA_DIR "/../../samples");
    print_message("fast path and libcsv agree on %zu files\n", files);
    assert_true(files > 50);
}

/* A log longer than the reader's 1 MiB block, with every kind of line the
 * fast path hands to libcsv (quotes, a quoted line break, spaces, CR LF,
 * a lone CR, blank lines, comments), so lines are cut by the block's end
 * in each state. */
static void test_fast_path_same_across_blocks(void **state)
{
    (void)state;
    static const char *odd[] = {
        "\"%d.5\",16.1,2\n", "%d.5, 16.1 ,2\n", "%d.5,16.1,2\r\n", "%d.5,16.1,2\r", "\n",
        "# note %d\n", "%d.5,\"16\n.1\",2\n", "%d.5,16.1\n", "%d.5,x,2,9\n",
        /* number shapes the reader's own parse takes or hands to num_parse */
        "%d.5,-16.10,-2\n", "%d.5,16.,2\n", "%d.5,.5,2\n", "%d.5,1.6e1,2\n", "%d.5,+16.1,2\n",
        "%d.5,16.1.1,2\n", "%d.5,-,2\n", "%d.5,1-6,2\n", "%d.5,16.100000000000000000001,2\n",
        "%d.5,12345678901234567890,2\n", "%d.5,9007199254740993,2\n", "%d.50000,16.1,02\n",
        /* what the numeric-line path (numline_scan) must hand on, or take */
        "#%d.5,16.1,2\n", "%d.5,16.1,2,\n", "%d.5,16.1\r\n", "%d.5,-0,2\n", "%d.5,0016.100,2\n",
        "%d.5,16.1,2\r\r\n", "%d.5,0000000000000000016.10,2\n", "%d.5,16.100000000000000000,2\n",
        "%d.5,16.1;2\n", "%d,16.1,2\n", "%d.5,16.1,2\n\n", "%d.5,16.1,-\n", "%d.5,16.1,.\n",
        "%d.5,16.1,2.\r", "%d.5,16.1,+2\n", "%d.5,1e1,2\n", "%d.5,16.1,2 \n", "%d.5,16.1,\"2\"\n",
        "%d.5,16.1,2\t\n", "%d.5,16.1,2\x01\n",
        /* numeric lines the keep logic drops: glitches, a time seen before */
        "%d.5,999.9,2\n", "%d.5,0.1,2\n", "%d.5,16.1,200000\n", "%d.5,16.1,-200000\n",
        "%1$d.75,16.1,2\n%1$d.75,16.2,2\n"};
    size_t cap = 3u << 20, len = 0;
    char *text = malloc(cap);
    assert_non_null(text);
    len += (size_t)snprintf(text, cap, "time_s,voltage_v,current_a\n");
    unsigned seed = 14;
    for (int k = 1; len + 64 < cap; k++) {
        seed = seed * 1103515245u + 12345u;
        unsigned pick = (seed >> 16) % 90;
        if (pick < (sizeof odd / sizeof *odd))
            len += (size_t)snprintf(text + len, cap - len, odd[pick], k);
        else
            len += (size_t)snprintf(text + len, cap - len, "%d.25,%.3f,%.2f\n", k, 16.0 - k * 1e-6,
                                    1.0 + (double)(pick % 7));
    }
    struct logread_opts o = {0};
    /* past the first 1 MiB block, a machine with a second core reads the
     * rest ahead in 256 KiB blocks (logread.c, ahead_start), parsed by either
     * thread: compared too, from memory, a file and a pipe */
    check_paths_agree(text, len, "generated 3 MiB log", &o);
    check_paths_agree_from(text, len, "generated 3 MiB log in a file", &o, SRC_FILE);
    check_paths_agree_from(text, len, "generated 3 MiB log through a pipe", &o, SRC_PIPE);
    /* a log of nothing but numeric lines (the benchmark's kind), CR LF ends */
    size_t plen = (size_t)snprintf(text, cap, "time_s,voltage_v,current_a,temp_c\r\n");
    for (int k = 0; plen + 64 < cap; k++)
        plen +=
            (size_t)snprintf(text + plen, cap - plen, "%d.%03d,%.3f,%.3f,%d\r\n", k / 10,
                             k % 10 * 100, 16.8 - k * 1e-6, 9.0 + (k * 7 % 13) * 0.25, 20 + k % 5);
    check_paths_agree(text, plen, "numeric 3 MiB log", &o);
    /* and from a regular file (whole reads, not a pipe's pieces) */
    check_paths_agree_from(text, plen, "numeric 3 MiB log in a file", &o, SRC_FILE);
    /* with a pack's cells and a small rating: currents over 200 C dropped */
    struct logread_opts rated = {.cells = 4, .rated_mah = 55};
    check_paths_agree(text, plen, "numeric 3 MiB log, rated", &rated);
    check_paths_agree_from(text, plen, "numeric 3 MiB log through a pipe", &o, SRC_PIPE);
    /* the same cut at every length near a block boundary, of the first
     * block and of the read-ahead blocks after it */
    for (size_t cut = (1u << 20) - 40; cut < (1u << 20) + 40; cut += 7)
        check_paths_agree(text, cut, "numeric log cut short", &o);
    for (size_t cut = (1u << 20) + (256u << 10) - 40; cut < (1u << 20) + (256u << 10) + 40;
         cut += 7)
        check_paths_agree(text, cut, "numeric log cut short after a read-ahead block", &o);
    /* from a regular file too: just under, at and over the 1 MiB first
     * block (only a full one is read ahead), the last line cut (no final
     * newline) or whole */
    for (size_t cut = (1u << 20) - 2; cut < (1u << 20) + 3; cut++)
        check_paths_agree_from(text, cut, "numeric log in a file near 1 MiB", &o, SRC_FILE);
    size_t whole = plen;
    while (whole > 0 && text[whole - 1] != '\n')
        whole--;
    check_paths_agree_from(text, whole, "numeric log in a file, whole lines", &o, SRC_FILE);
    check_paths_agree_from(text, whole - 3, "numeric log in a file, last line cut", &o, SRC_FILE);
    /* (last: it writes over the numeric log the checks above read) */
    /* the second thread starts once the layout is known, 64 KiB into the
     * first block, or after that block: comments before the header, or
     * before the first data line, for 70 KiB */
    for (int where = 0; where < 2; where++) {
        size_t clen = 0;
        if (where == 1)
            clen += (size_t)snprintf(text, cap, "time_s,voltage_v,current_a\n");
        while (clen < (70u << 10))
            clen += (size_t)snprintf(text + clen, cap - clen, "# a comment line\n");
        if (where == 0)
            clen += (size_t)snprintf(text + clen, cap - clen, "time_s,voltage_v,current_a\n");
        for (int k = 0; clen + 64 < cap; k++)
            clen +=
                (size_t)snprintf(text + clen, cap - clen, "%d.25,%.3f,9.5\n", k, 16.8 - k * 1e-6);
        check_paths_agree(text, clen, where ? "data after 70 KiB" : "header after 70 KiB", &o);
    }
    free(text);
}

/* Lines much shorter at first than later, or much longer, read from a file
 * and a pipe as from memory (a read-ahead block's tables are sized for
 * lines of 16 bytes or more: the short lines make them grow). */
static void test_line_lengths_change(void **state)
{
    (void)state;
    size_t cap = 3u << 20;
    char *text = malloc(cap);
    assert_non_null(text);
    for (int first_short = 0; first_short < 2; first_short++) {
        size_t len = (size_t)snprintf(text, cap, "time_s,voltage_v,current_a\n");
        for (int k = 0; len + 96 < cap; k++) {
            int early = len < (200u << 10);
            if (early == first_short)
                len += (size_t)snprintf(text + len, cap - len, "%d,16,2\n", k);
            else
                len += (size_t)snprintf(text + len, cap - len,
                                        "%d.000000,16.000000000,2.0000000000000\n", k);
        }
        const char *what = first_short ? "short lines first" : "long lines first";
        struct logread_opts o = {0};
        check_paths_agree_from(text, len, what, &o, SRC_FILE);
        check_paths_agree_from(text, len, what, &o, SRC_PIPE);
    }
    free(text);
}

static void test_clock_time_and_ignored_names(void **state)
{
    (void)state;
    /* times of day across midnight: 23:59:59.500 to 00:00:00.250 is 0.75 s (arithmetic); the
     * columns read as nothing are named, the one taken as a duplicate too */
    const char *text = "Clock,Bat(V),Loop,Bat(A),Voltage\n"
                       "23:59:59.500,16.80,1,0.1,1\n"
                       "24:00:00,16.79,2,5.0,1\n" /* not a time of day: dropped, counted */
                       "00:00:00.250,16.70,3,5.0,1\n"
                       "00:00:01,16.60,4,5.0,1\n";
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(st.time_is_clock, 1);
    assert_int_equal(s->has_epoch, 0);
    check_close(s->t_s[1], 0.75, 1e-9, "across midnight");
    check_close(s->t_s[s->n - 1], 1.5, 1e-9, "00:00:01 is 1.5 s after 23:59:59.500");
    assert_int_equal(st.bad_number.count, 1);
    assert_int_equal(st.bad_number.first_line, 3);
    assert_string_equal(st.ignored_names, "Loop, Voltage");
    series_free(s);
}

static void test_date_and_time_columns(void **state)
{
    (void)state;
    /* 2026-03-19T23:59:59.5Z is 1773964799.5 s after the epoch (Python's
     * datetime(2026, 3, 19, 23, 59, 59, 500000, tzinfo=UTC).timestamp()); the date column
     * carries the day over midnight, the time column the time of day */
    const char *text = "Date;Time;Bat(V);Bat(A)\n"
                       "2026-03-19;23:59:59.500;16.8;0.1\n"
                       "2026-03-20;00:00:00.250;16.6;10\n"
                       "2026-03-2x;00:00:00.500;16.6;10\n" /* not a date: dropped, counted */
                       "2026-03-20;00:00:01;16.5;0.1\n";
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->has_epoch, 1);
    check_close(s->start_epoch_s, 1773964799.5, 1e-6, "date + time of day, UTC");
    assert_int_equal(s->n, 3);
    check_close(s->t_s[1], 0.75, 1e-9, "over midnight by the date");
    check_close(s->t_s[2], 1.5, 1e-9, "last sample");
    assert_int_equal(st.date_column, 1);
    assert_int_equal(st.bad_number.count, 1);
    assert_int_equal(st.bad_number.first_line, 4);
    series_free(s);
}

static void test_missing_cell_drops_the_cell(void **state)
{
    (void)state;
    /* cell 2 empty throughout, cell 4 text: those cells go, the log stays;
     * cell 3's one empty value drops that one sample, counted */
    const char *text = "time_s,current_a,cell1_v,cell2_v,cell3_v,cell4_v\n"
                       "0,10,4.10,,4.00,n/a\n1,12,4.00,,3.90,n/a\n"
                       "2,11,3.90,,,n/a\n3,10,3.85,,3.75,n/a\n";
    struct logread_opts o = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    struct series *s = read_text(text, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->ncells, 2);
    assert_int_equal(s->cell_no[0], 1);
    assert_int_equal(s->cell_no[1], 3);
    assert_int_equal(s->n, 3);
    assert_int_equal(st.ncells_dropped, 2);
    assert_int_equal(st.cell_dropped[0].cell, 2);
    assert_int_equal(st.cell_dropped[0].column, 4);
    assert_int_equal(st.cell_dropped[0].unreadable, 4);
    assert_int_equal(st.cell_dropped[1].cell, 4);
    assert_int_equal(st.cell_dropped[1].unreadable, 4);
    assert_int_equal(st.empty_field.count, 1);
    assert_int_equal(st.empty_field.first_line, 4);
    assert_int_equal(st.empty_field.first_column, 5);
    /* the pack voltage from 2 of 3 cells: 3 x their mean (cells_in_pack 3:
     * the highest cell read, cell 4 being above it) */
    assert_int_equal(s->cells_in_pack, 3);
    assert_int_equal(st.cells_voltage_estimated, 1);
    check_close(s->v_v[0], 3.0 * (4.10 + 4.00) / 2.0, 1e-12, "pack voltage from the cells read");
    series_free(s);

    /* a cell with no column at all (cell 2), and one --map names a missing
     * column for (cell 3), with a pack voltage column */
    const char *text2 = "time_s,voltage_v,current_a,c1,cell4_v\n0,16.2,10,4.10,4.00\n"
                        "1,16.0,12,4.00,3.95\n2,15.8,11,3.95,3.90\n";
    o.map = "cell1_v=c1,cell3_v=nowhere";
    s = read_text(text2, &o, &st, &err);
    assert_non_null(s);
    assert_int_equal(s->ncells, 2);
    assert_int_equal(s->cell_no[1], 4);
    assert_int_equal(st.ncells_dropped, 2);
    assert_int_equal(st.cell_dropped[0].column, 0);
    assert_int_equal(st.cell_dropped[1].cell, 3);
    assert_int_equal(st.cell_dropped[1].column, 0);
    assert_int_equal(st.cells_voltage_estimated, 0);
    check_close(s->v_v[1], 16.0, 0.0, "the pack voltage column");
    series_free(s);

    /* no voltage at all: fails */
    const char *text3 = "time_s,current_a,cell1_v,cell2_v\n0,10,,\n1,12,,\n2,11,,\n";
    o.map = NULL;
    s = read_text(text3, &o, &st, &err);
    assert_null(s);
    assert_non_null(strstr(err.msg, "no voltage"));
}

int main(void)
{
    signal(SIGPIPE, SIG_IGN); /* a reader that stops early closes the test's pipe */
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_semicolon_decimal_comma_ms_mv),
        cmocka_unit_test(test_tab_quotes_trailing_empty),
        cmocka_unit_test(test_counts_and_places),
        cmocka_unit_test(test_stray_rows_dropped_with_place),
        cmocka_unit_test(test_first_row_ahead_is_a_stray),
        cmocka_unit_test(test_restart_makes_segments),
        cmocka_unit_test(test_time_that_is_not_a_clock),
        cmocka_unit_test(test_glitches_dropped_with_place),
        cmocka_unit_test(test_voltage_spike_is_not_a_crossing),
        cmocka_unit_test(test_spikes_on_a_long_log),
        cmocka_unit_test(test_headerless_needs_columns),
        cmocka_unit_test(test_epoch_and_iso),
        cmocka_unit_test(test_cells_and_sign),
        cmocka_unit_test(test_adc_sense_chain),
        cmocka_unit_test(test_field_too_long),
        cmocka_unit_test(test_fast_path_same_on_tiny_files),
        cmocka_unit_test(test_fast_path_same_on_every_file),
        cmocka_unit_test(test_fast_path_same_across_blocks),
        cmocka_unit_test(test_line_lengths_change),
        cmocka_unit_test(test_clock_time_and_ignored_names),
        cmocka_unit_test(test_date_and_time_columns),
        cmocka_unit_test(test_missing_cell_drops_the_cell),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
