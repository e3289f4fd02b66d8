/* logopts: the options that say how to read and analyse a log, shared by
 * every command that reads logs (analyze, import), and the one pipeline
 * that runs them: file -> logread -> analyze. */
#ifndef PB_LOGOPTS_H
#define PB_LOGOPTS_H

#include <getopt.h>

#include "../core/analyze.h"
#include "../core/logread.h"
#include "../core/plausible.h"
#include "cmd.h"

enum {
    LO_FLOOR = 300,
    LO_COLUMNS,
    LO_MAP,
    LO_DELIM,
    LO_DECIMAL,
    LO_SIGN,
    LO_ADC_SCALE,
    LO_ADC_OFFSET,
    LO_ADC_BITS,
    LO_ADC_VREF,
    LO_SENSE_RATIO,
    LO_SENSE_OHM,
    LO_GAP,
    LO_REST,
    LO_FIT,
    LO_CELLS,
    LO_CHEM,
    LO_CAP,
};

/* Entries for a command's getopt_long table. */
#define LOGOPTS_LONG                                                                               \
    {"cut-off", required_argument, NULL, LO_FLOOR},                                                \
        {"floor", required_argument, NULL, LO_FLOOR}, /* the old name, kept */                     \
        {"columns", required_argument, NULL, LO_COLUMNS},                                          \
        {"map", required_argument, NULL, LO_MAP},                                                  \
        {"delimiter", required_argument, NULL, LO_DELIM},                                          \
        {"decimal", required_argument, NULL, LO_DECIMAL},                                          \
        {"current-sign", required_argument, NULL, LO_SIGN},                                        \
        {"adc-scale", required_argument, NULL, LO_ADC_SCALE},                                      \
        {"adc-offset", required_argument, NULL, LO_ADC_OFFSET},                                    \
        {"adc-bits", required_argument, NULL, LO_ADC_BITS},                                        \
        {"adc-vref", required_argument, NULL, LO_ADC_VREF},                                        \
        {"sense-ratio", required_argument, NULL, LO_SENSE_RATIO},                                  \
        {"sense-ohm", required_argument, NULL, LO_SENSE_OHM},                                      \
        {"gap", required_argument, NULL, LO_GAP},                                                  \
        {"rest-current", required_argument, NULL, LO_REST},                                        \
    {                                                                                              \
        "fit", required_argument, NULL, LO_FIT                                                     \
    }

/* The pack of a single log, for commands that read one without the
 * history (analyze, predict --log): --cells, --chemistry, --capacity. */
#define LOGOPTS_PACK_LONG                                                                          \
    {"cells", required_argument, NULL, LO_CELLS}, {"chemistry", required_argument, NULL, LO_CHEM}, \
    {                                                                                              \
        "capacity", required_argument, NULL, LO_CAP                                                \
    }

/* The help text for those options. */
extern const char logopts_usage[];

struct log_cli {
    struct logread_opts read;
    struct analyze_opts an;
    int refuse_implausible; /* a log no flight can be (plausible.h) fails, naming why */
    /* the reader bounds each sample's voltage by the pack-independent limits
     * only, not by an.cells: the caller judges the cell count itself (import
     * checks the log against its pack and says so) */
    int read_without_cells;
    int adc_bits;
    double adc_vref, sense_ratio, sense_ohm;
};

void logopts_init(struct log_cli *cli);

/* Takes option c if it is one of LOGOPTS_LONG: returns 1 (taken), 0 (not
 * ours) or -1 (bad value, err filled). */
int logopts_take(int c, const char *arg, struct log_cli *cli, struct pb_error *err);

/* Checks the options together (the sense chain) once all are parsed. */
enum pb_code logopts_finish(struct log_cli *cli, struct pb_error *err);

/* Reads and analyses one log ("-" is stdin), then checks it as a whole
 * (plausible.h): findings become warnings, and with refuse_implausible a
 * log that cannot be one flight fails with PB_EINPUT. On success *stats is filled
 * and *out is an analysis owned by the caller (analysis_free); so is the
 * series in *series_out when that is not NULL (series_free). */
enum pb_code logopts_analyze(const char *path, const struct log_cli *cli,
                             struct logread_stats *stats, struct analysis **out,
                             struct series **series_out, struct pb_error *err);

#endif
