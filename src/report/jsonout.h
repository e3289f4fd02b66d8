/* jsonout: the small pieces every JSON writer shares (jansson underneath).
 *
 * Owns nothing: each function returns a new jansson reference for the
 * caller to hand to an object or array, or writes and releases one. */
#ifndef PB_JSONOUT_H
#define PB_JSONOUT_H

#include <jansson.h>
#include <stdio.h>

/* A real, or null when x is not finite (unknown). */
json_t *jout_num(double x);

/* A string, or null for NULL or "". */
json_t *jout_str(const char *s);

/* An ISO 8601 UTC time, or null when epoch_s is not finite. */
json_t *jout_date(double epoch_s);

/* Writes o (indented, 10 significant digits, keys in order) and a newline,
 * then releases o. Returns 0, or -1 when o is NULL or writing failed. */
int jout_write(FILE *out, json_t *o);

#endif
