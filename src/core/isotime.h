/* isotime: ISO 8601 date-times to and from Unix epoch seconds (UTC).
 *
 * Owns nothing. The calendar arithmetic is libc's (timegm, gmtime_r);
 * this module only reads and writes the text forms. */
#ifndef PB_ISOTIME_H
#define PB_ISOTIME_H

#include <stddef.h>

/* Parses "YYYY-MM-DD[T| ]hh:mm[:ss[.fff]][Z|+hh:mm|-hh:mm|+hhmm]" or a
 * bare date "YYYY-MM-DD". A missing zone is taken as UTC and *zone_given
 * (if not NULL) set to 0. Returns 0, or -1 when s is not such a time. */
int isotime_parse(const char *s, size_t len, double *epoch_s, int *zone_given);

/* Writes epoch_s as "YYYY-MM-DDThh:mm:ss[.fff]Z" (milliseconds when not
 * whole) into buf of at least 32 bytes; returns buf. */
char *isotime_format(double epoch_s, char *buf, size_t cap);

/* ISO 8601 week of a day: *iso_year and *week (1..53). Returns 0 or -1. */
int isotime_week(double epoch_s, int *iso_year, int *week);

#endif
