/* logopts: the options that say how to read and analyse a log, shared by
 * every command that reads logs (analyze, import), and the one pipeline
 * that runs them: file -> logread -> analyze. */
#ifndef PB_LOGOPTS_H
#define PB_LOGOPTS_H

#include "../core/analyze.h"
#include "../core/logread.h"
#include "../core/plausible.h"
#include "cmd.h"
#include "opt.h"

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

/* The reading and analysis options (their values go into struct log_cli),
 * for a verb's option groups and for the settings a pack or the settings
 * file remembers (packopts, config: by name, without the dashes). */
extern const struct opt logopts_table[];

/* The pack of a single log, for commands that read one without the
 * history (analyze, plot, predict --log): --cells, --chemistry, --capacity. */
extern const struct opt logopts_pack_table[];

/* The follow-up of those options' values (the ADC flag, the delimiter's
 * words, the chemistry's id): an opt_after_fn with base a struct log_cli. */
int logopts_after(void *base, const struct opt *o, const char *val, struct pb_error *err);

#define LOGOPTS_GROUP(cli)                                                                         \
    {                                                                                              \
        "reading the log, and analysis:", logopts_table, (cli), logopts_after                      \
    }
#define LOGOPTS_PACK_GROUP(cli, title)                                                             \
    {                                                                                              \
        (title), logopts_pack_table, (cli), logopts_after                                          \
    }

/* Whether o is one of logopts_table's (a reading option a pack remembers). */
int logopts_is_reading(const struct opt *o);

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

/* Takes the option with id c if it is one of logopts_table or
 * logopts_pack_table: returns 1 (taken), 0 (not ours) or -1 (bad value, err
 * filled). */
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
