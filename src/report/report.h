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

/* The milliohm symbol of text output: "mΩ" when set_utf8 was called with 1
 * (main.c does when standard output is a UTF-8 terminal), else "mOhm".
 * Figures always draw the Ω. JSON and CSV carry no units in values. */
void report_set_utf8(int utf8);
const char *report_mohm(void);

/* s with every "mOhm" written as report_mohm() (into buf, cut to cap). */
const char *report_units(const char *s, char *buf, size_t cap);

/* A printf width for s that pads to `width` display columns although s
 * may hold multi-byte UTF-8 characters. */
int report_width(const char *s, int width);

/* Chemistry tables, for `packbook chemistry`. */
int report_chemistry_json(FILE *out);
int report_chemistry_text(FILE *out);

#endif
