/* health: a pack's history turned into its state, trend and retirement.
 *
 * Owns nothing beyond its result structs (plain values). Pure: flights in,
 * figures out. Resistance is compared per cell (mOhm per series cell) and
 * capacity as % of the rated capacity. */
#ifndef PB_HEALTH_H
#define PB_HEALTH_H

#include <stddef.h>

#include "life.h"

struct health_flight {
    double epoch_s;
    double charge_mah;        /* net charge used */
    double r0_mohm;           /* pack, NAN when unknown */
    double capacity_mah;      /* NAN when unknown */
    double capacity_ci95_mah; /* its 95 % half-width; NAN when unknown */
    double spread_rest_mv;    /* NAN when unknown */
    int below_floor;          /* the loaded voltage crossed the per-cell floor */
    int weakest_cell;         /* 1-based cell lowest under load, 0 when the log had no cells */
    double r0_ci95_mohm;      /* its 95 % half-width; NAN or 0 when unknown */
};

/* Thresholds. Defaults (health_rules_default): capacity at or below 80 %
 * of rated (the end-of-life criterion of battery standards and practice),
 * R0 at or above 2x the pack's baseline (common practice), resting cell
 * spread at or above 60 mV (common practice, from memory), 3 or more
 * flights below the floor; "watch" levels at 85 %, 1.5x, 30 mV and 1. */
/* The policy values, named once; reports and help print them from here.
 * Whole numbers where they can be, so they read the same when stringised
 * (HEALTH_STR) into help texts. */
#define HEALTH_RETIRE_CAPACITY_PCT 80
#define HEALTH_WATCH_CAPACITY_PCT 85
#define HEALTH_RETIRE_R0_RATIO 2
#define HEALTH_WATCH_R0_RATIO 1.5
#define HEALTH_RETIRE_IMBALANCE_MV 60
#define HEALTH_WATCH_IMBALANCE_MV 30
#define HEALTH_RETIRE_OVERDISCHARGES 3
#define HEALTH_WATCH_OVERDISCHARGES 1
#define HEALTH_BASELINE_FLIGHTS 3 /* first flights that set the baseline */
#define HEALTH_RECENT_FLIGHTS 5   /* last flights that set "now" */
#define HEALTH_STR_(x) #x
#define HEALTH_STR(x) HEALTH_STR_(x)

struct health_rules {
    double retire_capacity_pct, watch_capacity_pct;
    double retire_r0_ratio, watch_r0_ratio;
    double retire_spread_mv, watch_spread_mv;
    int retire_overdischarge, watch_overdischarge;
    int baseline_flights; /* first flights that set the baseline */
    int recent_flights;   /* last flights that set "now" */
};

enum health_status { HEALTH_OK = 0, HEALTH_WATCH, HEALTH_RETIRE };

struct pack_health {
    size_t flights;
    double cycles;            /* equivalent full cycles: total charge / rated */
    double last_epoch_s;      /* NAN without flights */
    double r0_now_mohm_cell;  /* median of the recent flights */
    double r0_base_mohm_cell; /* median of the baseline flights */
    double r0_ratio;          /* now / baseline */
    double capacity_pct;      /* precision-weighted median of the recent estimates, % of rated */
    double spread_mv;         /* median of the recent resting spreads */
    int overdischarges;       /* flights below the floor */
    int weakest_cell;     /* the cell most often weakest in the recent flights naming one, 0 none */
    size_t weakest_count; /* in how many of them it was */
    size_t weakest_of;    /* how many recent flights named a weakest cell */
    enum health_status status;
    char reason[320]; /* which rules fired, with the numbers */
};

void health_rules_default(struct health_rules *r);

/* Assesses n flights (oldest first) of a pack with cells series cells and
 * the given rated capacity. */
void health_assess(const struct health_flight *f, size_t n, int cells, double rated_mah,
                   const struct health_rules *rules, struct pack_health *out);

const char *health_status_name(enum health_status s);

/* Adds a finding made outside health_assess (text, e.g. a flight that left
 * its trend) to h's reason, raising its status to at least level. */
void health_add_finding(struct pack_health *h, enum health_status level, const char *text);

/* A straight-line fit y = a + b x with the slope's 95 % interval. */
struct line_fit {
    int ok; /* enough points (>= 3) with spread in x */
    size_t n;
    double a, b, b_ci95;
    double sigma;
    double cov_aa, cov_ab, cov_bb; /* covariance of (a, b) */
    double t95;                    /* Student t for the 95 % intervals, n - 2 dof */
};

/* Fits y on x (NAN points skipped); robust (bisquare, GSL) unless plain. */
struct line_fit health_line(const double *x, const double *y, size_t n, int plain);

/* Half-width of the 95 % confidence band of the fitted line's mean at x
 * (t95 sqrt(var(a + b x))); NAN when the fit is not ok. */
double health_line_band(const struct line_fit *l, double x);

/* Half-width of the 95 % prediction band at x, where a new point is expected:
 * t95 sqrt(sigma^2 + var(a + b x)); NAN when the fit is not ok. */
double health_line_predict_band(const struct line_fit *l, double x);

/* Where a line reaches level (from below when rising, from above when
 * not), beyond x_now: sets *x_cross and returns 1; returns 0 when the line
 * heads away or its slope is not told from zero by its interval, -1 when
 * the fitted line is at or past the level at x_now already. */
int health_crossing(const struct line_fit *l, double level, int rising, double x_now,
                    double *x_cross);

/* ---- trends ------------------------------------------------------------ */

enum trend_by { TREND_WEEK = 0, TREND_MONTH, TREND_CYCLE };

#define TREND_CYCLE_BUCKET 5.0 /* equivalent cycles per bucket with --by cycle */

struct trend_bucket {
    char key[40]; /* "2026-W15", "2026-04" or "cycles 5-10" */
    size_t flights;
    double first_epoch_s, last_epoch_s;
    double charge_mah;
    double r0_mohm_cell; /* mean of known values, NAN when none */
    double capacity_pct;
};

/* One quantity's regression against cycles and against days, and when it
 * crosses its retirement level. cross_* NAN when it does not within the
 * horizon. crossed: the retirement rule fires now (the pack's state, the
 * same in every view); line_past: the fitted line is at the level already,
 * whether or not the rule has fired. */
struct trend_line {
    struct line_fit vs_cycles, vs_days;
    double level; /* the retirement level it is checked against */
    int crossed;
    int line_past;
    double cross_cycles;  /* equivalent cycles at the crossing */
    double cross_epoch_s; /* date of the crossing, from the time fit */
    int beyond_horizon;   /* a crossing exists, but later than the horizon */
    /* the knee-aware projection (life.h): its early end is what to plan
     * for; plan_epoch_s is that early end as a date at the pack's average
     * use so far (equivalent cycles per day), NAN when unknown */
    struct life_projection life;
    double plan_epoch_s;
};

struct pack_trend {
    size_t nbuckets;
    struct trend_bucket *buckets; /* owned: free with health_trend_release */
    double cycles_now, days_now;
    struct trend_line r0;       /* mOhm per cell, level = retire ratio x baseline */
    struct trend_line capacity; /* % of rated, level = retire capacity % */
};

/* Aggregates and regressions of a pack's flights (oldest first). horizon:
 * crossings further than this many cycles ahead are "not within". Returns
 * 0, or -1 when out of memory. */
int health_trend(const struct health_flight *f, size_t n, int cells, double rated_mah,
                 const struct health_rules *rules, enum trend_by by, int plain, double horizon,
                 struct pack_trend *out);

/* What to plan for: the earlier of the two quantities' early ends
 * (life.h). Sets *cycles, *epoch_s (NAN without a date) and *what ("R0" or
 * "capacity"); returns 0 when neither projects a crossing within the
 * horizon. */
int health_plan(const struct pack_trend *t, double *cycles, double *epoch_s, const char **what);

/* Frees the buckets of t (not t itself); safe on a zeroed struct. */
void health_trend_release(struct pack_trend *t);

#endif
