#include "assessment.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "assess_code.h" /* PB_ASSESS_CODE: a hash of the sources that assess (meson) */

/* The first line of every kept assessment; a new layout gets a new number. */
#define ASSESSMENT_HEAD "packbook-assessment 1\n"

/* A line fit's numbers, in order. */
#define LINE_FIELDS(X, L)                                                                          \
    X(L.ok, int)                                                                                   \
    X(L.n, size_t)                                                                                 \
    X(L.a, double)                                                                                 \
    X(L.b, double)                                                                                 \
    X(L.b_ci95, double)                                                                            \
    X(L.sigma, double)                                                                             \
    X(L.cov_aa, double)                                                                            \
    X(L.cov_ab, double)                                                                            \
    X(L.cov_bb, double)                                                                            \
    X(L.t95, double)

#define LIFE_FIELDS(X, P)                                                                          \
    X(P.model, enum life_model)                                                                    \
    X(P.shape, double)                                                                             \
    X(P.coef[0], double)                                                                           \
    X(P.coef[1], double)                                                                           \
    X(P.coef[2], double)                                                                           \
    X(P.scale_x, double)                                                                           \
    X(P.holdout_err, double)                                                                       \
    X(P.err_rate, double)                                                                          \
    X(P.cov[0], double)                                                                            \
    X(P.cov[1], double)                                                                            \
    X(P.cov[2], double)                                                                            \
    X(P.cov[3], double)                                                                            \
    X(P.cov[4], double)                                                                            \
    X(P.cov[5], double)                                                                            \
    X(P.cov[6], double)                                                                            \
    X(P.cov[7], double)                                                                            \
    X(P.cov[8], double)                                                                            \
    X(P.early, double)                                                                             \
    X(P.middle, double)                                                                            \
    X(P.late, double)                                                                              \
    X(P.past, int)

#define TREND_LINE_FIELDS(X, T)                                                                    \
    LINE_FIELDS(X, T.vs_cycles)                                                                    \
    LINE_FIELDS(X, T.vs_days)                                                                      \
    X(T.level, double)                                                                             \
    X(T.crossed, int)                                                                              \
    X(T.line_past, int)                                                                            \
    X(T.cross_cycles, double)                                                                      \
    X(T.cross_epoch_s, double)                                                                     \
    X(T.beyond_horizon, int)                                                                       \
    LIFE_FIELDS(X, T.life)                                                                         \
    X(T.plan_epoch_s, double)

/* Every number of a view that fleet shows; the health reason follows them. */
#define VIEW_FIELDS(X, V)                                                                          \
    X(V->health.flights, size_t)                                                                   \
    X(V->health.cycles, double)                                                                    \
    X(V->health.last_epoch_s, double)                                                              \
    X(V->health.r0_now_mohm_cell, double)                                                          \
    X(V->health.r0_base_mohm_cell, double)                                                         \
    X(V->health.r0_ratio, double)                                                                  \
    X(V->health.capacity_pct, double)                                                              \
    X(V->health.spread_mv, double)                                                                 \
    X(V->health.overdischarges, int)                                                               \
    X(V->health.weakest_cell, int)                                                                 \
    X(V->health.weakest_count, size_t)                                                             \
    X(V->health.weakest_of, size_t)                                                                \
    X(V->health.status, enum health_status)                                                        \
    X(V->trend.cycles_now, double)                                                                 \
    X(V->trend.days_now, double)                                                                   \
    TREND_LINE_FIELDS(X, V->trend.r0)                                                              \
    TREND_LINE_FIELDS(X, V->trend.capacity)                                                        \
    X(V->departures, size_t)

#define COUNT_ONE(lv, type) +1
enum { VIEW_NFIELDS = 0 VIEW_FIELDS(COUNT_ONE, v) };

void assessment_key(const struct pack_rec *p, const struct health_rules *r, int64_t gen, char *buf,
                    size_t cap)
{
    /* %.17g: two different rules never print the same */
    snprintf(buf, cap,
             "code=%s gen=%lld cells=%d capacity_mah=%.17g rules=%.17g,%.17g,%.17g,%.17g,%.17g,"
             "%.17g,%d,%d,%d,%d",
             PB_ASSESS_CODE, (long long)gen, p->cells, p->capacity_mah, r->retire_capacity_pct,
             r->watch_capacity_pct, r->retire_r0_ratio, r->watch_r0_ratio, r->retire_spread_mv,
             r->watch_spread_mv, r->retire_overdischarge, r->watch_overdischarge,
             r->baseline_flights, r->recent_flights);
}

char *assessment_encode(const struct pack_view *v)
{
    /* each number at most 24 characters and a separator */
    size_t cap = sizeof ASSESSMENT_HEAD + (size_t)VIEW_NFIELDS * 26 + sizeof v->health.reason + 2;
    char *out = malloc(cap);
    if (!out)
        return NULL;
    size_t used = (size_t)snprintf(out, cap, "%s", ASSESSMENT_HEAD);
#define PUT(lv, type) used += (size_t)snprintf(out + used, cap - used, "%.17g ", (double)(lv));
    VIEW_FIELDS(PUT, v)
#undef PUT
    out[used - 1] = '\n';
    snprintf(out + used, cap - used, "%s", v->health.reason);
    return out;
}

/* The next number of text at *p (then past its separator): 0, or -1 when
 * there is none. */
static int take(const char **p, double *x)
{
    char *end;
    *x = strtod(*p, &end);
    if (end == *p || (*end != ' ' && *end != '\n'))
        return -1;
    *p = end + 1;
    return 0;
}

/* A count or a flag: a whole number in [0, hi]. */
static int whole(double x, double hi)
{
    return x >= 0 && x <= hi && x == floor(x);
}

int assessment_decode(const char *text, struct pack_view *v)
{
    const size_t head = sizeof ASSESSMENT_HEAD - 1;
    if (!text || strncmp(text, ASSESSMENT_HEAD, head) != 0)
        return -1;
    const char *p = text + head;
    double x;
    int bad = 0;
    /* numbers for doubles, whole numbers in range for counts, flags and enums */
#define GET(lv, type)                                                                              \
    if (take(&p, &x) != 0)                                                                         \
        return -1;                                                                                 \
    if (_Generic((lv), double : 1, default : 0))                                                   \
        lv = (type)x;                                                                              \
    else if (whole(x, 1e15))                                                                       \
        lv = (type)x;                                                                              \
    else                                                                                           \
        bad = 1;
    VIEW_FIELDS(GET, v)
#undef GET
    if (bad || p[-1] != '\n' || strlen(p) >= sizeof v->health.reason)
        return -1;
    if ((unsigned)v->health.status > HEALTH_RETIRE ||
        (unsigned)v->trend.r0.life.model > LIFE_POWER ||
        (unsigned)v->trend.capacity.life.model > LIFE_POWER)
        return -1;
    memcpy(v->health.reason, p, strlen(p) + 1);
    v->trend.nbuckets = 0;
    v->trend.buckets = NULL;
    return 0;
}
