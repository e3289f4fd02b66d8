/* report: writers for analysis results (text for people, JSON for tools).
 *
 * Owns nothing; reads a struct analysis and writes to a FILE. Returns 0,
 * or -1 when writing failed (the caller reports it). NAN values become
 * JSON null and "unknown" in text. */
#ifndef PB_REPORT_H
#define PB_REPORT_H

#include <stdio.h>

#include "../core/analyze.h"
#include "../core/logread.h"

struct report_input {
    const char *name;                  /* the log's name as given */
    const struct logread_stats *stats; /* how it was read */
    const struct analyze_opts *opts;
    int plain_fit;
};

int report_analysis_json(FILE *out, const struct analysis *a, const struct report_input *in);
int report_analysis_text(FILE *out, const struct analysis *a, const struct report_input *in);

/* Chemistry tables, for `packbook chemistry`. */
int report_chemistry_json(FILE *out);
int report_chemistry_text(FILE *out);

#endif
