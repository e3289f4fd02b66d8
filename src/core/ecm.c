#define _POSIX_C_SOURCE 200809L /* sysconf */
#include "ecm.h"

#include "edges.h"
#include "twin.h"

#include <gsl/gsl_cdf.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#define WINDOW_MIN_S 60.0
#define WINDOW_DT 8.0     /* a window spans at least this many sample intervals */
#define WINDOW_MIN_ROWS 3 /* windows with fewer samples are left out */
#define TAU_GRID 12
#define BIC_MARGIN 10.0 /* the RC model must beat the static one by this */
/* A lag started this many time constants before it is needed has forgotten
 * how it was started (exp(-40) = 4e-18, below a double's rounding of the
 * lag): a part of a pass after the first starts its lag there, not at the
 * first sample. */
#define WARM_TAUS 40.0
/* The OCV trend of a long log stays its even sample's fit when that pins
 * the OCV at both ends to this 95 % half-width: a fiftieth of the 50 mV per
 * cell every OCV interval carries (SOCEST_LOADED_V, socest.h), so the
 * interval moves by under 0.02 % (hypot) and the OCV by about as much as
 * this; otherwise one pass weights every row, as for the other fits. */
#define TREND_SAMPLE_CI_V 0.001

/* Where a lag needed from sample k0 on starts: the last sample of [0, k0]
 * at least warm_s before k0 (0 when none is; times strictly increasing).
 * Not the first sample after that time: across a gap the lag holds the
 * current from before the gap (a = exp(-dt / tau) ~ 0 takes I[k-1]), so a
 * start after it would miss the gap. */
static size_t warm_start(const double *t_s, size_t k0, double warm_s)
{
    double from = t_s[k0] - warm_s;
    size_t lo = 0, hi = k0;
    while (lo < hi) { /* the first sample at or after from */
        size_t mid = lo + (hi - lo) / 2;
        if (t_s[mid] < from)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo > 0 && t_s[lo] > from ? lo - 1 : lo;
}

double ecm_window_s(double dt_med_s)
{
    return fmax(WINDOW_MIN_S, WINDOW_DT * dt_med_s);
}

/* One window's straight line in q for each column: z ~ mz + bz (q - mq). */
struct win {
    size_t k0, k1; /* samples [k0, k1) */
    int use;       /* the window informs R (see ecm_fit) */
    double mq, sqq;
    double mv, bv, mi, bi, m1, b1; /* voltage, current, RC current */
    double si;                     /* the current's variation about its line: sum of squares */
};

/* Whether sample k's interval makes the lag's factor anew (a_dt the
 * interval it was made for): jitter within a billionth keeps it. */
static inline int new_interval(const double *t, size_t k, double a_dt)
{
    double dt = t[k] - t[k - 1];
    return fabs(dt - a_dt) > 1e-9 * dt;
}

/* The RC branch's current run sample by sample: the first-order lag of the
 * current (zero-order hold between samples) with time constant tau, its
 * factor made for the interval a_dt. The model's rows (struct ctx) and the
 * OCV trend's (struct trend_ctx) each run one. */
struct lag {
    double i1; /* the lag at sample next - 1 */
    double a_dt, a_val;
    size_t next; /* the sample whose lag is due next (0: none made yet) */
};

/* The lag started at sample k (the current held there before it). */
static inline void lag_start(struct lag *l, const double *ia, size_t k)
{
    l->next = k + 1;
    l->i1 = ia[k];
    l->a_dt = -1.0;
}

/* The lag from sample k - 1 to k (k == 0: its start). */
static inline void lag_advance(struct lag *l, const double *t, const double *ia, double tau_s,
                               size_t k)
{
    if (k == 0) {
        lag_start(l, ia, 0);
        return;
    }
    l->next = k + 1;
    if (new_interval(t, k, l->a_dt)) {
        l->a_dt = t[k] - t[k - 1];
        l->a_val = exp(-l->a_dt / tau_s);
    }
    l->i1 = l->a_val * l->i1 + (1.0 - l->a_val) * ia[k - 1];
}

/* The lag brought to sample k0 > 0 (its value at k0 - 1 made) for rows
 * asked for out of turn: run on from the last sample made, or started
 * afresh warm_s before k0 when that sample is at or past k0 or further
 * back. */
static void lag_catch_up(struct lag *l, const double *t, const double *ia, double tau_s,
                         double warm_s, size_t k0)
{
    size_t ks = warm_start(t, k0, warm_s);
    if (l->next == 0 || l->next > k0 || l->next < ks)
        lag_start(l, ia, ks);
    for (size_t k = l->next; k < k0; k++)
        lag_advance(l, t, ia, tau_s, k);
}

struct ctx {
    const struct series *s;
    const double *y;
    const double *q;
    struct win *w;
    size_t nw;
    double step_a;
    int whole;     /* no pass cut in two (ecm_opts) */
    int no_scout;  /* no scout for the tau search (ecm_opts) */
    int p;         /* 1: R only; 2: R0 and R1 */
    double tau_s;  /* RC branch */
    double warm_s; /* a lag's start before it is needed (WARM_TAUS times the longest tau) */
    struct ecm_lag_rows *lr; /* the lag at the sampled rows, made by the search or rc_lines */
    /* running state, reset at k == 0 */
    size_t at;      /* current window */
    struct lag lag; /* the RC branch's current */
};

/* lag_advance over samples [k0, k0 + m), each one's lag into lag[]; a run of
 * samples at one interval without a call (exp() between runs only), so the
 * lag stays in a register. */
static void rc_lags(struct ctx *c, size_t k0, size_t m, double *lag)
{
    const double *t = c->s->t_s, *ia = c->s->i_a;
    size_t j = 0;
    if (k0 == 0 && m > 0) {
        lag_start(&c->lag, ia, 0);
        lag[j++] = c->lag.i1;
    }
    double i1 = c->lag.i1, a_val = c->lag.a_val, a_dt = c->lag.a_dt;
    while (j < m) {
        size_t k = k0 + j;
        if (new_interval(t, k, a_dt)) {
            a_dt = t[k] - t[k - 1];
            a_val = exp(-a_dt / c->tau_s);
        }
        const double oma = 1.0 - a_val;
        do {
            i1 = a_val * i1 + oma * ia[k - 1];
            lag[j++] = i1;
            k++;
        } while (j < m && !new_interval(t, k, a_dt));
    }
    c->lag.i1 = i1;
    c->lag.a_val = a_val;
    c->lag.a_dt = a_dt;
    c->lag.next = k0 + m;
}

/* Where a walk over the windows is cut (twin.h): the first window that
 * starts at or after twin_split, nw when the log is short or c->whole. */
static size_t walk_cut(const struct ctx *c)
{
    size_t cut = c->nw;
    if (c->s->n >= TWIN_MIN_ROWS && !c->whole) {
        size_t h = twin_split(c->s->n);
        cut = 0;
        while (cut < c->nw && c->w[cut].k0 < h)
            cut++;
    }
    return cut;
}

/* Where a part of a walk over windows [w0, ...) starts keeping the lag at
 * the sampled rows (lag_rows): the first part from its first sample, a
 * later one from its first window in use (before it, its lag is still
 * forgetting its start). */
static size_t part_keep_from(const struct ctx *c, size_t w0)
{
    if (w0 == 0)
        return 0;
    while (w0 < c->nw && !c->w[w0].use)
        w0++;
    return w0 < c->nw ? c->w[w0].k0 : c->s->n;
}

/* The sample where the lag of a walk over windows [w0, ...) starts: the
 * first sample for the first part, else warm_s before its first window in
 * use (n: none in use). */
static size_t part_lag_start(const struct ctx *c, size_t w0)
{
    if (w0 == 0)
        return 0;
    size_t k0 = part_keep_from(c, w0);
    return k0 < c->s->n ? warm_start(c->s->t_s, k0, c->warm_s) : k0;
}

/* The first sampled row at or after k (lag_rows; SIZE_MAX: none kept). */
static size_t next_mark(const struct ecm_lag_rows *lr, size_t k)
{
    return lr ? (k + lr->every - 1) / lr->every * lr->every : SIZE_MAX;
}

/* lag_rows made afresh: NAN where no walk keeps a value. */
static void lag_rows_clear(const struct ctx *c)
{
    if (!c->lr)
        return;
    size_t m = c->s->n / c->lr->every + 1;
    for (size_t j = 0; j < m; j++)
        c->lr->i1_a[j] = NAN;
    c->lr->tau_s = NAN;
}

/* The RC lines of the windows in use in [w0, w1), the lag started where
 * part_lag_start says, kept at the sampled rows as the search's walk keeps
 * it (part_keep_from). */
static void rc_lines_part(struct ctx *c, size_t w0, size_t w1)
{
    size_t k = part_lag_start(c, w0);
    if (k >= c->s->n)
        return;
    const double *t = c->s->t_s, *ia = c->s->i_a;
    struct lag *l = &c->lag;
    lag_start(l, ia, k);
    size_t keep_from = part_keep_from(c, w0);
    size_t mark = next_mark(c->lr, k > keep_from ? k : keep_from);
#define KEEP_LAG(k)                                                                                \
    do {                                                                                           \
        if ((k) == mark) {                                                                         \
            c->lr->i1_a[(k) / c->lr->every] = l->i1;                                               \
            mark += c->lr->every;                                                                  \
        }                                                                                          \
    } while (0)
    KEEP_LAG(k);
    for (size_t j = w0; j < w1; j++) {
        struct win *w = &c->w[j];
        if (!w->use)
            continue;
        double m1 = 0.0, b1 = 0.0;
        for (k = l->next; k < w->k0; k++) {
            lag_advance(l, t, ia, c->tau_s, k);
            KEEP_LAG(k);
        }
        for (k = w->k0; k < w->k1; k++) {
            if (k == l->next) {
                lag_advance(l, t, ia, c->tau_s, k);
                KEEP_LAG(k);
            }
            m1 += l->i1;
            b1 += (c->q[k] - w->mq) * l->i1;
        }
        w->m1 = m1 / (double)(w->k1 - w->k0);
        w->b1 = w->sqq > 0.0 ? b1 / w->sqq : 0.0;
    }
#undef KEEP_LAG
}

/* Each window's line of the RC current (the voltage and current lines are
 * made once, by base_lines), the lag run as the tau search's walk runs it
 * (in two parts where it is cut), so that a fit at the search's tau and one
 * at the same tau fixed have the same lines, number for number. Since the
 * deviations of q sum to zero in a window, the slope is
 * sum (q - mq) i1 / sqq. */
static void rc_lines(struct ctx *c)
{
    for (size_t j = 0; j < c->nw; j++)
        c->w[j].m1 = c->w[j].b1 = 0.0;
    lag_rows_clear(c);
    size_t cut = walk_cut(c);
    rc_lines_part(c, 0, cut);
    rc_lines_part(c, cut, c->nw);
    if (c->lr)
        c->lr->tau_s = c->tau_s;
}

/* The lag at row k from lag_rows when they were made at the fit's tau and
 * keep a value there, else NULL. */
static const double *kept_lag(const struct ecm_lag_rows *lr, double tau_s, size_t k)
{
    if (!lr || lr->tau_s != tau_s || k % lr->every != 0 || !isfinite(lr->i1_a[k / lr->every]))
        return NULL;
    return &lr->i1_a[k / lr->every];
}

/* A block of the model's rows (x: minus the current, and minus the RC
 * current when p == 2, each less its window's line in q; y: the voltage
 * less its line), without a call per row; a row outside the windows that
 * inform R is not used, and one either side of a current step is kept at
 * full weight. */
static void ecm_block(void *vc, size_t k0, size_t m, int p, double *x, double *y,
                      unsigned char *use)
{
    struct ctx *c = vc;
    const struct series *s = c->s;
    /* the window search runs on from the last row made; rows asked for
     * before it (the static model's rows come in any order) start it over */
    if (k0 == 0 || (c->at > 0 && k0 < c->w[c->at - 1].k1))
        c->at = 0;
    /* a sampled row's lag kept by the search (or rc_lines) saves running
     * the lag up to it; otherwise the lag runs on from the last row made,
     * or starts afresh warm_s before k0 when that row is earlier than k0
     * or further back */
    const double *kept = p == 2 && m == 1 ? kept_lag(c->lr, c->tau_s, k0) : NULL;
    if (p == 2 && !kept && k0 > 0 && k0 != c->lag.next)
        lag_catch_up(&c->lag, s->t_s, s->i_a, c->tau_s, c->warm_s, k0);
    double lag[FIT_BLOCK_ROWS];
    if (kept)
        lag[0] = *kept;
    else if (p == 2)
        rc_lags(c, k0, m, lag);
    const double step_a = c->step_a, *ia = s->i_a;
    size_t j = 0;
    while (j < m) {
        size_t k = k0 + j;
        while (c->at < c->nw && k >= c->w[c->at].k1)
            c->at++;
        /* rows [k, end) all in the window c->at, or all outside any in use */
        const struct win *w = c->at < c->nw ? &c->w[c->at] : NULL;
        size_t end = k0 + m;
        if (w && k < w->k0)
            end = w->k0 < end ? w->k0 : end;
        else if (w)
            end = w->k1 < end ? w->k1 : end;
        if (!w || k < w->k0 || !w->use) {
            memset(use + j, 0, end - k);
            j += end - k;
            continue;
        }
        const double mq = w->mq, mi = w->mi, bi = w->bi, mv = w->mv, bv = w->bv;
        const double m1 = w->m1, b1 = w->b1;
        /* a current step either side of a row keeps it at full weight */
        int big_before = k > 0 && fabs(ia[k] - ia[k - 1]) >= step_a;
        for (; k < end; k++, j++) {
            double dq = c->q[k] - mq;
            double *xr = x + j * (size_t)p;
            xr[0] = -(ia[k] - (mi + bi * dq));
            if (p == 2)
                xr[1] = -(lag[j] - (m1 + b1 * dq));
            y[j] = c->y[k] - (mv + bv * dq);
            int big_after = k + 1 < s->n && fabs(ia[k + 1] - ia[k]) >= step_a;
            use[j] = (unsigned char)((big_before || big_after ? FIT_ROW_KEEP : 1) |
                                     (k == w->k0 ? FIT_ROW_FIRST : 0));
            big_before = big_after;
        }
    }
}

/* Cuts [0, n) into windows of at most win_s, none across a gap or a joint
 * between clock segments. */
static struct win *make_windows(const struct series *s, double win_s, double gap_s, size_t *nw)
{
    size_t cap = 16, m = 0;
    struct win *w = malloc(cap * sizeof *w);
    if (!w)
        return NULL;
    size_t k0 = 0;
    const int joints = s->nseg > 1; /* else no call per sample */
    for (size_t k = 1; k <= s->n; k++) {
        int cut = k == s->n || s->t_s[k] - s->t_s[k - 1] > gap_s ||
                  s->t_s[k] - s->t_s[k0] > win_s || (joints && series_is_joint(s, k));
        if (!cut)
            continue;
        if (k - k0 >= WINDOW_MIN_ROWS) {
            if (m == cap) {
                struct win *g = realloc(w, 2 * cap * sizeof *w);
                if (!g) {
                    free(w);
                    return NULL;
                }
                w = g;
                cap *= 2;
            }
            w[m++] = (struct win){.k0 = k0, .k1 = k};
        }
        k0 = k;
    }
    *nw = m;
    return w;
}

/* Means and slopes in q of voltage and current per window, and whether the
 * window informs R (use): its current varies around its line by more than
 * 5 deviations of the current's noise sigma_i, and the voltage fitted (the
 * pack's, or one cell's for a cell's fit) stays above cutoff_v (0: no
 * cut-off); each window's samples walked while in cache. */
static size_t base_lines(struct ctx *c, double sigma_i, double cutoff_v)
{
    const struct series *s = c->s;
    size_t informative = 0;
    for (size_t j = 0; j < c->nw; j++) {
        struct win *w = &c->w[j];
        double n = (double)(w->k1 - w->k0), mq = 0.0, mv = 0.0, mi = 0.0;
        for (size_t k = w->k0; k < w->k1; k++) {
            mq += c->q[k];
            mv += c->y[k];
            mi += s->i_a[k];
        }
        mq /= n;
        mv /= n;
        mi /= n;
        double sqq = 0.0, sqv = 0.0, sqi = 0.0;
        for (size_t k = w->k0; k < w->k1; k++) {
            double dq = c->q[k] - mq;
            sqq += dq * dq;
            sqv += dq * (c->y[k] - mv);
            sqi += dq * (s->i_a[k] - mi);
        }
        /* a window at rest has no charge slope to fit: its line is flat */
        int slope = sqq > 1e-18 * n;
        w->mq = mq;
        w->sqq = slope ? sqq : 0.0;
        w->mv = mv;
        w->mi = mi;
        w->bv = slope ? sqv / sqq : 0.0;
        w->bi = slope ? sqi / sqq : 0.0;
        w->m1 = w->b1 = 0.0;
        double ss = 0.0, vmin = HUGE_VAL;
        for (size_t k = w->k0; k < w->k1; k++) {
            double d = s->i_a[k] - (w->mi + w->bi * (c->q[k] - w->mq));
            ss += d * d;
            /* fmin without a call per sample: the reader keeps no voltage
             * that is not a number */
            vmin = c->y[k] < vmin ? c->y[k] : vmin;
        }
        w->si = ss;
        w->use = ss > 25.0 * sigma_i * sigma_i * n && ss > 1e-12 * n &&
                 !(cutoff_v > 0.0 && vmin <= cutoff_v);
        informative += (size_t)w->use;
    }
    return informative;
}

/* The windows' own parameters (a line in q, or a level where the charge
 * does not move) over the windows in use among [w0, w1). */
static size_t window_params(const struct ctx *c, size_t w0, size_t w1)
{
    size_t k = 0;
    for (size_t j = w0; j < w1; j++)
        if (c->w[j].use)
            k += c->w[j].sqq > 0.0 ? 2 : 1;
    return k;
}

/* lines: the windows' RC lines at tau_s when the tau search made them (its
 * walk at this very tau), else NULL and they are made here. The lag-1
 * moments of the rows go in *lag1 (honest_cov). */
static void fit_setup(struct ctx *c, int p, double tau_s, const double *lines)
{
    c->p = p;
    c->tau_s = tau_s;
    if (p == 2 && lines) {
        for (size_t j = 0; j < c->nw; j++)
            if (c->w[j].use) {
                c->w[j].m1 = lines[2 * j];
                c->w[j].b1 = lines[2 * j + 1];
            }
    } else if (p == 2) {
        rc_lines(c);
    }
    c->lag.next = 0;
}

/* A pass cut in two runs its second half on a copy of the context (fit.h). */
static size_t ctx_size(const struct ctx *c)
{
    return c->whole ? 0 : sizeof *c;
}

static enum pb_code fit_at(struct ctx *c, int p, double tau_s, int robust, size_t *work,
                           const double *lines, struct fit_lag1 *lag1, struct fit_result *f,
                           struct pb_error *err)
{
    fit_setup(c, p, tau_s, lines);
    /* rows made in any order (ecm_block), a robust fit of a long log
     * takes its plain start from the even sample (its rss_plain then the
     * sample's: the model choice takes the plain residuals over every row
     * from the tau search, see static_rss_plain and ecm_end) */
    enum pb_code rc =
        robust ? fit_blocks_any_order(c->s->n, p, ecm_block, c, ctx_size(c), lag1, f, err)
               : fit_blocks(c->s->n, p, ecm_block, c, ctx_size(c), robust, lag1, f, err);
    if (work)
        *work += f->rows_visited + (p == 2 && !lines ? c->s->n : 0);
    return rc;
}

/* fit_at's robust fit begun (fit_part_begin), to be ended by part_end_at;
 * NULL when memory is short. */
static struct fit_part *part_begin_at(struct ctx *c, int p, double tau_s, size_t *work,
                                      const double *lines, struct fit_lag1 *lag1)
{
    fit_setup(c, p, tau_s, lines);
    if (work && p == 2 && !lines)
        *work += c->s->n;
    return fit_part_begin(c->s->n, p, ecm_block, c, ctx_size(c), lag1);
}

static enum pb_code part_end_at(struct fit_part *part, size_t *work, struct fit_result *f)
{
    enum pb_code rc = fit_part_end(part, f, NULL);
    if (work)
        *work += f->rows_visited;
    return rc;
}

/* Charges the windows' own parameters to the degrees of freedom and widens
 * the covariance for serially correlated residuals; returns rho, the lag-1
 * autocorrelation of the residuals within windows, from the moments the
 * fit's pass made (lag1; NAN when it made none, and then no widening). */
static double honest_cov(const struct ctx *c, const struct fit_lag1 *lag1, struct fit_result *f)
{
    double dof = f->dof - (double)window_params(c, 0, c->nw);
    if (dof < 1.0) {
        f->dof = 0.0;
        return NAN;
    }
    double rho = fit_lag1_rho(lag1, f->beta, f->p);
    double infl = rho > 0.0 ? (1.0 + rho) / (1.0 - fmin(rho, 0.99)) : 1.0;
    double k = f->dof / dof * infl;
    for (int i = 0; i < f->p; i++)
        for (int j = 0; j < f->p; j++)
            f->cov[i][j] *= k;
    f->sigma *= sqrt(f->dof / dof);
    f->dof = dof;
    return rho;
}

#define TAU_WALK_MAX TAU_GRID       /* time constants summed in one walk */
#define GRID_THREAD_MIN_ROWS 100000 /* the grid walked in a thread of its own from here */

/* The sums of the RC model's normal equations that do not depend on tau
 * (those of the current and voltage columns). */
struct tau_free_sums {
    double a00, b0, yy;
    size_t n_used;
};

/* What a walk (or a part of one) sums: per time constant, those of the RC
 * column with the current's, with itself and with the voltage; and the
 * tau-free ones. */
struct walk_sums {
    double a01[TAU_WALK_MAX], a11[TAU_WALK_MAX], b1[TAU_WALK_MAX];
    struct tau_free_sums free_sums;
};

/* into += from (nt time constants; the tau-free sums too when free_too). */
static void walk_sums_add(struct walk_sums *into, const struct walk_sums *from, int nt,
                          int free_too)
{
    for (int j = 0; j < nt; j++) {
        into->a01[j] += from->a01[j];
        into->a11[j] += from->a11[j];
        into->b1[j] += from->b1[j];
    }
    if (free_too) {
        into->free_sums.a00 += from->free_sums.a00;
        into->free_sums.b0 += from->free_sums.b0;
        into->free_sums.yy += from->free_sums.yy;
        into->free_sums.n_used += from->free_sums.n_used;
    }
}

/* The static model's plain residual sum of squares from the tau-free sums;
 * HUGE_VAL where the fit fails. */
static double free_rss(const struct tau_free_sums *fs)
{
    struct fit_sums sm = {.yy = fs->yy, .n_used = fs->n_used};
    sm.a[0][0] = fs->a00;
    sm.b[0] = fs->b0;
    struct fit_result f;
    return fit_solve_sums(&sm, 1, &f, NULL) == PB_OK ? f.rss : HUGE_VAL;
}

/* The RC model's plain residual sum of squares at each of nt time
 * constants from a walk's sums; HUGE_VAL where a fit fails. */
static void walk_rss(const struct walk_sums *ws, int nt, double *rss)
{
    const struct tau_free_sums *fs = &ws->free_sums;
    for (int j = 0; j < nt; j++) {
        struct fit_sums sm = {.yy = fs->yy, .n_used = fs->n_used};
        sm.a[0][0] = fs->a00;
        sm.a[0][1] = ws->a01[j];
        sm.a[1][1] = ws->a11[j];
        sm.b[0] = fs->b0;
        sm.b[1] = ws->b1[j];
        struct fit_result f;
        rss[j] = fit_solve_sums(&sm, 2, &f, NULL) == PB_OK ? f.rss : HUGE_VAL;
    }
}

/* One part of a walk over the log for nt time constants (nt <= TAU_WALK_MAX):
 * the windows [w0, w1) in use, their sums of the RC model's normal
 * equations. The lag of each tau starts where part_lag_start says and runs
 * over every sample from there. Within a window the lags are kept (buf)
 * until the window's lines are known, then summed in row order: per tau,
 * the same operations in the same order as a walk of one tau. The voltage
 * and current columns do not depend on tau: their sums are made only when
 * want_free is set. */
struct walk_part {
    const struct ctx *c;
    const double *tau_s;
    double *buf;   /* WALK_ROW_DOUBLES times the longest window */
    double *lines; /* each used window's RC line (mean, slope) of tau_s[keep], else NULL */
    int keep;
    size_t w0, w1;
    struct ecm_lag_rows *lr; /* not NULL: the lag of tau_s[keep] kept at the sampled rows */
    int want_free;
    struct walk_sums sums;
};

/* Two doubles operated on together (GCC's vector extension: an SSE2
 * register on the baseline x86-64), each lane with exactly the operations
 * of scalar code, so a lane's numbers are a scalar walk's. A walk's taus
 * are vh such pairs (the last padded with a copy of the last tau, its sums
 * not used). v2d_mem loads and stores at any double's alignment. */
typedef double v2d __attribute__((vector_size(2 * sizeof(double))));
typedef double v2d_mem __attribute__((vector_size(2 * sizeof(double)), aligned(sizeof(double))));
#define VH_MAX ((TAU_WALK_MAX + 1) / 2)
#define VH_UNROLL _Pragma("GCC unroll 6")
/* A walk's buffer per row of its longest window: the lags, and the row's
 * charge offset, current and voltage columns (tau-free, made once). */
#define WALK_ROW_DOUBLES (2 * VH_MAX + 3)

/* The running lags of a walk's taus (as lag_advance runs one). */
struct lag_pairs {
    v2d i1[VH_MAX], a_val[VH_MAX], oma[VH_MAX];
};

/* The lags' factors for sample k's interval. */
static void new_factors(int vh, struct lag_pairs *lp, const double *tau_s, const double *t,
                        size_t k, double *a_dt)
{
    double dt = t[k] - t[k - 1];
    *a_dt = dt;
    for (int j = 0; j < 2 * vh; j++) {
        lp->a_val[j / 2][j % 2] = exp(-dt / tau_s[j]);
        lp->oma[j / 2][j % 2] = 1.0 - lp->a_val[j / 2][j % 2];
    }
}

/* The lags over samples [k, k_end) (each from sample k - 1, as lag_advance
 * runs it), the lag of tau keep (-1: none) kept at the sampled rows from
 * *mark on. With acc set, the rows are a window's from its row r = k - k0
 * on: each row's lags into buf, their sums into m1 and, times the row's
 * charge offset dq, into bq. A run of samples at one interval is walked
 * without a call (exp() between the runs only), so the lags and sums stay
 * in registers. */
static inline __attribute__((always_inline)) void
lag_run(const int vh, const int acc, struct lag_pairs *lp, double *a_dt, const double *tau_s,
        const double *t, const double *ia, size_t k, size_t k_end, struct ecm_lag_rows *lr,
        int keep, size_t *mark, size_t r, const double *dq, double *buf, v2d *m1, v2d *bq)
{
    v2d i1[VH_MAX], s1[VH_MAX], sq[VH_MAX];
    VH_UNROLL
    for (int h = 0; h < vh; h++) {
        i1[h] = lp->i1[h];
        s1[h] = acc ? m1[h] : (v2d){0};
        sq[h] = acc ? bq[h] : (v2d){0};
    }
    size_t mk = *mark;
    while (k < k_end) {
        if (new_interval(t, k, *a_dt))
            new_factors(vh, lp, tau_s, t, k, a_dt);
        const v2d *a_val = lp->a_val, *oma = lp->oma;
        do {
            double ip = ia[k - 1];
            VH_UNROLL
            for (int h = 0; h < vh; h++)
                i1[h] = a_val[h] * i1[h] + oma[h] * ip;
            if (keep >= 0 && k == mk) {
                lr->i1_a[k / lr->every] = i1[keep / 2][keep % 2];
                mk += lr->every;
            }
            if (acc) {
                double d = dq[r];
                VH_UNROLL
                for (int h = 0; h < vh; h++) {
                    *(v2d_mem *)(buf + r * 2 * (size_t)vh + 2 * (size_t)h) = i1[h];
                    s1[h] += i1[h];
                    sq[h] += d * i1[h];
                }
                r++;
            }
            k++;
        } while (k < k_end && !new_interval(t, k, *a_dt));
    }
    VH_UNROLL
    for (int h = 0; h < vh; h++) {
        lp->i1[h] = i1[h];
        if (acc) {
            m1[h] = s1[h];
            bq[h] = sq[h];
        }
    }
    *mark = mk;
}

static inline __attribute__((always_inline)) void walk_windows(struct walk_part *wp, const int nt)
{
    const int vh = (nt + 1) / 2;
    const struct ctx *c = wp->c;
    const struct series *s = c->s;
    const double *ia = s->i_a, *t = s->t_s, *q = c->q;
    double taus[2 * VH_MAX];
    for (int j = 0; j < 2 * vh; j++)
        taus[j] = wp->tau_s[j < nt ? j : nt - 1];
    struct lag_pairs lp;
    v2d a01[VH_MAX] = {{0}}, a11[VH_MAX] = {{0}}, b1[VH_MAX] = {{0}};
    double a00 = 0.0, b0 = 0.0, yy = 0.0, a_dt = -1.0;
    size_t n_used = 0, k;
    /* the lag of sample k - 1 is in i1 */
    k = part_lag_start(c, wp->w0) + 1;
    if (k > s->n)
        k = s->n;
    for (int h = 0; h < vh; h++) {
        lp.i1[h] = (v2d){0} + ia[k - 1];
        lp.a_val[h] = lp.oma[h] = (v2d){0};
    }
    /* the lag kept at the sampled rows from here (lag_rows, as rc_lines) */
    struct ecm_lag_rows *lr = wp->lr;
    size_t keep_from = part_keep_from(c, wp->w0);
    size_t mark = next_mark(lr, k - 1 > keep_from ? k - 1 : keep_from);
    const int keep = lr || wp->lines ? wp->keep : -1;
    if (mark == k - 1) {
        lr->i1_a[mark / lr->every] = ia[k - 1];
        mark += lr->every;
    }
    for (size_t wj = wp->w0; wj < wp->w1; wj++) {
        const struct win *w = &c->w[wj];
        if (!w->use)
            continue;
        size_t len = w->k1 - w->k0;
        double *buf = wp->buf, *dq = buf + 2 * (size_t)vh * len, *x0 = dq + len, *y = x0 + len;
        /* the tau-free columns */
        for (size_t r = 0; r < len; r++) {
            size_t kk = w->k0 + r;
            dq[r] = q[kk] - w->mq;
            x0[r] = -(ia[kk] - (w->mi + w->bi * dq[r]));
            y[r] = c->y[kk] - (w->mv + w->bv * dq[r]);
            if (wp->want_free) {
                a00 += x0[r] * x0[r];
                b0 += x0[r] * y[r];
                yy += y[r] * y[r];
            }
        }
        /* the lags run on over [k, w->k0), then over the window's rows
         * from kadv (a part's first sample holds the lag it starts with) */
        if (k < w->k0)
            lag_run(vh, 0, &lp, &a_dt, taus, t, ia, k, w->k0, lr, keep, &mark, 0, NULL, NULL, NULL,
                    NULL);
        size_t kadv = k > w->k0 ? k : w->k0, r = 0;
        v2d m1[VH_MAX] = {{0}}, bq[VH_MAX] = {{0}};
        for (; r < len && w->k0 + r < kadv; r++)
            for (int h = 0; h < vh; h++) {
                *(v2d_mem *)(buf + r * 2 * (size_t)vh + 2 * (size_t)h) = lp.i1[h];
                m1[h] += lp.i1[h];
                bq[h] += dq[r] * lp.i1[h];
            }
        if (r < len)
            lag_run(vh, 1, &lp, &a_dt, taus, t, ia, w->k0 + r, w->k1, lr, keep, &mark, r, dq, buf,
                    m1, bq);
        VH_UNROLL
        for (int h = 0; h < vh; h++) {
            m1[h] /= (double)len;
            bq[h] = w->sqq > 0.0 ? bq[h] / w->sqq : (v2d){0};
        }
        if (wp->lines) {
            wp->lines[2 * wj] = m1[keep / 2][keep % 2];
            wp->lines[2 * wj + 1] = bq[keep / 2][keep % 2];
        }
        v2d s01[VH_MAX], s11[VH_MAX], s1y[VH_MAX];
        VH_UNROLL
        for (int h = 0; h < vh; h++) {
            s01[h] = a01[h];
            s11[h] = a11[h];
            s1y[h] = b1[h];
        }
        for (r = 0; r < len; r++) {
            double d = dq[r], xr = x0[r], yr = y[r];
            VH_UNROLL
            for (int h = 0; h < vh; h++) {
                /* the RC column -(lag - line), written line - lag: the same number
                 * but for a zero's sign, which no sum keeps */
                v2d x1 = (m1[h] + bq[h] * d) -
                         *(const v2d_mem *)(buf + r * 2 * (size_t)vh + 2 * (size_t)h);
                s01[h] += xr * x1;
                s11[h] += x1 * x1;
                s1y[h] += x1 * yr;
            }
        }
        VH_UNROLL
        for (int h = 0; h < vh; h++) {
            a01[h] = s01[h];
            a11[h] = s11[h];
            b1[h] = s1y[h];
        }
        if (k < w->k1)
            k = w->k1;
        n_used += len;
    }
    for (int j = 0; j < nt; j++) {
        wp->sums.a01[j] = a01[j / 2][j % 2];
        wp->sums.a11[j] = a11[j / 2][j % 2];
        wp->sums.b1[j] = b1[j / 2][j % 2];
    }
    wp->sums.free_sums = (struct tau_free_sums){a00, b0, yy, n_used};
}

static void walk_grid(void *wp)
{
    walk_windows(wp, TAU_GRID);
}

static void walk_three(void *wp)
{
    walk_windows(wp, 3);
}

/* The plain residual sums of squares of the RC model at nt time constants
 * (TAU_GRID or 3) in one walk over the log; a long log walked in two parts
 * (the windows before and after twin_split, each with a buffer of its own
 * in bufs[0] and bufs[1]), added in that order whether or not they ran side
 * by side. With lines not NULL, each used window's RC line at tau_s[keep]
 * (mean and slope in q of the lag, as rc_lines makes them, number for
 * number) goes in lines[2 j], lines[2 j + 1]. With lr not NULL, the lag of
 * tau_s[keep] is kept at the sampled rows (as rc_lines keeps it). The
 * tau-free sums are made
 * into *fs when have_fs is 0, else taken from it (the same numbers, made
 * once for every walk of the search). rss[j] is HUGE_VAL where a fit fails. */
static void rss_walk(const struct ctx *c, const double *tau_s, int nt, double *const bufs[2],
                     double *lines, int keep, struct ecm_lag_rows *lr, double *rss,
                     struct tau_free_sums *fs, int have_fs)
{
    size_t cut = walk_cut(c);
    struct walk_part a = {.c = c,
                          .tau_s = tau_s,
                          .buf = bufs[0],
                          .lines = lines,
                          .keep = keep,
                          .lr = lr,
                          .w0 = 0,
                          .w1 = cut,
                          .want_free = !have_fs};
    struct walk_part b = a;
    b.buf = bufs[1];
    b.w0 = cut;
    b.w1 = c->nw;
    void (*walk)(void *) = nt == 3 ? walk_three : walk_grid;
    if (cut < c->nw)
        twin_run(walk, &a, walk, &b);
    else
        walk(&a);
    walk_sums_add(&a.sums, &b.sums, nt, !have_fs);
    if (have_fs)
        a.sums.free_sums = *fs;
    else
        *fs = a.sums.free_sums;
    walk_rss(&a.sums, nt, rss);
}

/* The scout of a long log's tau search: SCOUT_PARTS runs of windows spread
 * evenly over the log, together about 1 / SCOUT_SHARE of its windows, each
 * walked as a later part of a cut pass is (its lags started warm_s before
 * its first window in use, so its sums are those a walk of every row makes
 * for these windows). Where its profile says there is no RC branch to
 * find, or where one clearly is, the search is spared the grid's walk of
 * every row (tau_run). */
#define SCOUT_MIN_ROWS 262144 /* logs this long are scouted (4 fits' even samples) */
#define SCOUT_PARTS 4
#define SCOUT_SHARE 8
#define SCOUT_MIN_WINDOWS 8 /* in each run of the scout, else no scout */
/* The scout must hold at least half its share of the current's variation in
 * the windows in use (what informs R0 and the branch): a log whose current
 * varies mostly elsewhere (a few hard manoeuvres in a long hover) is
 * searched on every row. */
#define SCOUT_MIN_VARIATION (0.5 / SCOUT_SHARE)
/* The RC model is chosen only where it cuts the plain RSS by at least 5 %
 * (ecm_end). A scout whose best grid point cuts it by under 1 % leaves the
 * whole log far from that: the search ends unresolved, as it would when its
 * best point is at a grid end or the branch is rejected. One that cuts it
 * by more than 10 % has found the branch: Newton's method starts from the
 * scout's own minimum. In between, the grid walks every row. */
#define SCOUT_NO_BRANCH 0.99
#define SCOUT_BRANCH 0.90
#define SCOUT_STEPS_MAX 8

struct scout {
    size_t w0[SCOUT_PARTS], w1[SCOUT_PARTS];
};

/* The scout's runs of windows; 0 when the log is too short for one or
 * the runs are not representative (SCOUT_MIN_VARIATION). */
static int scout_parts(const struct ctx *c, struct scout *sc)
{
    size_t len = c->nw / (SCOUT_PARTS * SCOUT_SHARE);
    if (c->no_scout || c->s->n < SCOUT_MIN_ROWS || len < SCOUT_MIN_WINDOWS)
        return 0;
    double all = 0.0, held = 0.0;
    for (size_t j = 0; j < c->nw; j++)
        all += c->w[j].use ? c->w[j].si : 0.0;
    for (int i = 0; i < SCOUT_PARTS; i++) {
        /* centred in the i-th of SCOUT_PARTS equal shares of the windows */
        size_t mid = (2 * (size_t)i + 1) * c->nw / (2 * SCOUT_PARTS);
        sc->w0[i] = mid - len / 2;
        sc->w1[i] = sc->w0[i] + len;
        for (size_t j = sc->w0[i]; j < sc->w1[i]; j++)
            held += c->w[j].use ? c->w[j].si : 0.0;
    }
    return held >= SCOUT_MIN_VARIATION * all && held > 0.0;
}

/* Half of the scout's runs walked in turn, sums added in run order. */
struct scout_half {
    struct walk_part part;
    const struct scout *sc;
    int i0, i1, nt;
    struct walk_sums sums;
};

static void scout_half_run(void *vh)
{
    struct scout_half *h = vh;
    memset(&h->sums, 0, sizeof h->sums);
    for (int i = h->i0; i < h->i1; i++) {
        h->part.w0 = h->sc->w0[i];
        h->part.w1 = h->sc->w1[i];
        if (h->nt == 3)
            walk_three(&h->part);
        else
            walk_grid(&h->part);
        walk_sums_add(&h->sums, &h->part.sums, h->nt, 1);
    }
}

/* rss_walk over the scout's windows alone (the first half of its runs
 * beside the second); the static model's plain RSS there in *rss_static,
 * its rows in use in *n_used. */
static void scout_walk(const struct ctx *c, const struct scout *sc, const double *tau_s, int nt,
                       double *const bufs[2], double *rss, double *rss_static, size_t *n_used)
{
    struct scout_half a = {
        .part = {.c = c, .tau_s = tau_s, .buf = bufs[0], .keep = 0, .want_free = 1},
        .sc = sc,
        .i0 = 0,
        .i1 = SCOUT_PARTS / 2,
        .nt = nt};
    struct scout_half b = a;
    b.part.buf = bufs[1];
    b.i0 = SCOUT_PARTS / 2;
    b.i1 = SCOUT_PARTS;
    twin_run(scout_half_run, &a, scout_half_run, &b);
    walk_sums_add(&a.sums, &b.sums, nt, 1);
    *rss_static = free_rss(&a.sums.free_sums);
    *n_used = a.sums.free_sums.n_used;
    walk_rss(&a.sums, nt, rss);
}

/* The search for tau: the plain RSS on a grid of time constants from lo_s
 * to hi_s, then Newton's method on the profile between the best grid
 * point's neighbours. It only reads the windows and the series (its own
 * copy of the context keeps the running state apart), so when a core is
 * free a second thread runs all of it while the static model is fitted. */
struct tau_grid {
    struct ctx c;
    double g[TAU_GRID], taus[TAU_GRID], f[TAU_GRID];
    double *buf; /* the walks' two buffers (rss_walk) */
    size_t buf_len;
    double tau;          /* the result: NAN when the best tau is at a grid end */
    double tau_rss;      /* the RC model's plain residual sum of squares there */
    double tau_d2;       /* the profile's curvature there, d2 RSS / d (ln tau)2 */
    double *lines_mem;   /* room for the windows' RC lines */
    const double *lines; /* the RC lines of the walk at tau (in lines_mem), else NULL */
    size_t work;         /* rows the search visited, added to the caller's count at the end */
    struct tau_free_sums free_sums; /* the static model's plain sums, every row */
    struct twin_job job;            /* the search beside the static fit (threaded) */
    int threaded, ok, walked, free_ok;
};

static size_t longest_window(const struct ctx *c)
{
    size_t longest = 0;
    for (size_t j = 0; j < c->nw; j++)
        if (c->w[j].use && c->w[j].k1 - c->w[j].k0 > longest)
            longest = c->w[j].k1 - c->w[j].k0;
    return longest;
}

/* ln tau either side of a point for the profile's slope and curvature
 * (central differences: their own error moves the minimum by about
 * TAU_H^2 / 6 times the profile's third over second derivative) */
#define TAU_H 5e-3
#define TAU_STEPS_MAX 16
/* Newton's step, in standard errors of ln tau (before the allowance for
 * correlated residuals, which only widens them), below which the search
 * ends: the tau reported is then within a hundredth of its error of the
 * profile's minimum; or below TAU_TOL_MIN in ln tau (a millionth: a log
 * without noise, whose error is rounding). A search that gets to neither
 * (TAU_STEPS_MAX walks, or the profile not curving up) leaves tau
 * unresolved. */
#define TAU_TOL_SE 0.01
#define TAU_TOL_MIN 1e-6

/* The profile's vertex through three points (x0 < x1 < x2, f1 the least):
 * inside [x0, x2]. */
static double vertex(double x0, double f0, double x1, double f1, double x2, double f2)
{
    double d0 = (f1 - f0) / (x1 - x0), d1 = (f2 - f1) / (x2 - x1), c = (d1 - d0) / (x2 - x0);
    double v = c > 0.0 ? 0.5 * (x0 + x1) - 0.5 * d0 / c : x1;
    return v > x0 && v < x2 ? v : x1;
}

/* The residual variance's degrees of freedom for Newton's tolerance: the
 * rows in use less the windows' own parameters and R0, R1, tau. */
static double search_dof(size_t n_used, size_t window_params)
{
    return (double)n_used - (double)window_params - 3.0;
}

enum newton { NEWTON_ON, NEWTON_DONE, NEWTON_STUCK, NEWTON_FAILED };

/* One step of Newton's method on the profile at u from its plain RSS at
 * u - TAU_H, u, u + TAU_H (p): the slope and curvature (*d2) by central
 * differences, the bracket [*lo, *hi] narrowed by the slope's sign.
 * NEWTON_DONE when the step is under TAU_TOL_SE standard errors (dof: the
 * residual variance's) or TAU_TOL_MIN; NEWTON_STUCK when the bracket is
 * narrower than TAU_TOL_MIN; NEWTON_FAILED when a fit failed (p HUGE_VAL);
 * else NEWTON_ON with the next point in *u (a bisection where the step
 * would leave the bracket). */
static enum newton newton_step(const double p[3], double dof, double *u, double *lo, double *hi,
                               double *d2)
{
    if (!(p[0] < HUGE_VAL && p[1] < HUGE_VAL && p[2] < HUGE_VAL))
        return NEWTON_FAILED;
    double d1 = (p[2] - p[0]) / (2.0 * TAU_H);
    *d2 = (p[2] - 2.0 * p[1] + p[0]) / (TAU_H * TAU_H);
    if (d1 > 0.0)
        *hi = *u;
    else
        *lo = *u;
    double step = *d2 > 0.0 ? -d1 / *d2 : NAN;
    double se = *d2 > 0.0 ? sqrt(2.0 * p[1] / dof / *d2) : NAN;
    if (fabs(step) <= fmax(TAU_TOL_SE * se, TAU_TOL_MIN))
        return NEWTON_DONE;
    if (!(*hi - *lo > TAU_TOL_MIN))
        return NEWTON_STUCK;
    double next = *u + step;
    *u = next > *lo && next < *hi ? next : 0.5 * (*lo + *hi);
    return NEWTON_ON;
}

/* The grid's best point (f: the plain RSS at g, ln tau): its neighbours the
 * bracket in *lo, *hi, the vertex of the three the start in *u; 0 when a
 * fit failed or the best point is at a grid end (tau not resolved). */
static int grid_point(const double *g, const double *f, double *lo, double *hi, double *u)
{
    int best = 0, failed = 0;
    for (int j = 0; j < TAU_GRID; j++) {
        failed |= !(f[j] < HUGE_VAL);
        if (f[j] < f[best])
            best = j;
    }
    if (failed || best == 0 || best == TAU_GRID - 1)
        return 0;
    *lo = g[best - 1];
    *hi = g[best + 1];
    *u = vertex(*lo, f[best - 1], g[best], f[best], *hi, f[best + 1]);
    return 1;
}

enum { SCOUT_UNSURE, SCOUT_NONE, SCOUT_FOUND };

/* The scout's part of the search (struct scout): SCOUT_NONE when it finds
 * no branch the RC model could be chosen for; SCOUT_FOUND when it finds
 * one, with the grid's bracket in *lo, *hi and the scout's own minimum of
 * the profile in *u (Newton's method on its windows, as tau_run's on every
 * row); else SCOUT_UNSURE (or a short log, or a fit that failed). */
static int scout_search(struct tau_grid *gr, double *const bufs[2], double *lo, double *hi,
                        double *u)
{
    const struct ctx *c = &gr->c;
    struct scout sc;
    if (!scout_parts(c, &sc))
        return SCOUT_UNSURE;
    double f[TAU_GRID], rss_static;
    size_t n_used, params = 0; /* n_used: the rows of the scout's windows in use */
    for (int i = 0; i < SCOUT_PARTS; i++)
        params += window_params(c, sc.w0[i], sc.w1[i]);
    scout_walk(c, &sc, gr->taus, TAU_GRID, bufs, f, &rss_static, &n_used);
    gr->work += n_used;
    double best = HUGE_VAL;
    for (int j = 0; j < TAU_GRID; j++)
        best = f[j] < best ? f[j] : best;
    if (!(rss_static > 0.0 && rss_static < HUGE_VAL && best < HUGE_VAL))
        return SCOUT_UNSURE;
    if (best > SCOUT_NO_BRANCH * rss_static)
        return SCOUT_NONE;
    if (!(best < SCOUT_BRANCH * rss_static) || !grid_point(gr->g, f, lo, hi, u))
        return SCOUT_UNSURE;
    double dof = search_dof(n_used, params), l = *lo, h = *hi, d2;
    if (!(dof >= 1.0))
        return SCOUT_UNSURE;
    enum newton state = NEWTON_ON;
    for (int steps = 1; steps <= SCOUT_STEPS_MAX && state == NEWTON_ON; steps++) {
        double taus[3] = {exp(*u - TAU_H), exp(*u), exp(*u + TAU_H)}, p[3];
        scout_walk(c, &sc, taus, 3, bufs, p, &rss_static, &n_used);
        gr->work += n_used;
        state = newton_step(p, dof, u, &l, &h, &d2);
    }
    return SCOUT_FOUND;
}

/* Newton's method on the profile from u in [lo, hi] (tau_run), each step a
 * walk of every row; the tau-free sums in *fs (have_fs), else made by the
 * first walk. Returns 1 when it converged: gr->tau the last tau walked, its
 * RC lines kept for the fit; else 0, gr->tau NAN. */
static int newton_search(struct tau_grid *gr, double *const bufs[2], struct tau_free_sums *fs,
                         int have_fs, double lo, double hi, double u)
{
    struct ctx *c = &gr->c;
    double dof = have_fs ? search_dof(fs->n_used, window_params(c, 0, c->nw)) : NAN;
    if (have_fs && !(dof >= 1.0))
        return 0;
    lag_rows_clear(c); /* each walk keeps the lag of its middle tau */
    enum newton state = NEWTON_ON;
    for (int steps = 1; steps <= TAU_STEPS_MAX && state == NEWTON_ON; steps++) {
        double taus[3] = {exp(u - TAU_H), exp(u), exp(u + TAU_H)}, p[3];
        rss_walk(c, taus, 3, bufs, gr->lines_mem, 1, c->lr, p, fs, have_fs);
        gr->work += c->s->n;
        if (!have_fs) {
            have_fs = 1;
            gr->free_sums = *fs;
            gr->free_ok = 1;
            dof = search_dof(fs->n_used, window_params(c, 0, c->nw));
            if (!(dof >= 1.0))
                break;
        }
        double d2;
        /* a fit failed near tau: not resolved, as on the grid */
        state = newton_step(p, dof, &u, &lo, &hi, &d2);
        if (state != NEWTON_FAILED) {
            gr->tau = taus[1];
            gr->tau_rss = p[1];
            gr->tau_d2 = d2;
        }
    }
    if (state != NEWTON_DONE) { /* no minimum found to the tolerance: not resolved */
        gr->tau = NAN;
        return 0;
    }
    if (c->lr)
        c->lr->tau_s = gr->tau;
    gr->lines = gr->lines_mem;
    return 1;
}

/* Profiles the plain RSS over u = ln tau on the grid, then Newton's method
 * from the vertex of the best grid point and its neighbours, each step one
 * walk at u - TAU_H, u, u + TAU_H (the slope and curvature by central
 * differences, the bracket narrowed by the slope's sign, a bisection
 * where the step would leave it). gr->tau is NAN when the best tau is at a
 * grid end (not resolved) or a walk failed. The last point walked is the
 * result: its RC lines are kept for the fit, its curvature for tau's
 * interval. A long log is scouted first (struct scout): where the scout
 * finds no branch to choose, the search ends unresolved; where it finds
 * one, Newton's method starts from the scout's minimum, and the grid walks
 * every row only if that does not converge. */
static void tau_run(void *vg)
{
    struct tau_grid *gr = vg;
    struct ctx *c = &gr->c;
    struct tau_free_sums fs;
    double *bufs[2] = {gr->buf, gr->buf + gr->buf_len};
    gr->tau = NAN;
    double lo, hi, u;
    switch (scout_search(gr, bufs, &lo, &hi, &u)) {
    case SCOUT_NONE:
        return;
    case SCOUT_FOUND:
        if (newton_search(gr, bufs, &fs, 0, lo, hi, u))
            return;
        break;
    default:
        break;
    }
    rss_walk(c, gr->taus, TAU_GRID, bufs, NULL, 0, NULL, gr->f, &fs, 0);
    gr->free_sums = fs;
    gr->free_ok = 1;
    gr->work += c->s->n;
    if (grid_point(gr->g, gr->f, &lo, &hi, &u))
        newton_search(gr, bufs, &fs, 1, lo, hi, u);
}

/* Starts the search (in a thread when one can run beside this one); ok is
 * 0 when the range is too short or memory is short. */
static void grid_start(struct tau_grid *gr, const struct ctx *c, double lo_s, double hi_s)
{
    double lo = log(lo_s), hi = log(hi_s);
    gr->threaded = gr->ok = gr->walked = 0;
    gr->buf = NULL;
    gr->lines_mem = NULL;
    gr->lines = NULL;
    gr->tau = NAN;
    gr->work = 0;
    if (!(hi - lo > 1.0))
        return;
    gr->c = *c;
    gr->buf_len = WALK_ROW_DOUBLES * longest_window(c);
    gr->buf = malloc(2 * gr->buf_len * sizeof(double));
    if (!gr->buf)
        return;
    gr->lines_mem = malloc(2 * c->nw * sizeof(double)); /* NULL: the RC fit makes its lines */
    for (int j = 0; j < TAU_GRID; j++) {
        gr->g[j] = lo + (hi - lo) * j / (TAU_GRID - 1);
        gr->taus[j] = exp(gr->g[j]);
    }
    gr->ok = 1;
    /* a short log's walk costs less than a thread (and import runs one
     * analysis per core already) */
    if (c->s->n >= GRID_THREAD_MIN_ROWS && sysconf(_SC_NPROCESSORS_ONLN) > 1 &&
        twin_start(&gr->job, tau_run, gr) == 0)
        gr->threaded = 1;
}

/* The search's tau (joins the thread, or searches here); NAN when not
 * resolved. Frees the search's buffer. */
static double search_tau(struct tau_grid *gr, size_t *work)
{
    if (!gr->ok)
        return NAN;
    if (gr->threaded) {
        twin_join(&gr->job);
        gr->threaded = 0;
    } else if (!gr->walked) {
        tau_run(gr);
    }
    gr->walked = 1;
    if (work)
        *work += gr->work;
    free(gr->buf);
    gr->buf = NULL;
    return gr->tau;
}

/* The windows' RC lines the search's walk made at tau, or NULL (another
 * tau: the RC fit makes them, rc_lines). */
static const double *search_lines(const struct tau_grid *gr, double tau)
{
    return gr->lines && tau == gr->tau ? gr->lines : NULL;
}

/* The static model's plain residual sum of squares over every row: from
 * the search's walk when it ran (the sums of a plain pass of the static
 * fit, cut at a window's start rather than a row, so equal up to rounding),
 * else the fit's own (which, for a robust fit of a long log, is its even
 * sample's scaled to every row). */
static double static_rss_plain(const struct tau_grid *gr, const struct fit_result *fs)
{
    double rss = gr->free_ok ? free_rss(&gr->free_sums) : HUGE_VAL;
    return rss < HUGE_VAL ? rss : fs->rss_plain;
}

/* tau's 95 % half-width from the profile's curvature at the search's
 * result: var(ln tau) = 2 sigma^2 / (d2 RSS / d (ln tau)^2), the residual
 * variance over every row in use (n_eff of them after the windows' own
 * parameters, less R0, R1 and tau), widened for serial correlation as the
 * other intervals are (rho); tau times ln tau's half-width (the delta
 * method). NAN where the search did not give a curvature at this tau. */
static double tau_ci95(const struct tau_grid *gr, double tau, double rss, double n_eff, double rho)
{
    double dof = n_eff - 3.0;
    if (!(tau == gr->tau && gr->tau_d2 > 0.0 && dof >= 1.0))
        return NAN;
    /* residuals at the rounding of the sums (a log without noise): the
     * curvature is rounding too, and no interval can be told */
    if (!(rss > 1e-12 * gr->free_sums.yy))
        return NAN;
    double infl = rho > 0.0 ? (1.0 + rho) / (1.0 - fmin(rho, 0.99)) : 1.0;
    double se = sqrt(2.0 * rss / dof * infl / gr->tau_d2);
    return tau * gsl_cdf_tdist_Pinv(0.975, dof) * se;
}

static double bic(double rss, double n, int k)
{
    return n * log(fmax(rss, 1e-300) / n) + k * log(n);
}

struct ecm_run {
    struct ecm_opts o;
    struct ctx c;
    struct tau_grid grid;
    struct ecm_result out;
    int try_rc;
};

struct ecm_run *ecm_begin(const struct series *s, const double *q_ah, const struct ecm_opts *o)
{
    struct ecm_run *run = calloc(1, sizeof *run);
    if (!run)
        return NULL;
    run->o = *o;
    struct ecm_result *out = &run->out;
    out->r0_mohm = out->r0_ci95_mohm = out->r_static_mohm = out->r_static_ci95_mohm = NAN;
    out->r1_mohm = out->r1_ci95_mohm = out->tau_s = out->tau_ci95_s = out->sigma_mv = out->rho =
        NAN;
    out->window_s = ecm_window_s(o->dt_med_s);
    run->grid = (struct tau_grid){
        .ok = 0, .threaded = 0, .walked = 0, .buf = NULL, .lines_mem = NULL, .tau = NAN};
    struct ctx *c = &run->c;
    *c = (struct ctx){
        .s = s,
        .y = o->y_v,
        .q = q_ah,
        .step_a = o->step_a,
        .whole = o->whole,
        .no_scout = o->no_scout,
        /* the search's longest tau is half a window (ecm_begin) */
        .warm_s = WARM_TAUS * fmax(0.5 * out->window_s, o->tau_fixed_s),
        .lr = o->lag_rows && o->lag_rows->every == fit_sample_every(s->n) ? o->lag_rows : NULL};
    if (c->lr)
        c->lr->tau_s = NAN;
    c->w = make_windows(s, out->window_s, o->gap_s, &c->nw);
    if (!c->w) {
        free(run);
        return NULL;
    }
    out->windows = c->nw;
    /* A window informs R only if its current varies well above the current
     * sensor's noise: noise in a regressor biases its coefficient toward
     * zero by var(noise) / var(total), so at least 5 noise deviations (bias
     * under 4 %). Windows that touch the cut-off voltage are left out: near
     * empty the resistance rises steeply and no constant R fits there. */
    double sigma_i = edges_noise(s->i_a, s->i_a, s->n, o->step_a);
    if (!isfinite(sigma_i))
        sigma_i = 0.0;
    size_t informative = base_lines(c, sigma_i, o->cutoff_v);
    out->windows = informative;
    if (informative == 0) {
        out->reason = "the current does not vary above its noise within any part of the log "
                      "away from the cut-off: resistance cannot be told apart from the falling "
                      "open-circuit voltage";
        return run;
    }
    run->try_rc = (o->try_rc || o->tau_fixed_s > 0.0) && s->n >= 50;
    /* resolvable: slower than the sampling, faster than half a window */
    if (run->try_rc && !(o->tau_fixed_s > 0.0))
        grid_start(&run->grid, c, fmax(2.0 * o->dt_med_s, 1e-3), 0.5 * out->window_s);
    return run;
}

enum pb_code ecm_end(struct ecm_run *run, struct ecm_result *res)
{
    if (!run)
        return PB_ENOMEM;
    enum pb_code rc = PB_OK;
    const struct ecm_opts *o = &run->o;
    struct ecm_result *out = &run->out;
    struct ctx c = run->c;
    struct tau_grid *grid = &run->grid;
    int try_rc = run->try_rc;
    if (out->reason)
        goto done;
    struct fit_result fs, fr;
    struct fit_lag1 lag1;
    double tau = o->tau_fixed_s;
    int searched = 0; /* the search waited for and the "RC fit" stage told, sharing the pass */
    struct fit_part *rc_part = NULL; /* the RC fit begun, sharing the static fit's pass */
    stage_begin(o->stages, "static fit");
    enum pb_code fs_rc;
    if (o->robust) {
        struct fit_part *part = part_begin_at(&c, 1, 0.0, o->work, NULL, &lag1);
        /* A static fit due a pass over every row waits for the tau
         * search, and when that gives a tau, the pass is made with the RC
         * fit's (fit_part_share: the rows made once, the same sums). The
         * search's walks keep both cores busy (each in two halves), so
         * the static pass gained nothing by running beside them; without a
         * tau it runs after the search. */
        if (try_rc && !(tau > 0.0) && grid->ok && fit_part_due(part) && !o->no_share) {
            stage_begin(o->stages, "tau search");
            tau = search_tau(grid, o->work);
            searched = 1;
            stage_begin(o->stages, "RC fit");
            if (isfinite(tau)) {
                rc_part = part_begin_at(&c, 2, tau, o->work, search_lines(grid, tau), &lag1);
                fit_part_share(part, rc_part);
            }
        }
        fs_rc = part_end_at(part, o->work, &fs);
    } else {
        fs_rc = fit_at(&c, 1, 0.0, o->robust, o->work, NULL, &lag1, &fs, NULL);
    }
    if (fs_rc != PB_OK || fs.rank < 1) {
        fit_part_free(rc_part); /* its fit is not wanted: no passes made for it */
        out->reason = "the resistance fit failed (too few samples inside the windows)";
        goto done;
    }
    double rho = honest_cov(&c, &lag1, &fs);
    double r_static = 1000.0 * fs.beta[0], r_static_ci = 1000.0 * fit_ci95(&fs, 0);
    out->r_static_mohm = r_static;
    out->r_static_ci95_mohm = r_static_ci;
    out->sigma_mv = 1000.0 * fs.sigma;
    out->rho = rho;
    out->downweighted = fs.n_downweighted;
    out->iterations = fs.iterations;
    out->r0_mohm = r_static;
    out->r0_ci95_mohm = r_static_ci;

    if (try_rc) {
        if (!(tau > 0.0) && !searched) {
            stage_begin(o->stages, "tau search");
            tau = search_tau(grid, o->work);
        }
        enum pb_code fr_rc = PB_ENUMERIC;
        if (!searched)
            stage_begin(o->stages, "RC fit");
        if (rc_part) {
            fr_rc = part_end_at(rc_part, o->work, &fr);
        } else if (isfinite(tau)) {
            fr_rc =
                fit_at(&c, 2, tau, o->robust, o->work, search_lines(grid, tau), &lag1, &fr, NULL);
        }
        if (fr_rc == PB_OK && fr.rank == 2) {
            /* the search's walk at this tau summed the RC model's plain
             * normal equations over every row, as a plain pass would (a
             * robust fit's own rss_plain is its sample's) */
            double rss_plain_rc = tau == grid->tau ? grid->tau_rss : fr.rss_plain;
            double rss_plain_static = static_rss_plain(grid, &fs);
            double rho_rc = honest_cov(&c, &lag1, &fr);
            double r0 = 1000.0 * fr.beta[0], r1 = 1000.0 * fr.beta[1];
            double r1_ci = 1000.0 * fit_ci95(&fr, 1);
            double n_eff = (double)fs.n_used - (double)window_params(&c, 0, c.nw);
            /* the branch must be physical (R0 > 0, R1 >= 0), explain real
             * residual, beat the static model by the information criterion
             * (paying for R1 and tau) and be significant; a fixed tau (the
             * pack's, for a cell) needs only the physical part */
            int fixed = o->tau_fixed_s > 0.0;
            int better = fixed || (rss_plain_rc < 0.95 * rss_plain_static &&
                                   bic(rss_plain_rc, n_eff, 3) <
                                       bic(rss_plain_static, n_eff, 1) - BIC_MARGIN &&
                                   r1 > r1_ci);
            if (r0 > 0.0 && r1 >= 0.0 && better) {
                out->rc = 1;
                out->r0_mohm = r0;
                out->r0_ci95_mohm = 1000.0 * fit_ci95(&fr, 0);
                out->r1_mohm = r1;
                out->r1_ci95_mohm = r1_ci;
                out->tau_s = tau;
                out->tau_ci95_s = fixed ? NAN : tau_ci95(grid, tau, rss_plain_rc, n_eff, rho_rc);
                out->sigma_mv = 1000.0 * fr.sigma;
                out->rho = rho_rc;
                out->downweighted = fr.n_downweighted;
                out->iterations = fr.iterations;
            }
        }
    }
    if (!(out->r0_mohm > 0.0)) {
        out->reason = "the fitted resistance is not positive: the log cannot separate resistance "
                      "from the voltage drift (or voltage and current are out of step)";
    } else if (!(out->r0_ci95_mohm < out->r0_mohm)) {
        out->reason = "the resistance fit is too uncertain to report";
    }
done:
    if (grid->threaded) /* a search still running is waited for, its result unused */
        twin_join(&grid->job);
    free(grid->buf);
    free(grid->lines_mem);
    if (out->reason) {
        out->r0_mohm = out->r0_ci95_mohm = NAN;
        out->r1_mohm = out->r1_ci95_mohm = out->tau_s = out->tau_ci95_s = NAN;
        out->rc = 0;
    }
    free(c.w);
    *res = *out;
    free(run);
    return rc;
}

enum pb_code ecm_fit(const struct series *s, const double *q_ah, const struct ecm_opts *o,
                     struct ecm_result *out, struct pb_error *err)
{
    struct ecm_run *run = ecm_begin(s, q_ah, o);
    if (!run) {
        *out = (struct ecm_result){0};
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    }
    return ecm_end(run, out);
}

/* ---- OCV trend with R fixed ------------------------------------------- */

struct trend_ctx {
    const struct series *s;
    const double *q;
    double q_scale;
    int degree;
    double r0, r1, tau, v_ref;
    const struct ecm_lag_rows *lr; /* the lag at the sampled rows (may be NULL) */
    struct lag lag;                /* the RC branch's current */
};

/* Row k with the RC branch's current i1 (ignored without a branch). */
static inline int trend_row(const struct trend_ctx *c, size_t k, double i1, double *x, double *y)
{
    const struct series *s = c->s;
    double v = s->v_v[k] + c->r0 * s->i_a[k];
    if (c->r1 > 0.0)
        v += c->r1 * i1;
    double u = c->degree > 0 ? 2.0 * c->q[k] * c->q_scale - 1.0 : 0.0;
    double p = 1.0;
    for (int j = 0; j <= c->degree; j++) {
        x[j] = p;
        p *= u;
    }
    *y = v - c->v_ref;
    return 1;
}

/* Rows in any order: with an RC branch a row needs the lag of the samples
 * before it, so rows asked for out of turn (the kept sample's, ascending,
 * then every row from the first) run the lag on from the last row made, or
 * start it afresh WARM_TAUS time constants before when that row is earlier
 * or further back: the same lag as a walk in order, up to rounding. */
static void trend_block(void *vc, size_t k0, size_t m, int p, double *x, double *y,
                        unsigned char *use)
{
    struct trend_ctx *c = vc;
    /* a sampled row's lag kept by the model fit (lag_rows) */
    const double *kept = c->r1 > 0.0 && m == 1 ? kept_lag(c->lr, c->tau, k0) : NULL;
    if (kept) {
        use[0] = (unsigned char)trend_row(c, k0, *kept, x, &y[0]);
        return;
    }
    const double *t = c->s->t_s, *ia = c->s->i_a;
    if (c->r1 > 0.0 && k0 > 0 && k0 != c->lag.next)
        lag_catch_up(&c->lag, t, ia, c->tau, WARM_TAUS * c->tau, k0);
    for (size_t j = 0; j < m; j++) {
        if (c->r1 > 0.0)
            lag_advance(&c->lag, t, ia, c->tau, k0 + j);
        use[j] = (unsigned char)trend_row(c, k0 + j, c->lag.i1, x + j * (size_t)p, &y[j]);
    }
}

/* A sample's trend stands for the log when it pins the OCV at both ends to
 * TREND_SAMPLE_CI_V (ctx: the degree). */
static int trend_pinned(void *ctx, const struct fit_result *f)
{
    int degree = *(const int *)ctx;
    double v, se_start, se_end;
    ecm_ocv_at(f, degree, -1.0, &v, &se_start);
    ecm_ocv_at(f, degree, 1.0, &v, &se_end);
    return 1.96 * fmax(se_start, se_end) <= TREND_SAMPLE_CI_V;
}

enum pb_code ecm_ocv_trend(const struct series *s, const double *q_ah, double q_end_ah, int degree,
                           double r0_ohm, double r1_ohm, double tau_s, int robust,
                           const struct ecm_lag_rows *lag_rows, size_t *work,
                           struct fit_result *out, struct pb_error *err)
{
    struct trend_ctx c = {.s = s,
                          .q = q_ah,
                          .q_scale = q_end_ah != 0.0 ? 1.0 / q_end_ah : 0.0,
                          .degree = degree,
                          .r0 = r0_ohm,
                          .r1 = tau_s > 0.0 ? r1_ohm : 0.0,
                          .tau = tau_s,
                          .v_ref = s->v_v[0],
                          .lr = lag_rows && lag_rows->every == fit_sample_every(s->n) ? lag_rows
                                                                                      : NULL};
    /* rows are made in any order (trend_block), so a robust fit of a long
     * log takes its plain start from the even sample, and ends there when
     * the sample pins the trend's ends to TREND_SAMPLE_CI_V */
    enum pb_code rc;
    if (robust) {
        rc = fit_blocks_sampled(s->n, degree + 1, trend_block, &c, sizeof c, trend_pinned, &degree,
                                out, err);
    } else {
        rc = fit_blocks(s->n, degree + 1, trend_block, &c, sizeof c, robust, NULL, out, err);
    }
    if (work)
        *work += out->rows_visited;
    /* the reference voltage back into the constant term */
    out->beta[0] += c.v_ref;
    return rc;
}

void ecm_ocv_at(const struct fit_result *f, int degree, double u, double *v, double *se)
{
    double g[FIT_MAX_P] = {0};
    double p = 1.0;
    for (int j = 0; j <= degree; j++) {
        g[j] = p;
        p *= u;
    }
    double val = 0.0, var = 0.0;
    for (int i = 0; i <= degree; i++) {
        val += g[i] * f->beta[i];
        for (int j = 0; j <= degree; j++)
            var += g[i] * g[j] * f->cov[i][j];
    }
    *v = val;
    *se = sqrt(fmax(var, 0.0));
}
