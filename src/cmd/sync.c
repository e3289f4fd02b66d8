/* packbook sync: packs and flights from one history store to another (a
 * crew's SQLite file and the shared PostgreSQL database, or any two). */
#include <getopt.h>
#include <math.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

#include "../core/utf8.h"
#include "cmd.h"
#include "opt.h"
#include "packview.h"

/* clang-format off */
static const char usage[] =
    "usage: packbook sync --to PATH|URL [--db PATH|URL] [--wait S]\n"
    "       packbook sync --from PATH|URL [--db PATH|URL] [--wait S]\n"
    "\n"
    "Copies packs and their flights (with each flight's report, cells and\n"
    "acknowledgement, and registered pairs) from one history to another: --to\n"
    "sends this history (--db, or the default) to another store, --from brings\n"
    "another store's into this one. Either side may be an SQLite file or a\n"
    "PostgreSQL database; the receiving side is created when it is new. A flight\n"
    "is known by its content hash, so running sync again, after an interruption,\n"
    "or from two crews at once stores each flight once. A pack whose label the\n"
    "other side has with other cells, parallel strings, chemistry or capacity is\n"
    "a conflict: it is reported and skipped (its flights stay where they are), never\n"
    "merged; fix one side with 'packbook pack edit' and sync again. Prints a summary:\n"
    "packs created, flights sent, already present, conflicts. Exit status 1 when\n"
    "there were conflicts.\n"
    "\n";
/* clang-format on */

struct sync_cli {
    const char *to, *from, *db;
    double wait_s;
};

/* clang-format off */
static const struct opt sync_table[] = {
    {.name = "to", .kind = OPT_PATH, .off = offsetof(struct sync_cli, to), .meta = "PATH|URL",
     .help = "the store to send to"},
    {.name = "from", .kind = OPT_PATH, .off = offsetof(struct sync_cli, from), .meta = "PATH|URL",
     .help = "the store to bring from"},
    {.name = "db", .kind = OPT_PATH, .off = offsetof(struct sync_cli, db), .meta = "PATH|URL",
     .help = "this history (default: $PACKBOOK_DB, else the settings\n"
     "file's db, else $XDG_DATA_HOME/packbook/packbook.db;\n"
     "see 'packbook config')"},
    {.name = "wait", .kind = OPT_DOUBLE, .off = offsetof(struct sync_cli, wait_s), .lo = 0,
     .hi = 86400, .def = CMD_STR(STORE_WAIT_DEFAULT_S), .meta = "S",
     .help = "wait up to S seconds for another process's lock"},
    {0},
};
/* clang-format on */

struct sync_count {
    size_t packs_created, flights_sent, already, conflicts, acks, pairs;
};

/* Whether two registrations of a label are the same pack: what an analysis
 * depends on must agree; notes, dates and reading options may differ. */
static int same_pack(const struct pack_rec *a, const struct pack_rec *b, char *why, size_t cap)
{
    if (a->cells != b->cells)
        snprintf(why, cap, "%d cells here, %d there", a->cells, b->cells);
    else if (a->parallel != b->parallel)
        snprintf(why, cap, "%d parallel here, %d there", a->parallel, b->parallel);
    else if (strcasecmp(a->chemistry, b->chemistry) != 0)
        snprintf(why, cap, "chemistry %s here, %s there", a->chemistry, b->chemistry);
    else if (fabs(a->capacity_mah - b->capacity_mah) > 1e-9 * fabs(a->capacity_mah))
        snprintf(why, cap, "%.0f mAh here, %.0f mAh there", a->capacity_mah, b->capacity_mah);
    else
        return 1;
    return 0;
}

/* The receiving side's pack for src: found, created (with its retirement),
 * or a conflict (*conflict set, reported). */
static enum pb_code dest_pack(struct store *dst, const struct pack_rec *src, struct pack_rec *out,
                              int *conflict, struct sync_count *n, struct pb_error *err)
{
    *conflict = 0;
    struct pb_error e = {PB_OK, ""};
    enum pb_code rc = store_pack_get(dst, src->label, out, &e);
    if (rc == PB_EUSAGE) {
        *out = *src;
        rc = store_pack_add(dst, out, &e);
        if (rc == PB_OK) {
            n->packs_created++;
            if (src->retired_at[0])
                rc = store_pack_retire(dst, src->label, src->retire_reason, &e);
            if (rc != PB_OK) {
                *err = e;
                return rc;
            }
            return PB_OK;
        }
        /* another sync created it meanwhile: compare with theirs */
        if (rc == PB_EUSAGE)
            rc = store_pack_get(dst, src->label, out, &e);
    }
    if (rc != PB_OK) {
        *err = e;
        return rc;
    }
    char why[160];
    if (!same_pack(src, out, why, sizeof why)) {
        *conflict = 1;
        n->conflicts++;
        char shown[4 * sizeof src->label];
        fprintf(stderr, "packbook: sync: conflict: pack '%s' (%s): skipped, nothing of it sent\n",
                utf8_printable(shown, sizeof shown, src->label), why);
    }
    return PB_OK;
}

/* One pack's flights and acknowledgements. */
static enum pb_code send_flights(struct store *src, struct store *dst, const struct pack_rec *sp,
                                 const struct pack_rec *dp, struct sync_count *n,
                                 struct pb_error *err)
{
    struct flight_rec *f = NULL;
    struct flight_ack *acks = NULL, *have = NULL;
    size_t nf = 0, na = 0, nh = 0;
    enum pb_code rc = store_flights_of(src, sp->id, &f, &nf, err);
    if (rc == PB_OK)
        rc = store_acks_of(src, sp->id, &acks, &na, err);
    if (rc == PB_OK)
        rc = store_acks_of(dst, dp->id, &have, &nh, err);
    for (size_t k = 0; rc == PB_OK && k < nf; k++) {
        char *json = NULL;
        if ((rc = store_flight_report(src, f[k].id, &json, err)) != PB_OK)
            break;
        struct flight_rec g = f[k];
        g.pack_id = dp->id;
        struct store_dup dup;
        rc = store_flight_put(dst, &g, json ? json : "{}", &dup, err);
        free(json);
        if (rc != PB_OK)
            break;
        if (dup.kind != DUP_NONE) {
            n->already++;
            if (strcmp(dup.label, dp->label) != 0) {
                char a[512], b[512];
                fprintf(stderr,
                        "packbook: sync: flight %lld of pack '%s' is there already as flight "
                        "%lld of pack '%s'\n",
                        (long long)f[k].id, utf8_printable(a, sizeof a, sp->label),
                        (long long)dup.id, utf8_printable(b, sizeof b, dup.label));
            }
        } else {
            n->flights_sent++;
        }
    }
    /* acknowledgements follow their flight (by content hash); one already
     * there is kept, so a second run changes nothing */
    for (size_t k = 0; rc == PB_OK && k < na; k++) {
        const struct flight_rec *fk = NULL;
        for (size_t j = 0; j < nf && !fk; j++)
            if (f[j].id == acks[k].flight_id)
                fk = &f[j];
        if (!fk)
            continue;
        int found = 0;
        int64_t id = 0;
        char label[128];
        if ((rc = store_flight_find_hash(dst, fk->content_hash, &found, &id, label, sizeof label,
                                         err)) != PB_OK ||
            !found)
            continue;
        int acked = 0;
        for (size_t j = 0; j < nh && !acked; j++)
            acked = have[j].flight_id == id;
        if (acked || strcmp(label, dp->label) != 0)
            continue;
        if ((rc = store_flight_ack(dst, id, acks[k].note, label, sizeof label, err)) == PB_OK)
            n->acks++;
    }
    store_flights_free(f);
    store_acks_free(acks);
    store_acks_free(have);
    return rc;
}

/* Registered pairs whose packs both arrived (and are not conflicts). */
static enum pb_code send_pairs(struct store *src, struct store *dst, const char *skip,
                               const struct pack_rec *sp, size_t nsp, struct sync_count *n,
                               struct pb_error *err)
{
    struct pair_rec *sv = NULL, *dv = NULL;
    size_t ns = 0, nd = 0;
    enum pb_code rc = store_pairs_list(src, &sv, &ns, err);
    if (rc == PB_OK)
        rc = store_pairs_list(dst, &dv, &nd, err);
    for (size_t k = 0; rc == PB_OK && k < ns; k++) {
        int skipped = 0;
        for (size_t j = 0; j < nsp; j++)
            if (skip[j] && (strcmp(sp[j].label, sv[k].a) == 0 || strcmp(sp[j].label, sv[k].b) == 0))
                skipped = 1;
        if (skipped)
            continue;
        int same = 0, other = 0;
        for (size_t j = 0; j < nd; j++) {
            int a = strcmp(dv[j].a, sv[k].a) == 0 || strcmp(dv[j].b, sv[k].a) == 0;
            int b = strcmp(dv[j].a, sv[k].b) == 0 || strcmp(dv[j].b, sv[k].b) == 0;
            same |= a && b;
            other |= a != b;
        }
        if (same)
            continue;
        if (other) {
            char a[512], b[512];
            n->conflicts++;
            fprintf(stderr,
                    "packbook: sync: conflict: the pair '%s' + '%s' (one of them is paired "
                    "otherwise there): skipped\n",
                    utf8_printable(a, sizeof a, sv[k].a), utf8_printable(b, sizeof b, sv[k].b));
            continue;
        }
        struct pack_rec pa, pb;
        struct pb_error e = {PB_OK, ""};
        rc = store_pack_get(dst, sv[k].a, &pa, err);
        if (rc == PB_OK)
            rc = store_pack_get(dst, sv[k].b, &pb, err);
        if (rc != PB_OK)
            break;
        enum pb_code r = store_pair_add(dst, &pa, &pb, &e);
        if (r == PB_OK)
            n->pairs++;
        else if (r != PB_EUSAGE) { /* usage: another sync paired them meanwhile */
            *err = e;
            rc = r;
        }
    }
    store_pairs_free(sv);
    store_pairs_free(dv);
    return rc;
}

enum pb_code cmd_sync(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct sync_cli cli = {0};
    int done = 0;
    opt_defaults(sync_table, &cli);
    struct opt_cmd cmd = {"sync", usage, NULL, {{NULL, sync_table, &cli, NULL}}, 1, NULL, NULL};
    enum pb_code parsed = opt_parse(&cmd, argc, argv, &done, err);
    if (parsed != PB_OK || done)
        return parsed;
    const char *db = cli.db, *to = cli.to, *from = cli.from;
    double wait_s = cli.wait_s;
    if (optind < argc)
        return pb_error_set(err, PB_EUSAGE, "sync: unexpected argument '%s'", argv[optind]);
    if (!to == !from)
        return pb_error_set(err, PB_EUSAGE,
                            "sync: give one of --to or --from (see 'packbook sync --help')");
    if (!(to ? *to : *from))
        return pb_error_set(err, PB_EUSAGE, "sync: %s needs a database", to ? "--to" : "--from");
    struct store *src = NULL, *dst = NULL;
    /* the sending side is only read; the receiving side is created when new */
    enum pb_code rc = to ? packview_open_store(db, STORE_READ, &src, err)
                         : packview_open_store(from, STORE_READ, &src, err);
    if (rc == PB_OK)
        rc = to ? packview_open_store_wait(to, STORE_CREATE, wait_s, &dst, err)
                : packview_open_store_wait(db, STORE_CREATE, wait_s, &dst, err);
    struct pack_rec *packs = NULL;
    size_t np = 0;
    char *skip = NULL;
    struct sync_count n = {0};
    if (rc == PB_OK)
        rc = store_pack_list(src, &packs, &np, err);
    if (rc == PB_OK && !(skip = calloc(np + 1, 1)))
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
    for (size_t k = 0; rc == PB_OK && k < np; k++) {
        struct pack_rec dp;
        int conflict = 0;
        rc = dest_pack(dst, &packs[k], &dp, &conflict, &n, err);
        if (rc == PB_OK && conflict)
            skip[k] = 1;
        else if (rc == PB_OK) {
            size_t had = n.flights_sent + n.acks;
            rc = send_flights(src, dst, &packs[k], &dp, &n, err);
            /* the receiving side's fleet view of the pack, kept as import keeps it */
            if (rc == PB_OK && n.flights_sent + n.acks > had)
                rc = packview_keep(dst, &dp, NULL, NULL, err);
        }
    }
    if (rc == PB_OK)
        rc = send_pairs(src, dst, skip, packs, np, &n, err);
    if (dst) {
        char shown[4 * 1024];
        /* what moved is said even when a step failed: a retry sends the rest */
        printf("sync %s %s: %zu pack%s created, %zu flight%s sent, %zu already present, %zu "
               "conflict%s",
               to ? "to" : "from", utf8_printable(shown, sizeof shown, store_shown(to ? dst : src)),
               n.packs_created, n.packs_created == 1 ? "" : "s", n.flights_sent,
               n.flights_sent == 1 ? "" : "s", n.already, n.conflicts, n.conflicts == 1 ? "" : "s");
        if (n.acks || n.pairs)
            printf(", %zu acknowledgement%s, %zu pair%s", n.acks, n.acks == 1 ? "" : "s", n.pairs,
                   n.pairs == 1 ? "" : "s");
        printf("\n");
    }
    free(skip);
    store_packs_free(packs);
    store_close(src);
    store_close(dst);
    if (rc != PB_OK)
        return rc;
    if (n.conflicts)
        app->some_failed = 1;
    return cmd_finish_stdout(err);
}
