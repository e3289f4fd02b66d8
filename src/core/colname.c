#include "colname.h"

#include <ctype.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define NAME_MAX_LEN 128

struct unit_entry {
    const char *unit;
    enum col_role role; /* the role this unit belongs to */
    double scale;
    double offset;
    enum time_kind time;
};

static const struct unit_entry units[] = {
    {"s", COL_TIME, 1.0, 0.0, TIME_RELATIVE},
    {"sec", COL_TIME, 1.0, 0.0, TIME_RELATIVE},
    {"secs", COL_TIME, 1.0, 0.0, TIME_RELATIVE},
    {"seconds", COL_TIME, 1.0, 0.0, TIME_RELATIVE},
    {"ms", COL_TIME, 1e-3, 0.0, TIME_RELATIVE},
    {"msec", COL_TIME, 1e-3, 0.0, TIME_RELATIVE},
    {"us", COL_TIME, 1e-6, 0.0, TIME_RELATIVE},
    {"usec", COL_TIME, 1e-6, 0.0, TIME_RELATIVE},
    {"\xc2\xb5s", COL_TIME, 1e-6, 0.0, TIME_RELATIVE},
    {"min", COL_TIME, 60.0, 0.0, TIME_RELATIVE},
    {"epoch", COL_TIME, 1.0, 0.0, TIME_EPOCH},
    {"unix", COL_TIME, 1.0, 0.0, TIME_EPOCH},
    {"iso", COL_TIME, 1.0, 0.0, TIME_AUTO},
    {"utc", COL_TIME, 1.0, 0.0, TIME_AUTO},
    {"v", COL_VOLTAGE, 1.0, 0.0, 0},
    {"volt", COL_VOLTAGE, 1.0, 0.0, 0},
    {"volts", COL_VOLTAGE, 1.0, 0.0, 0},
    {"mv", COL_VOLTAGE, 1e-3, 0.0, 0},
    {"a", COL_CURRENT, 1.0, 0.0, 0},
    {"amp", COL_CURRENT, 1.0, 0.0, 0},
    {"amps", COL_CURRENT, 1.0, 0.0, 0},
    {"ma", COL_CURRENT, 1e-3, 0.0, 0},
    {"adc", COL_CURRENT_RAW, 1.0, 0.0, 0},
    {"raw", COL_CURRENT_RAW, 1.0, 0.0, 0},
    {"counts", COL_CURRENT_RAW, 1.0, 0.0, 0},
    {"count", COL_CURRENT_RAW, 1.0, 0.0, 0},
    {"cnt", COL_CURRENT_RAW, 1.0, 0.0, 0},
    {"c", COL_TEMP, 1.0, 0.0, 0},
    {"degc", COL_TEMP, 1.0, 0.0, 0},
    {"\xc2\xb0"
     "c",
     COL_TEMP, 1.0, 0.0, 0},
    {"celsius", COL_TEMP, 1.0, 0.0, 0},
    {"k", COL_TEMP, 1.0, -273.15, 0},
    {"kelvin", COL_TEMP, 1.0, -273.15, 0},
};

struct base_entry {
    const char *base;
    enum col_role role;
};

/* Base names (unit removed), after lower-casing and punctuation to '_'. */
static const struct base_entry bases[] = {
    {"time", COL_TIME},
    {"t", COL_TIME},
    {"timestamp", COL_TIME},
    {"elapsed", COL_TIME},
    {"datetime", COL_TIME},
    {"date_time", COL_TIME},
    {"clock", COL_TIME},
    {"time_utc", COL_TIME},
    {"utc", COL_TIME},
    {"epoch", COL_TIME},
    {"unix_time", COL_TIME},
    {"time_unix", COL_TIME},
    {"test_time", COL_TIME},
    {"elapsed_time", COL_TIME},
    {"date", COL_DATE},
    {"voltage", COL_VOLTAGE},
    {"v", COL_VOLTAGE},
    {"volt", COL_VOLTAGE},
    {"vbat", COL_VOLTAGE},
    {"v_bat", COL_VOLTAGE},
    {"vpack", COL_VOLTAGE},
    {"v_pack", COL_VOLTAGE},
    {"bat_v", COL_VOLTAGE},
    {"batt_v", COL_VOLTAGE},
    {"u", COL_VOLTAGE},
    {"pack_voltage", COL_VOLTAGE},
    {"battery_voltage", COL_VOLTAGE},
    {"bat_voltage", COL_VOLTAGE},
    {"batt_voltage", COL_VOLTAGE},
    {"voltage_pack", COL_VOLTAGE},
    {"ubat", COL_VOLTAGE},
    {"batv", COL_VOLTAGE},
    {"battv", COL_VOLTAGE},
    {"packv", COL_VOLTAGE},
    {"current", COL_CURRENT},
    {"i", COL_CURRENT},
    {"ibat", COL_CURRENT},
    {"i_bat", COL_CURRENT},
    {"curr", COL_CURRENT},
    {"cur", COL_CURRENT},
    {"bata", COL_CURRENT},
    {"batta", COL_CURRENT},
    {"packa", COL_CURRENT},
    {"amps", COL_CURRENT},
    {"ipack", COL_CURRENT},
    {"i_pack", COL_CURRENT},
    {"pack_current", COL_CURRENT},
    {"battery_current", COL_CURRENT},
    {"bat_current", COL_CURRENT},
    {"batt_current", COL_CURRENT},
    {"bat_i", COL_CURRENT},
    {"batt_i", COL_CURRENT},
    {"temp", COL_TEMP},
    {"temperature", COL_TEMP},
    {"pack_temp", COL_TEMP},
    {"battery_temp", COL_TEMP},
    {"bat_temp", COL_TEMP},
    {"batt_temp", COL_TEMP},
    {"tbat", COL_TEMP},
    {"t_bat", COL_TEMP},
    {"pack_temperature", COL_TEMP},
};

/* Lower-case, every run of non-alphanumerics (bar UTF-8 bytes) to one '_',
 * no leading or trailing '_'. */
static size_t normalise(const char *in, size_t len, char *out, size_t cap)
{
    size_t n = 0;
    int pending = 0;
    for (size_t k = 0; k < len && n + 2 < cap; k++) {
        unsigned char c = (unsigned char)in[k];
        if (isalnum(c) || c >= 0x80) {
            if (pending && n > 0)
                out[n++] = '_';
            pending = 0;
            out[n++] = (char)tolower(c);
        } else {
            pending = 1;
        }
    }
    out[n] = '\0';
    return n;
}

static const struct unit_entry *find_unit(const char *u)
{
    for (size_t k = 0; k < sizeof units / sizeof *units; k++)
        if (strcmp(units[k].unit, u) == 0)
            return &units[k];
    return NULL;
}

static enum col_role find_base(const char *b)
{
    for (size_t k = 0; k < sizeof bases / sizeof *bases; k++)
        if (strcmp(bases[k].base, b) == 0)
            return bases[k].role;
    return COL_IGNORE;
}

/* Names of the battery that say nothing of the quantity: the unit does
 * ("Bat(V)", "Battery(V)", "Pack V", "bat_a"). Without a unit, ignored. */
static int battery_base(const char *b)
{
    static const char *const names[] = {"bat", "batt", "battery", "pack"};
    for (size_t k = 0; k < sizeof names / sizeof *names; k++)
        if (strcmp(names[k], b) == 0)
            return 1;
    return 0;
}

/* A raw-current base: a current name with a raw marker before or after. */
static int raw_current_base(const char *b)
{
    static const char *const raws[] = {"current_adc", "current_raw", "adc_current",   "raw_current",
                                       "i_adc",       "i_raw",       "ibat_adc",      "ibat_raw",
                                       "curr_adc",    "curr_raw",    "current_counts"};
    for (size_t k = 0; k < sizeof raws / sizeof *raws; k++)
        if (strcmp(raws[k], b) == 0)
            return 1;
    return 0;
}

/* "cell3", "cell_3", "vcell3", "v_cell_3", "c3v" is not accepted: too loose. */
static int cell_index(const char *b)
{
    const char *p = b;
    if (strncmp(p, "v_", 2) == 0)
        p += 2;
    else if (p[0] == 'v' && strncmp(p + 1, "cell", 4) == 0)
        p += 1;
    if (strncmp(p, "cell", 4) != 0)
        return 0;
    p += 4;
    if (*p == '_')
        p++;
    if (!isdigit((unsigned char)*p))
        return 0;
    char *end = NULL;
    long idx = strtol(p, &end, 10);
    if (*end == '_' && strcmp(end, "_v") == 0)
        end += 2; /* "cell_3_v" after a unit was already split is rare; accept */
    if (*end != '\0' || idx < 1 || idx > 64)
        return 0;
    return (int)idx;
}

int colname_parse(const char *name, size_t len, struct col_spec *out)
{
    char norm[NAME_MAX_LEN];
    memset(out, 0, sizeof *out);
    out->scale = 1.0;
    out->time = TIME_AUTO;
    normalise(name, len, norm, sizeof norm);
    if (norm[0] == '\0')
        return 0;

    /* Split a trailing unit token, if it is one we know. */
    const struct unit_entry *unit = NULL;
    char *us = strrchr(norm, '_');
    if (us && find_unit(us + 1)) {
        unit = find_unit(us + 1);
        *us = '\0';
    }
    /* a whole name of the table whose last token looks like a unit ("bat_v")
     * is that name, not a base without meaning and a unit */
    if (unit && find_base(norm) == COL_IGNORE && !battery_base(norm) && !raw_current_base(norm) &&
        !cell_index(norm)) {
        *us = '_';
        if (find_base(norm) != COL_IGNORE)
            unit = NULL;
        else
            *us = '\0';
    }

    enum col_role role = find_base(norm);
    if (role == COL_IGNORE && unit && battery_base(norm) &&
        (unit->role == COL_VOLTAGE || unit->role == COL_CURRENT || unit->role == COL_TEMP ||
         unit->role == COL_CURRENT_RAW))
        role = unit->role;
    int cell = 0;
    if (role == COL_IGNORE && raw_current_base(norm))
        role = COL_CURRENT_RAW;
    if (role == COL_IGNORE && (cell = cell_index(norm)) > 0)
        role = COL_CELL;
    if (role == COL_IGNORE && !unit) {
        /* a bare unit as the whole name: "V", "A", "mV" */
        const struct unit_entry *only = find_unit(norm);
        if (only && only->role != COL_TEMP && only->role != COL_TIME)
            role = only->role, unit = only;
    }
    if (role == COL_IGNORE)
        return 0;

    if (unit) {
        enum col_role unit_role = unit->role;
        /* "current" with a raw unit is raw counts */
        if (role == COL_CURRENT && unit_role == COL_CURRENT_RAW) {
            role = COL_CURRENT_RAW;
        } else {
            enum col_role want = role == COL_CELL   ? COL_VOLTAGE
                                 : role == COL_DATE ? COL_TIME
                                                    : role;
            /* "t" with "c" would be temperature in some loggers, but "t" is
             * time here; a time base with a temperature unit is rejected */
            if (want != unit_role && !(want == COL_CURRENT_RAW && unit_role == COL_CURRENT_RAW))
                return -1;
        }
        out->scale = unit->scale;
        out->offset = unit->offset;
        out->unit_given = 1;
        if (role == COL_TIME)
            out->time = unit->time;
    }
    out->role = role;
    out->cell = cell;
    return 0;
}

const char *colname_role_name(enum col_role role)
{
    switch (role) {
    case COL_IGNORE:
        return "ignored";
    case COL_TIME:
        return "time";
    case COL_VOLTAGE:
        return "voltage";
    case COL_CURRENT:
        return "current";
    case COL_CURRENT_RAW:
        return "current (ADC counts)";
    case COL_TEMP:
        return "temperature";
    case COL_CELL:
        return "cell voltage";
    case COL_DATE:
        return "date";
    }
    return "?";
}
