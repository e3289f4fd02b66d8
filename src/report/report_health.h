/* report_health: writers for the history views (pack show, fleet, trend,
 * compare) in text, JSON and CSV.
 *
 * struct pack_view is what those views show of one pack; it owns its
 * flights and trend (pack_view_release). */
#ifndef PB_REPORT_HEALTH_H
#define PB_REPORT_HEALTH_H

#include <stdio.h>

#include "../core/health.h"
#include "../store/store.h"

struct pack_view {
    struct pack_rec pack;
    struct flight_rec *flights;
    size_t nflights;
    struct pack_health health;
    struct pack_trend trend;
    double safe_s[2]; /* fleet --predict: conservative and median safe time (NAN: none) */
};

void pack_view_release(struct pack_view *v);

enum fleet_format { FLEET_TEXT = 0, FLEET_JSON, FLEET_CSV };

int report_pack_list(FILE *out, const struct pack_rec *p, size_t n, int json);
int report_pack_show(FILE *out, const struct pack_view *v, int json);
/* safe: NULL, or per pack the conservative and median safe times in s
 * (safe[2k], safe[2k + 1]; NAN when no prediction was possible). */
int report_fleet(FILE *out, const struct pack_view *v, size_t n, enum fleet_format fmt,
                 const double *safe);
int report_trend(FILE *out, const struct pack_view *v, enum trend_by by, double horizon, int json);
int report_compare(FILE *out, const struct pack_view *v, size_t n, int json);

/* A CSV cell that a spreadsheet would not run as a formula: cells that
 * begin with = + - @ (or tab/CR) get a leading apostrophe; quoted as needed. */
void report_csv_cell(FILE *out, const char *text);

#endif
