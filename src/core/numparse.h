/* numparse: locale-independent decimal number parsing for log fields.
 *
 * Owns nothing. Accepts [space][+-]digits[.digits][(e|E)[+-]digits][space]
 * with '.' or a given decimal separator; rejects hex floats, words and
 * trailing junk. Results are correctly rounded (fast exact path for short
 * mantissas, strtod_l in the "C" locale otherwise). */
#ifndef PB_NUMPARSE_H
#define PB_NUMPARSE_H

#include <stddef.h>
#include <stdint.h>

enum num_status {
    NUM_OK = 0,
    NUM_EMPTY,     /* only blanks */
    NUM_BAD,       /* not a decimal number */
    NUM_NONFINITE, /* nan, inf, or out of double range (e.g. 1e400) */
};

/* Parses s[0..len) into *out. decimal is '.' or ','. */
enum num_status num_parse(const char *s, size_t len, char decimal, double *out);

/* Powers of ten that are exact in binary64, 1e0 to 1e22. */
extern const double num_exact_pow10[23];

/* The common field alone, [-]digits[decimal digits] with 1 to 19 digits,
 * nothing else and a mantissa of at most 2^53: 1 with *out as num_parse
 * gives it (one correctly rounded division), else 0 (ask num_parse). Inline
 * for the reader's inner loops. */
static inline int num_parse_plain(const char *s, size_t len, char decimal, double *out)
{
    if (len == 0 || len > 21)
        return 0;
    size_t k = s[0] == '-';
    int neg = (int)k, frac = -1, nd = 0;
    uint64_t mant = 0;
    for (; k < len; k++) {
        unsigned d = (unsigned)((unsigned char)s[k] - '0');
        if (d <= 9) {
            mant = mant * 10 + d;
            nd++;
        } else if (s[k] == decimal && frac < 0) {
            frac = (int)(len - k - 1);
        } else {
            return 0;
        }
    }
    if (nd == 0 || nd > 19 || mant > (UINT64_C(1) << 53))
        return 0;
    double v = (double)mant;
    if (frac > 0)
        v /= num_exact_pow10[frac];
    *out = neg ? -v : v;
    return 1;
}

#endif
