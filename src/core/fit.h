/* fit: weighted linear least squares over rows made on the fly.
 *
 * Owns nothing but what it allocates inside one call. The design matrix is
 * never stored: a callback makes row k (x[0..p), y) and the fit sums the
 * normal equations, which it solves after equilibrating the columns, through
 * GSL's symmetric eigensolver (a pseudo-inverse, so a rank-deficient design
 * is reported, not divided by zero). Rows are asked for in order 0..n-1 on
 * every pass, so a callback may carry state from row to row.
 *
 * Robust mode is iteratively reweighted least squares with Tukey's
 * bisquare weight (c = 4.685) and scale = 1.4826 * median |residual|, the
 * median taken over an even sample of at most 65536 rows (every m-th row by
 * index, those in use). When those rows
 * are at most a quarter of all, the reweighting iterates on them alone and
 * one pass over every row then weights all rows at that fit (more passes
 * only when it moves a coefficient beyond the subsample's own error).
 *
 * On request the first pass over every row also makes the rows' lag-1
 * moments (struct fit_lag1), from which the residuals' serial correlation
 * at the final coefficients follows without a pass of its own. */
#ifndef PB_FIT_H
#define PB_FIT_H

#include <stddef.h>

#include "pb_error.h"

#define FIT_MAX_P 8
#define FIT_BLOCK_ROWS 256 /* the most rows a block callback is asked for at once */

/* Makes row k; returns 0 to leave the row out, 1 to use it, FIT_ROW_KEEP
 * to use it at full weight even in robust mode (rows that carry what the fit
 * exists to identify, such as the samples either side of a current step,
 * must not be reweighted away as outliers). A callback that keeps state
 * across rows resets it when k == 0. */
#define FIT_ROW_KEEP 2
typedef int (*fit_row_fn)(void *ctx, size_t k, double *x, double *y);

/* Or'ed into a block's use[j] (fit_block_fn): row j starts a run of its
 * own, its residual is not paired with the row before it in the lag-1
 * moments (struct fit_lag1), e.g. the first row of a window. */
#define FIT_ROW_FIRST 4

/* Makes rows k0..k0+m-1 (m <= FIT_BLOCK_ROWS) in order: row j's columns in
 * x[j*p .. j*p+p), its value in y[j] and in use[j] what a row callback
 * returns, with FIT_ROW_FIRST or'ed in where a run starts. Asked for in order 0..n-1 on every pass
 * (k0 == 0 starts one), so it may carry state from block to block.
 *
 * A context given with its size (ctx_size > 0) may be copied byte for byte
 * and the copy asked for rows from any k0 on (it runs its state on from the
 * first row, or resets it, as for rows asked for out of turn): a pass over
 * at least TWIN_MIN_ROWS rows is then summed in two fixed halves (twin.h),
 * the second on the copy, beside the first when a core is free. ctx_size 0:
 * one walk in order. */
typedef void (*fit_block_fn)(void *ctx, size_t k0, size_t m, int p, double *x, double *y,
                             unsigned char *use);

/* Unweighted normal equations summed by the caller: X'X (upper triangle),
 * X'y, y'y over n_used rows. */
struct fit_sums {
    double a[FIT_MAX_P][FIT_MAX_P];
    double b[FIT_MAX_P];
    double yy;
    size_t n_used;
};

/* The lag-1 moments of the rows in use, for the serial correlation of the
 * residuals at any coefficients (fit_lag1_rho) without another pass: sums
 * over the rows of y^2, x y and x x', and over the pairs of consecutive
 * rows in use (the later not flagged FIT_ROW_FIRST) of y_k y_k-1,
 * x_k y_k-1, y_k x_k-1 and x_k x_k-1'. The rows in use do not depend on
 * the weights, so one pass makes them. */
struct fit_lag1 {
    int have; /* made (a fit that passed over every row) */
    double yy, xy[FIT_MAX_P], xx[FIT_MAX_P][FIT_MAX_P];
    double pyy, pxy[FIT_MAX_P], pyx[FIT_MAX_P], pxx[FIT_MAX_P][FIT_MAX_P];
};

/* The lag-1 autocorrelation of the residuals y - x beta from the moments:
 * sum r_k r_k-1 over the pairs / sum r_k^2 over the rows, within [-1, 1];
 * NAN when m was not made or the residuals are at the rounding of the sums
 * (sum r^2 under 1e-10 of sum y^2: an exact fit). */
double fit_lag1_rho(const struct fit_lag1 *m, const double *beta, int p);

struct fit_result {
    int p;
    int rank; /* numerical rank of the design */
    double beta[FIT_MAX_P];
    double cov[FIT_MAX_P][FIT_MAX_P];
    double sigma;          /* residual standard deviation (weighted) */
    double rss;            /* weighted residual sum of squares */
    double rss_plain;      /* residual sum of squares of the unweighted fit */
    double scale;          /* robust residual scale (0 for plain fits) */
    double dof;            /* effective rows minus rank */
    size_t n_used;         /* rows the callback gave */
    size_t n_downweighted; /* rows with final weight < 0.5 (robust) */
    int iterations;
    size_t rows_visited; /* callback calls over all passes: the work done */
};

/* Fits n rows of p columns (robust: reweighted). Returns PB_OK or an
 * error in err. */
enum pb_code fit_linear(size_t n, int p, fit_row_fn row, void *ctx, int robust,
                        struct fit_result *out, struct pb_error *err);

/* fit_linear with rows made a block at a time (no call per row). lag1 not
 * NULL: the lag-1 moments of the rows are made into it on the first pass
 * over every row (lag1->have set). */
enum pb_code fit_blocks(size_t n, int p, fit_block_fn block, void *ctx, size_t ctx_size, int robust,
                        struct fit_lag1 *lag1, struct fit_result *out, struct pb_error *err);

/* Robust fit_blocks for rows that do not depend on each other, so block()
 * makes any rows asked for in any order: on a long log the plain fit too is
 * the even sample's, made without a pass over every row (rss_plain is then
 * the sample's, scaled to n rows); then one pass over every row as above. */
enum pb_code fit_blocks_any_order(size_t n, int p, fit_block_fn block, void *ctx, size_t ctx_size,
                                  struct fit_lag1 *lag1, struct fit_result *out,
                                  struct pb_error *err);

/* Whether a fit of a sample of the rows stands for them all (ctx: the
 * caller's), judged on the fit as fit_blocks_sampled would return it. */
typedef int (*fit_stands_fn)(void *ctx, const struct fit_result *f);

/* fit_blocks_any_order ended at the even sample's fit when the sample
 * stands for the rows (n at least 4 times its 65536 rows) and stands()
 * says so of its fit (stands NULL: always): no pass over every row;
 * coefficients, intervals, scale and n_used are the sample's (intervals
 * about sqrt(n / 65536) times a fit of every row's), rss_plain the
 * sample's scaled to n. Otherwise (fewer rows, an exact or failed sample
 * fit, or one stands() rejects) the same as fit_blocks_any_order, from the
 * same sample's fit without making it again. For a curve that the sample
 * already pins far closer than anything that uses it needs. */
enum pb_code fit_blocks_sampled(size_t n, int p, fit_block_fn block, void *ctx, size_t ctx_size,
                                fit_stands_fn stands, void *stands_ctx, struct fit_result *out,
                                struct pb_error *err);

/* A robust fit_blocks_any_order in two steps, so that a fit over the same
 * rows with more columns may make its first pass over every row for both
 * (fit_part_share), e.g. a model and the same model with a term added.
 * fit_part_begin makes the plain fit and, for a long log, the reweighting
 * on the even sample; NULL when memory is short. fit_part_end makes the
 * rest and fills out exactly as fit_blocks_any_order would (an error met
 * in either step is returned here), and frees the part (NULL: out of
 * memory, out cleared). */
struct fit_part;
struct fit_part *fit_part_begin(size_t n, int p, fit_block_fn block, void *ctx, size_t ctx_size,
                                struct fit_lag1 *lag1);
enum pb_code fit_part_end(struct fit_part *part, struct fit_result *out, struct pb_error *err);

/* Frees a part begun and not wanted, without the passes fit_part_end would
 * make (NULL: a no-op). */
void fit_part_free(struct fit_part *part);

/* Whether the fit's next step is a pass over every row (0 for NULL, a
 * failed fit, one whose sample's fit stands, or one ended). */
int fit_part_due(const struct fit_part *part);

/* When both are due one (fit_part_due), makes the next pass over every row
 * of two fits begun over the same n rows at once: wide's block() makes the
 * rows, and narrow's rows must be their first narrow->p columns (the same
 * rows in use, the same values). Each fit's sums, sample and lag-1 moments
 * are then exactly those of its own pass (narrow's moments the first
 * columns' of wide's, so lag1 may be one struct for both); the rows made
 * are counted once, in wide's rows_visited. Otherwise a no-op. */
void fit_part_share(struct fit_part *narrow, struct fit_part *wide);

/* The plain fit of sums made by the caller (e.g. shared walks over the
 * data for many candidate models); rows_visited is left 0. */
enum pb_code fit_solve_sums(const struct fit_sums *sums, int p, struct fit_result *out,
                            struct pb_error *err);

/* Robust fit continued from an earlier one (its beta and scale), e.g. one
 * made on a subsample of the rows: skips the plain pass, so rss_plain is
 * the start's, scaled to this fit's row count. */
enum pb_code fit_linear_from(size_t n, int p, fit_row_fn row, void *ctx,
                             const struct fit_result *start, struct fit_result *out,
                             struct pb_error *err);

/* The robust fits' even sample of n rows: every this many rows by index
 * (row 0, this, twice this, ...), at most 65536 of them. */
size_t fit_sample_every(size_t n);

/* Half-width of the two-sided 95 % interval of coefficient j (Student t). */
double fit_ci95(const struct fit_result *f, int j);

/* Median of a[0..n) by selection; reorders a. 0 when n == 0. */
double fit_median(double *a, size_t n);

/* Median of the order statistics from..n-1 of a[0..n) (from < n): the
 * median with the from smallest values left out; reorders a. */
double fit_median_above(double *a, size_t n, size_t from);

#endif
