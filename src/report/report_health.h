/* report_health: writers for the history views (pack show, fleet, trend,
 * compare) in text, JSON and CSV.
 *
 * struct pack_view is what those views show of one pack; it owns its
 * flights and trend (pack_view_release). */
#ifndef PB_REPORT_HEALTH_H
#define PB_REPORT_HEALTH_H

#include <stdio.h>

#include "../core/departure.h"
#include "../core/health.h"
#include "../store/store.h"

struct pack_view {
    struct pack_rec pack;
    struct flight_rec *flights;
    size_t nflights;
    struct pack_health health;
    struct pack_trend trend;
    double safe_s[2];        /* fleet --predict: conservative and median safe time (NAN: none) */
    struct departure *dep;   /* per flight (nflights): did it leave its trend */
    struct flight_ack *acks; /* the operator's acknowledgements, by flight id */
    size_t nacks;
    size_t departures;     /* flights that left their trend, not acknowledged */
    char paired_with[128]; /* the registered partner's label, "" when none */
    double pair_distance;  /* their mismatch now (pairs.h), NAN when not known */
};

/* The acknowledgement of flight id in v, or NULL. */
const struct flight_ack *pack_view_ack(const struct pack_view *v, int64_t id);

void pack_view_release(struct pack_view *v);

enum fleet_format { FLEET_TEXT = 0, FLEET_JSON, FLEET_CSV };

int report_pack_list(FILE *out, const struct pack_rec *p, size_t n, enum fleet_format fmt);
/* A pack with its health and flights; CSV is its flights as 'flight list --csv'. */
int report_pack_show(FILE *out, const struct pack_view *v, enum fleet_format fmt);
/* safe: NULL, or per pack the conservative and median safe times in s
 * (safe[2k], safe[2k + 1]; NAN when no prediction was possible) to the
 * landing reserve reserve_pct. */
int report_fleet(FILE *out, const struct pack_view *v, size_t n, enum fleet_format fmt,
                 const double *safe, double reserve_pct);
/* The flights of the listing, each with its pack's label (labels[k]):
 * id, date, file, duration, charge, R0, capacity, SoC, resting cell
 * imbalance, time under the cut-off and warnings. */
int report_flight_list(FILE *out, const struct flight_rec *f, const char *const *labels, size_t n,
                       enum fleet_format fmt);
/* The knee-aware projection of one quantity in words ("80 % between cycle
 * X and Y (middle Z, exponential fit); plan for X, around DATE") into buf;
 * returns 0 (buf untouched) when there is none to tell. */
int report_life_text(const struct trend_line *t, const char *unit, double horizon, char *buf,
                     size_t cap);

/* Slopes against cycles are printed per this many cycles in every text view. */
#define REPORT_SLOPE_CYCLES 10.0

/* The trends of n packs: text one after another, CSV one table (a pack
 * column; weeks or months without flights as empty rows, as in text), JSON
 * one object for one pack, an array for several. */
int report_trend(FILE *out, const struct pack_view *v, size_t n, enum trend_by by, double horizon,
                 enum fleet_format fmt);
int report_compare(FILE *out, const struct pack_view *v, size_t n, enum fleet_format fmt);

/* A CSV cell that a spreadsheet would not run as a formula: cells that
 * begin with = + - @ (or tab/CR) get a leading apostrophe; quoted as needed. */
void report_csv_cell(FILE *out, const char *text);

#endif
