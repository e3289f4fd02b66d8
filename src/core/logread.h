/* logread: one flight log (CSV-like text) into a series.
 *
 * Owns the dialect detection and the per-sample checks. Reads a FILE in
 * large blocks through libcsv and never holds the whole text. Every sample
 * it drops or repairs is counted in struct logread_stats with the first
 * place (line, column) it happened. The caller owns the returned series. */
#ifndef PB_LOGREAD_H
#define PB_LOGREAD_H

#include <stdio.h>

#include "colname.h"
#include "pb_error.h"
#include "series.h"

#define LOGREAD_MAX_COLUMNS 1024
#define LOGREAD_MAX_FIELD_BYTES 65536

enum current_sign {
    SIGN_AUTO = 0, /* discharge positive unless the data clearly say otherwise */
    SIGN_DISCHARGE_POSITIVE,
    SIGN_DISCHARGE_NEGATIVE,
};

struct logread_opts {
    const char *columns; /* positional layout, comma-separated names, "-" skips */
    const char *map;     /* overrides "ROLE[_UNIT]=NAME|INDEX,..." */
    char delimiter;      /* 0: detect among , ; tab */
    char decimal;        /* 0: detect ('.' or ',') */
    enum current_sign sign;
    int have_adc; /* raw current calibration given */
    double adc_a_per_count;
    double adc_offset_counts;
    size_t min_samples; /* fewest usable samples accepted; 0 means 2 (what analysis needs) */
    /* called with every block of raw bytes as read (e.g. to hash the log) */
    void (*on_block)(void *ctx, const char *buf, size_t len);
    void *block_ctx;
};

/* A counted event: how often, and where first. */
struct logread_event {
    size_t count;
    size_t first_line;
    int first_column;
};

struct logread_stats {
    char delimiter;
    char decimal;
    int bom;
    int has_header;
    size_t header_line;
    size_t lines; /* physical lines seen */
    size_t comment_lines;
    size_t records; /* data records seen (kept or not) */
    size_t kept;
    int time_column, voltage_column, current_column, temp_column; /* 1-based, 0 = none */
    int current_is_raw;
    int time_is_iso;
    int time_is_epoch;
    int ignored_columns;
    char ignored_names[512]; /* the ignored columns' names, ", "-separated ("..." when cut) */
    int time_is_clock;       /* times of day (HH:MM:SS): relative, across midnight */
    int date_column;         /* 1-based column of dates joined to the times of day, 0 = none */
    int sign_flipped;        /* auto-detected discharge-negative and flipped */
    int voltage_from_cells;
    struct logread_event bad_number;     /* text where a number was due: sample dropped */
    struct logread_event nonfinite;      /* nan/inf/overflow: sample dropped */
    struct logread_event empty_field;    /* empty required field: sample dropped */
    struct logread_event short_row;      /* too few fields: sample dropped */
    struct logread_event long_row;       /* more fields than the header: extras ignored */
    struct logread_event duplicate_time; /* same time as the previous sample: dropped */
    struct logread_event temp_repaired;  /* bad temperature: previous value kept */
    struct logread_event duplicate_role; /* a second column for the same role: ignored */
    int truncated_last_line;             /* last line had no newline and was short */
};

/* Reads a log. name is used in messages ("-" for stdin). On success
 * returns a series (owned by the caller) with at least two samples;
 * on failure NULL with err set, messages in the form
 * "NAME:LINE:COLUMN: what was expected". stats is always filled. */
struct series *logread_file(FILE *fp, const char *name, const struct logread_opts *opts,
                            struct logread_stats *stats, struct pb_error *err);

/* Sense-chain calibration: amps per ADC count for a current-sense output
 * of I/ratio through r_ohm, read by a bits-bit ADC with reference vref_v. */
double logread_adc_a_per_count(int bits, double vref_v, double ratio, double r_ohm);

#endif
