/* packopts: a pack's remembered reading and analysis settings (cut-off,
 * sense chain, column map, current sign, ...: the options of logopts),
 * stored with the pack as "name=value" lines and used by every verb given
 * --pack, under the options given on the command line.
 *
 * Owns nothing: struct packopts_seen points into argv. */
#ifndef PB_PACKOPTS_H
#define PB_PACKOPTS_H

#include "logopts.h"

#define PACKOPTS_MAX 64

/* The reading options given on one command line, in order. */
struct packopts_seen {
    int n;
    int c[PACKOPTS_MAX];
    const char *arg[PACKOPTS_MAX];
};

/* Records option c (an id of logopts_table) with its value; returns 1 when c
 * is one, 0 otherwise, -1 (err filled) when there are too many. */
int packopts_note(struct packopts_seen *seen, int c, const char *arg, struct pb_error *err);

/* Rebuilds *log from the settings file's reading defaults, then the pack's
 * settings over them, then the options seen on the command line over both
 * (a later layer that gives any ADC or sense-chain option replaces the
 * earlier layers' whole chain), keeping log's cells, chemistry, capacity
 * and fewest samples; checks the result (logopts_finish). settings (NULL: none)
 * is split into its lines in place and must outlive log, which points
 * into it. */
enum pb_code packopts_apply(char *settings, const struct packopts_seen *seen, struct log_cli *log,
                            struct pb_error *err);

/* The settings old with the options seen merged over them (same rule as
 * packopts_apply), checked, as "name=value" lines in the options' order;
 * clear drops old first. */
enum pb_code packopts_merge(const char *old, const struct packopts_seen *seen, int clear, char *out,
                            size_t cap, struct pb_error *err);

/* Whether name (len bytes) is a reading option's long name. */
int packopts_known(const char *name, size_t len);

/* The settings as command-line text ("--floor 3.4 --adc-bits 12"), or
 * "(none)". */
void packopts_describe(const char *settings, char *out, size_t cap);

#endif
