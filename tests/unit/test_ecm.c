/* ecm: the circuit model on a long generated log with known truth, through
 * the long-log paths (the tau search beside the static fit, rows made in
 * any order from an even sample, the trend's lag run on out of turn).
 *
 * Sources:
 * - The generator's truth (this file): V = OCV(q) - R0 I - R1 i1 + noise,
 *   i1 the first-order lag of I with tau (zero-order hold, the model's own
 *   form), R0 12 mOhm, R1 6 mOhm, tau 4 s, OCV a cubic in the charge drawn,
 *   white noise of 2 mV on V. 300,000 rows at 10 Hz: each estimate's 95 %
 *   interval is then far under 1 % (R0 about 0.01 %, tau about 0.1 % here),
 *   so R0, R1 and tau are held to 1 % of the truth, and the trend's OCV at
 *   both ends to 1 mV (its standard error is under 0.1 mV).
 * - ecm_begin/ecm_end with work between them against ecm_fit: the same
 *   computation in two halves, so the results must be identical, number
 *   for number (mathematics: no tolerance).
 * - The RC fit at the searched tau takes the windows' lines of the lag from
 *   the search's own walk at that tau; a fit at the same tau given as fixed
 *   makes them itself (rc_lines): the same lines, so the same fit, number
 *   for number (no tolerance), on this log's clock and on one whose every
 *   interval differs (jittered by up to 1 %): the search's walks run their
 *   lags as lanes of vectors, rc_lines one scalar lag, and both make the
 *   lag's factor anew where the interval changes.
 * - The passes of a long log cut in two halves (twin.h) against the same
 *   passes walked whole: the same rows and sums added in another order, so
 *   R0, R1, tau and their intervals agree within 1e-6 relative (far above
 *   the rounding of reordered sums and of a lag started 40 time constants
 *   early, far below the intervals: tau's half-width is 6e-4 of tau here),
 *   on this log and on the same with a long gap just before the cut, which
 *   the later half's early-started lag must carry across.
 * - The static fit's pass over every row made with the RC fit's
 *   (fit_part_share) against each fit making its own: the same sums, so
 *   the same results, number for number (no tolerance), one pass fewer.
 * - The robust trend (rows in any order, its plain start from the sample)
 *   against the plain trend (rows in order, every row): on Gaussian noise
 *   both estimate the same line; within 0.2 mV at both ends. The robust
 *   one of this long log is its even sample's fit, with the sample's
 *   interval: its standard error over the plain fit's of every row is
 *   sqrt(every row / the sample's) (least squares' 1 / sqrt(n)), within
 *   20 % (bisquare weights' efficiency, 95 % on Gaussian noise). */
#include <gsl/gsl_errno.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <cmocka.h>

#include "ecm.h"
#include "edges.h"
#include "series.h"
#include "testutil.h"

#define ROWS 300000
#define DT_S 0.1
#define R0_OHM 0.012
#define R1_OHM 0.006
#define TAU_S 4.0
#define NOISE_V 0.002
#define SEED 20261202u

static uint64_t rng_state;

static double uniform(void)
{
    rng_state = rng_state * 6364136223846793005u + 1442695040888963407u;
    return ((double)(rng_state >> 11) + 0.5) / 9007199254740992.0;
}

static double gaussian(void)
{
    return sqrt(-2.0 * log(uniform())) * cos(6.283185307179586 * uniform());
}

static double ocv_truth(double x) /* x: the charge drawn as a fraction of the whole */
{
    return 16.6 - 1.4 * x + 0.5 * x * x - 0.9 * x * x * x;
}

/* With gap_at > 0, the clock jumps by GAP_S before sample gap_at (no charge
 * drawn across it) and the current is 3 A for the 30 s before it and 38 A
 * for the 30 s after: a lag must carry the 3 A across the gap. With jitter
 * > 0 each interval is DT_S times 1 + jitter * (a uniform draw - 1/2): a
 * clock that never repeats an interval, so every sample makes the lag's
 * factor anew (the path between the walks' runs at one interval). */
#define GAP_S 5000.0
#define JITTER 0.02
/* The generator's R1 (gen_r1_ohm), and with gen_busy_rows > 0 a current
 * that steps as above only before that row and by under half an ampere
 * about 20 A after it (a quiet hover after a busy start); the scout's
 * tests set them and put them back. */
static double gen_r1_ohm = R1_OHM;
static size_t gen_busy_rows = 0;
static struct series *gen_log(size_t rows, uint64_t seed, size_t gap_at, double jitter,
                              double **q_out, double *q_end)
{
    struct series *s = series_new(1, 0, 0);
    assert_non_null(s);
    double *q = malloc(rows * sizeof *q);
    assert_non_null(q);
    rng_state = seed;
    double level = 20.0, hold = 0.0;
    for (size_t k = 0; k < rows; k++) {
        assert_int_equal(series_reserve_one(s), 0);
        if (hold <= 0.0) { /* a new level every 2-8 s, 3-38 A */
            level = 3.0 + 35.0 * uniform();
            hold = 2.0 + 6.0 * uniform();
            if (gen_busy_rows && k >= gen_busy_rows)
                level = 20.0 + 0.8 * (uniform() - 0.5);
        }
        hold -= DT_S;
        s->t_s[k] = DT_S * (double)k + (gap_at && k >= gap_at ? GAP_S : 0.0);
        if (jitter > 0.0 && k > 0)
            s->t_s[k] = s->t_s[k - 1] + DT_S * (1.0 + jitter * (uniform() - 0.5)) +
                        (gap_at && k == gap_at ? GAP_S : 0.0);
        double dt = jitter > 0.0 && k > 0 && k != gap_at ? s->t_s[k] - s->t_s[k - 1] : DT_S;
        if (gap_at && k + 300 >= gap_at && k < gap_at + 300)
            level = k < gap_at ? 3.0 : 38.0;
        s->i_a[k] = level;
        int across = gap_at && k == gap_at;
        q[k] = k && !across ? q[k - 1] + dt * 0.5 * (s->i_a[k - 1] + level) / 3600.0
                            : (k ? q[k - 1] : 0.0);
        s->n = k + 1;
    }
    *q_end = q[rows - 1];
    double i1 = s->i_a[0];
    for (size_t k = 0; k < rows; k++) {
        if (k) {
            double a = exp(-(s->t_s[k] - s->t_s[k - 1]) / TAU_S);
            i1 = a * i1 + (1.0 - a) * s->i_a[k - 1];
        }
        s->v_v[k] =
            ocv_truth(q[k] / *q_end) - R0_OHM * s->i_a[k] - gen_r1_ohm * i1 + NOISE_V * gaussian();
    }
    *q_out = q;
    return s;
}

static struct series *gen(double **q_out, double *q_end)
{
    print_message("seed %u\n", SEED);
    return gen_log(ROWS, SEED, 0, 0.0, q_out, q_end);
}

static struct ecm_opts opts(const struct series *s)
{
    double peak = 0.0;
    for (size_t k = 0; k < s->n; k++)
        peak = fmax(peak, fabs(s->i_a[k]));
    return (struct ecm_opts){.y_v = s->v_v,
                             .dt_med_s = DT_S,
                             .gap_s = 1.0,
                             .step_a = edges_step_a(0.0, peak),
                             .robust = 1,
                             .try_rc = 1};
}

static void test_rc_truth_and_split(void **state)
{
    (void)state;
    double *q, q_end;
    struct series *s = gen(&q, &q_end);
    struct ecm_opts o = opts(s);
    struct ecm_result a, b;
    assert_int_equal(ecm_fit(s, q, &o, &a, NULL), PB_OK);
    assert_null(a.reason);
    assert_true(a.rc);
    check_rel(a.r0_mohm, 1000.0 * R0_OHM, 0.01, "R0 against the generator's");
    check_rel(a.r1_mohm, 1000.0 * R1_OHM, 0.01, "R1 against the generator's");
    check_rel(a.tau_s, TAU_S, 0.01, "tau against the generator's");

    /* the two halves with the current steps measured between them, as
     * analyze does while the search runs */
    struct ecm_run *run = ecm_begin(s, q, &o);
    assert_non_null(run);
    struct edges_opts eo = {.gap_s = 1.0, .peak_a = 38.0, .series = s};
    struct edges_result er;
    edges_estimate(s->t_s, s->v_v, s->i_a, s->n, &eo, &er);
    assert_int_equal(ecm_end(run, &b), PB_OK);
    assert_int_equal(a.rc, b.rc);
    assert_true(a.r0_mohm == b.r0_mohm && a.r0_ci95_mohm == b.r0_ci95_mohm);
    assert_true(a.r_static_mohm == b.r_static_mohm && a.r1_mohm == b.r1_mohm);
    assert_true(a.r1_ci95_mohm == b.r1_ci95_mohm && a.tau_s == b.tau_s);
    assert_true(a.sigma_mv == b.sigma_mv && a.rho == b.rho);
    assert_int_equal(a.downweighted, b.downweighted);
    assert_int_equal(a.windows, b.windows);
    free(q);
    series_free(s);
}

static void test_lines_from_the_search(void **state)
{
    (void)state;
    for (int jittered = 0; jittered < 2; jittered++) {
        double *q, q_end;
        struct series *s = jittered ? gen_log(ROWS, SEED, 0, JITTER, &q, &q_end) : gen(&q, &q_end);
        struct ecm_opts o = opts(s);
        struct ecm_result searched, fixed;
        size_t work_searched = 0, work_fixed = 0;
        o.work = &work_searched;
        assert_int_equal(ecm_fit(s, q, &o, &searched, NULL), PB_OK);
        assert_true(searched.rc);
        o.tau_fixed_s = searched.tau_s;
        o.work = &work_fixed;
        assert_int_equal(ecm_fit(s, q, &o, &fixed, NULL), PB_OK);
        assert_true(fixed.rc);
        assert_true(searched.tau_s == fixed.tau_s);
        assert_true(searched.r0_mohm == fixed.r0_mohm &&
                    searched.r0_ci95_mohm == fixed.r0_ci95_mohm);
        assert_true(searched.r1_mohm == fixed.r1_mohm &&
                    searched.r1_ci95_mohm == fixed.r1_ci95_mohm);
        assert_true(searched.sigma_mv == fixed.sigma_mv && searched.rho == fixed.rho);
        assert_int_equal(searched.downweighted, fixed.downweighted);
        /* the truth within 1 %, as test_rc_truth_and_split holds it */
        check_rel(searched.r0_mohm, 1000.0 * R0_OHM, 0.01, "R0, jittered clock or not");
        check_rel(searched.tau_s, TAU_S, 0.01, "tau, jittered clock or not");
        free(q);
        series_free(s);
    }
}

/* tau's interval against the scatter of tau over independent logs (the
 * meaning of a 95 % interval: it holds the truth in 95 % of logs, and its
 * half-width is 1.96 standard deviations of the estimate; statistics
 * textbook, e.g. NIST/SEMATECH e-Handbook of Statistical Methods, 7.1.4,
 * from memory).
 * TAU_LOGS logs of TAU_ROWS rows, each with its own noise and current:
 * - coverage: with a true 95 %, more than 5 misses of 60 has probability
 *   0.08 and more than 8 of 60 under 0.005 (binomial), so at most 8;
 * - width: the mean half-width over 1.96 times the standard deviation of
 *   the 60 estimates, 1 for a true interval; the sample deviation of 60
 *   scatters by about 9 % (1 / sqrt(2 * 59)), so 0.8-1.25, about 2.3 of
 *   that either side (a variance off by a factor of 2 is outside). */
#define TAU_LOGS 60
#define TAU_ROWS 20000
static void test_tau_interval(void **state)
{
    (void)state;
    double tau[TAU_LOGS], sum = 0.0, sum_ci = 0.0;
    int misses = 0;
    for (int j = 0; j < TAU_LOGS; j++) {
        double *q, q_end;
        struct series *s = gen_log(TAU_ROWS, SEED + 7919u * (uint64_t)(j + 1), 0, 0.0, &q, &q_end);
        struct ecm_opts o = opts(s);
        struct ecm_result r;
        assert_int_equal(ecm_fit(s, q, &o, &r, NULL), PB_OK);
        assert_true(r.rc);
        assert_true(r.tau_ci95_s > 0.0);
        tau[j] = r.tau_s;
        sum += r.tau_s;
        sum_ci += r.tau_ci95_s;
        misses += fabs(r.tau_s - TAU_S) > r.tau_ci95_s;
        free(q);
        series_free(s);
    }
    double mean = sum / TAU_LOGS, ss = 0.0;
    for (int j = 0; j < TAU_LOGS; j++)
        ss += (tau[j] - mean) * (tau[j] - mean);
    double sd = sqrt(ss / (TAU_LOGS - 1)), ratio = sum_ci / TAU_LOGS / (1.96 * sd);
    print_message("tau over %d logs: mean %.5f s, sd %.5f s, mean half-width %.5f s "
                  "(ratio %.3f), %d misses\n",
                  TAU_LOGS, mean, sd, sum_ci / TAU_LOGS, ratio, misses);
    assert_true(misses <= 8);
    assert_true(ratio > 0.8 && ratio < 1.25);
}

/* The lag kept at the sampled rows (ecm_lag_rows) against the lag run
 * over every sample from the first, as the man page defines it
 * (i_rc[k] = a i_rc[k-1] + (1 - a) I[k-1], i_rc[0] = I[0], a from the
 * generator's exact interval): within 1e-10 relative. A lag takes its a
 * from the interval where it starts, and the later half's starts far into
 * the log, where the times' own rounding (4e-12 s at 30,000 s) moves that
 * interval by ~4e-11 relative, which the lag carries as a few 1e-12 (a
 * lag started 40 time constants early forgets its start to 4e-18). Kept at every sampled row of the
 * search's walk, so at least the rows inside the windows (here nearly all). The same values whether
 * the search made them or rc_lines at that tau fixed (number for number,
 * test_lines_from_the_search's reason). The trend's sampled rows take them: the trend with and
 * without them within 1e-9 relative. On a clean clock, with a gap before the cut, and on a
 * jittered clock (every sample a new interval: the lag's factor made anew at each). */
/* Just before where a long pass is cut (twin_split(ROWS) = 149,760), so a
 * later half's early-started lag reaches back across the gap. */
#define GAP_AT 149660

static void test_lag_rows(void **state)
{
    (void)state;
    for (int run = 0; run < 3; run++) {
        int gap = run == 1, jittered = run == 2;
        double *q, q_end;
        struct series *s =
            gen_log(ROWS, SEED, gap ? GAP_AT : 0, jittered ? JITTER : 0.0, &q, &q_end);
        struct ecm_opts o = opts(s);
        size_t every = fit_sample_every(s->n), m = s->n / every + 1;
        struct ecm_lag_rows searched = {.i1_a = malloc(m * sizeof(double)), .every = every};
        struct ecm_lag_rows fixed = {.i1_a = malloc(m * sizeof(double)), .every = every};
        assert_non_null(searched.i1_a);
        assert_non_null(fixed.i1_a);
        struct ecm_result r;
        o.lag_rows = &searched;
        assert_int_equal(ecm_fit(s, q, &o, &r, NULL), PB_OK);
        assert_true(r.rc && searched.tau_s == r.tau_s);
        o.lag_rows = &fixed;
        o.tau_fixed_s = r.tau_s;
        assert_int_equal(ecm_fit(s, q, &o, &r, NULL), PB_OK);
        assert_true(fixed.tau_s == r.tau_s);
        double i1 = s->i_a[0], worst = 0.0;
        size_t kept = 0;
        for (size_t k = 0; k < s->n; k++) {
            if (k) {
                double a = exp(-(s->t_s[k] - s->t_s[k - 1]) / r.tau_s);
                i1 = a * i1 + (1.0 - a) * s->i_a[k - 1];
            }
            if (k % every)
                continue;
            double v = searched.i1_a[k / every];
            assert_true(v == fixed.i1_a[k / every] || (isnan(v) && isnan(fixed.i1_a[k / every])));
            if (isnan(v))
                continue;
            kept++;
            worst = fmax(worst, fabs(v - i1) / fabs(i1));
        }
        print_message("%s: lag kept at %zu of %zu sampled rows, worst %.2e relative\n",
                      gap        ? "a gap before the cut"
                      : jittered ? "a jittered clock"
                                 : "no gap",
                      kept, m, worst);
        assert_true(worst < 1e-10);
        assert_true(kept > 9 * m / 10);
        struct fit_result with, without;
        assert_int_equal(
            ecm_ocv_trend(s, q, q_end, 3, R0_OHM, R1_OHM, r.tau_s, 1, &searched, NULL, &with, NULL),
            PB_OK);
        assert_int_equal(
            ecm_ocv_trend(s, q, q_end, 3, R0_OHM, R1_OHM, r.tau_s, 1, NULL, NULL, &without, NULL),
            PB_OK);
        for (int j = 0; j < 4; j++)
            check_rel(with.beta[j], without.beta[j], 1e-9, "trend with the kept lag");
        free(searched.i1_a);
        free(fixed.i1_a);
        free(q);
        series_free(s);
    }
}

/* Windows that touch the cut-off are left out (man packbook, MODEL), judged
 * on the voltage being fitted: a cell's fit (y_v one cell's voltage, the
 * cut-off per cell) leaves out the windows where that cell is at its
 * cut-off, whatever the pack's voltage. Here the "cell" is the pack's
 * voltage over 4 and the cut-off that cell's voltage 95 % of the way
 * through the log: some windows near the end touch it, so fewer windows
 * inform R than without a cut-off (but most still do). */
static void test_cutoff_on_the_fitted_voltage(void **state)
{
    (void)state;
    double *q, q_end;
    struct series *s = gen(&q, &q_end);
    double *cell = malloc(s->n * sizeof *cell);
    assert_non_null(cell);
    for (size_t k = 0; k < s->n; k++)
        cell[k] = s->v_v[k] / 4.0;
    struct ecm_opts o = opts(s);
    o.y_v = cell;
    o.try_rc = 0;
    struct ecm_result all, cut;
    assert_int_equal(ecm_fit(s, q, &o, &all, NULL), PB_OK);
    o.cutoff_v = cell[s->n / 20 * 19];
    assert_int_equal(ecm_fit(s, q, &o, &cut, NULL), PB_OK);
    print_message("windows informing R: %zu without a cut-off, %zu with %.4f V per cell\n",
                  all.windows, cut.windows, o.cutoff_v);
    assert_true(cut.windows < all.windows);
    assert_true(cut.windows > all.windows / 2);
    free(cell);
    free(q);
    series_free(s);
}

static void test_cut_in_two(void **state)
{
    (void)state;
    for (int gap = 0; gap < 2; gap++) {
        double *q, q_end;
        struct series *s = gen_log(ROWS, SEED, gap ? GAP_AT : 0, 0.0, &q, &q_end);
        struct ecm_opts o = opts(s);
        struct ecm_result cut, whole;
        assert_int_equal(ecm_fit(s, q, &o, &cut, NULL), PB_OK);
        o.whole = 1;
        assert_int_equal(ecm_fit(s, q, &o, &whole, NULL), PB_OK);
        assert_true(cut.rc && whole.rc);
        check_rel(cut.r0_mohm, whole.r0_mohm, 1e-6, "R0 cut in two against whole");
        check_rel(cut.r0_ci95_mohm, whole.r0_ci95_mohm, 1e-6, "R0's interval cut against whole");
        check_rel(cut.r_static_mohm, whole.r_static_mohm, 1e-6, "static R cut against whole");
        check_rel(cut.r1_mohm, whole.r1_mohm, 1e-6, "R1 cut in two against whole");
        check_rel(cut.tau_s, whole.tau_s, 1e-6, "tau cut in two against whole");
        check_close(cut.rho, whole.rho, 1e-6, "residual correlation cut against whole");
        assert_int_equal(cut.downweighted, whole.downweighted);
        free(q);
        series_free(s);
    }
}

static void test_rc_trend(void **state)
{
    (void)state;
    double *q, q_end;
    struct series *s = gen(&q, &q_end);
    struct fit_result robust, plain;
    assert_int_equal(
        ecm_ocv_trend(s, q, q_end, 3, R0_OHM, R1_OHM, TAU_S, 1, NULL, NULL, &robust, NULL), PB_OK);
    assert_int_equal(
        ecm_ocv_trend(s, q, q_end, 3, R0_OHM, R1_OHM, TAU_S, 0, NULL, NULL, &plain, NULL), PB_OK);
    for (int end = -1; end <= 1; end += 2) {
        double v_r, se_r, v_p, se_p;
        ecm_ocv_at(&robust, 3, end, &v_r, &se_r);
        ecm_ocv_at(&plain, 3, end, &v_p, &se_p);
        check_close(v_r, ocv_truth(end < 0 ? 0.0 : 1.0), 1e-3, "trend OCV against the truth");
        check_close(v_r, v_p, 2e-4, "robust trend against the plain one");
        /* the robust trend of these 300,000 rows is its even sample's
         * (TREND_SAMPLE_CI_V: 2 mV of noise pins the ends far closer than
         * 1 mV), and its interval says so: the sample's, about
         * sqrt(300000 / 60000) = 2.2 times the plain fit's of every row */
        assert_true(robust.n_used < s->n / 4);
        assert_true(1.96 * se_r <= 1e-3);
        check_rel(se_r / se_p, sqrt((double)plain.n_used / (double)robust.n_used), 0.2,
                  "the sample's standard error against every row's");
    }
    /* 200 mV of noise: the sample would leave the ends' interval over
     * 1 mV, so the trend takes one pass over every row (n_used all rows) */
    for (size_t k = 0; k < s->n; k++)
        s->v_v[k] += 0.2 * gaussian();
    assert_int_equal(
        ecm_ocv_trend(s, q, q_end, 3, R0_OHM, R1_OHM, TAU_S, 1, NULL, NULL, &robust, NULL), PB_OK);
    assert_int_equal(robust.n_used, s->n);
    free(q);
    series_free(s);
}

/* The scout of a long log's tau search (ecm.c: an eighth of the windows,
 * in four runs) against the search of every row (no_scout), on this long
 * log:
 * - with the branch (the generator's R1 and tau): the scout finds it, and
 *   both searches end within TAU_TOL_SE (a hundredth of tau's standard
 *   error) of the same minimum of the profile: their taus within 0.05
 *   standard errors (tau_ci95 / 1.96), R0 and R1 within a quarter of
 *   their intervals (issue 14's rule for any change made for speed), the
 *   grid's walk of every row spared (work);
 * - without it (R1 = 0): the scout's RSS falls by far under 1 % (the RC
 *   model needs 5 % to be chosen), so the search ends unresolved and no
 *   RC fit is made: the same result as the search of every row, number
 *   for number (the static fit does not depend on the search), the grid's
 *   walk of every row spared;
 * - with the current varying only in the log's first tenth (a quiet hover
 *   after): the scout's windows hold next to none of the variation, so it
 *   is not trusted and the search walks every row as without it: the same
 *   result and the same work. */
static void scouted_and_not(const struct series *s, const double *q, struct ecm_result *a,
                            size_t *work_a, struct ecm_result *b, size_t *work_b)
{
    struct ecm_opts o = opts(s);
    *work_a = *work_b = 0;
    o.work = work_a;
    assert_int_equal(ecm_fit(s, q, &o, a, NULL), PB_OK);
    o.work = work_b;
    o.no_scout = 1;
    assert_int_equal(ecm_fit(s, q, &o, b, NULL), PB_OK);
    print_message("work: scouted %zu, every row %zu (%zu rows)\n", *work_a, *work_b, s->n);
}

static void same_result(const struct ecm_result *a, const struct ecm_result *b)
{
    assert_int_equal(a->rc, b->rc);
    assert_true(a->r0_mohm == b->r0_mohm && a->r0_ci95_mohm == b->r0_ci95_mohm);
    assert_true(a->r_static_mohm == b->r_static_mohm);
    assert_true(a->sigma_mv == b->sigma_mv && a->rho == b->rho);
    assert_int_equal(a->downweighted, b->downweighted);
}

static void test_scout(void **state)
{
    (void)state;
    double *q, q_end;
    struct ecm_result a, b;
    size_t wa, wb;
    struct series *s = gen(&q, &q_end);
    scouted_and_not(s, q, &a, &wa, &b, &wb);
    assert_true(a.rc && b.rc);
    check_close(a.tau_s, b.tau_s, 0.05 * b.tau_ci95_s / 1.96, "tau scouted against every row");
    check_close(a.r0_mohm, b.r0_mohm, 0.25 * b.r0_ci95_mohm, "R0 scouted against every row");
    check_close(a.r1_mohm, b.r1_mohm, 0.25 * b.r1_ci95_mohm, "R1 scouted against every row");
    assert_true(wa + s->n / 2 < wb);
    free(q);
    series_free(s);

    gen_r1_ohm = 0.0;
    s = gen(&q, &q_end);
    scouted_and_not(s, q, &a, &wa, &b, &wb);
    assert_false(a.rc);
    same_result(&a, &b);
    assert_true(wa + s->n / 2 < wb);
    free(q);
    series_free(s);

    gen_r1_ohm = R1_OHM;
    gen_busy_rows = ROWS / 10;
    s = gen(&q, &q_end);
    scouted_and_not(s, q, &a, &wa, &b, &wb);
    same_result(&a, &b);
    assert_true(a.tau_s == b.tau_s || (isnan(a.tau_s) && isnan(b.tau_s)));
    assert_int_equal(wa, wb);
    gen_busy_rows = 0;
    free(q);
    series_free(s);
}

/* The static fit's pass over every row made with the RC fit's (ecm_end,
 * fit_part_share) against the static fit ending beside the search
 * (no_share): the same fits, number for number (the same sums; no
 * tolerance), the rows made once (the work less by the log's rows), on
 * this log and on one without the branch (no tau: the static fit's pass
 * after the search, the same work). */
static void test_shared_pass(void **state)
{
    (void)state;
    for (int branch = 1; branch >= 0; branch--) {
        gen_r1_ohm = branch ? R1_OHM : 0.0;
        double *q, q_end;
        struct series *s = gen(&q, &q_end);
        struct ecm_opts o = opts(s);
        struct ecm_result a, b;
        size_t wa = 0, wb = 0;
        o.work = &wa;
        assert_int_equal(ecm_fit(s, q, &o, &a, NULL), PB_OK);
        o.work = &wb;
        o.no_share = 1;
        assert_int_equal(ecm_fit(s, q, &o, &b, NULL), PB_OK);
        print_message("branch %d: work shared %zu, apart %zu (%zu rows)\n", branch, wa, wb, s->n);
        assert_int_equal(a.rc, branch);
        same_result(&a, &b);
        assert_true(a.r_static_ci95_mohm == b.r_static_ci95_mohm);
        assert_int_equal(a.iterations, b.iterations);
        if (branch) {
            assert_true(a.r1_mohm == b.r1_mohm && a.r1_ci95_mohm == b.r1_ci95_mohm);
            assert_true(a.tau_s == b.tau_s && a.tau_ci95_s == b.tau_ci95_s);
        }
        assert_int_equal(wa + (branch ? s->n : 0), wb);
        free(q);
        series_free(s);
    }
    gen_r1_ohm = R1_OHM;
}

int main(void)
{
    gsl_set_error_handler_off();
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_rc_truth_and_split),
        cmocka_unit_test(test_lines_from_the_search),
        cmocka_unit_test(test_cut_in_two),
        cmocka_unit_test(test_cutoff_on_the_fitted_voltage),
        cmocka_unit_test(test_lag_rows),
        cmocka_unit_test(test_tau_interval),
        cmocka_unit_test(test_rc_trend),
        cmocka_unit_test(test_scout),
        cmocka_unit_test(test_shared_pass),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
