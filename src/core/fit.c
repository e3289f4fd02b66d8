#include "fit.h"

#include "twin.h"

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_eigen.h>
#include <gsl/gsl_matrix.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define BISQUARE_C 4.685
#define MAD_TO_SIGMA 1.4826
#define EIG_RTOL 1e-11

struct normal_eq {
    double a[FIT_MAX_P][FIT_MAX_P]; /* X'WX, upper triangle filled */
    double b[FIT_MAX_P];            /* X'Wy */
    double yy;                      /* y'Wy */
    double wsum;
    size_t n_used;
    size_t n_low;
};

#define SCALE_SAMPLES 65536      /* residuals kept for the robust scale */
#define FIT_BLOCK FIT_BLOCK_ROWS /* rows made per call */
/* the reweighting iterates on the kept rows when they are at most this
 * fraction of the rows */
#define SUBSAMPLE_RATIO 4
/* the kernels' loops over columns unrolled, so the sums stay in registers */
#define PB_UNROLL _Pragma("GCC unroll 8")

struct scale_sample {
    double *r; /* |residual| of every used row whose index is a multiple of m */
    size_t n, m;
    size_t cap; /* room in r (and in x, y, u) */
    /* the same rows themselves, kept by the plain pass (when not NULL) so
     * the first scale, at the plain fit, needs no pass over every row */
    double *x, *y;
    unsigned char *u; /* and what the row callback said of each */
    size_t nk;
};

/* Rows come in blocks; a row callback is adapted to one. */
struct source {
    fit_block_fn block;
    void *ctx;
    int any_order;   /* block() makes any rows asked for, in any order */
    size_t ctx_size; /* ctx may be copied (0: it may not; a pass is not cut) */
    void *copy;      /* room for that copy, made by part_begin for a long fit */
    fit_row_fn row;  /* when the caller gave rows, not blocks */
    void *row_ctx;
    struct fit_lag1 *lag1; /* the lag-1 moments wanted (NULL: not), made by the first full pass */
    int sample_only;       /* a long log's fit ends with its even sample's (fit_blocks_sampled) */
    fit_stands_fn stands;  /* ... when this says so of it (NULL: always) */
    void *stands_ctx;
};

/* The lag-1 moments of one piece of a pass, with the last row in hand (to
 * pair with the next) and the piece's first row (to pair with the row
 * before the piece, where a pass is cut). */
struct lag_acc {
    struct fit_lag1 m;
    int prev_used;
    double px[FIT_MAX_P], py;
    int first_seen;
    unsigned char first_u;
    double fx[FIT_MAX_P], fy;
};

static inline void lag_pair(const int p, struct fit_lag1 *m, const double *x, double y,
                            const double *px, double py)
{
    m->pyy += y * py;
    PB_UNROLL
    for (int i = 0; i < p; i++) {
        m->pxy[i] += x[i] * py;
        m->pyx[i] += y * px[i];
        PB_UNROLL
        for (int j = 0; j < p; j++)
            m->pxx[i][j] += x[i] * px[j];
    }
}

static inline __attribute__((always_inline)) void
lag_block(const int p, size_t n, const double *restrict x, const double *restrict y,
          const unsigned char *restrict use, struct lag_acc *acc)
{
    if (p < 1 || p > FIT_MAX_P)
        __builtin_unreachable();
    struct fit_lag1 m = acc->m;
    double px[FIT_MAX_P] = {0}, py = acc->py;
    int prev_used = acc->prev_used;
    PB_UNROLL
    for (int i = 0; i < p; i++)
        px[i] = acc->px[i];
    if (!acc->first_seen && n > 0) {
        acc->first_seen = 1;
        acc->first_u = use[0];
        acc->fy = y[0];
        for (int i = 0; i < p; i++)
            acc->fx[i] = x[i];
    }
    for (size_t r = 0; r < n; r++) {
        if (!use[r]) {
            prev_used = 0;
            continue;
        }
        const double *xr = x + r * (size_t)p;
        double yr = y[r];
        m.yy += yr * yr;
        PB_UNROLL
        for (int i = 0; i < p; i++) {
            m.xy[i] += xr[i] * yr;
            PB_UNROLL
            for (int j = i; j < p; j++)
                m.xx[i][j] += xr[i] * xr[j];
        }
        if (prev_used && !(use[r] & FIT_ROW_FIRST))
            lag_pair(p, &m, xr, yr, px, py);
        prev_used = 1;
        py = yr;
        PB_UNROLL
        for (int i = 0; i < p; i++)
            px[i] = xr[i];
    }
    acc->m = m;
    acc->py = py;
    acc->prev_used = prev_used;
    PB_UNROLL
    for (int i = 0; i < p; i++)
        acc->px[i] = px[i];
}

/* lag_block with p made a constant where it is common. */
static void lag_of(int p, size_t n, const double *x, const double *y, const unsigned char *use,
                   struct lag_acc *acc)
{
    switch (p) {
    case 1:
        lag_block(1, n, x, y, use, acc);
        break;
    case 2:
        lag_block(2, n, x, y, use, acc);
        break;
    default:
        lag_block(p, n, x, y, use, acc);
        break;
    }
}

/* b's moments after a's; b's first row paired with a's last where both are
 * in use and b's does not start a run. */
static void lag_join(int p, struct fit_lag1 *into, const struct lag_acc *a, const struct lag_acc *b)
{
    *into = a->m;
    const struct fit_lag1 *m = &b->m;
    into->yy += m->yy;
    into->pyy += m->pyy;
    for (int i = 0; i < p; i++) {
        into->xy[i] += m->xy[i];
        into->pxy[i] += m->pxy[i];
        into->pyx[i] += m->pyx[i];
        for (int j = 0; j < p; j++) {
            into->xx[i][j] += m->xx[i][j];
            into->pxx[i][j] += m->pxx[i][j];
        }
    }
    if (a->prev_used && b->first_seen && b->first_u && !(b->first_u & FIT_ROW_FIRST))
        lag_pair(p, into, b->fx, b->fy, a->px, a->py);
}

double fit_lag1_rho(const struct fit_lag1 *m, const double *beta, int p)
{
    if (!m->have)
        return NAN;
    double s00 = m->yy, s01 = m->pyy;
    for (int i = 0; i < p; i++) {
        s00 -= 2.0 * beta[i] * m->xy[i];
        s01 -= beta[i] * (m->pxy[i] + m->pyx[i]);
        for (int j = 0; j < p; j++) {
            s00 += beta[i] * beta[j] * (i <= j ? m->xx[i][j] : m->xx[j][i]);
            s01 += beta[i] * beta[j] * m->pxx[i][j];
        }
    }
    /* residuals at the rounding of the sums (an exact fit): no correlation
     * can be told from them */
    if (!(s00 > 1e-10 * m->yy))
        return NAN;
    double rho = s01 / s00;
    return rho > 1.0 ? 1.0 : rho < -1.0 ? -1.0 : rho;
}

static void rows_as_block(void *vsrc, size_t k0, size_t m, int p, double *x, double *y,
                          unsigned char *use)
{
    struct source *src = vsrc;
    for (size_t j = 0; j < m; j++)
        use[j] = (unsigned char)src->row(src->row_ctx, k0 + j, x + j * (size_t)p, &y[j]);
}

/* The sums of one block of rows over their first p columns (rows of
 * stride columns each), for a p known at compile time where it is inlined
 * (the kernels below): no call, no division per row, the sums in
 * registers. */
static inline __attribute__((always_inline)) void
block_sums(const int p, const int stride, size_t m, const double *restrict x,
           const double *restrict y, const unsigned char *restrict use, const double *beta,
           double scale, struct scale_sample *ss, size_t *ss_left, struct normal_eq *ne)
{
    if (p < 1 || p > FIT_MAX_P)
        __builtin_unreachable(); /* part_begin checked it; lets the unrolled loops end */
    double a[FIT_MAX_P][FIT_MAX_P] = {{0}}, b[FIT_MAX_P] = {0};
    PB_UNROLL
    for (int i = 0; i < p; i++) {
        b[i] = ne->b[i];
        PB_UNROLL
        for (int j = i; j < p; j++)
            a[i][j] = ne->a[i][j];
    }
    double yy = ne->yy, wsum = ne->wsum;
    size_t n_used = ne->n_used, n_low = ne->n_low;
    double inv_cs = scale > 0.0 ? 1.0 / (BISQUARE_C * scale) : 0.0;
    size_t left = ss ? *ss_left : 0; /* a local: not stored back on every row */
    for (size_t r = 0; r < m; r++) {
        int u = use[r];
        /* the sample is of rows by index (so the halves of a cut pass take
         * the same rows as one whole pass), those in use */
        int take = ss && --left == 0;
        if (take)
            left = ss->m;
        if (!u)
            continue;
        const double *xr = x + r * (size_t)stride;
        double yr = y[r];
        double w = 1.0;
        if (!beta && take) {
            if (ss->nk < ss->cap) {
                PB_UNROLL
                for (int j = 0; j < p; j++)
                    ss->x[ss->nk * (size_t)p + (size_t)j] = xr[j];
                ss->u[ss->nk] = (unsigned char)u;
                ss->y[ss->nk++] = yr;
            }
        }
        if (beta) {
            double res = yr;
            PB_UNROLL
            for (int j = 0; j < p; j++)
                res -= xr[j] * beta[j];
            if (take && ss->n < ss->cap)
                ss->r[ss->n++] = fabs(res);
            if (scale > 0.0 && !(u & FIT_ROW_KEEP)) {
                double v = res * inv_cs;
                w = fabs(v) < 1.0 ? (1.0 - v * v) * (1.0 - v * v) : 0.0;
                n_low += w < 0.5;
            }
        }
        n_used++;
        if (w == 0.0)
            continue;
        PB_UNROLL
        for (int i = 0; i < p; i++) {
            double wx = w * xr[i];
            PB_UNROLL
            for (int j = i; j < p; j++)
                a[i][j] += wx * xr[j];
            b[i] += wx * yr;
        }
        yy += w * yr * yr;
        wsum += w;
    }
    PB_UNROLL
    for (int i = 0; i < p; i++) {
        ne->b[i] = b[i];
        PB_UNROLL
        for (int j = i; j < p; j++)
            ne->a[i][j] = a[i][j];
    }
    ne->yy = yy;
    ne->wsum = wsum;
    ne->n_used = n_used;
    ne->n_low = n_low;
    if (ss)
        *ss_left = left;
}

/* block_sums with p (and the rows' stride) made constants where they are
 * common: rows of p columns, or one column of rows of two (a shared pass,
 * fit_part_share). */
static void sums_of(int p, int stride, size_t m, const double *x, const double *y,
                    const unsigned char *use, const double *beta, double scale,
                    struct scale_sample *ss, size_t *ss_left, struct normal_eq *ne)
{
    if (p == 1 && stride == 2) {
        block_sums(1, 2, m, x, y, use, beta, scale, ss, ss_left, ne);
        return;
    }
    if (p != stride) {
        block_sums(p, stride, m, x, y, use, beta, scale, ss, ss_left, ne);
        return;
    }
    switch (p) {
    case 1:
        block_sums(1, 1, m, x, y, use, beta, scale, ss, ss_left, ne);
        break;
    case 2:
        block_sums(2, 2, m, x, y, use, beta, scale, ss, ss_left, ne);
        break;
    case 4:
        block_sums(4, 4, m, x, y, use, beta, scale, ss, ss_left, ne);
        break;
    default:
        block_sums(p, p, m, x, y, use, beta, scale, ss, ss_left, ne);
        break;
    }
}

/* One fit's sums in a pass: over the first p columns of the rows made (all
 * of them, or the first of a wider fit's rows in a shared pass). */
struct pass_sums {
    int p;
    const double *beta; /* NULL: the plain sums */
    double scale;
    struct scale_sample *ss; /* NULL: no sample */
    size_t ss_left;          /* rows to the next sampled one, counting it */
    struct normal_eq ne;
};

#define PASS_FITS 2 /* fits summed in one pass at most (fit_part_share) */

/* One piece of a pass: rows [k0, k1) of p columns made with ctx (the
 * source's own, or a copy of it for the second half of a cut pass), summed
 * for nfit fits. */
struct half {
    const struct source *src;
    void *ctx;
    size_t k0, k1;
    int p;
    int nfit;
    struct pass_sums fit[PASS_FITS];
    struct lag_acc *lag; /* NULL: no lag-1 moments */
};

static void half_pass(void *vh)
{
    struct half *h = vh;
    double x[FIT_BLOCK * FIT_MAX_P], y[FIT_BLOCK];
    unsigned char use[FIT_BLOCK];
    for (int f = 0; f < h->nfit; f++)
        memset(&h->fit[f].ne, 0, sizeof h->fit[f].ne);
    for (size_t k0 = h->k0; k0 < h->k1; k0 += FIT_BLOCK) {
        size_t m = h->k1 - k0 < FIT_BLOCK ? h->k1 - k0 : FIT_BLOCK;
        h->src->block(h->ctx, k0, m, h->p, x, y, use);
        for (int f = 0; f < h->nfit; f++) {
            struct pass_sums *ps = &h->fit[f];
            sums_of(ps->p, h->p, m, x, y, use, ps->beta, ps->scale, ps->ss, &ps->ss_left, &ps->ne);
        }
        if (h->lag)
            lag_of(h->p, m, x, y, use, h->lag);
    }
}

/* into += from (the second half's sums after the first's) */
static void add_sums(struct normal_eq *into, const struct normal_eq *from, int p)
{
    for (int i = 0; i < p; i++) {
        into->b[i] += from->b[i];
        for (int j = i; j < p; j++)
            into->a[i][j] += from->a[i][j];
    }
    into->yy += from->yy;
    into->wsum += from->wsum;
    into->n_used += from->n_used;
    into->n_low += from->n_low;
}

/* Sampled row indices below h (multiples of m), at most cap: the first
 * half's room in the sample of a cut pass. */
static size_t marks_below(size_t h, size_t m, size_t cap)
{
    size_t k = (h + m - 1) / m;
    return k < cap ? k : cap;
}

/* The kept rows of a cut pass closed up: the second half's nk rows, made
 * from row from on, moved to follow the first half's, from row to on. */
static void close_up_rows(struct scale_sample *ss, int p, size_t to, size_t from, size_t nk)
{
    memmove(ss->x + to * (size_t)p, ss->x + from * (size_t)p, nk * (size_t)p * sizeof *ss->x);
    memmove(ss->y + to, ss->y + from, nk * sizeof *ss->y);
    memmove(ss->u + to, ss->u + from, nk);
}

/* One pass over the rows of p columns, summed for nfit fits (each over its
 * first fits[f].p columns): the normal equations, weighted by Tukey's
 * bisquare at the fit's scale when its beta is not NULL; a sample of the
 * |residuals| at beta (or, without beta, the rows themselves) for the next
 * scale when its ss is not NULL. A long pass of a source that may be copied
 * is cut in two (twin.h), the second half run on a copy, beside the first
 * when a core is free; its sample is put after the first's, so the sample
 * is the one a whole pass takes. */
static void run_passes(size_t n, int p, const struct source *src, int nfit, struct pass_sums *fits)
{
    for (int f = 0; f < nfit; f++) {
        struct scale_sample *ss = fits[f].ss;
        if (ss && fits[f].beta)
            ss->n = 0;
        if (ss && !fits[f].beta)
            ss->nk = 0;
    }
    size_t h = src->copy ? twin_split(n) : 0;
    /* the lag-1 moments on the first pass over every row */
    struct lag_acc lag_room[2], *lag = NULL;
    if (src->lag1 && !src->lag1->have) {
        memset(lag_room, 0, sizeof lag_room);
        lag = lag_room;
    }
    struct half a = {
        .src = src, .ctx = src->ctx, .k1 = h ? h : n, .p = p, .nfit = nfit, .lag = lag};
    for (int f = 0; f < nfit; f++) {
        a.fit[f] = fits[f];
        a.fit[f].ss_left = 1;
    }
    if (h == 0) {
        half_pass(&a);
        for (int f = 0; f < nfit; f++)
            fits[f].ne = a.fit[f].ne;
        if (lag) {
            *src->lag1 = lag[0].m;
            src->lag1->have = 1;
        }
        return;
    }
    memcpy(src->copy, src->ctx, src->ctx_size);
    struct half b = a;
    b.ctx = src->copy;
    b.k0 = h;
    b.k1 = n;
    b.lag = lag ? lag + 1 : NULL;
    struct scale_sample sa[PASS_FITS], sb[PASS_FITS];
    size_t marks[PASS_FITS] = {0}; /* sampled indices below h: the first half's room */
    for (int f = 0; f < nfit; f++) {
        struct scale_sample *ss = fits[f].ss;
        if (!ss)
            continue;
        marks[f] = marks_below(h, ss->m, ss->cap);
        sa[f] = *ss;
        sa[f].cap = marks[f];
        sb[f] = *ss;
        sb[f].cap = ss->cap - marks[f];
        sb[f].n = sb[f].nk = 0;
        if (fits[f].beta) {
            sb[f].r = ss->r + marks[f];
        } else {
            sb[f].x = ss->x + marks[f] * (size_t)fits[f].p;
            sb[f].y = ss->y + marks[f];
            sb[f].u = ss->u + marks[f];
        }
        a.fit[f].ss = &sa[f];
        b.fit[f].ss = &sb[f];
        b.fit[f].ss_left = marks[f] * ss->m - h + 1; /* the first multiple of m at or after h */
    }
    twin_run(half_pass, &a, half_pass, &b);
    for (int f = 0; f < nfit; f++) {
        struct scale_sample *ss = fits[f].ss;
        fits[f].ne = a.fit[f].ne;
        add_sums(&fits[f].ne, &b.fit[f].ne, fits[f].p);
        if (ss && fits[f].beta) {
            memmove(ss->r + sa[f].n, sb[f].r, sb[f].n * sizeof *sb[f].r);
            ss->n = sa[f].n + sb[f].n;
        } else if (ss) {
            close_up_rows(ss, fits[f].p, sa[f].nk, marks[f], sb[f].nk);
            ss->nk = sa[f].nk + sb[f].nk;
        }
    }
    if (lag) {
        lag_join(p, src->lag1, &lag[0], &lag[1]);
        src->lag1->have = 1;
    }
}

/* run_passes for one fit. */
static void run_pass(size_t n, int p, const struct source *src, const double *beta, double scale,
                     struct scale_sample *ss, struct normal_eq *ne)
{
    struct pass_sums f = {.p = p, .beta = beta, .scale = scale, .ss = ss};
    run_passes(n, p, src, 1, &f);
    *ne = f.ne;
}

/* run_pass over the rows the plain pass kept (ss->x, ss->y, ss->u) alone:
 * the weighted sums of the subsample in ne, and |residual| at beta of every
 * kept row in ss->r, the same rows a full pass samples for the scale. */
static void kept_pass(int p, struct scale_sample *ss, const double *beta, double scale,
                      struct normal_eq *ne)
{
    struct scale_sample every = {.r = ss->r, .m = 1, .cap = SCALE_SAMPLES};
    size_t left = 1;
    memset(ne, 0, sizeof *ne);
    sums_of(p, p, ss->nk, ss->x, ss->y, ss->u, beta, scale, &every, &left, ne);
    ss->n = every.n;
}

/* The kept rows of [k0, k1): every row whose index is a multiple of m,
 * those the block uses, into x, y, u (room for cap). */
struct sample_half {
    const struct source *src;
    void *ctx;
    size_t k0, k1, m;
    int p;
    double *x, *y;
    unsigned char *u;
    size_t nk, cap, asked;
};

static void sample_half_run(void *vh)
{
    struct sample_half *h = vh;
    double x[FIT_MAX_P], y;
    unsigned char use;
    const int p = h->p;
    for (size_t k = (h->k0 + h->m - 1) / h->m * h->m; k < h->k1 && h->nk < h->cap;
         k += h->m, h->asked++) {
        h->src->block(h->ctx, k, 1, p, x, &y, &use);
        if (!use)
            continue;
        memcpy(h->x + h->nk * (size_t)p, x, (size_t)p * sizeof *x);
        h->u[h->nk] = use;
        h->y[h->nk++] = y;
    }
}

/* The kept rows (every m-th row, those the block uses) made without a
 * pass over the others, for rows made in any order; their plain sums in
 * ne. Returns the rows asked for. A long log's rows are made in two
 * halves as run_pass cuts a pass (the second half's after the first's:
 * the same rows in the same order either way). */
static size_t sample_rows(size_t n, int p, const struct source *src, struct scale_sample *ss,
                          struct normal_eq *ne)
{
    size_t h = src->copy ? twin_split(n) : n;
    size_t marks = marks_below(h, ss->m, SCALE_SAMPLES); /* all of a whole pass's */
    struct sample_half a = {.src = src,
                            .ctx = src->ctx,
                            .k1 = h,
                            .m = ss->m,
                            .p = p,
                            .x = ss->x,
                            .y = ss->y,
                            .u = ss->u,
                            .cap = marks};
    if (h < n) {
        memcpy(src->copy, src->ctx, src->ctx_size);
        struct sample_half b = {.src = src,
                                .ctx = src->copy,
                                .k0 = h,
                                .k1 = n,
                                .m = ss->m,
                                .p = p,
                                .x = ss->x + marks * (size_t)p,
                                .y = ss->y + marks,
                                .u = ss->u + marks,
                                .cap = SCALE_SAMPLES - marks};
        twin_run(sample_half_run, &a, sample_half_run, &b);
        close_up_rows(ss, p, a.nk, marks, b.nk);
        a.nk += b.nk;
        a.asked += b.asked;
    } else {
        sample_half_run(&a);
    }
    ss->nk = a.nk;
    size_t left = 1;
    memset(ne, 0, sizeof *ne);
    sums_of(p, p, ss->nk, ss->x, ss->y, ss->u, NULL, 0.0, NULL, &left, ne);
    return a.asked;
}

/* Largest move of beta from prev, in standard errors at the given scale
 * (inv the unscaled inverse of the last solve). */
static double change_in_se(int p, const double *beta, const double *prev,
                           double inv[FIT_MAX_P][FIT_MAX_P], double scale)
{
    double change = 0.0;
    for (int j = 0; j < p; j++) {
        double se = scale * sqrt(fmax(inv[j][j], 0.0));
        change = fmax(change, fabs(beta[j] - prev[j]) / (se + 1e-300));
    }
    return change;
}

/* Solves the normal equations; fills beta, the unscaled inverse in inv and
 * the rank. Returns -1 when GSL fails. */
static int solve(const struct normal_eq *ne, int p, double *beta, double inv[FIT_MAX_P][FIT_MAX_P],
                 int *rank)
{
    double d[FIT_MAX_P];
    gsl_matrix *a = gsl_matrix_alloc((size_t)p, (size_t)p);
    gsl_matrix *evec = gsl_matrix_alloc((size_t)p, (size_t)p);
    gsl_vector *eval = gsl_vector_alloc((size_t)p);
    gsl_eigen_symmv_workspace *ws = gsl_eigen_symmv_alloc((size_t)p);
    int rc = -1;
    if (!a || !evec || !eval || !ws)
        goto cleanup;
    for (int i = 0; i < p; i++)
        d[i] = ne->a[i][i] > 0.0 ? 1.0 / sqrt(ne->a[i][i]) : 0.0;
    for (int i = 0; i < p; i++)
        for (int j = 0; j < p; j++) {
            double v = i <= j ? ne->a[i][j] : ne->a[j][i];
            gsl_matrix_set(a, (size_t)i, (size_t)j, v * d[i] * d[j]);
        }
    if (gsl_eigen_symmv(a, eval, evec, ws) != 0)
        goto cleanup;
    double lmax = 0.0;
    for (int i = 0; i < p; i++)
        lmax = fmax(lmax, gsl_vector_get(eval, (size_t)i));
    *rank = 0;
    for (int i = 0; i < p; i++)
        for (int j = 0; j < p; j++)
            inv[i][j] = 0.0;
    for (int m = 0; m < p; m++) {
        double l = gsl_vector_get(eval, (size_t)m);
        if (!(l > EIG_RTOL * lmax))
            continue;
        (*rank)++;
        for (int i = 0; i < p; i++)
            for (int j = 0; j < p; j++)
                inv[i][j] += gsl_matrix_get(evec, (size_t)i, (size_t)m) *
                             gsl_matrix_get(evec, (size_t)j, (size_t)m) / l;
    }
    for (int i = 0; i < p; i++)
        for (int j = 0; j < p; j++)
            inv[i][j] *= d[i] * d[j];
    for (int i = 0; i < p; i++) {
        beta[i] = 0.0;
        for (int j = 0; j < p; j++)
            beta[i] += inv[i][j] * ne->b[j];
    }
    rc = 0;
cleanup:
    gsl_eigen_symmv_free(ws);
    gsl_vector_free(eval);
    gsl_matrix_free(evec);
    gsl_matrix_free(a);
    return rc;
}

/* Moves the values of a[lo..hi) that are below pivot (below_or_equal: at
 * most pivot) to its front, in one walk without a branch per value (a
 * partition's branches are coin flips on residuals: mispredicted half the
 * time); returns where the rest starts. */
static size_t partition_front(double *a, size_t lo, size_t hi, double pivot, int below_or_equal)
{
    size_t st = lo;
    if (below_or_equal) {
        for (size_t i = lo; i < hi; i++) {
            double v = a[i];
            a[i] = a[st];
            a[st] = v;
            st += v <= pivot;
        }
    } else {
        for (size_t i = lo; i < hi; i++) {
            double v = a[i];
            a[i] = a[st];
            a[st] = v;
            st += v < pivot;
        }
    }
    return st;
}

/* The k-th smallest of a[0..n) (k < n), reordering a so that no value
 * before k is above it and none after it below: quickselect, the pivot the
 * median of three. A pivot that is its range's least value (runs of equal
 * values: a log's sampling intervals are mostly one value) takes its equals
 * to the front in one more walk, so equal runs cost one pass, not a
 * quadratic walk (gsl_stats_select took 2 ms per 9,000 equal intervals). */
static double select_kth(double *a, size_t n, size_t k)
{
    size_t lo = 0, hi = n; /* the answer is in a[lo..hi) */
    while (hi - lo > 1) {
        double x = a[lo], y = a[lo + (hi - lo) / 2], z = a[hi - 1];
        double pivot = x < y ? (y < z ? y : (x < z ? z : x)) : (x < z ? x : (y < z ? z : y));
        size_t lt = partition_front(a, lo, hi, pivot, 0); /* a[lo..lt) < pivot */
        if (k < lt) {
            hi = lt;
            continue;
        }
        if (lt > lo) {
            lo = lt;
            continue;
        }
        /* nothing below the pivot: its equals first */
        size_t eq = partition_front(a, lo, hi, pivot, 1);
        if (k < eq)
            return pivot;
        lo = eq;
    }
    return a[lo];
}

double fit_median(double *a, size_t n)
{
    if (n == 0)
        return 0.0; /* as gsl_stats_median did: a one-sample log has no interval */
    return fit_median_above(a, n, 0);
}

double fit_median_above(double *a, size_t n, size_t from)
{
    size_t m = n - from, lhs = from + (m - 1) / 2, rhs = from + m / 2;
    double m_lhs = select_kth(a, n, lhs);
    if (lhs == rhs)
        return m_lhs;
    /* the next order statistic: the smallest of what lies above lhs */
    double next = a[rhs];
    for (size_t k = rhs + 1; k < n; k++)
        next = a[k] < next ? a[k] : next;
    return 0.5 * (m_lhs + next);
}

/* The fit's figures from its weighted sums, solution and inverse. */
static void fill_result(const struct normal_eq *ne, int p, const double *beta,
                        double inv[FIT_MAX_P][FIT_MAX_P], int rank, struct fit_result *out)
{
    /* residual sum of squares from the sums: y'Wy - beta'X'Wy */
    double rss = ne->yy;
    for (int j = 0; j < p; j++)
        rss -= beta[j] * ne->b[j];
    if (rss < 0.0)
        rss = 0.0;
    double dof = ne->wsum - rank;
    out->rank = rank;
    out->rss = rss;
    out->dof = dof;
    out->n_used = ne->n_used;
    out->sigma = dof > 0 ? sqrt(rss / dof) : 0.0;
    double s2 = out->sigma * out->sigma;
    for (int i = 0; i < p; i++) {
        out->beta[i] = beta[i];
        for (int j = 0; j < p; j++)
            out->cov[i][j] = s2 * inv[i][j];
    }
}

/* A fit under way: what fit_core does, cut where its passes over every
 * row begin (part_begin, then part_end), so that a fit over the same rows
 * may make its first such pass with another's (fit_part_share). An error
 * is kept in rc and err, and part_end returns it. */
struct fit_part {
    size_t n;
    int p, robust;
    struct source src; /* its copy room (src.copy) owned here */
    const struct fit_result *start;
    enum pb_code rc;
    struct pb_error err;
    struct normal_eq ne, keep; /* keep: the sums before the pass under way */
    double inv[FIT_MAX_P][FIT_MAX_P];
    double beta[FIT_MAX_P], prev[FIT_MAX_P];
    int rank;
    struct scale_sample ss;
    double scale, limit;
    size_t visited;
    int sub, sample_fit, it, iters, left, ended;
    struct fit_result out;
};

static void free_sample(struct scale_sample *ss)
{
    free(ss->r);
    free(ss->x);
    free(ss->y);
    free(ss->u);
    ss->r = ss->x = ss->y = NULL;
    ss->u = NULL;
}

/* The fit up to its passes over every row: the plain fit (of the even
 * sample, or a pass), and for a long robust fit the reweighting on the
 * kept rows. */
static void part_begin(struct fit_part *fp, size_t n, int p, const struct source *src, int robust,
                       const struct fit_result *start)
{
    memset(fp, 0, sizeof *fp);
    fp->n = n;
    fp->p = p;
    fp->robust = robust;
    fp->src = *src;
    if (src->ctx == src) /* a row callback's adapter, whose context is its source */
        fp->src.ctx = &fp->src;
    fp->src.copy = NULL;
    fp->start = start;
    fp->ss = (struct scale_sample){.m = fit_sample_every(n), .cap = SCALE_SAMPLES};
    fp->it = 1;
    fp->left = 15;
    fp->limit = 0.05; /* converged: no move beyond this many standard errors */
    if (fp->src.ctx_size && n >= TWIN_MIN_ROWS && !(fp->src.copy = malloc(fp->src.ctx_size))) {
        fp->rc = pb_error_set(&fp->err, PB_ENOMEM, "out of memory");
        return;
    }
    if (p < 1 || p > FIT_MAX_P) {
        fp->rc = pb_error_set(&fp->err, PB_ENUMERIC, "fit: %d columns is out of range", p);
        return;
    }
    fp->out.p = p;
    struct scale_sample *ss = &fp->ss;
    struct normal_eq *ne = &fp->ne;
    src = &fp->src;
    int sampled = 0; /* the plain fit is the kept rows' (sample_rows) */
    if (start) {
        memcpy(fp->beta, start->beta, sizeof fp->beta);
        fp->scale = start->scale;
    } else {
        if (robust) {
            ss->x = malloc(SCALE_SAMPLES * (size_t)p * sizeof *ss->x);
            ss->y = malloc(SCALE_SAMPLES * sizeof *ss->y);
            ss->u = malloc(SCALE_SAMPLES);
        }
        int keep_rows = ss->x && ss->y && ss->u;
        size_t asked = 0;
        sampled = keep_rows && src->any_order && n >= SUBSAMPLE_RATIO * SCALE_SAMPLES;
        if (sampled) {
            asked = sample_rows(n, p, src, ss, ne);
            fp->visited += asked;
        } else {
            run_pass(n, p, src, NULL, 0.0, keep_rows ? ss : NULL, ne);
            fp->visited += n;
        }
        if (!keep_rows)
            free_sample(ss);
        if (ne->n_used <= (size_t)p || solve(ne, p, fp->beta, fp->inv, &fp->rank) != 0) {
            free_sample(ss);
            if (ne->n_used <= (size_t)p)
                fp->rc = pb_error_set(&fp->err, PB_ENUMERIC, "fit: %zu rows for %d unknowns",
                                      ne->n_used, p);
            else
                fp->rc = pb_error_set(&fp->err, PB_ENUMERIC, "fit: eigensolver failed");
            return;
        }
        fp->out.rss_plain = ne->yy;
        for (int j = 0; j < p; j++)
            fp->out.rss_plain -= fp->beta[j] * ne->b[j];
        fp->out.rss_plain = fmax(fp->out.rss_plain, 0.0);
        if (sampled) /* the sample's, scaled to every row */
            fp->out.rss_plain *= (double)n / (double)asked;
    }
    if (!robust)
        return;
    ss->r = malloc(SCALE_SAMPLES * sizeof *ss->r);
    if (!ss->r) {
        free_sample(ss);
        fp->rc = pb_error_set(&fp->err, PB_ENOMEM, "out of memory");
        return;
    }
    /* Many rows: the reweighting iterates on the rows the plain pass kept
     * (an even sample of at most SCALE_SAMPLES), then one pass over every
     * row weights them at the subsample's fit and scale. Full passes go on
     * only when that pass moves a coefficient by more than the subsample's
     * own sampling error allows. The scale is the same either way: a full
     * pass samples its residuals at these very rows. */
    fp->sub =
        ss->x && ss->nk > (size_t)(4 * p) && (sampled || ne->n_used >= SUBSAMPLE_RATIO * ss->nk);
    if (!fp->sub)
        return;
    double rows = sampled ? (double)n : (double)ne->n_used;
    double y_rms = sqrt(ne->yy / (double)ne->n_used);
    struct normal_eq sne;
    int solved = 0; /* beta is the solution of sne */
    for (; fp->it <= 15; fp->it++) {
        double prev[FIT_MAX_P];
        memcpy(prev, fp->beta, sizeof prev);
        kept_pass(p, ss, fp->beta, fp->scale, &sne);
        fp->visited += ss->nk;
        double next = MAD_TO_SIGMA * fit_median(ss->r, ss->n);
        if (!(next > 1e-12 * y_rms))
            break; /* an exact fit: at the first pass, the plain fit stands */
        if (fp->scale > 0.0) {
            if (sne.n_used <= (size_t)p || sne.wsum <= p ||
                solve(&sne, p, fp->beta, fp->inv, &fp->rank) != 0) {
                memcpy(fp->beta, prev, sizeof prev);
                solved = 0;
                break;
            }
            fp->iters++;
            solved = 1;
            if (change_in_se(p, fp->beta, prev, fp->inv, next) < 0.05) {
                fp->scale = next;
                break;
            }
        }
        fp->scale = next;
    }
    if (src->sample_only && sampled && solved && fp->scale > 0.0) {
        /* the sample's fit, as it would be returned, for the caller to
         * judge; a fit it does not take goes on to the passes over every
         * row (fit_blocks_any_order's) */
        struct fit_result judged = fp->out;
        fill_result(&sne, p, fp->beta, fp->inv, fp->rank, &judged);
        if (!src->stands || src->stands(src->stands_ctx, &judged)) {
            *ne = sne;
            fp->sample_fit = 1;
        }
    }
    /* the subsample's standard errors are sqrt(n / kept) times the full data's */
    fp->limit = 3.0 * sqrt(rows / (double)ss->nk);
    fp->it = 2; /* the full passes below start weighted */
    if (sampled && !(fp->scale > 0.0)) {
        /* an exact fit: the plain fit of every row after all */
        run_pass(n, p, src, NULL, 0.0, NULL, ne);
        fp->visited += n;
        if (ne->n_used <= (size_t)p || solve(ne, p, fp->beta, fp->inv, &fp->rank) != 0) {
            free_sample(ss);
            fp->rc =
                pb_error_set(&fp->err, PB_ENUMERIC, "fit: %zu rows for %d unknowns", ne->n_used, p);
        }
    }
}

/* Whether the reweighting goes on: another pass, each weighting by the
 * scale of the previous pass's residuals and sampling its own (at
 * convergence the two agree). */
static int part_going(const struct fit_part *fp)
{
    return fp->rc == PB_OK && fp->robust && !fp->ended && !fp->sample_fit &&
           (!fp->sub || fp->scale > 0.0) && fp->left > 0;
}

/* ... and that its next pass is over every row (not the first scale's,
 * which the kept rows give). */
static int part_due(const struct fit_part *fp)
{
    return part_going(fp) && !(fp->it == 1 && fp->ss.x);
}

static void part_before(struct fit_part *fp)
{
    memcpy(fp->prev, fp->beta, sizeof fp->prev);
    fp->keep = fp->ne;
}

/* A pass of the reweighting (part_before first, part_after next). */
static void part_pass(struct fit_part *fp)
{
    struct scale_sample *ss = &fp->ss;
    if (!part_due(fp)) {
        /* the scale at the plain fit from the kept rows: the same residuals
         * a pass at weight 1 would sample, and that pass's sums are the
         * plain pass's */
        for (size_t k = 0; k < ss->nk; k++) {
            double res = ss->y[k];
            for (int j = 0; j < fp->p; j++)
                res -= ss->x[k * (size_t)fp->p + (size_t)j] * fp->beta[j];
            ss->r[k] = fabs(res);
        }
        ss->n = ss->nk;
        fp->visited += ss->nk;
    } else {
        run_pass(fp->n, fp->p, &fp->src, fp->beta, fp->scale, ss, &fp->ne);
        fp->visited += fp->n;
    }
}

/* The new scale, fit and convergence after a pass. */
static void part_after(struct fit_part *fp)
{
    const int p = fp->p;
    struct normal_eq *ne = &fp->ne;
    double next = MAD_TO_SIGMA * fit_median(fp->ss.r, fp->ss.n);
    /* an exact fit (residuals at rounding level): nothing to reweight */
    double y_rms = ne->n_used ? sqrt(fmax(ne->yy, fp->keep.yy) / (double)ne->n_used) : 0.0;
    if (!(next > 1e-12 * y_rms)) {
        if (fp->scale > 0.0)
            *ne = fp->keep;
        fp->ended = 1;
        return;
    }
    if (fp->scale > 0.0) {
        if (ne->n_used <= (size_t)p || ne->wsum <= p ||
            solve(ne, p, fp->beta, fp->inv, &fp->rank) != 0) {
            /* reweighting cannot leave fewer rows than unknowns: keep the last fit */
            memcpy(fp->beta, fp->prev, sizeof fp->prev);
            *ne = fp->keep;
            solve(ne, p, fp->beta, fp->inv, &fp->rank);
            fp->ended = 1;
            return;
        }
        fp->iters++;
        /* converged when no coefficient moves by more than a twentieth of
         * its own standard error: far below what is reported, and IRLS on
         * a misfitting model creeps */
        if (change_in_se(p, fp->beta, fp->prev, fp->inv, next) < fp->limit) {
            fp->ended = 1;
            return;
        }
        fp->limit = 0.05;
    }
    fp->scale = next;
    fp->left--;
    fp->it++;
}

/* The rest of the reweighting, then the fit's figures into out; frees what
 * the part holds (not the part). */
static enum pb_code part_end(struct fit_part *fp, struct fit_result *out, struct pb_error *err)
{
    while (part_going(fp)) {
        part_before(fp);
        part_pass(fp);
        part_after(fp);
    }
    if (fp->rc == PB_OK) {
        if (fp->robust) {
            fp->out.iterations = fp->iters;
            fp->out.n_downweighted = fp->ne.n_low;
            fp->out.scale = fp->scale;
        }
        if (fp->start && (!fp->robust || fp->ne.n_used <= (size_t)fp->p))
            fp->rc = pb_error_set(&fp->err, PB_ENUMERIC, "fit: a warm start needs a robust fit");
        else if (fp->start) /* the start's plain residual, scaled from its rows to these */
            fp->out.rss_plain =
                fp->start->rss_plain * (double)fp->ne.n_used / (double)fp->start->n_used;
    }
    if (fp->rc == PB_OK) {
        fp->out.rows_visited = fp->visited;
        fill_result(&fp->ne, fp->p, fp->beta, fp->inv, fp->rank, &fp->out);
    }
    free_sample(&fp->ss);
    free(fp->src.copy);
    fp->src.copy = NULL;
    *out = fp->out;
    if (fp->rc != PB_OK && err)
        *err = fp->err;
    return fp->rc;
}

/* A whole fit (both parts). */
static enum pb_code fit_core(size_t n, int p, struct source *src, int robust,
                             const struct fit_result *start, struct fit_result *out,
                             struct pb_error *err)
{
    struct fit_part fp;
    part_begin(&fp, n, p, src, robust, start);
    return part_end(&fp, out, err);
}

/* The source of a robust fit of rows made in any order (fit_blocks_any_order
 * and fit_part_begin), its lag-1 moments (when wanted) not yet made. */
static struct source any_order_source(fit_block_fn block, void *ctx, size_t ctx_size,
                                      struct fit_lag1 *lag1)
{
    if (lag1)
        lag1->have = 0;
    return (struct source){
        .block = block, .ctx = ctx, .any_order = 1, .ctx_size = ctx_size, .lag1 = lag1};
}

struct fit_part *fit_part_begin(size_t n, int p, fit_block_fn block, void *ctx, size_t ctx_size,
                                struct fit_lag1 *lag1)
{
    struct fit_part *fp = malloc(sizeof *fp);
    if (!fp)
        return NULL;
    struct source src = any_order_source(block, ctx, ctx_size, lag1);
    part_begin(fp, n, p, &src, 1, NULL);
    return fp;
}

int fit_part_due(const struct fit_part *part)
{
    return part && part_due(part);
}

void fit_part_share(struct fit_part *narrow, struct fit_part *wide)
{
    struct fit_lag1 *m = narrow ? narrow->src.lag1 : NULL, *w = wide ? wide->src.lag1 : NULL;
    /* the narrow fit's lag-1 moments, when it still wants them, come from
     * the wide's made in this pass (their first columns) */
    int wants = m && !m->have;
    if (!(fit_part_due(narrow) && fit_part_due(wide) && narrow->n == wide->n &&
          narrow->p <= wide->p && (!wants || (w && !w->have))))
        return;
    part_before(narrow);
    part_before(wide);
    struct pass_sums f[2] = {
        {.p = narrow->p, .beta = narrow->beta, .scale = narrow->scale, .ss = &narrow->ss},
        {.p = wide->p, .beta = wide->beta, .scale = wide->scale, .ss = &wide->ss}};
    run_passes(wide->n, wide->p, &wide->src, 2, f);
    narrow->ne = f[0].ne;
    wide->ne = f[1].ne;
    wide->visited += wide->n; /* the rows were made once */
    if (wants && m != w)
        *m = *w;
    part_after(narrow);
    part_after(wide);
}

void fit_part_free(struct fit_part *part)
{
    if (!part)
        return;
    free_sample(&part->ss);
    free(part->src.copy);
    free(part);
}

enum pb_code fit_part_end(struct fit_part *part, struct fit_result *out, struct pb_error *err)
{
    if (!part) {
        memset(out, 0, sizeof *out);
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    }
    enum pb_code rc = part_end(part, out, err);
    free(part);
    return rc;
}

enum pb_code fit_linear(size_t n, int p, fit_row_fn row, void *ctx, int robust,
                        struct fit_result *out, struct pb_error *err)
{
    struct source src = {.block = rows_as_block, .row = row, .row_ctx = ctx};
    src.ctx = &src;
    return fit_core(n, p, &src, robust, NULL, out, err);
}

enum pb_code fit_blocks(size_t n, int p, fit_block_fn block, void *ctx, size_t ctx_size, int robust,
                        struct fit_lag1 *lag1, struct fit_result *out, struct pb_error *err)
{
    struct source src = {.block = block, .ctx = ctx, .ctx_size = ctx_size, .lag1 = lag1};
    if (lag1)
        lag1->have = 0;
    return fit_core(n, p, &src, robust, NULL, out, err);
}

enum pb_code fit_blocks_any_order(size_t n, int p, fit_block_fn block, void *ctx, size_t ctx_size,
                                  struct fit_lag1 *lag1, struct fit_result *out,
                                  struct pb_error *err)
{
    struct source src = any_order_source(block, ctx, ctx_size, lag1);
    return fit_core(n, p, &src, 1, NULL, out, err);
}

enum pb_code fit_blocks_sampled(size_t n, int p, fit_block_fn block, void *ctx, size_t ctx_size,
                                fit_stands_fn stands, void *stands_ctx, struct fit_result *out,
                                struct pb_error *err)
{
    struct source src = any_order_source(block, ctx, ctx_size, NULL);
    src.sample_only = 1;
    src.stands = stands;
    src.stands_ctx = stands_ctx;
    return fit_core(n, p, &src, 1, NULL, out, err);
}

enum pb_code fit_linear_from(size_t n, int p, fit_row_fn row, void *ctx,
                             const struct fit_result *start, struct fit_result *out,
                             struct pb_error *err)
{
    struct source src = {.block = rows_as_block, .row = row, .row_ctx = ctx};
    src.ctx = &src;
    return fit_core(n, p, &src, 1, start, out, err);
}

enum pb_code fit_solve_sums(const struct fit_sums *sums, int p, struct fit_result *out,
                            struct pb_error *err)
{
    struct normal_eq ne = {0};
    double inv[FIT_MAX_P][FIT_MAX_P], beta[FIT_MAX_P];
    int rank = 0;
    memset(out, 0, sizeof *out);
    if (p < 1 || p > FIT_MAX_P)
        return pb_error_set(err, PB_ENUMERIC, "fit: %d columns is out of range", p);
    memcpy(ne.a, sums->a, sizeof ne.a);
    memcpy(ne.b, sums->b, sizeof ne.b);
    ne.yy = sums->yy;
    ne.wsum = (double)sums->n_used;
    ne.n_used = sums->n_used;
    if (ne.n_used <= (size_t)p)
        return pb_error_set(err, PB_ENUMERIC, "fit: %zu rows for %d unknowns", ne.n_used, p);
    if (solve(&ne, p, beta, inv, &rank) != 0)
        return pb_error_set(err, PB_ENUMERIC, "fit: eigensolver failed");
    out->p = p;
    fill_result(&ne, p, beta, inv, rank, out);
    out->rss_plain = out->rss;
    return PB_OK;
}

size_t fit_sample_every(size_t n)
{
    return n / SCALE_SAMPLES + 1;
}

double fit_ci95(const struct fit_result *f, int j)
{
    if (f->dof < 1.0)
        return NAN;
    double t = gsl_cdf_tdist_Pinv(0.975, f->dof);
    return t * sqrt(fmax(f->cov[j][j], 0.0));
}
