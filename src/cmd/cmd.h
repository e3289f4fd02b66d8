/* cmd: one function per subcommand, called from the table in main.c.
 *
 * Adding a subcommand: (1) write src/cmd/<verb>.c with cmd_<verb>() and its
 * option table, parsed by opt_parse (opt.h),
 * (2) add its row to the table in main.c, (3) add a CLI test under
 * tests/cli/, (4) document it in man/packbook.1, README and --help.
 *
 * A command returns a pb_code; on failure it has filled err, which main
 * prints once. Commands may print their results and usage text. */
#ifndef PB_CMD_H
#define PB_CMD_H

#include <stdio.h>

#include "../core/pb_error.h"
#include "../core/stage.h"

struct app {
    const char *prog; /* argv[0] as shown in messages */
    int some_failed;  /* a batch command had failures: exit status 1 */
};

enum pb_code cmd_analyze(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_chemistry(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_pack(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_import(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_flight(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_fleet(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_trend(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_compare(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_predict(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_sync(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_db(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_config(int argc, char **argv, struct app *app, struct pb_error *err);
enum pb_code cmd_plot(int argc, char **argv, struct app *app, struct pb_error *err);

/* A numeric constant as text, for an option table's default. */
#define CMD_STR_(x) #x
#define CMD_STR(x) CMD_STR_(x)

/* Parses a number option value; returns 0 or fills err (usage). */
int cmd_parse_double(const char *opt, const char *val, double lo, double hi, double *out,
                     struct pb_error *err);
int cmd_parse_int(const char *opt, const char *val, int lo, int hi, int *out, struct pb_error *err);

/* The index of val among words (a NULL-terminated list) compared in any
 * case, so --by Week and current-sign = Discharge-Negative read as written
 * in lower case; -1 with err filled (usage: "OPT: expected a, b or c, got
 * 'V'") when it is none of them. */
int cmd_keyword(const char *opt, const char *val, const char *const *words, struct pb_error *err);

/* The usage error for an option getopt_long did not know or that lacked
 * its value; verb names the command for the hint. */
enum pb_code cmd_bad_option(const char *verb, int argc, char **argv, struct pb_error *err);

/* qsort comparison for doubles, ascending. */
int cmd_cmp_double(const void *a, const void *b);

/* Opens a log for reading: a folder is refused with a message, a named pipe is
 * opened without blocking. NULL with err filled (PB_EINPUT). */
FILE *cmd_open_log(const char *path, struct pb_error *err);

/* Flushes stdout and checks every write reached it. */
enum pb_code cmd_finish_stdout(struct pb_error *err);

/* With PACKBOOK_STAGES set in the environment, a hook (core/stage.h) that
 * writes each stage's label and its start in milliseconds from the first
 * stage's to stderr, a line each ("stage LABEL MS"), for bench/stages;
 * else NULL. For one analysis in one thread (analyze). */
const struct stage_hook *cmd_stage_hook(void);

#endif
