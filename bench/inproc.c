/* inproc: analyze_series timed in one process, the log read once: the least
 * and median of N analyses, wall and CPU. For comparing two builds on a
 * machine whose speed drifts (a shared VM): run each build's inproc
 * alternately (bench/inproc), and under `taskset -c 1` for the CPU cost
 * alone (every thread then on one core). Not a test; nothing checks it.
 *
 *     inproc LOG [N]      (N analyses, default 15, at most 200) */
#define _POSIX_C_SOURCE 200809L
#include "analyze.h"
#include "logread.h"
#include "series.h"

#include <stdio.h>
#include <stdlib.h>
#include <time.h>

#define MAX_RUNS 200

static double ms(clockid_t clock)
{
    struct timespec t;
    clock_gettime(clock, &t);
    return 1e3 * (double)t.tv_sec + 1e-6 * (double)t.tv_nsec;
}

static int by_value(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

int main(int argc, char **argv)
{
    if (argc < 2 || argc > 3) {
        fprintf(stderr, "usage: inproc LOG [N]\n");
        return 2;
    }
    int n = argc == 3 ? atoi(argv[2]) : 15;
    if (n < 1 || n > MAX_RUNS) {
        fprintf(stderr, "inproc: N must be 1 to %d\n", MAX_RUNS);
        return 2;
    }
    FILE *fp = fopen(argv[1], "rb");
    if (!fp) {
        perror(argv[1]);
        return 1;
    }
    struct logread_opts ro = {0};
    struct logread_stats st;
    struct pb_error err = {0};
    double t0 = ms(CLOCK_MONOTONIC);
    struct series *s = logread_file(fp, argv[1], &ro, &st, &err);
    double read_ms = ms(CLOCK_MONOTONIC) - t0;
    fclose(fp);
    if (!s) {
        fprintf(stderr, "inproc: %s\n", err.msg);
        return 1;
    }
    double wall[MAX_RUNS], cpu[MAX_RUNS], r0 = 0.0;
    struct analyze_opts o = {0};
    for (int i = 0; i < n; i++) {
        struct analysis *a = analysis_new();
        if (!a) {
            fprintf(stderr, "inproc: out of memory\n");
            return 1;
        }
        double w0 = ms(CLOCK_MONOTONIC), c0 = ms(CLOCK_PROCESS_CPUTIME_ID);
        enum pb_code rc = analyze_series(s, &st, argv[1], &o, a, &err);
        wall[i] = ms(CLOCK_MONOTONIC) - w0;
        cpu[i] = ms(CLOCK_PROCESS_CPUTIME_ID) - c0;
        r0 = a->r0_mohm.value;
        analysis_free(a);
        if (rc != PB_OK) {
            fprintf(stderr, "inproc: %s\n", err.msg);
            return 1;
        }
    }
    qsort(wall, (size_t)n, sizeof *wall, by_value);
    qsort(cpu, (size_t)n, sizeof *cpu, by_value);
    /* R0 shown so that two builds can be seen to compute the same */
    printf("read %.1f ms | analyze wall least %.1f median %.1f ms | cpu least %.1f median %.1f ms "
           "| R0 %.6f mOhm\n",
           read_ms, wall[0], wall[n / 2], cpu[0], cpu[n / 2], r0);
    series_free(s);
    return 0;
}
