/* config: the settings file, and 'packbook config' that shows what is in force. */
#include "config.h"

#include <ctype.h>
#include <getopt.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "../core/predict.h"
#include "../report/jsonout.h"
#include "packopts.h"
#include "packview.h"

struct entry {
    const char *key;
    int opt; /* the command-line option with the same meaning (RO_*), or 0 */
    const char *help;
    char value[1024];
    char where[1100]; /* "file:line" when the file set it */
};

static struct entry entries[] = {
    {"db", 0, "history database path", "", ""},
    {"retire-capacity", RO_CAP, "retire at capacity <= PCT % of rated", "", ""},
    {"retire-r0-ratio", RO_R0, "retire at R0 >= X times its baseline", "", ""},
    {"retire-imbalance", RO_SPREAD, "retire at resting cell imbalance >= MV", "", ""},
    {"retire-overdischarge", RO_OVER, "retire after N flights under the cut-off", "", ""},
    {"reserve", 0, "landing reserve SoC % for predict", "", ""},
};
#define NENTRIES (sizeof entries / sizeof *entries)

static char config_path[1024];

/* reading defaults: "name=value" lines, and where each came from */
#define READING_MAX 32
static char reading[1024];
static struct {
    char name[32], value[256], where[1100];
} reading_src[READING_MAX];
static int nreading;

static void find_path(void)
{
    const char *env = getenv("PACKBOOK_CONFIG");
    const char *xdg = getenv("XDG_CONFIG_HOME");
    const char *home = getenv("HOME");
    if (env && *env)
        snprintf(config_path, sizeof config_path, "%s", env);
    else if (xdg && *xdg == '/')
        snprintf(config_path, sizeof config_path, "%s/packbook/config", xdg);
    else if (home && *home)
        snprintf(config_path, sizeof config_path, "%s/.config/packbook/config", home);
    else
        config_path[0] = '\0';
}

static char *trim(char *s)
{
    while (isspace((unsigned char)*s))
        s++;
    size_t n = strlen(s);
    while (n > 0 && isspace((unsigned char)s[n - 1]))
        s[--n] = '\0';
    return s;
}

/* Checks a value as its option would: 0, or -1 with err filled. */
static int check_value(const struct entry *e, const char *v, struct pb_error *err)
{
    struct health_rules r;
    double x;
    health_rules_default(&r);
    if (e->opt)
        return ruleopts_take(e->opt, v, &r, err) < 0 ? -1 : 0;
    if (strcmp(e->key, "reserve") == 0)
        return opt_take(config_reserve_table, &x, v, err);
    if (!*v) {
        pb_error_set(err, PB_EUSAGE, "db: give a path");
        return -1;
    }
    return 0;
}

enum pb_code config_load(struct pb_error *err)
{
    find_path();
    if (!config_path[0])
        return PB_OK;
    FILE *f = fopen(config_path, "r");
    if (!f)
        return PB_OK; /* no file: the defaults */
    char line[1200];
    int no = 0;
    enum pb_code rc = PB_OK;
    while (rc == PB_OK && fgets(line, sizeof line, f)) {
        no++;
        if (!strchr(line, '\n') && !feof(f)) {
            rc = pb_error_set(err, PB_EUSAGE, "%s:%d: line too long", config_path, no);
            break;
        }
        char *s = trim(line);
        if (!*s || *s == '#')
            continue;
        char *eq = strchr(s, '=');
        if (!eq) {
            rc = pb_error_set(err, PB_EUSAGE, "%s:%d: expected 'key = value', got '%s'",
                              config_path, no, s);
            break;
        }
        *eq = '\0';
        char *key = trim(s), *val = trim(eq + 1);
        struct entry *e = NULL;
        const struct opt *ro = opt_by_name(ruleopts_table, key, strlen(key));
        if (ro) /* an old name (retire-spread) reads as the new */
            key = (char *)ro->name;
        for (size_t k = 0; k < NENTRIES; k++)
            if (strcmp(entries[k].key, key) == 0)
                e = &entries[k];
        if (!e && packopts_known(key, strlen(key))) {
            /* a reading default: checked with the others once all are read */
            size_t used = strlen(reading);
            if (nreading >= READING_MAX || strchr(val, '\n') ||
                used + strlen(key) + strlen(val) + 3 > sizeof reading) {
                rc = pb_error_set(err, PB_EUSAGE, "%s:%d: too many reading defaults", config_path,
                                  no);
                break;
            }
            snprintf(reading + used, sizeof reading - used, "%s=%s\n", key, val);
            snprintf(reading_src[nreading].name, sizeof reading_src[0].name, "%s", key);
            snprintf(reading_src[nreading].value, sizeof reading_src[0].value, "%s", val);
            snprintf(reading_src[nreading].where, sizeof reading_src[0].where, "%s:%d", config_path,
                     no);
            nreading++;
            continue;
        }
        if (!e) {
            rc = pb_error_set(err, PB_EUSAGE,
                              "%s:%d: unknown key '%s' (db, retire-capacity, retire-r0-ratio, "
                              "retire-imbalance, retire-overdischarge, reserve, or a reading "
                              "option of analyze such as cut-off)",
                              config_path, no, key);
            break;
        }
        struct pb_error e2 = {PB_OK, ""};
        if (check_value(e, val, &e2) != 0) {
            rc = pb_error_set(err, PB_EUSAGE, "%s:%d: %s", config_path, no, e2.msg);
            break;
        }
        snprintf(e->value, sizeof e->value, "%s", val);
        snprintf(e->where, sizeof e->where, "%s:%d", config_path, no);
    }
    if (rc == PB_OK && ferror(f))
        rc = pb_error_set(err, PB_EUSAGE, "cannot read '%s'", config_path);
    fclose(f);
    if (rc == PB_OK && reading[0]) {
        /* the reading defaults together, as every log will be read with them */
        char merged[1024];
        struct packopts_seen none = {0};
        struct pb_error e2 = {PB_OK, ""};
        char mine[1024];
        snprintf(mine, sizeof mine, "%s", reading);
        reading[0] = '\0'; /* not yet in force while it is checked */
        if (packopts_merge(mine, &none, 0, merged, sizeof merged, &e2) != PB_OK)
            rc = pb_error_set(err, PB_EUSAGE, "%s: reading defaults: %s", config_path, e2.msg);
        else
            snprintf(reading, sizeof reading, "%s", mine);
    }
    return rc;
}

static struct entry *entry_of(const char *key)
{
    for (size_t k = 0; k < NENTRIES; k++)
        if (strcmp(entries[k].key, key) == 0)
            return &entries[k];
    return NULL;
}

const char *config_db(void)
{
    const struct entry *e = entry_of("db");
    return e->value[0] ? e->value : NULL;
}

void config_rules(struct health_rules *r)
{
    struct pb_error err = {PB_OK, ""};
    health_rules_default(r);
    for (size_t k = 0; k < NENTRIES; k++)
        if (entries[k].opt && entries[k].value[0])
            (void)ruleopts_take(entries[k].opt, entries[k].value, r, &err); /* checked at load */
}

const char *config_reading(void)
{
    return reading;
}

double config_reserve(void)
{
    const struct entry *e = entry_of("reserve");
    return e->value[0] ? strtod(e->value, NULL) : (double)PREDICT_RESERVE_PCT;
}

/* ---- packbook config ---------------------------------------------------- */

static const char usage[] =
    "usage: packbook config [--db PATH] [--retire-... X] [--reserve PCT] [--json]\n"
    "\n"
    "Shows each setting in force and where it comes from: an option given here,\n"
    "the environment ($PACKBOOK_DB), the settings file or the built-in default.\n"
    "The settings file is $PACKBOOK_CONFIG, else $XDG_CONFIG_HOME/packbook/config,\n"
    "else ~/.config/packbook/config: one 'key = value' per line, '#' comments.\n"
    "Keys: db, retire-capacity, retire-r0-ratio, retire-imbalance (or its old name\n"
    "retire-spread),\n"
    "retire-overdischarge (the fleet, trend, compare, plot options of those names),\n"
    "reserve (predict's --reserve), and any reading option of analyze without its\n"
    "dashes (cut-off, map, current-sign, adc-scale, gap, ...) as a default for every\n"
    "log. Options on a command override the file; a pack's remembered reading\n"
    "settings override its reading defaults.\n"
    "\n";

struct config_cli {
    const char *given[NENTRIES];
    const char *db;
    double reserve;
    int json;
    struct health_rules rules; /* where the rule options' values are checked */
};

#define CONFIG_AT(field) offsetof(struct config_cli, field)

/* clang-format off */
const struct opt config_reserve_table[] = {
    {.name = "reserve", .kind = OPT_DOUBLE, .off = 0, .lo = 0, .hi = 99,
     .def = PREDICT_STR(PREDICT_RESERVE_PCT), .meta = "PCT",
     .help = "landing reserve SoC for predict, % (common practice;\n"
     "the settings file's 'reserve' overrides the default)"},
    {0},
};

static const struct opt config_table[] = {
    {.name = "db", .kind = OPT_PATH, .off = CONFIG_AT(db), .meta = "PATH",
     .help = "show this database path as in force"},
    {.name = "json", .kind = OPT_FLAG, .off = CONFIG_AT(json), .set = 1,
     .help = "JSON on standard output"},
    {0},
};
/* clang-format on */

static int config_hook(void *ctx, const struct opt *o, const char *v, struct pb_error *err)
{
    struct config_cli *cli = ctx;
    (void)err;
    const char *key = o == &config_table[0] ? "db" : o == config_reserve_table ? "reserve" : NULL;
    for (size_t k = 0; !key && k < NENTRIES; k++)
        if (entries[k].opt && entries[k].opt == o->id)
            key = entries[k].key;
    if (key)
        cli->given[entry_of(key) - entries] = v;
    return 0;
}

enum pb_code cmd_config(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct config_cli cli = {0};
    (void)app;
    health_rules_default(&cli.rules);
    int done = 0;
    struct opt_cmd cmd = {
        "config", usage,       NULL, {{NULL, config_table, &cli, NULL}, RULEOPTS_GROUP(&cli.rules)},
        2,        config_hook, &cli};
    enum pb_code parsed = opt_parse(&cmd, argc, argv, &done, err);
    if (parsed != PB_OK || done)
        return parsed;
    const char **given = cli.given;
    int json = cli.json;
    if (optind < argc)
        return pb_error_set(err, PB_EUSAGE, "config: unexpected argument '%s'", argv[optind]);
    struct health_rules def;
    health_rules_default(&def);
    char dflt_db[1024] = "";
    const char *env_db = getenv("PACKBOOK_DB");
    {
        /* the built-in default: what store_default_path gives without $PACKBOOK_DB */
        const char *xdg = getenv("XDG_DATA_HOME"), *home = getenv("HOME");
        if (xdg && *xdg == '/')
            snprintf(dflt_db, sizeof dflt_db, "%s/packbook/packbook.db", xdg);
        else if (home && *home)
            snprintf(dflt_db, sizeof dflt_db, "%s/.local/share/packbook/packbook.db", home);
    }
    char defaults[NENTRIES][64];
    snprintf(defaults[1], 64, "%g", def.retire_capacity_pct);
    snprintf(defaults[2], 64, "%g", def.retire_r0_ratio);
    snprintf(defaults[3], 64, "%g", def.retire_spread_mv);
    snprintf(defaults[4], 64, "%d", def.retire_overdischarge);
    snprintf(defaults[5], 64, "%g", (double)PREDICT_RESERVE_PCT);
    json_t *arr = json ? json_array() : NULL;
    if (!json)
        printf("settings file: %s\n\n%-21s %-28s %s\n", config_path[0] ? config_path : "(none)",
               "key", "value", "from");
    for (size_t k = 0; k < NENTRIES; k++) {
        const struct entry *e = &entries[k];
        const char *val, *from;
        if (given[k])
            val = given[k], from = "option";
        else if (k == 0 && env_db && *env_db)
            val = env_db, from = "environment PACKBOOK_DB";
        else if (e->value[0])
            val = e->value, from = e->where;
        else
            val = k == 0 ? dflt_db : defaults[k], from = "default";
        char masked[1024];
        if (k == 0) { /* a connection string's password is never shown */
            store_mask(val, masked, sizeof masked);
            val = masked;
        }
        if (json)
            json_array_append_new(
                arr, json_pack("{s:s, s:s, s:s}", "key", e->key, "value", val, "from", from));
        else
            printf("%-21s %-28s %s\n", e->key, val, from);
    }
    for (int k = 0; k < nreading; k++) {
        if (json)
            json_array_append_new(arr,
                                  json_pack("{s:s, s:s, s:s}", "key", reading_src[k].name, "value",
                                            reading_src[k].value, "from", reading_src[k].where));
        else
            printf("%-21s %-28s %s\n", reading_src[k].name, reading_src[k].value,
                   reading_src[k].where);
    }
    if (json && jout_write(stdout, json_pack("{s:o, s:o}", "file", jout_str(config_path),
                                             "settings", arr)) != 0)
        return pb_error_set(err, PB_EOUTPUT, "cannot write the output");
    return cmd_finish_stdout(err);
}
