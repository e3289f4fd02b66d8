#define _GNU_SOURCE
#include "numparse.h"

#include <errno.h>
#include <locale.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

/* Powers of ten that are exact in binary64 (10^22 is the largest). */
const double num_exact_pow10[23] = {
    1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,  1e8,  1e9,  1e10, 1e11,
    1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
};

static int is_blank(char c)
{
    return c == ' ' || c == '\t' || c == '\r' || c == '\n';
}

static enum num_status word_value(const char *s, size_t len)
{
    /* Words that some loggers write for missing or overflowed values. */
    static const char *const words[] = {"nan",  "+nan",     "-nan",      "inf",      "+inf",
                                        "-inf", "infinity", "+infinity", "-infinity"};
    for (size_t k = 0; k < sizeof words / sizeof *words; k++)
        if (strlen(words[k]) == len && strncasecmp(s, words[k], len) == 0)
            return NUM_NONFINITE;
    return NUM_BAD;
}

/* Slow path: a cleaned copy through strtod_l in the C locale. */
static enum num_status slow_parse(const char *s, size_t len, char decimal, double *out)
{
    char buf[400];
    if (len >= sizeof buf)
        return NUM_BAD;
    for (size_t k = 0; k < len; k++)
        buf[k] = (s[k] == decimal) ? '.' : s[k];
    buf[len] = '\0';
    locale_t c_locale = newlocale(LC_NUMERIC_MASK, "C", (locale_t)0);
    if (c_locale == (locale_t)0)
        return NUM_BAD;
    errno = 0;
    char *end = NULL;
    double v = strtod_l(buf, &end, c_locale);
    int range_err = errno == ERANGE;
    freelocale(c_locale);
    if (end != buf + len)
        return NUM_BAD;
    if (range_err && (isinf(v) || fabs(v) > 1.0))
        return NUM_NONFINITE;
    *out = v;
    return NUM_OK;
}

enum num_status num_parse(const char *s, size_t len, char decimal, double *out)
{
    if (num_parse_plain(s, len, decimal, out))
        return NUM_OK;
    while (len > 0 && is_blank(*s)) {
        s++;
        len--;
    }
    while (len > 0 && is_blank(s[len - 1]))
        len--;
    if (len == 0)
        return NUM_EMPTY;

    size_t k = 0;
    int neg = 0;
    if (s[k] == '+' || s[k] == '-') {
        neg = s[k] == '-';
        k++;
    }
    uint64_t mant = 0;
    int digits = 0;  /* significant digits kept in mant */
    int dropped = 0; /* integer digits beyond what mant holds */
    int frac_digits = 0;
    int any_digit = 0;
    int lost = 0; /* nonzero digits that did not fit */
    while (k < len && s[k] >= '0' && s[k] <= '9') {
        any_digit = 1;
        if (digits < 19) {
            mant = mant * 10 + (uint64_t)(s[k] - '0');
            if (mant)
                digits++;
        } else {
            dropped++;
            lost |= s[k] != '0';
        }
        k++;
    }
    if (k < len && s[k] == decimal) {
        k++;
        while (k < len && s[k] >= '0' && s[k] <= '9') {
            any_digit = 1;
            if (digits < 19) {
                mant = mant * 10 + (uint64_t)(s[k] - '0');
                if (mant)
                    digits++;
                frac_digits++;
            } else {
                lost |= s[k] != '0';
            }
            k++;
        }
    }
    if (!any_digit)
        return word_value(s, len);
    long exp10 = 0;
    if (k < len && (s[k] == 'e' || s[k] == 'E')) {
        k++;
        int eneg = 0;
        if (k < len && (s[k] == '+' || s[k] == '-')) {
            eneg = s[k] == '-';
            k++;
        }
        if (k >= len || s[k] < '0' || s[k] > '9')
            return NUM_BAD;
        while (k < len && s[k] >= '0' && s[k] <= '9') {
            if (exp10 < 100000)
                exp10 = exp10 * 10 + (s[k] - '0');
            k++;
        }
        if (eneg)
            exp10 = -exp10;
    }
    if (k != len)
        return NUM_BAD; /* trailing junk, hex floats, thousands separators */

    long e = exp10 + dropped - frac_digits;
    /* Clinger's fast path: mantissa and power of ten both exact, so one
     * correctly rounded multiply or divide gives the correctly rounded result. */
    if (!lost && mant <= (UINT64_C(1) << 53) && e >= -22 && e <= 22) {
        double v = (double)mant;
        v = e < 0 ? v / num_exact_pow10[-e] : v * num_exact_pow10[e];
        *out = neg ? -v : v;
        return NUM_OK;
    }
    if (mant == 0 && !lost) {
        *out = neg ? -0.0 : 0.0;
        return NUM_OK;
    }
    return slow_parse(s, len, decimal, out);
}
