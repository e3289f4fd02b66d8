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

/* A string, or null for NULL or "". Bytes that are not valid UTF-8 (a Latin-1
 * file name) become U+FFFD rather than losing the value. NULL only when out
 * of memory. */
json_t *jout_str(const char *s);

/* json_object_set_new and json_array_append_new that fail loudly: when v is
 * NULL (a constructor failed) or cannot be added, the container is marked
 * and jout_write refuses the document. Return 0 or -1; v is always taken. */
int jout_set(json_t *o, const char *key, json_t *v);
int jout_append(json_t *a, json_t *v);

/* An ISO 8601 UTC time, or null when epoch_s is not finite. */
json_t *jout_date(double epoch_s);

/* Writes o (indented, 10 significant digits, keys in order) and a newline,
 * then releases o. Returns 0, or -1 (having written nothing) when o is NULL
 * or a part of it could not be made (see jout_set), or when writing failed. */
int jout_write(FILE *out, json_t *o);

#endif
