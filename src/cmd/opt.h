/* opt: one option table per verb. Each entry says the option's long name,
 * an old name still accepted, a short letter, its kind, where its value
 * goes (an offset into the struct of its group), the range or the words
 * accepted, its default and its help line. From the tables opt_parse builds
 * getopt_long's array, checks and stores every value (a usage error names
 * the option, the value and what was expected), and prints --help with the
 * defaults and --list-options; no verb keeps a switch of its own for
 * parsing, only a hook for what a value does beyond being stored.
 *
 * Adding an option: one entry in the verb's table (or a shared group:
 * logopts, ruleopts, trendopts), its line in man/packbook.1 and README
 * when user-visible; tests/cli/test_options.py checks the man page and
 * --help name every entry.
 *
 * Owns nothing: the tables are static, values point into argv. */
#ifndef PB_OPT_H
#define PB_OPT_H

#include <stddef.h>
#include <stdio.h>

#include "../core/pb_error.h"

enum opt_kind {
    OPT_FLAG,    /* no value: stores set (int) */
    OPT_INT,     /* a whole number in [lo, hi] (int) */
    OPT_DOUBLE,  /* a number in [lo, hi], no unit, no hex, no inf (double) */
    OPT_KEYWORD, /* one of words, in any case: stores values[k], or k (int) */
    OPT_STRING,  /* any text (const char *) */
    OPT_PATH,    /* a file name, not empty (const char *) */
};

#define OPT_NOWHERE ((size_t)-1) /* the hook takes the value; nothing stored */

struct opt {
    const char *name;         /* long name without "--"; NULL ends a table */
    const char *alias;        /* an old name still accepted, or NULL */
    int letter;               /* short option letter, or 0 */
    enum opt_kind kind;       /* what the value is */
    int id;                   /* the verb's code for it, given to hooks (0: none) */
    size_t off;               /* where the value goes in its group's struct, or OPT_NOWHERE */
    double lo, hi;            /* OPT_INT, OPT_DOUBLE: the range accepted */
    const char *const *words; /* OPT_KEYWORD: the words accepted, NULL-terminated */
    const int *values;        /* OPT_KEYWORD: what each word stores (NULL: its index) */
    int set;                  /* OPT_FLAG: the value stored */
    const char *def;          /* the default as the option would take it (opt_defaults stores
                                 it, --help shows it), or NULL */
    const char *meta;         /* the value's name in --help ("V", "PATH") */
    const char *what;         /* OPT_INT, OPT_DOUBLE: what is expected, in messages ("a
                                 count"; NULL: "a whole number", "a number") */
    const char *help;         /* --help text; a '\n' starts a continuation line */
};

/* Called after a value of group's table is stored (or, for OPT_NOWHERE,
 * instead): 0, or -1 with err filled (usage). */
typedef int (*opt_after_fn)(void *base, const struct opt *o, const char *val, struct pb_error *err);

struct opt_group {
    const char *title;      /* heading in --help ("reading the log:"), or NULL */
    const struct opt *opts; /* the table */
    void *base;             /* the struct the offsets point into */
    opt_after_fn after;     /* the group's own follow-up, or NULL */
};

#define OPT_MAX_GROUPS 8

struct opt_cmd {
    const char *verb;  /* for messages and the --help hint ("plot", "pack pair") */
    const char *usage; /* the text --help prints before the options */
    const char *tail;  /* and after them, or NULL */
    struct opt_group groups[OPT_MAX_GROUPS];
    int ngroups;
    /* called for every option given, after its group: 0, or -1 with err filled */
    int (*hook)(void *ctx, const struct opt *o, const char *val, struct pb_error *err);
    void *ctx;
};

/* Parses argv (options anywhere; optind is left at the first operand, as
 * getopt_long leaves it). --help prints the help, --list-options the long
 * names and old names one a line; either sets *done. An unknown option or
 * a missing value is a usage error (PB_EUSAGE). */
enum pb_code opt_parse(const struct opt_cmd *cmd, int argc, char **argv, int *done,
                       struct pb_error *err);

/* Checks val as option o takes it and stores it into base (o->off):
 * 0, or -1 with err filled (usage: "--name: expected ..., got 'val'"). */
int opt_take(const struct opt *o, void *base, const char *val, struct pb_error *err);

/* Stores every default (o->def) of the table into base. */
void opt_defaults(const struct opt *opts, void *base);

/* The entry named name (len bytes; its long name or old name), or NULL. */
const struct opt *opt_by_name(const struct opt *opts, const char *name, size_t len);

/* The entry with id, or NULL. */
const struct opt *opt_by_id(const struct opt *opts, int id);

/* Prints cmd's help: the usage text, each group's options with their
 * defaults and old names, the tail. */
void opt_help(FILE *out, const struct opt_cmd *cmd);

#endif
