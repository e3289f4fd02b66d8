/* packbook pack pair [ID ID] | pack unpair ID: packs that fly together,
 * and the pairs in the history views (packview_pairs). */
#include <getopt.h>
#include <jansson.h>
#include <math.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "../core/pairs.h"
#include "../core/utf8.h"
#include "../report/jsonout.h"
#include "cmd.h"
#include "packview.h"

static const char usage[] =
    "usage: packbook pack pair [--method optimal|greedy] [--json] [--db PATH]\n"
    "       packbook pack pair ID ID [--db PATH]\n"
    "       packbook pack unpair ID [--db PATH]\n"
    "\n"
    "For aircraft that fly two packs in series or parallel. Without IDs: the\n"
    "registered pairs with how well they match now, then proposed pairs among\n"
    "the other packs in service (same chemistry and cell count), with their\n"
    "total d. --method optimal (the default): the least total d, exact up to\n"
    "20 packs of a chemistry and cell count (above that exact when the\n"
    "Hungarian method's cover splits into pairs, else greedy with the least\n"
    "possible total shown); greedy: the closest pair first, then the closest\n"
    "among the packs left. Mismatch d = sqrt((dC / 5 %)^2 +\n"
    "(dR / 15 %)^2) of the pair's mean: d <= 1 is within the limits. With two\n"
    "IDs: registers them as a pair (fleet keeps them together and warns when\n"
    "they drift beyond the limits). unpair removes a pack's pair. --method is for\n"
    "proposals only.\n"
    "\n";

struct pair_cli {
    const char *db;
    int json;
    int method; /* enum pair_method */
};

static const char *const method_words[] = {"optimal", "greedy", NULL};
static const int method_values[] = {PAIR_OPTIMAL, PAIR_GREEDY};

/* clang-format off */
static const struct opt pair_table[] = {
    {.name = "json", .kind = OPT_FLAG, .off = offsetof(struct pair_cli, json), .set = 1,
     .help = "JSON on standard output"},
    {.name = "db", .kind = OPT_PATH, .off = offsetof(struct pair_cli, db), .meta = "PATH",
     .help = "history database (see 'packbook config')"},
    {.name = "method", .kind = OPT_KEYWORD, .off = offsetof(struct pair_cli, method),
     .words = method_words, .values = method_values, .def = "optimal", .meta = "M",
     .help = "optimal (least total d) or greedy (closest pair first)"},
    {0},
};
/* clang-format on */

static void to_pair_pack(const struct pack_view *v, struct pair_pack *p)
{
    p->chemistry = v->pack.chemistry;
    p->cells = v->pack.cells;
    p->capacity_pct = v->health.capacity_pct;
    p->capacity_mah = v->pack.capacity_mah;
    p->r0_mohm_cell = v->health.r0_now_mohm_cell;
}

static size_t find_view(const struct pack_view *views, size_t n, int64_t id)
{
    for (size_t k = 0; k < n; k++)
        if (views[k].pack.id == id)
            return k;
    return n;
}

enum pb_code packview_pairs(struct store *st, struct pack_view *views, size_t n,
                            struct pb_error *err)
{
    struct pair_rec *pr = NULL;
    size_t np = 0;
    enum pb_code rc = store_pairs_list(st, &pr, &np, err);
    if (rc != PB_OK)
        return rc;
    for (size_t k = 0; k < np; k++) {
        size_t a = find_view(views, n, pr[k].a_id), b = find_view(views, n, pr[k].b_id);
        if (a < n)
            snprintf(views[a].paired_with, sizeof views[a].paired_with, "%s", pr[k].b);
        if (b < n)
            snprintf(views[b].paired_with, sizeof views[b].paired_with, "%s", pr[k].a);
        if (a == n || b == n)
            continue;
        struct pair_pack pp[2];
        struct pair_match m;
        to_pair_pack(&views[a], &pp[0]);
        to_pair_pack(&views[b], &pp[1]);
        if (pairs_distance(pp, 0, 1, &m) != 0)
            continue;
        views[a].pair_distance = views[b].pair_distance = m.distance;
        if (m.distance <= 1.0)
            continue;
        for (int j = 0; j < 2; j++) {
            char text[320];
            snprintf(text, sizeof text,
                     "pair with %s drifted apart: capacity differs %.1f %% (limit %.0f %%), R0 "
                     "%.1f %% (limit %.0f %%)",
                     j ? pr[k].a : pr[k].b, m.capacity_diff_pct, PAIR_CAPACITY_PCT, m.r0_diff_pct,
                     PAIR_R0_PCT);
            health_add_finding(&views[j ? b : a].health, HEALTH_WATCH, text);
        }
    }
    store_pairs_free(pr);
    return PB_OK;
}

void packview_keep_pairs_together(struct pack_view *views, size_t n)
{
    for (size_t k = 0; k + 1 < n; k++) {
        if (!views[k].paired_with[0])
            continue;
        size_t j = k + 1;
        while (j < n && strcmp(views[j].pack.label, views[k].paired_with) != 0)
            j++;
        if (j == n || j == k + 1)
            continue;
        /* move the partner up to k + 1, the others between down by one */
        struct pack_view t = views[j];
        memmove(&views[k + 2], &views[k + 1], (j - k - 1) * sizeof *views);
        views[k + 1] = t;
        k++;
    }
}

static void print_match(const struct pair_match *m, const struct pack_view *v)
{
    char r[32];
    if (isfinite(m->r0_diff_pct))
        snprintf(r, sizeof r, "%.1f", m->r0_diff_pct);
    else
        snprintf(r, sizeof r, "-");
    char la[4 * 128 + 4], lb[4 * 128 + 4];
    printf("  %-14s %-14s %10.1f %10s %8.2f  %s\n",
           utf8_printable(la, sizeof la, v[m->a].pack.label),
           utf8_printable(lb, sizeof lb, v[m->b].pack.label), m->capacity_diff_pct, r, m->distance,
           m->distance <= 1.0 ? "within limits" : "beyond");
}

static json_t *match_obj(const struct pair_match *m, const struct pack_view *v)
{
    return json_pack("{s:s, s:s, s:o, s:o, s:o, s:b}", "a", v[m->a].pack.label, "b",
                     v[m->b].pack.label, "capacity_diff_pct", jout_num(m->capacity_diff_pct),
                     "r0_diff_pct", jout_num(m->r0_diff_pct), "distance", jout_num(m->distance),
                     "within_limits", m->distance <= 1.0);
}

static enum pb_code show(struct store *st, int json, enum pair_method method, struct pb_error *err)
{
    struct health_rules rules;
    health_rules_default(&rules);
    struct pack_view *views = NULL;
    size_t nv = 0;
    enum pb_code rc = packview_load_fleet(st, &rules, 0, NULL, 0, NULL, NULL, &views, &nv, err);
    struct pair_pack *pp = calloc(nv ? nv : 1, sizeof *pp);
    int *usable = calloc(nv ? nv : 1, sizeof *usable);
    struct pair_match *reg = calloc(nv ? nv : 1, sizeof *reg);
    struct pair_match *prop = calloc(nv ? nv : 1, sizeof *prop);
    if (rc == PB_OK && (!pp || !usable || !reg || !prop))
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
    if (rc == PB_OK)
        rc = packview_pairs(st, views, nv, err);
    size_t nreg = 0;
    int nprop = 0;
    struct pair_plan plan = {0};
    if (rc == PB_OK) {
        for (size_t k = 0; k < nv; k++) {
            to_pair_pack(&views[k], &pp[k]);
            usable[k] = !views[k].paired_with[0];
        }
        /* each registered pair once, from its first member */
        for (size_t k = 0; k < nv; k++) {
            size_t j = views[k].paired_with[0] ? 0 : nv;
            while (j < nv && strcmp(views[j].pack.label, views[k].paired_with) != 0)
                j++;
            if (j < nv && j > k && pairs_distance(pp, k, j, &reg[nreg]) == 0)
                nreg++;
        }
        nprop = pairs_plan(pp, nv, usable, method, prop, &plan);
        if (nprop < 0)
            rc = pb_error_set(err, PB_ENOMEM, "out of memory");
    }
    if (rc == PB_OK && json) {
        json_t *r = json_array(), *p = json_array();
        for (size_t k = 0; k < nreg; k++)
            json_array_append_new(r, match_obj(&reg[k], views));
        for (int k = 0; k < nprop; k++)
            json_array_append_new(p, match_obj(&prop[k], views));
        json_t *o =
            json_pack("{s:o, s:o, s:s, s:o, s:o, s:b, s:f, s:f}", "registered", r, "proposed", p,
                      "method", pairs_method_name(method), "total_distance", jout_num(plan.total),
                      "least_possible_total", jout_num(plan.lower_bound), "optimal", plan.exact,
                      "limit_capacity_pct", PAIR_CAPACITY_PCT, "limit_r0_pct", PAIR_R0_PCT);
        if (jout_write(stdout, o) != 0)
            rc = pb_error_set(err, PB_EOUTPUT, "cannot write the output");
    } else if (rc == PB_OK) {
        printf("  %-14s %-14s %10s %10s %8s\n", "pack", "with", "cap diff %", "R0 diff %", "d");
        printf("registered pairs:\n");
        for (size_t k = 0; k < nreg; k++)
            print_match(&reg[k], views);
        if (nreg == 0)
            printf("  (none: packbook pack pair ID ID)\n");
        if (method == PAIR_GREEDY)
            printf("proposed pairs (greedy: the closest pair first), total d %.2f%s:\n", plan.total,
                   plan.exact ? ", the least possible" : "");
        else if (plan.groups_greedy == 0)
            printf("proposed pairs (optimal: the least total d), total d %.2f:\n", plan.total);
        else
            printf("proposed pairs (optimal where proven, greedy in %zu group%s of over %d "
                   "packs), total d %.2f, the least possible at least %.2f:\n",
                   plan.groups_greedy, plan.groups_greedy == 1 ? "" : "s", PAIR_EXACT_MAX,
                   plan.total, plan.lower_bound);
        for (int k = 0; k < nprop; k++)
            print_match(&prop[k], views);
        if (nprop == 0)
            printf("  (none: no two unpaired packs of the same chemistry and cell count with a "
                   "capacity estimate)\n");
        printf("d = sqrt((capacity difference / %.0f %%)^2 + (R0 difference / %.0f %%)^2), each\n"
               "of the pair's mean; d <= 1 is within the limits\n",
               PAIR_CAPACITY_PCT, PAIR_R0_PCT);
    }
    free(pp), free(usable), free(reg), free(prop);
    packview_free_all(views, nv);
    return rc;
}

/* Notes that --method was given (its default cannot tell). */
static int note_method(void *ctx, const struct opt *o, const char *val, struct pb_error *err)
{
    (void)val;
    (void)err;
    if (strcmp(o->name, "method") == 0)
        *(int *)ctx = 1;
    return 0;
}

enum pb_code cmd_pack_pair(int argc, char **argv, struct pb_error *err)
{
    struct pair_cli cli = {0};
    opt_defaults(pair_table, &cli);
    int unpair = strcmp(argv[0], "unpair") == 0, done = 0, method_given = 0;
    struct opt_cmd cmd = {unpair ? "pack unpair" : "pack pair",
                          usage,
                          NULL,
                          {{NULL, pair_table, &cli, NULL}},
                          1,
                          note_method,
                          &method_given};
    enum pb_code parsed = opt_parse(&cmd, argc, argv, &done, err);
    if (parsed != PB_OK || done)
        return parsed;
    const char *db = cli.db;
    int json = cli.json;
    enum pair_method method = (enum pair_method)cli.method;
    int ids = argc - optind;
    if (unpair ? ids != 1 : ids != 0 && ids != 2)
        return pb_error_set(err, PB_EUSAGE,
                            unpair ? "pack unpair: give one pack ID"
                                   : "pack pair: give no IDs (proposals) or two (register)");
    /* a method chooses among proposals; registering or removing one has none to choose */
    if (ids && method_given)
        return pb_error_set(err, PB_EUSAGE,
                            "%s: --method chooses how pairs are proposed; with pack IDs it has "
                            "nothing to choose",
                            unpair ? "pack unpair" : "pack pair");
    struct store *st = NULL;
    enum pb_code rc = packview_open_store(db, ids ? STORE_WRITE : STORE_READ, &st, err);
    struct pack_rec a, b;
    if (rc == PB_OK && ids >= 1)
        rc = store_pack_get(st, argv[optind], &a, err);
    if (rc == PB_OK && ids == 2)
        rc = store_pack_get(st, argv[optind + 1], &b, err);
    if (rc == PB_OK && unpair) {
        int removed = 0;
        rc = store_pair_remove(st, &a, &removed, err);
        if (rc == PB_OK)
            printf(removed ? "pack '%s' unpaired\n" : "pack '%s' was in no pair\n",
                   utf8_printable((char[4 * 128 + 4]){0}, 4 * 128 + 4, a.label));
    } else if (rc == PB_OK && ids == 2) {
        if (strcmp(a.chemistry, b.chemistry) != 0 || a.cells != b.cells)
            rc = pb_error_set(err, PB_EUSAGE,
                              "pack pair: '%s' (%dS %s) and '%s' (%dS %s) differ in cell count "
                              "or chemistry",
                              a.label, a.cells, a.chemistry, b.label, b.cells, b.chemistry);
        if (rc == PB_OK && (a.retired_at[0] || b.retired_at[0]))
            rc = pb_error_set(err, PB_EUSAGE, "pack pair: '%s' is retired",
                              a.retired_at[0] ? a.label : b.label);
        if (rc == PB_OK)
            rc = store_pair_add(st, &a, &b, err);
        if (rc == PB_OK)
            printf("packs '%s' and '%s' paired\n",
                   utf8_printable((char[4 * 128 + 4]){0}, 4 * 128 + 4, a.label),
                   utf8_printable((char[4 * 128 + 4]){0}, 4 * 128 + 4, b.label));
    } else if (rc == PB_OK) {
        rc = show(st, json, method, err);
    }
    if (rc == PB_OK)
        rc = cmd_finish_stdout(err);
    store_close(st);
    return rc;
}
