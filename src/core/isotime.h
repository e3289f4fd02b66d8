/* isotime: ISO 8601 date-times to and from Unix epoch seconds (UTC).
 *
 * Owns nothing. The calendar arithmetic is libc's (timegm, gmtime_r);
 * this module only reads and writes the text forms. */
#ifndef PB_ISOTIME_H
#define PB_ISOTIME_H

#include <stddef.h>

/* Times accepted: 1970-01-01T00:00:00Z up to (not including) 2101-01-01T00:00:00Z.
 * Flight logs and pack histories never lie outside; a time that does is a typo
 * or a broken clock, and refusing it keeps the calendar arithmetic (weeks,
 * trend dates) inside what it was checked for. */
#define ISOTIME_YEAR_MIN 1970
#define ISOTIME_YEAR_MAX 2100
#define ISOTIME_EPOCH_MIN_S 0.0
#define ISOTIME_EPOCH_END_S 4133980800.0 /* 2101-01-01T00:00:00Z */

/* Parses "YYYY-MM-DD[T| ]hh:mm[:ss[.fff]][Z|+hh:mm|-hh:mm|+hhmm]" or a
 * bare date "YYYY-MM-DD". A missing zone is taken as UTC and *zone_given
 * (if not NULL) set to 0. Every field must be a real calendar value (no 31
 * February, no hour 24, no second 60) and the instant inside the range
 * above. Returns 0, or -1 when s is not such a time. */
int isotime_parse(const char *s, size_t len, double *epoch_s, int *zone_given);

/* isotime_parse that also says why it refused (into why, cap bytes; may be
 * NULL), e.g. "day 31: February 2026 has 28 days". */
int isotime_parse_why(const char *s, size_t len, double *epoch_s, int *zone_given, char *why,
                      size_t cap);

/* Writes epoch_s as "YYYY-MM-DDThh:mm:ss[.fff]Z" (milliseconds when not
 * whole) into buf of at least 32 bytes; returns buf. */
char *isotime_format(double epoch_s, char *buf, size_t cap);

/* ISO 8601 week of a day: *iso_year and *week (1..53). Returns 0 or -1. */
int isotime_week(double epoch_s, int *iso_year, int *week);

#endif
