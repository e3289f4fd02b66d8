/* logread: one flight log (CSV-like text) into a series.
 *
 * Owns the dialect detection and the per-sample checks. Reads a FILE in
 * large blocks through libcsv (plain lines split by its own fast path, the
 * same fields; lines of plain numbers read in one walk, the same numbers)
 * and never holds the whole text; past the first block of a long log, a
 * second thread reads ahead when a core is free and both threads parse
 * (the same fields and numbers, taken in the same order). Every sample
 * it drops or repairs is counted in struct logread_stats with the first
 * place (line, column) it happened. The caller owns the returned series.
 *
 * Plausibility: a sample no pack can produce is a glitch, dropped and
 * counted: a per-cell voltage outside 0.5..5 V (pack voltage over the cell
 * count when it is known), |current| above LOGREAD_MAX_CURRENT_A, or above
 * LOGREAD_MAX_C_RATE times the rated capacity when that is known, and a
 * voltage that leaves both neighbours by more than a fifth for one sample
 * while the current holds steady across the three (a spike: never a floor
 * crossing; a current step on either side explains the voltage).
 *
 * Time order: a lone row behind (or ahead of) its neighbours is a stray,
 * dropped and counted; a restart (time jumps back and goes on) starts a new
 * segment of the series (series.h), counted. A time column that goes back
 * at very many places is refused as not a clock. */
#ifndef PB_LOGREAD_H
#define PB_LOGREAD_H

#include <stdio.h>

#include "colname.h"
#include "pb_error.h"
#include "series.h"

#define LOGREAD_MAX_COLUMNS 1024
#define LOGREAD_MAX_FIELD_BYTES 65536
#define LOGREAD_CELL_MIN_V 0.5      /* no Li cell reads below this and works (issue 10) */
#define LOGREAD_CELL_MAX_V 5.0      /* nor above this (LiHV charges to 4.35-4.45 V) */
#define LOGREAD_MAX_C_RATE 200.0    /* |current| / rated capacity (1/h) no pack delivers */
#define LOGREAD_MAX_CURRENT_A 1.0e5 /* whatever the pack: a sentinel, not a current */
#define LOGREAD_SPIKE_FRACTION 0.2  /* one-sample voltage jump, of the neighbours' voltage */

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
    int cells;          /* series cells when known (0: unknown), for the voltage check */
    int pack_cells;     /* the pack's cells when known but not to bound voltages (import
                           judges the cell count itself): which cell columns are the
                           pack's when one is dropped; 0: cells */
    double rated_mah;   /* rated capacity when known (0: unknown), for the current check */
    /* called with every block of raw bytes as read (e.g. to hash the log) */
    void (*on_block)(void *ctx, const char *buf, size_t len);
    void *block_ctx;
    int no_fast_path; /* every line through libcsv (tests compare the two paths) */
    int ahead_split;  /* who parses a long log's blocks after the first (tests take each
                         way): LOGREAD_SPLIT_BOTH, _THREAD or _READER */
};

enum {
    LOGREAD_SPLIT_BOTH = 0, /* both threads, whichever is free (the default) */
    LOGREAD_SPLIT_THREAD,   /* the read-ahead thread parses every block into tables */
    LOGREAD_SPLIT_READER,   /* the reading thread parses every block itself */
};

/* A cell column left out: the log is read with the other cells. */
struct logread_cell_drop {
    int cell;          /* 1-based cell number */
    int column;        /* 1-based column, 0: no such column (or --map named none there) */
    size_t unreadable; /* samples whose value was no cell voltage (most or all) */
    size_t read;       /* samples whose value was one (dropped with the column) */
    int above_pack;    /* numbered above every cell read and the given count: unused */
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
    int time_unit_given; /* the time column's name (or --columns/--map) carried a unit */
    int ignored_columns;
    char ignored_names[512]; /* the ignored columns' names, ", "-separated ("..." when cut) */
    int time_is_clock;       /* times of day (HH:MM:SS): relative, across midnight */
    int date_column;         /* 1-based column of dates joined to the times of day, 0 = none */
    int sign_flipped;        /* auto-detected discharge-negative and flipped */
    int voltage_from_cells;
    int ncells_dropped; /* cell columns with no voltage at all: dropped, the log read */
    struct logread_cell_drop cell_dropped[PB_MAX_CELLS];
    int cells_in_pack;                   /* cells the cell columns stand for (dropped ones too) */
    int cells_voltage_estimated;         /* pack voltage from cells with one missing: scaled up */
    struct logread_event bad_number;     /* text where a number was due: sample dropped */
    struct logread_event nonfinite;      /* nan/inf/overflow: sample dropped */
    struct logread_event empty_field;    /* empty required field: sample dropped */
    struct logread_event short_row;      /* too few fields: sample dropped */
    struct logread_event long_row;       /* more fields than the header: extras ignored */
    struct logread_event duplicate_time; /* same time as the previous sample: dropped */
    struct logread_event temp_repaired;  /* bad temperature: previous value kept */
    struct logread_event duplicate_role; /* a second column for the same role: ignored */
    int truncated_last_line;             /* last line had no newline and was short */
    struct logread_event glitch_voltage; /* voltage no cell shows: sample dropped */
    struct logread_event glitch_current; /* current no pack delivers: sample dropped */
    struct logread_event glitch_spike;   /* one-sample voltage spike: sample dropped */
    struct logread_event stray_time;     /* a lone row out of time order: dropped */
    struct logread_event clock_restart;  /* time jumped back and went on: new segment */
    size_t time_back_steps;              /* times seen going back (strays and restarts) */
};

/* Reads a log. name is used in messages ("-" for stdin). On success
 * returns a series (owned by the caller) with at least two samples;
 * on failure NULL with err set, messages in the form
 * "NAME:LINE:COLUMN: what was expected". stats is always filled. */
struct series *logread_file(FILE *fp, const char *name, const struct logread_opts *opts,
                            struct logread_stats *stats, struct pb_error *err);

/* Samples dropped for any reason (the reader's counted events). */
size_t logread_dropped(const struct logread_stats *st);

/* Calls emit(ctx, code, message) once for each kind of plausibility and
 * time-order event in st (glitch_voltage, glitch_current, glitch_spike,
 * stray_time, clock_restart), with the count and the first place
 * "NAME:LINE:COLUMN", and once per dropped cell column (cell_dropped, or
 * cell_unused above the pack's cells) and for a pack voltage estimated
 * from cells with one missing (pack_voltage_estimated). The other reader
 * events are worded by analyze. */
void logread_warnings(const struct logread_stats *st, const char *name,
                      void (*emit)(void *ctx, const char *code, const char *message), void *ctx);

/* Sense-chain calibration: amps per ADC count for a current-sense output
 * of I/ratio through r_ohm, read by a bits-bit ADC with reference vref_v. */
double logread_adc_a_per_count(int bits, double vref_v, double ratio, double r_ohm);

#endif
