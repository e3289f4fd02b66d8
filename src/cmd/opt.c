#include "opt.h"

#include <errno.h>
#include <getopt.h>
#include <limits.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "../core/numparse.h"
#include "cmd.h"

#define OPT_MAX 160 /* long names and old names of one verb, with room */
#define HELP_COL 25 /* where help text starts, as the man page's lists */

static void *target(void *base, const struct opt *o)
{
    return o->off == OPT_NOWHERE || !base ? NULL : (char *)base + o->off;
}

int opt_take(const struct opt *o, void *base, const char *val, struct pb_error *err)
{
    char name[64];
    snprintf(name, sizeof name, "--%s", o->name);
    void *to = target(base, o);
    switch (o->kind) {
    case OPT_FLAG:
        if (to)
            *(int *)to = o->set;
        return 0;
    case OPT_INT: {
        int v;
        int lo = o->lo < INT_MIN ? INT_MIN : (int)o->lo,
            hi = o->hi > INT_MAX ? INT_MAX : (int)o->hi;
        if (cmd_parse_int(name, val, lo, hi, &v, err) != 0) {
            if (o->what)
                pb_error_set(err, PB_EUSAGE, "%s: expected %s from %d to %d, got '%s'", name,
                             o->what, lo, hi, val);
            return -1;
        }
        if (to)
            *(int *)to = v;
        return 0;
    }
    case OPT_DOUBLE: {
        double v;
        if (cmd_parse_double(name, val, o->lo, o->hi, &v, err) != 0) {
            if (o->what)
                pb_error_set(err, PB_EUSAGE, "%s: expected %s from %g to %g, got '%s'", name,
                             o->what, o->lo, o->hi, val);
            return -1;
        }
        if (to)
            *(double *)to = v;
        return 0;
    }
    case OPT_KEYWORD: {
        int k = cmd_keyword(name, val, o->words, err);
        if (k < 0)
            return -1;
        if (to)
            *(int *)to = o->values ? o->values[k] : k;
        return 0;
    }
    case OPT_PATH:
        if (!*val) {
            pb_error_set(err, PB_EUSAGE, "%s: expected a file name, got ''", name);
            return -1;
        }
        /* fall through */
    case OPT_STRING:
        if (to)
            *(const char **)to = val;
        return 0;
    }
    return 0;
}

void opt_defaults(const struct opt *opts, void *base)
{
    struct pb_error e = {PB_OK, ""};
    for (const struct opt *o = opts; o->name; o++)
        if (o->def && o->kind != OPT_STRING && o->kind != OPT_PATH)
            (void)opt_take(o, base, o->def, &e); /* the tables' own defaults parse */
}

const struct opt *opt_by_name(const struct opt *opts, const char *name, size_t len)
{
    for (const struct opt *o = opts; o->name; o++)
        if ((strlen(o->name) == len && strncmp(o->name, name, len) == 0) ||
            (o->alias && strlen(o->alias) == len && strncmp(o->alias, name, len) == 0))
            return o;
    return NULL;
}

const struct opt *opt_by_id(const struct opt *opts, int id)
{
    for (const struct opt *o = opts; o->name; o++)
        if (o->id == id)
            return o;
    return NULL;
}

/* One option's help: "  -o, --name META" then the text from HELP_COL, its
 * continuation lines under it, the old name and the default at the end. */
static void help_line(FILE *out, const struct opt *o)
{
    char left[96], letter[8] = "";
    const char *meta = o->kind == OPT_FLAG ? "" : o->meta ? o->meta : "X";
    if (o->letter)
        snprintf(letter, sizeof letter, "-%c, ", o->letter);
    int n = snprintf(left, sizeof left, "  %s--%s%s%s", letter, o->name, *meta ? " " : "", meta);
    fputs(left, out);
    if (n >= HELP_COL - 1)
        fprintf(out, "\n%*s", HELP_COL, "");
    else
        fprintf(out, "%*s", HELP_COL - n, "");
    const char *h = o->help ? o->help : "";
    for (const char *p = h; *p;) {
        const char *nl = strchr(p, '\n');
        size_t len = nl ? (size_t)(nl - p) : strlen(p);
        fprintf(out, "%.*s", (int)len, p);
        if (!nl)
            break;
        fprintf(out, "\n%*s", HELP_COL, "");
        p = nl + 1;
    }
    if (o->kind == OPT_KEYWORD && o->words && !strstr(h, o->words[0])) {
        fputs(h[0] ? " (" : "(", out);
        for (int k = 0; o->words[k]; k++)
            fprintf(out, "%s%s", k == 0 ? "" : o->words[k + 1] ? ", " : " or ", o->words[k]);
        fputs(")", out);
    }
    if (o->def)
        fprintf(out, " (default %s)", o->def);
    if (o->alias)
        fprintf(out, " (--%s: the old name)", o->alias);
    fputc('\n', out);
}

/* Whether a group before group g has an option called name. */
static int taken_before(const struct opt_cmd *cmd, int g, const char *name)
{
    for (int k = 0; k < g; k++)
        for (const struct opt *o = cmd->groups[k].opts; o->name; o++)
            if (strcmp(o->name, name) == 0 || (o->alias && strcmp(o->alias, name) == 0))
                return 1;
    return 0;
}

void opt_help(FILE *out, const struct opt_cmd *cmd)
{
    fputs(cmd->usage, out);
    for (int g = 0; g < cmd->ngroups; g++) {
        const struct opt_group *gr = &cmd->groups[g];
        if (gr->title)
            fprintf(out, "%s\n", gr->title);
        for (const struct opt *o = gr->opts; o->name; o++)
            if (!taken_before(cmd, g, o->name)) /* plot's --fit: the first group's */
                help_line(out, o);
    }
    fprintf(out, "  -h, --help%*sthis text; --list-options: the option names, one a line\n",
            HELP_COL - 12, "");
    if (cmd->tail)
        fputs(cmd->tail, out);
}

static void list_options(FILE *out, const struct opt_cmd *cmd)
{
    for (int g = 0; g < cmd->ngroups; g++)
        for (const struct opt *o = cmd->groups[g].opts; o->name; o++) {
            if (taken_before(cmd, g, o->name))
                continue;
            fprintf(out, "--%s\n", o->name);
            if (o->alias)
                fprintf(out, "--%s\n", o->alias);
        }
    fputs("--help\n", out);
}

enum pb_code opt_parse(const struct opt_cmd *cmd, int argc, char **argv, int *done,
                       struct pb_error *err)
{
    struct option longopts[OPT_MAX + 3];
    const struct opt *which[OPT_MAX];
    int group_of[OPT_MAX];
    char shorts[2 * OPT_MAX + 2] = "h";
    int n = 0;
    size_t ns = 1;
    enum { HELP = 1, LIST = 2, FIRST = 256 };
    for (int g = 0; g < cmd->ngroups; g++) {
        for (const struct opt *o = cmd->groups[g].opts; o->name; o++) {
            int has_arg = o->kind == OPT_FLAG ? no_argument : required_argument;
            for (int a = 0; a < 2; a++) {
                const char *nm = a ? o->alias : o->name;
                if (!nm)
                    continue;
                /* a name a group before already took (plot's --fit) stays theirs */
                int dup = 0;
                for (int k = 0; k < n; k++)
                    dup |= strcmp(longopts[k].name, nm) == 0;
                if (dup || n >= OPT_MAX)
                    continue;
                longopts[n] = (struct option){nm, has_arg, NULL, FIRST + n};
                which[n] = o;
                group_of[n++] = g;
            }
            if (o->letter && ns + 2 < sizeof shorts && !strchr(shorts, o->letter)) {
                shorts[ns++] = (char)o->letter;
                if (has_arg == required_argument)
                    shorts[ns++] = ':';
                shorts[ns] = '\0';
            }
        }
    }
    longopts[n++] = (struct option){"help", no_argument, NULL, 'h'};
    longopts[n++] = (struct option){"list-options", no_argument, NULL, LIST};
    longopts[n] = (struct option){NULL, 0, NULL, 0};
    int c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, shorts, longopts, NULL)) != -1) {
        if (c == 'h' || c == LIST) {
            if (c == 'h')
                opt_help(stdout, cmd);
            else
                list_options(stdout, cmd);
            *done = 1;
            return cmd_finish_stdout(err);
        }
        int k = -1;
        if (c >= FIRST && c < FIRST + n)
            k = c - FIRST;
        for (int j = 0; k < 0 && j < n - 2 && c > 0 && c < FIRST; j++)
            if (which[j]->letter == c)
                k = j;
        if (k < 0)
            return cmd_bad_option(cmd->verb, argc, argv, err);
        const struct opt *o = which[k];
        const struct opt_group *gr = &cmd->groups[group_of[k]];
        const char *val = o->kind == OPT_FLAG ? NULL : optarg;
        if ((o->off != OPT_NOWHERE && opt_take(o, gr->base, val, err) != 0) ||
            (gr->after && gr->after(gr->base, o, val, err) != 0) ||
            (cmd->hook && cmd->hook(cmd->ctx, o, val, err) != 0))
            return err->code != PB_OK ? err->code : PB_EUSAGE;
    }
    return PB_OK;
}
