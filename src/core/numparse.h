/* numparse: locale-independent decimal number parsing for log fields.
 *
 * Owns nothing. Accepts [space][+-]digits[.digits][(e|E)[+-]digits][space]
 * with '.' or a given decimal separator; rejects hex floats, words and
 * trailing junk. Results are correctly rounded (fast exact path for short
 * mantissas, strtod_l in the "C" locale otherwise). */
#ifndef PB_NUMPARSE_H
#define PB_NUMPARSE_H

#include <stddef.h>

enum num_status {
    NUM_OK = 0,
    NUM_EMPTY,     /* only blanks */
    NUM_BAD,       /* not a decimal number */
    NUM_NONFINITE, /* nan, inf, or out of double range (e.g. 1e400) */
};

/* Parses s[0..len) into *out. decimal is '.' or ','. */
enum num_status num_parse(const char *s, size_t len, char decimal, double *out);

#endif
