#define _GNU_SOURCE
#include "isotime.h"

#include <math.h>
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

int isotime_parse(const char *s, size_t len, double *epoch_s, int *zone_given)
{
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
        return -1;
    k = 10;
    if (k < len) {
        if (s[k] != 'T' && s[k] != ' ')
            return -1;
        k++;
        if (digits(s, len, k, 2, &hour) || k + 2 >= len || s[k + 2] != ':' ||
            digits(s, len, k + 3, 2, &min))
            return -1;
        k += 5;
        if (k < len && s[k] == ':') {
            if (digits(s, len, k + 1, 2, &sec))
                return -1;
            k += 3;
            if (k < len && (s[k] == '.' || s[k] == ',')) {
                double scale = 0.1;
                k++;
                if (k >= len || s[k] < '0' || s[k] > '9')
                    return -1;
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
            return -1;
        k += 3;
        if (k < len && s[k] == ':')
            k++;
        if (k < len) {
            if (digits(s, len, k, 2, &om))
                return -1;
            k += 2;
        }
        if (oh > 23 || om > 59)
            return -1;
        zone = 1;
        offset_s = sign * (oh * 3600L + om * 60L);
    }
    if (k != len)
        return -1;
    if (mon < 1 || mon > 12 || day < 1 || day > 31 || hour > 24 || min > 59 || sec > 60)
        return -1;
    struct tm tm = {0};
    tm.tm_year = year - 1900;
    tm.tm_mon = mon - 1;
    tm.tm_mday = day;
    tm.tm_hour = hour;
    tm.tm_min = min;
    tm.tm_sec = sec;
    time_t t = timegm(&tm);
    /* timegm normalises 31 February into March; reject such dates */
    if (tm.tm_mday != day && hour < 24)
        return -1;
    *epoch_s = (double)t + frac - (double)offset_s;
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
