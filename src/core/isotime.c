#define _GNU_SOURCE
#include "isotime.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>
#include <time.h>

static int digits(const char *s, size_t len, size_t at, int n, int *out)
{
    int v = 0;
    if (at + (size_t)n > len)
        return -1;
    for (int k = 0; k < n; k++) {
        char c = s[at + (size_t)k];
        if (c < '0' || c > '9')
            return -1;
        v = v * 10 + (c - '0');
    }
    *out = v;
    return 0;
}

static int why_set(char *why, size_t cap, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

static int why_set(char *why, size_t cap, const char *fmt, ...)
{
    if (why && cap) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(why, cap, fmt, ap);
        va_end(ap);
    }
    return -1;
}

static int leap(int y)
{
    return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
}

static int days_in_month(int y, int m)
{
    static const int dm[12] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
    return m == 2 && leap(y) ? 29 : dm[m - 1];
}

static const char *const month_name[12] = {"January",   "February", "March",    "April",
                                           "May",       "June",     "July",     "August",
                                           "September", "October",  "November", "December"};

int isotime_parse(const char *s, size_t len, double *epoch_s, int *zone_given)
{
    return isotime_parse_why(s, len, epoch_s, zone_given, NULL, 0);
}

int isotime_parse_why(const char *s, size_t len, double *epoch_s, int *zone_given, char *why,
                      size_t cap)
{
    static const char form[] =
        "not an ISO 8601 date-time (YYYY-MM-DD[Thh:mm[:ss[.fff]]][Z|+hh:mm])";
    while (len > 0 && (*s == ' ' || *s == '\t')) {
        s++;
        len--;
    }
    while (len > 0 && (s[len - 1] == ' ' || s[len - 1] == '\t' || s[len - 1] == '\r'))
        len--;
    int year, mon, day, hour = 0, min = 0, sec = 0;
    double frac = 0.0;
    size_t k = 0;
    if (digits(s, len, 0, 4, &year) || len < 10 || s[4] != '-' || digits(s, len, 5, 2, &mon) ||
        s[7] != '-' || digits(s, len, 8, 2, &day))
        return why_set(why, cap, "%s", form);
    k = 10;
    if (k < len) {
        if (s[k] != 'T' && s[k] != ' ')
            return why_set(why, cap, "%s", form);
        k++;
        if (digits(s, len, k, 2, &hour) || k + 2 >= len || s[k + 2] != ':' ||
            digits(s, len, k + 3, 2, &min))
            return why_set(why, cap, "%s", form);
        k += 5;
        if (k < len && s[k] == ':') {
            if (digits(s, len, k + 1, 2, &sec))
                return why_set(why, cap, "%s", form);
            k += 3;
            if (k < len && (s[k] == '.' || s[k] == ',')) {
                double scale = 0.1;
                k++;
                if (k >= len || s[k] < '0' || s[k] > '9')
                    return why_set(why, cap, "%s", form);
                while (k < len && s[k] >= '0' && s[k] <= '9') {
                    frac += (s[k] - '0') * scale;
                    scale *= 0.1;
                    k++;
                }
            }
        }
    }
    int zone = 0;
    long offset_s = 0;
    if (k < len && (s[k] == 'Z' || s[k] == 'z')) {
        zone = 1;
        k++;
    } else if (k < len && (s[k] == '+' || s[k] == '-')) {
        int sign = s[k] == '-' ? -1 : 1;
        int oh, om = 0;
        if (digits(s, len, k + 1, 2, &oh))
            return why_set(why, cap, "%s", form);
        k += 3;
        if (k < len && s[k] == ':')
            k++;
        if (k < len) {
            if (digits(s, len, k, 2, &om))
                return why_set(why, cap, "%s", form);
            k += 2;
        }
        /* real zones lie within -12:00..+14:00 */
        if (oh > 14 || om > 59 || (oh == 14 && om > 0))
            return why_set(why, cap, "zone offset %02d:%02d is beyond 14:00", oh, om);
        zone = 1;
        offset_s = sign * (oh * 3600L + om * 60L);
    }
    if (k != len)
        return why_set(why, cap, "%s", form);
    /* each field in its range, with the reason: timegm would quietly roll
     * 31 February into March and 24:00 into the next day */
    if (year < ISOTIME_YEAR_MIN || year > ISOTIME_YEAR_MAX)
        return why_set(why, cap, "year %04d is outside %d-%d", year, ISOTIME_YEAR_MIN,
                       ISOTIME_YEAR_MAX);
    if (mon < 1 || mon > 12)
        return why_set(why, cap, "month %02d is not 01-12", mon);
    if (day < 1 || day > days_in_month(year, mon))
        return why_set(why, cap, "day %02d: %s %d has %d days", day, month_name[mon - 1], year,
                       days_in_month(year, mon));
    if (hour > 23)
        return why_set(why, cap, "hour %02d is not 00-23", hour);
    if (min > 59)
        return why_set(why, cap, "minute %02d is not 00-59", min);
    if (sec > 59)
        return why_set(why, cap, "second %02d is not 00-59 (leap seconds are not kept)", sec);
    struct tm tm = {0};
    tm.tm_year = year - 1900;
    tm.tm_mon = mon - 1;
    tm.tm_mday = day;
    tm.tm_hour = hour;
    tm.tm_min = min;
    tm.tm_sec = sec;
    time_t t = timegm(&tm);
    double e = (double)t + frac - (double)offset_s;
    /* the instant (as written, to the millisecond) must be inside the range too:
     * a zone offset can move the first and last hours out of it */
    double ms = round(e * 1000.0);
    if (ms < ISOTIME_EPOCH_MIN_S * 1000.0 || ms >= ISOTIME_EPOCH_END_S * 1000.0)
        return why_set(why, cap, "the time is outside %d-%d once its zone offset is applied",
                       ISOTIME_YEAR_MIN, ISOTIME_YEAR_MAX);
    *epoch_s = e;
    if (zone_given)
        *zone_given = zone;
    return 0;
}

char *isotime_format(double epoch_s, char *buf, size_t cap)
{
    double whole = floor(epoch_s);
    long ms = lround((epoch_s - whole) * 1000.0);
    if (ms == 1000) {
        whole += 1.0;
        ms = 0;
    }
    time_t t = (time_t)whole;
    struct tm tm;
    if (!gmtime_r(&t, &tm)) {
        snprintf(buf, cap, "invalid");
        return buf;
    }
    if (ms)
        snprintf(buf, cap, "%04d-%02d-%02dT%02d:%02d:%02d.%03ldZ", tm.tm_year + 1900, tm.tm_mon + 1,
                 tm.tm_mday, tm.tm_hour, tm.tm_min, tm.tm_sec, ms);
    else
        snprintf(buf, cap, "%04d-%02d-%02dT%02d:%02d:%02dZ", tm.tm_year + 1900, tm.tm_mon + 1,
                 tm.tm_mday, tm.tm_hour, tm.tm_min, tm.tm_sec);
    return buf;
}

int isotime_week(double epoch_s, int *iso_year, int *week)
{
    time_t t = (time_t)floor(epoch_s);
    struct tm tm;
    char buf[16];
    if (!gmtime_r(&t, &tm))
        return -1;
    /* strftime's %G and %V are the ISO 8601 week-numbering year and week */
    if (strftime(buf, sizeof buf, "%G %V", &tm) == 0)
        return -1;
    if (sscanf(buf, "%d %d", iso_year, week) != 2)
        return -1;
    return 0;
}
