/* colname: what a log column holds, read from its header name.
 *
 * Owns nothing. Turns names such as "time_s", "t_ms", "Time(s)",
 * "voltage [V]", "vbat_mV", "Current(A)", "ibat_mA", "temp_C", "cell3_v",
 * "current_adc" into a role, a cell index and a scale to SI-ish units
 * (s, V, A, degC). Matching is case-insensitive and ignores punctuation. */
#ifndef PB_COLNAME_H
#define PB_COLNAME_H

#include <stddef.h>

enum col_role {
    COL_IGNORE = 0,
    COL_TIME,
    COL_VOLTAGE,     /* pack voltage */
    COL_CURRENT,     /* pack current, physical units */
    COL_CURRENT_RAW, /* pack current as ADC counts */
    COL_TEMP,
    COL_CELL, /* one cell's voltage */
    COL_DATE, /* a calendar date, beside a time-of-day column */
};

enum time_kind {
    TIME_RELATIVE = 0, /* numbers, scaled to seconds */
    TIME_EPOCH,        /* Unix epoch numbers, scaled to seconds */
    TIME_AUTO,         /* decided from the values (ISO 8601 text or numbers) */
};

struct col_spec {
    enum col_role role;
    int cell;            /* 1-based cell index for COL_CELL */
    double scale;        /* multiply the value by this (e.g. 1e-3 for mV) */
    double offset;       /* then add this (e.g. -273.15 for kelvin) */
    enum time_kind time; /* for COL_TIME */
    int unit_given;      /* the name carried a unit */
};

/* Classifies one header name (len bytes, not NUL-terminated). Unknown
 * names give COL_IGNORE. Returns 0, or -1 when the name has a known role
 * but a unit that makes no sense for it (e.g. "voltage_ms"). */
int colname_parse(const char *name, size_t len, struct col_spec *out);

/* Name of a role for messages ("time", "voltage", ...). */
const char *colname_role_name(enum col_role role);

#endif
