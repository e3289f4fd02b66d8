/* fit: least squares by normal equations over generated rows.
 * Sources: exact recovery of an exactly linear model and the textbook
 * standard error of a simple-regression slope, SE = s / sqrt(sum (x - xbar)^2)
 * (mathematics; any regression text). The outlier case checks the robust
 * reweighting recovers the clean coefficients. */
#include <gsl/gsl_errno.h>
#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdlib.h>

#include <cmocka.h>

#include "fit.h"
#include "testutil.h"

struct data {
    size_t n;
    double *x, *y;
    int dup_column; /* add x again as a third column: rank deficient */
};

static int row_line(void *ctx, size_t k, double *x, double *y)
{
    struct data *d = ctx;
    x[0] = 1.0;
    x[1] = d->x[k];
    if (d->dup_column)
        x[2] = 2.0 * d->x[k];
    *y = d->y[k];
    return 1;
}

static struct data make(size_t n, double a, double b, double noise, unsigned seed)
{
    struct data d = {n, malloc(n * sizeof(double)), malloc(n * sizeof(double)), 0};
    srand(seed);
    for (size_t k = 0; k < n; k++) {
        d.x[k] = (double)k / (double)n * 10.0;
        double e = noise * ((double)rand() / RAND_MAX - 0.5);
        d.y[k] = a + b * d.x[k] + e;
    }
    return d;
}

static void test_exact(void **state)
{
    (void)state;
    struct data d = make(100, 3.0, -0.25, 0.0, 1);
    struct fit_result f;
    assert_int_equal(fit_linear(d.n, 2, row_line, &d, 0, &f, NULL), PB_OK);
    check_close(f.beta[0], 3.0, 1e-12, "intercept of an exact line");
    check_close(f.beta[1], -0.25, 1e-12, "slope of an exact line");
    assert_int_equal(f.rank, 2);
    free(d.x), free(d.y);
}

static void test_slope_se(void **state)
{
    (void)state;
    struct data d = make(500, 1.0, 2.0, 0.5, 7);
    struct fit_result f;
    assert_int_equal(fit_linear(d.n, 2, row_line, &d, 0, &f, NULL), PB_OK);
    double xbar = 0, sxx = 0, rss = 0;
    for (size_t k = 0; k < d.n; k++)
        xbar += d.x[k] / (double)d.n;
    for (size_t k = 0; k < d.n; k++) {
        sxx += (d.x[k] - xbar) * (d.x[k] - xbar);
        double r = d.y[k] - f.beta[0] - f.beta[1] * d.x[k];
        rss += r * r;
    }
    double s = sqrt(rss / (double)(d.n - 2));
    check_rel(sqrt(f.cov[1][1]), s / sqrt(sxx), 1e-9, "slope SE = s / sqrt(Sxx)");
    check_rel(f.sigma, s, 1e-9, "residual sigma");
    free(d.x), free(d.y);
}

static void test_robust_outliers(void **state)
{
    (void)state;
    struct data d = make(1000, 16.0, -0.05, 0.002, 3);
    for (size_t k = 0; k < d.n; k += 20)
        d.y[k] += 3.0; /* 5 % glitches of +3 V */
    struct fit_result plain, robust;
    assert_int_equal(fit_linear(d.n, 2, row_line, &d, 0, &plain, NULL), PB_OK);
    assert_int_equal(fit_linear(d.n, 2, row_line, &d, 1, &robust, NULL), PB_OK);
    check_close(robust.beta[0], 16.0, 0.001, "robust intercept ignores glitches");
    check_close(robust.beta[1], -0.05, 0.0002, "robust slope ignores glitches");
    assert_true(fabs(plain.beta[0] - 16.0) > 0.1); /* the plain fit is pulled up */
    assert_true(robust.n_downweighted >= 50);
    free(d.x), free(d.y);
}

static void block_line(void *ctx, size_t k0, size_t m, int p, double *x, double *y,
                       unsigned char *use)
{
    for (size_t j = 0; j < m; j++)
        use[j] = (unsigned char)row_line(ctx, k0 + j, x + j * (size_t)p, &y[j]);
}

/* A stands() that sees the sample's fit (the intercept it was shown, and
 * how often it was asked) and never takes it. */
struct seen {
    int calls;
    double beta0;
};

static int rejects(void *ctx, const struct fit_result *f)
{
    struct seen *s = ctx;
    s->calls++;
    assert_true(f->beta[0] == s->beta0);
    return 0;
}

/* A long log: the reweighting iterates on the kept sample of 65536 rows
 * and ends with one pass over all 400,000 (fit.h). The glitches must still
 * be ignored (truth of the generator: intercept 16, slope -0.05, uniform
 * noise of half-width 0.001 V, so each coefficient's standard error is of
 * order 1e-6 here and the tolerances below are far outside it), and the
 * fit whose plain start is the sample's (rows made in any order) must agree
 * with the one whose plain start is every row's within a quarter of the
 * 95 % half-width (issue 14: speed may not move an estimate further). */
static void test_robust_long(void **state)
{
    (void)state;
    struct data d = make(400000, 16.0, -0.05, 0.002, 5);
    for (size_t k = 0; k < d.n; k += 20)
        d.y[k] += 3.0;
    struct fit_result a, b;
    assert_int_equal(fit_blocks(d.n, 2, block_line, &d, 0, 1, NULL, &a, NULL), PB_OK);
    assert_int_equal(fit_blocks_any_order(d.n, 2, block_line, &d, 0, NULL, &b, NULL), PB_OK);
    check_close(a.beta[0], 16.0, 1e-4, "long robust intercept ignores glitches");
    check_close(a.beta[1], -0.05, 2e-5, "long robust slope ignores glitches");
    assert_true(a.n_downweighted >= d.n / 20);
    for (int j = 0; j < 2; j++)
        check_close(b.beta[j], a.beta[j], 0.25 * fit_ci95(&a, j), "sampled start agrees");
    /* fewer row visits than a pass per iteration: the plain pass, the
     * sample's iterations and one full pass */
    assert_true(a.rows_visited < 3 * d.n);
    assert_true(b.rows_visited < 2 * d.n);
    /* ended at the even sample (fit_blocks_sampled): the same robust line
     * within the sample's own 95 % interval (it is a sample of these rows),
     * an interval sqrt(rows / sample) = sqrt(400000 / 57143) = 2.6 times
     * the full fit's within 20 % (least squares' 1 / sqrt(n)), and no pass
     * over every row */
    struct fit_result c;
    assert_int_equal(fit_blocks_sampled(d.n, 2, block_line, &d, 0, NULL, NULL, &c, NULL), PB_OK);
    assert_true(c.n_used < d.n / 4);
    assert_true(c.rows_visited + d.n <= b.rows_visited); /* b passed over every row */
    for (int j = 0; j < 2; j++) {
        check_close(c.beta[j], b.beta[j], fit_ci95(&c, j), "sample's fit agrees");
        check_close(fit_ci95(&c, j) / fit_ci95(&b, j), sqrt((double)b.n_used / (double)c.n_used),
                    0.2 * sqrt((double)b.n_used / (double)c.n_used), "sample's interval");
    }
    /* a sample's fit the caller does not take (stands() says no, having
     * seen the very fit fit_blocks_sampled returned above): the fit of
     * every row that fit_blocks_any_order makes from the same sample,
     * number for number, without making the sample's fit again */
    struct seen judge = {0, c.beta[0]};
    struct fit_result h;
    assert_int_equal(fit_blocks_sampled(d.n, 2, block_line, &d, 0, rejects, &judge, &h, NULL),
                     PB_OK);
    assert_int_equal(judge.calls, 1);
    assert_true(h.beta[0] == b.beta[0] && h.beta[1] == b.beta[1] && h.n_used == b.n_used);
    assert_true(h.cov[0][0] == b.cov[0][0] && h.cov[1][1] == b.cov[1][1] && h.scale == b.scale);
    assert_int_equal(h.rows_visited, b.rows_visited);
    /* a log too short for a sample: the fit of every row, number for number */
    struct data e = make(20000, 16.0, -0.05, 0.002, 6);
    struct fit_result f, g;
    assert_int_equal(fit_blocks_any_order(e.n, 2, block_line, &e, 0, NULL, &f, NULL), PB_OK);
    assert_int_equal(fit_blocks_sampled(e.n, 2, block_line, &e, 0, NULL, NULL, &g, NULL), PB_OK);
    assert_true(f.beta[0] == g.beta[0] && f.beta[1] == g.beta[1] && f.n_used == g.n_used);
    free(e.x), free(e.y);
    free(d.x), free(d.y);
}

/* Rows with running state (a first-order lag of x, as the RC branch's
 * current is one): reset at k0 == 0, and run on from the first row when
 * asked for rows out of turn. */
struct lagged {
    const struct data *d;
    double lag;
    size_t next;
};

static void lag_to(struct lagged *c, size_t k0)
{
    if (k0 == 0 || c->next > k0) {
        c->lag = c->d->x[0];
        c->next = 1;
    }
    for (; c->next <= k0; c->next++)
        c->lag = 0.9 * c->lag + 0.1 * c->d->x[c->next];
}

static void block_lagged(void *ctx, size_t k0, size_t m, int p, double *x, double *y,
                         unsigned char *use)
{
    struct lagged *c = ctx;
    for (size_t j = 0; j < m; j++) {
        lag_to(c, k0 + j);
        x[j * (size_t)p] = 1.0;
        x[j * (size_t)p + 1] = c->lag;
        y[j] = c->d->y[k0 + j];
        use[j] = (k0 + j) % 7 != 3; /* some rows not in use, as outside a fit's windows */
    }
}

/* A long pass of a context that may be copied is cut in two halves
 * (twin.h): the same rows, sampled at the same places, so the fit is the
 * one-walk fit up to the rounding of sums taken in another order. Expected
 * values: the one-walk fit of the same rows (ctx_size 0). Tolerances:
 * coefficients and scale 1e-9 relative, far above the rounding of 400,000
 * added terms (~1e-16 each) and far below the coefficients' standard
 * errors (~1e-5 relative); variances and the plain residual 1e-3 relative,
 * since the residual sum of squares is y'y - beta'X'y, a difference of
 * numbers ~1e8 leaving ~0.1 here, where a reordered sum moves the last
 * ~1e-5 of it. */
static void test_cut_pass(void **state)
{
    (void)state;
    struct data d = make(400000, 16.0, -0.05, 0.002, 9);
    for (size_t k = 0; k < d.n; k += 20)
        d.y[k] -= 2.0;
    for (int any = 0; any < 2; any++) {
        struct lagged ca = {&d, 0.0, 0}, cb = {&d, 0.0, 0};
        struct fit_result a, b;
        enum pb_code ra = any ? fit_blocks_any_order(d.n, 2, block_lagged, &ca, 0, NULL, &a, NULL)
                              : fit_blocks(d.n, 2, block_lagged, &ca, 0, 1, NULL, &a, NULL);
        enum pb_code rb =
            any ? fit_blocks_any_order(d.n, 2, block_lagged, &cb, sizeof cb, NULL, &b, NULL)
                : fit_blocks(d.n, 2, block_lagged, &cb, sizeof cb, 1, NULL, &b, NULL);
        assert_int_equal(ra, PB_OK);
        assert_int_equal(rb, PB_OK);
        assert_int_equal(a.n_used, b.n_used);
        assert_int_equal(a.n_downweighted, b.n_downweighted);
        assert_int_equal(a.iterations, b.iterations);
        assert_int_equal(a.rows_visited, b.rows_visited);
        for (int j = 0; j < 2; j++) {
            check_close(b.beta[j], a.beta[j], 1e-9 * fabs(a.beta[j]), "cut pass: coefficient");
            check_close(b.cov[j][j], a.cov[j][j], 1e-3 * a.cov[j][j], "cut pass: variance");
        }
        check_close(b.scale, a.scale, 1e-9 * a.scale, "cut pass: the same scale sample");
        check_close(b.rss_plain, a.rss_plain, 1e-3 * a.rss_plain, "cut pass: plain residual");
    }
    free(d.x), free(d.y);
}

/* The lag-1 moments (fit_lag1) against the residuals' autocorrelation
 * summed directly at the fitted coefficients (its definition: sum of
 * r_k r_k-1 over pairs of consecutive rows in use within a run, over the
 * sum of r_k^2), with and without a cut pass, plain and robust. Rows: the
 * lagged column above, some not in use, a run starting every 50 rows
 * (FIT_ROW_FIRST), AR(1) noise with coefficient 0.6. Tolerance 1e-9
 * absolute: the moments give the sums as differences of much larger
 * numbers (y^2 and x y against r^2), which leaves ~2e-10 of rounding
 * here; one pair left out (the one across a cut) moves rho by ~1e-6. */
static void block_runs(void *ctx, size_t k0, size_t m, int p, double *x, double *y,
                       unsigned char *use)
{
    block_lagged(ctx, k0, m, p, x, y, use);
    for (size_t j = 0; j < m; j++)
        if ((k0 + j) % 50 == 0)
            use[j] |= FIT_ROW_FIRST;
}

static void test_lag1_moments(void **state)
{
    (void)state;
    struct data d = make(400000, 0.5, -0.05, 0.0, 11);
    srand(12);
    double e = 0.0;
    for (size_t k = 0; k < d.n; k++) {
        e = 0.6 * e + 0.01 * ((double)rand() / RAND_MAX - 0.5);
        d.y[k] += e;
    }
    for (int variant = 0; variant < 4; variant++) {
        int any = variant & 1, cut = variant >> 1;
        struct lagged c = {&d, 0.0, 0};
        struct fit_lag1 m;
        struct fit_result f;
        size_t size = cut ? sizeof c : 0;
        enum pb_code rc = any ? fit_blocks_any_order(d.n, 2, block_runs, &c, size, &m, &f, NULL)
                              : fit_blocks(d.n, 2, block_runs, &c, size, 0, &m, &f, NULL);
        assert_int_equal(rc, PB_OK);
        assert_true(m.have);
        struct lagged w = {&d, 0.0, 0};
        double s01 = 0.0, s00 = 0.0, prev = 0.0;
        int prev_used = 0;
        for (size_t k = 0; k < d.n; k++) {
            double x[2], y;
            unsigned char u;
            block_runs(&w, k, 1, 2, x, &y, &u);
            if (!u) {
                prev_used = 0;
                continue;
            }
            double r = y - x[0] * f.beta[0] - x[1] * f.beta[1];
            if (prev_used && !(u & FIT_ROW_FIRST))
                s01 += r * prev;
            s00 += r * r;
            prev = r;
            prev_used = 1;
        }
        double rho = fit_lag1_rho(&m, f.beta, 2);
        print_message("variant %d: rho %.12f, direct %.12f\n", variant, rho, s01 / s00);
        check_close(rho, s01 / s00, 1e-9, "lag-1 moments against the residuals");
        assert_true(rho > 0.3); /* the noise's own correlation shows */
    }
    free(d.x), free(d.y);
}

/* Two fits over the same rows, the narrow one's rows the first column of
 * the wide one's (a model and the same model with a term added, as ecm.c's
 * static and RC models), begun apart and their first pass over every row
 * made once (fit_part_share). Expected: each fit as fit_blocks_any_order
 * makes it alone, number for number (the same sums in the same order; no
 * tolerance), its lag-1 moments too, the wide fit's rows_visited the same
 * and the narrow's less by the rows made once for both. Rows: x, its lag
 * and glitches (so the reweighting has work), some rows not in use, runs
 * starting every 50 rows; walked whole and cut in two. A log too short for
 * the even sample: no pass is due after the first step, and sharing is a
 * no-op (the same fits again). */
static void block_pair(void *ctx, size_t k0, size_t m, int p, double *x, double *y,
                       unsigned char *use)
{
    struct lagged *c = ctx;
    for (size_t j = 0; j < m; j++) {
        lag_to(c, k0 + j);
        x[j * (size_t)p] = c->d->x[k0 + j];
        if (p > 1)
            x[j * (size_t)p + 1] = c->lag;
        y[j] = c->d->y[k0 + j] + 0.3 * c->lag;
        use[j] = (unsigned char)(((k0 + j) % 7 != 3) | ((k0 + j) % 50 == 0 ? FIT_ROW_FIRST : 0));
    }
}

static void same_fit(const struct fit_result *a, const struct fit_result *b)
{
    assert_int_equal(a->rank, b->rank);
    for (int i = 0; i < a->p; i++) {
        assert_true(a->beta[i] == b->beta[i]);
        for (int j = 0; j < a->p; j++)
            assert_true(a->cov[i][j] == b->cov[i][j]);
    }
    assert_true(a->sigma == b->sigma && a->rss == b->rss && a->rss_plain == b->rss_plain);
    assert_true(a->scale == b->scale && a->dof == b->dof);
    assert_int_equal(a->n_used, b->n_used);
    assert_int_equal(a->n_downweighted, b->n_downweighted);
    assert_int_equal(a->iterations, b->iterations);
}

static void shared_against_alone(const struct data *d, size_t ctx_size, int due)
{
    struct lagged c1 = {d, 0.0, 0}, c2 = {d, 0.0, 0}, cs = {d, 0.0, 0};
    struct fit_lag1 m1, m2, ms;
    struct fit_result a1, a2, s1, s2;
    assert_int_equal(fit_blocks_any_order(d->n, 1, block_pair, &c1, ctx_size, &m1, &a1, NULL),
                     PB_OK);
    assert_int_equal(fit_blocks_any_order(d->n, 2, block_pair, &c2, ctx_size, &m2, &a2, NULL),
                     PB_OK);
    /* one context and one struct of moments for both, as ecm.c has them */
    struct fit_part *narrow = fit_part_begin(d->n, 1, block_pair, &cs, ctx_size, &ms);
    struct fit_part *wide = fit_part_begin(d->n, 2, block_pair, &cs, ctx_size, &ms);
    assert_int_equal(fit_part_due(narrow), due);
    assert_int_equal(fit_part_due(wide), due);
    fit_part_share(narrow, wide);
    assert_int_equal(fit_part_end(narrow, &s1, NULL), PB_OK);
    assert_int_equal(fit_part_end(wide, &s2, NULL), PB_OK);
    same_fit(&s1, &a1);
    same_fit(&s2, &a2);
    assert_int_equal(s2.rows_visited, a2.rows_visited);
    assert_int_equal(s1.rows_visited + (due ? d->n : 0), a1.rows_visited);
    assert_true(ms.have && m1.have && m2.have);
    assert_true(fit_lag1_rho(&ms, s1.beta, 1) == fit_lag1_rho(&m1, a1.beta, 1));
    assert_true(fit_lag1_rho(&ms, s2.beta, 2) == fit_lag1_rho(&m2, a2.beta, 2));
    print_message("shared pass (n %zu, cut %d): narrow %.9g, wide %.9g %.9g, rho %.6f %.6f\n", d->n,
                  ctx_size > 0, s1.beta[0], s2.beta[0], s2.beta[1], fit_lag1_rho(&ms, s1.beta, 1),
                  fit_lag1_rho(&ms, s2.beta, 2));
}

static void test_shared_pass(void **state)
{
    (void)state;
    struct data d = make(400000, 0.0, 0.5, 0.004, 13);
    for (size_t k = 0; k < d.n; k += 20)
        d.y[k] += 1.0;
    for (int cut = 0; cut < 2; cut++)
        shared_against_alone(&d, cut ? sizeof(struct lagged) : 0, 1);
    free(d.x), free(d.y);
    struct data e = make(20000, 0.0, 0.5, 0.004, 14);
    shared_against_alone(&e, 0, 0);
    free(e.x), free(e.y);
    /* a NULL part (fit_part_begin short of memory): not due, and ended as
     * out of memory */
    struct fit_result f;
    assert_false(fit_part_due(NULL));
    fit_part_share(NULL, NULL);
    assert_int_equal(fit_part_end(NULL, &f, NULL), PB_ENOMEM);
    /* a part begun and not wanted is freed without its passes (its sample
     * and copy room too: ASan's leak check and valgrind in the CI and
     * scripts/memcheck would name them), and NULL is a no-op */
    struct data g = make(400000, 0.0, 0.5, 0.004, 15);
    struct lagged cg = {&g, 0.0, 0};
    struct fit_part *unwanted = fit_part_begin(g.n, 2, block_pair, &cg, sizeof cg, NULL);
    assert_true(fit_part_due(unwanted));
    fit_part_free(unwanted);
    fit_part_free(NULL);
    free(g.x), free(g.y);
}

static void test_rank_deficient(void **state)
{
    (void)state;
    struct data d = make(50, 1.0, 1.0, 0.0, 2);
    d.dup_column = 1;
    struct fit_result f;
    assert_int_equal(fit_linear(d.n, 3, row_line, &d, 0, &f, NULL), PB_OK);
    assert_int_equal(f.rank, 2);
    free(d.x), free(d.y);
}

static void test_too_few_rows(void **state)
{
    (void)state;
    struct data d = make(2, 1.0, 1.0, 0.0, 2);
    struct fit_result f;
    struct pb_error err = {0};
    assert_int_equal(fit_linear(d.n, 2, row_line, &d, 0, &f, &err), PB_ENUMERIC);
    free(d.x), free(d.y);
}

static int cmp_d(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* fit_median and fit_median_above against the definition (sort with the C
 * library's qsort, middle element or the mean of the two middle ones),
 * exact: on random data with many ties (a log's sampling intervals),
 * all-equal data and both parities. Seed printed. */
static void test_median_is_the_sorted_middle(void **state)
{
    (void)state;
    unsigned seed = 1414;
    print_message("seed %u\n", seed);
    srand(seed);
    for (int trial = 0; trial < 200; trial++) {
        size_t n = 1 + (size_t)(rand() % 3000);
        int distinct = 1 + rand() % (trial % 3 == 0 ? 2 : 500);
        double *a = malloc(n * sizeof *a), *b = malloc(n * sizeof *b);
        assert_non_null(a);
        assert_non_null(b);
        for (size_t k = 0; k < n; k++)
            a[k] = b[k] = 0.1 * (rand() % distinct) - 3.0;
        qsort(b, n, sizeof *b, cmp_d);
        double want = n % 2 ? b[n / 2] : 0.5 * (b[n / 2 - 1] + b[n / 2]);
        assert_true(fit_median(a, n) == want);
        /* the median of the order statistics from..n-1: of the sorted tail */
        size_t from = (size_t)rand() % n, m = n - from;
        double want_above = m % 2 ? b[from + m / 2] : 0.5 * (b[from + m / 2 - 1] + b[from + m / 2]);
        assert_true(fit_median_above(a, n, from) == want_above);
        free(a);
        free(b);
    }
    /* no values: 0, as gsl_stats_median gives (a one-sample log's intervals) */
    double none[1] = {42.0};
    assert_true(fit_median(none, 0) == 0.0);
}

int main(void)
{
    gsl_set_error_handler_off();
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_median_is_the_sorted_middle),
        cmocka_unit_test(test_exact),
        cmocka_unit_test(test_slope_se),
        cmocka_unit_test(test_robust_outliers),
        cmocka_unit_test(test_robust_long),
        cmocka_unit_test(test_cut_pass),
        cmocka_unit_test(test_lag1_moments),
        cmocka_unit_test(test_shared_pass),
        cmocka_unit_test(test_rank_deficient),
        cmocka_unit_test(test_too_few_rows),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
