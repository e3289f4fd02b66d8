/* packview: loads a pack with its flights from the store and assesses it. */
#ifndef PB_PACKVIEW_H
#define PB_PACKVIEW_H

#include "../core/predict.h"
#include "../report/report_health.h"
#include "cmd.h"
#include "opt.h"

struct rules_cli {
    struct health_rules rules;
};

/* Options that change the retirement rules (values into struct
 * health_rules), for a verb's option groups; ids for config.c. */
enum { RO_CAP = 400, RO_R0, RO_SPREAD, RO_OVER };
extern const struct opt ruleopts_table[];
extern const char ruleopts_title[];
/* Moves a watch level with its retire level: an opt_after_fn, base a struct health_rules. */
int ruleopts_after(void *base, const struct opt *o, const char *val, struct pb_error *err);
#define RULEOPTS_GROUP(rules)                                                                      \
    {                                                                                              \
        ruleopts_title, ruleopts_table, (rules), ruleopts_after                                    \
    }

/* Takes the rule option with id c: 1 taken, 0 not ours, -1 bad value. */
int ruleopts_take(int c, const char *arg, struct health_rules *r, struct pb_error *err);

/* --by, --fit and --horizon as trend and plot trend take them (values into
 * struct trend_cli_opts). */
struct trendopts {
    int by; /* enum trend_by */
    int plain;
    double horizon;
};
extern const struct opt trendopts_table[];

/* Opens the store named by --db (NULL: the default path) in mode. */
enum pb_code packview_open_store(const char *db, enum store_mode mode, struct store **out,
                                 struct pb_error *err);

/* The same with the lock wait of --wait (seconds); packview_open_store waits
 * STORE_WAIT_DEFAULT_S. Says on a terminal when it has waited a few seconds. */
enum pb_code packview_open_store_wait(const char *db, enum store_mode mode, double wait_s,
                                      struct store **out, struct pb_error *err);

/* Fills v for pack p: flights, health, trend. On failure v holds nothing to release. */
enum pb_code packview_load(struct store *st, const struct pack_rec *p,
                           const struct health_rules *rules, enum trend_by by, int plain,
                           double horizon, struct pack_view *v, struct pb_error *err);

/* Views of every pack in service (all: retired ones too), in the store's
 * order, assessed with rules (weekly buckets, robust fits); status, when
 * not NULL, keeps only the packs with that status (ok, watch, retire or
 * retired). The caller frees *views with packview_free_all. */
/* Called for each pack of the fleet while its flights are loaded (view k
 * of the result); the flights are freed after it. */
typedef void (*packview_each_fn)(const struct pack_view *v, size_t k, void *ctx);

/* Every pack (in service, or all) with its state and trend (status: only
 * those in it): a pack's kept assessment when its key is current (unless
 * reassess is set or each is given), else from its flights, one pack's
 * flights in memory at a time; the views come back without flights. each
 * may be NULL. */
enum pb_code packview_load_fleet(struct store *st, const struct health_rules *rules, int all,
                                 const char *status, int reassess, packview_each_fn each, void *ctx,
                                 struct pack_view **views, size_t *nv, struct pb_error *err);

/* Registered pairs (pair.c): sets each view's paired_with and, when the
 * partner is among the views, their mismatch; a pair beyond the limits
 * (pairs.h) becomes a finding of both packs' health (watch). */
enum pb_code packview_pairs(struct store *st, struct pack_view *views, size_t n,
                            struct pb_error *err);

/* Moves each view's registered partner right after it (views already in
 * the order wanted), so pairs are read together. */
void packview_keep_pairs_together(struct pack_view *views, size_t n);

/* packbook pack pair|unpair (pair.c); argv[0] is "pair" or "unpair". */
enum pb_code cmd_pack_pair(int argc, char **argv, struct pb_error *err);

/* Releases n views and frees the array; NULL is a no-op. */
void packview_free_all(struct pack_view *views, size_t n);

/* What a change to the history can change of a pack. */
struct pack_summary {
    char label[128];
    size_t flights;
    double cycles;            /* equivalent full cycles */
    double r0_base_mohm_cell; /* baseline R0, NAN when none yet */
    char status[16];
    char reason[320];
};

/* The summary of pack p as the store holds it now, under the default rules. */
enum pb_code packview_summary(struct store *st, const struct pack_rec *p, struct pack_summary *out,
                              struct pb_error *err);

/* Assesses pack p from its flights as the fleet view does (the settings'
 * rules) and keeps that assessment in the store (assessment.h) for fleet;
 * out, when not NULL, gets the summary; view, when not NULL, the view it
 * was made from, with its flights and departures (release it with
 * pack_view_release). A failure to keep it (a role
 * without the right, say) is not an error: a note on standard error says
 * why (only the fleet view's speed depends on it). Writing commands call it
 * for each pack whose history they changed. */
enum pb_code packview_keep(struct store *st, const struct pack_rec *p, struct pack_summary *out,
                           struct pack_view *view, struct pb_error *err);

/* packview_keep for every pack whose kept assessment is missing or stale
 * (db migrate); counts the packs assessed and those already current. */
enum pb_code packview_keep_stale(struct store *st, size_t *assessed, size_t *current,
                                 struct pb_error *err);

/* Prints "  LABEL: flights a -> b, cycles, baseline and status" lines for
 * what differs between before and after (flights and cycles always). */
void packview_print_change(FILE *out, const struct pack_summary *before,
                           const struct pack_summary *after);

/* Conservative and median safe time of a pack from its history at the
 * history's cruise power (or power_w when finite), default limits. */
enum pb_code predict_view(const struct pack_view *v, double power_w, struct predict_inputs *in,
                          struct predict_mc *mc, struct pb_error *err);

#endif
