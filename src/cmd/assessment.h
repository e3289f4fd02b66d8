/* assessment: a pack's fleet view kept in the store as text, and the key of
 * the inputs it was made from.
 *
 * What fleet shows of a pack (its health with the departure finding, the
 * trend lines and life projections, the count of departures) is written by
 * the commands that change the pack's history and read back by fleet, plot
 * fleet and pack pair instead of assessing every pack from its flights. The
 * text holds every number exactly (%.17g reads back to the same double, NaN
 * and its sign included), so a kept view prints the same bytes as a fresh
 * one. The key names everything the view depends on: this build's
 * assessment code (a hash of its sources), the rules, the pack's cells and
 * rated capacity and its history generation (store.h); a kept view whose
 * key differs is not used. Owns nothing beyond the strings it returns. */
#ifndef PB_ASSESSMENT_H
#define PB_ASSESSMENT_H

#include <stddef.h>
#include <stdint.h>

#include "../core/health.h"
#include "../report/report_health.h"

/* The key of pack p's view under rules at history generation gen, into buf
 * (cap >= ASSESSMENT_KEY_CAP). */
#define ASSESSMENT_KEY_CAP 512
void assessment_key(const struct pack_rec *p, const struct health_rules *rules, int64_t gen,
                    char *buf, size_t cap);

/* v's health, trend lines and departure count as text in a new string
 * (the caller frees it); NULL when out of memory. */
char *assessment_encode(const struct pack_view *v);

/* Fills v's health, trend (no buckets) and departure count from text;
 * returns 0, or -1 (v's fields then unspecified) when the text is not a
 * whole assessment of this format. */
int assessment_decode(const char *text, struct pack_view *v);

#endif
