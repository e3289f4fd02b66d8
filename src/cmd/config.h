/* config: the settings file, read once by main.c before a command runs.
 *
 * $PACKBOOK_CONFIG, else $XDG_CONFIG_HOME/packbook/config, else
 * ~/.config/packbook/config; a missing file is no error. Format: one
 * "key = value" per line, '#' starts a comment line; keys: db,
 * retire-capacity, retire-r0-ratio, retire-imbalance (retire-spread),
 * retire-overdischarge, reserve, and the reading options of analyze
 * (cut-off, map, current-sign, ...) as defaults for every log. Options
 * given on the command line override it (a pack's remembered settings
 * too); for the database $PACKBOOK_DB does too.
 *
 * Owns one read-only table filled by config_load (the only state of the
 * command layer: read once, never written after). */
#ifndef PB_CONFIG_H
#define PB_CONFIG_H

#include "../core/health.h"
#include "cmd.h"
#include "opt.h"

/* Reads the file; a malformed one is a usage error naming file:line. */
enum pb_code config_load(struct pb_error *err);

/* The database path the file sets, or NULL. */
const char *config_db(void);

/* The default rules with the file's retirement levels over them (the
 * watch levels follow as for the options). */
void config_rules(struct health_rules *r);

/* The landing reserve for predictions (%): the file's, else the default. */
double config_reserve(void);

/* The one entry of the landing reserve (--reserve, the file's 'reserve'):
 * range, default (PREDICT_RESERVE_PCT) and help, written once; its value
 * goes into a double (offset 0), for predict's and config's option groups. */
extern const struct opt config_reserve_table[];

/* The file's reading defaults as "name=value" lines ("" when none). */
const char *config_reading(void);

#endif
