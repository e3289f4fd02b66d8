/* packbook import: analyse logs and store each as a flight of a pack. */
#define _GNU_SOURCE
#include <dirent.h>
#include <getopt.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>
#include <xxhash.h>

#include "../core/isotime.h"
#include "../report/report.h"
#include "cmd.h"
#include "logopts.h"
#include "packview.h"

static const char usage_head[] =
    "usage: packbook import --pack ID [options] LOG|DIR|- ...\n"
    "\n"
    "Analyses each log with the pack's cells, chemistry and capacity and stores\n"
    "the flight. A log already imported (same content) is recognised and skipped.\n"
    "The flight date is the log's absolute time, else --date, else the file's\n"
    "modification time. A failing log does not stop the batch (exit status 1).\n"
    "\n"
    "  --pack ID              the pack that flew (see 'packbook pack list')\n"
    "  --date DATE            date for logs without absolute time (ISO 8601)\n"
    "  --db PATH              history database (default: $PACKBOOK_DB, else\n"
    "                         $XDG_DATA_HOME/packbook/packbook.db)\n"
    "  --quiet                no line per log, only the summary\n"
    "  --force                store a log that cannot be one flight (over a day\n"
    "                         long, or over twice the rated charge drawn): it is\n"
    "                         refused otherwise; the warning is kept either way\n";

enum { I_PACK = 256, I_DATE, I_DB, I_QUIET, I_FORCE };

static const struct option longopts[] = {
    {"pack", required_argument, NULL, I_PACK},
    {"date", required_argument, NULL, I_DATE},
    {"db", required_argument, NULL, I_DB},
    {"quiet", no_argument, NULL, I_QUIET},
    {"force", no_argument, NULL, I_FORCE},
    {"help", no_argument, NULL, 'h'},
    LOGOPTS_LONG,
    {NULL, 0, NULL, 0},
};

struct import_cli {
    struct log_cli log;
    const char *pack, *db;
    int have_date, quiet, force;
    double date_epoch_s;
};

struct path_list {
    char **v;
    size_t n, cap;
};

static int push(struct path_list *l, const char *p)
{
    if (l->n == l->cap) {
        size_t cap = l->cap ? 2 * l->cap : 32;
        char **v = realloc(l->v, cap * sizeof *v);
        if (!v)
            return -1;
        l->v = v;
        l->cap = cap;
    }
    l->v[l->n] = strdup(p);
    return l->v[l->n++] ? 0 : -1;
}

static int by_name(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

/* A directory's regular files (not hidden), sorted by name; a file or "-" as is. */
static enum pb_code expand(const char *arg, struct path_list *out, struct pb_error *err)
{
    struct stat sb;
    if (strcmp(arg, "-") == 0 || stat(arg, &sb) != 0 || !S_ISDIR(sb.st_mode))
        return push(out, arg) ? pb_error_set(err, PB_ENOMEM, "out of memory") : PB_OK;
    DIR *d = opendir(arg);
    if (!d)
        return pb_error_set(err, PB_EINPUT, "cannot read folder '%s': %m", arg);
    size_t first = out->n;
    struct dirent *e;
    while ((e = readdir(d)) != NULL) {
        if (e->d_name[0] == '.')
            continue;
        char *p = NULL;
        if (asprintf(&p, "%s/%s", arg, e->d_name) < 0) {
            closedir(d);
            return pb_error_set(err, PB_ENOMEM, "out of memory");
        }
        if (stat(p, &sb) == 0 && S_ISREG(sb.st_mode) && push(out, p) != 0) {
            free(p);
            closedir(d);
            return pb_error_set(err, PB_ENOMEM, "out of memory");
        }
        free(p);
    }
    closedir(d);
    qsort(out->v + first, out->n - first, sizeof *out->v, by_name);
    return PB_OK;
}

static void hash_block(void *ctx, const char *buf, size_t len)
{
    XXH3_128bits_update(ctx, buf, len);
}

/* The content hash of a file, as the reader's on_block hook makes it
 * (every byte as read). Returns 0, or -1 when the file cannot be read (the
 * reader then says why). */
static int hash_file(const char *path, char *out, size_t cap)
{
    FILE *fp = fopen(path, "rb");
    if (!fp)
        return -1;
    XXH3_state_t *hs = XXH3_createState();
    char *buf = malloc(1u << 16);
    int rc = -1;
    if (hs && buf) {
        XXH3_128bits_reset(hs);
        size_t len;
        while ((len = fread(buf, 1, 1u << 16, fp)) > 0)
            XXH3_128bits_update(hs, buf, len);
        if (!ferror(fp)) {
            XXH128_hash_t h = XXH3_128bits_digest(hs);
            snprintf(out, cap, "xxh128:%016llx%016llx", (unsigned long long)h.high64,
                     (unsigned long long)h.low64);
            rc = 0;
        }
    }
    free(buf);
    XXH3_freeState(hs);
    fclose(fp);
    return rc;
}

static void fill_flight(struct flight_rec *f, const struct analysis *a, const struct pack_rec *p)
{
    memset(f, 0, sizeof *f);
    f->pack_id = p->id;
    f->duration_s = a->duration_s;
    f->charge_used_mah = a->charge_used_mah;
    f->energy_used_wh = a->energy_used_wh;
    f->current_max_a = a->current_max_a;
    f->current_mean_a = a->current_mean_a;
    f->power_mean_w = a->power_mean_w;
    f->power_cruise_w = a->power_cruise_w;
    f->voltage_min_v = a->voltage_min_v;
    f->cell_voltage_min_v = a->cell_min_loaded_v;
    f->time_below_floor_s = a->cells > 0 ? a->time_below_floor_s : NAN;
    f->r0_mohm = a->r0_mohm.value;
    f->r0_ci95_mohm = a->r0_mohm.ci95;
    f->r1_mohm = a->r1_mohm.value;
    f->tau_s = a->tau_s.value;
    f->soc_start_pct = a->soc_start_pct.value;
    f->soc_end_pct = a->soc_end_pct.value;
    f->capacity_mah = a->capacity_mah.value;
    f->capacity_ci95_mah = a->capacity_mah.ci95;
    f->cell_spread_rest_mv = a->spread_rest_mv;
    f->cell_spread_load_mv = a->spread_load_mv;
    f->weakest_cell = a->weakest_cell;
    f->temperature_max_c = a->temp_max_c;
    f->warnings = (int)a->nwarnings;
    f->ncells = a->ncells_detail;
    for (int c = 0; c < a->ncells_detail; c++) {
        f->cell[c].index = a->cell[c].index;
        f->cell[c].r0_mohm = a->cell[c].r0_mohm.value;
        f->cell[c].voltage_min_v = a->cell[c].voltage_min_v;
        f->cell[c].voltage_rest_v = a->cell[c].voltage_rest_v;
    }
}

enum outcome { OUT_STORED, OUT_DUPLICATE, OUT_FAILED };

/* Imports one log; on OUT_FAILED err says why. */
static enum outcome import_one(struct store *st, const struct pack_rec *pack,
                               const struct import_cli *cli, const char *path, char *line,
                               size_t cap, struct pb_error *err)
{
    struct log_cli lc = cli->log;
    XXH3_state_t *hs = XXH3_createState();
    struct analysis *a = NULL;
    struct logread_stats stats;
    char *json = NULL;
    size_t json_len = 0;
    enum outcome out = OUT_FAILED;
    if (!hs) {
        pb_error_set(err, PB_ENOMEM, "out of memory");
        return OUT_FAILED;
    }
    XXH3_128bits_reset(hs);
    lc.read.on_block = hash_block;
    lc.read.block_ctx = hs;
    lc.an.cells = pack->cells;
    const struct chem_info *chem = ocv_chem_by_name(pack->chemistry);
    if (!chem) {
        /* only a database edited by hand gets here: packs are checked when added */
        pb_error_set(err, PB_ESTORE, "pack '%s' has an unknown chemistry '%s' in the database",
                     pack->label, pack->chemistry);
        XXH3_freeState(hs);
        return OUT_FAILED;
    }
    lc.an.chemistry = (int)chem->id;
    lc.an.capacity_mah = pack->capacity_mah;
    lc.refuse_implausible = !cli->force; /* nothing impossible reaches the store */
    int is_stdin = strcmp(path, "-") == 0;
    const char *name = is_stdin ? "(stdin)" : path;
    /* a log already stored is known by its hash before it is analysed, so
     * re-importing a folder costs reading it, not analysing it */
    char pre_hash[40];
    if (!is_stdin && hash_file(path, pre_hash, sizeof pre_hash) == 0) {
        int found = 0;
        char dup_label[128] = "";
        if (store_flight_find_hash(st, pre_hash, &found, dup_label, sizeof dup_label, err) != PB_OK)
            goto cleanup;
        if (found) {
            snprintf(line, cap, "already imported%s%s: %s", dup_label[0] ? " for pack " : "",
                     dup_label, name);
            out = OUT_DUPLICATE;
            goto cleanup;
        }
    }
    if (logopts_analyze(path, &lc, &stats, &a, NULL, err) != PB_OK)
        goto cleanup;

    struct flight_rec f;
    fill_flight(&f, a, pack);
    XXH128_hash_t h = XXH3_128bits_digest(hs);
    snprintf(f.content_hash, sizeof f.content_hash, "xxh128:%016llx%016llx",
             (unsigned long long)h.high64, (unsigned long long)h.low64);
    snprintf(f.source, sizeof f.source, "%s", name);
    struct stat sb;
    if (a->has_epoch) {
        f.flown_epoch_s = a->start_epoch_s;
        snprintf(f.date_source, sizeof f.date_source, "log");
    } else if (cli->have_date) {
        f.flown_epoch_s = cli->date_epoch_s;
        snprintf(f.date_source, sizeof f.date_source, "option");
    } else if (!is_stdin && stat(path, &sb) == 0) {
        f.flown_epoch_s = (double)sb.st_mtim.tv_sec;
        snprintf(f.date_source, sizeof f.date_source, "mtime");
    } else {
        pb_error_set(err, PB_EUSAGE, "%s: the log has no absolute time: give --date", name);
        goto cleanup;
    }
    FILE *mem = open_memstream(&json, &json_len);
    if (!mem) {
        pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
    struct report_input in = {name, &stats, &lc.an, lc.an.plain_fit};
    int wrc = report_analysis_json(mem, a, &in);
    if (fclose(mem) != 0 || wrc != 0) {
        pb_error_set(err, PB_ENOMEM, "cannot build the flight report");
        goto cleanup;
    }
    int dup = 0;
    char dup_label[128] = "";
    if (store_flight_put(st, &f, json, &dup, dup_label, sizeof dup_label, err) != PB_OK)
        goto cleanup;
    char when[40];
    isotime_format(f.flown_epoch_s, when, sizeof when);
    if (dup) {
        snprintf(line, cap, "already imported%s%s: %s", dup_label[0] ? " for pack " : "", dup_label,
                 name);
        out = OUT_DUPLICATE;
    } else {
        snprintf(line, cap,
                 "imported %s: %.16s (date from %s), %.0f mAh, R0 %s mOhm, %zu warning%s", name,
                 when, f.date_source, f.charge_used_mah,
                 isfinite(f.r0_mohm) ? (char[32]){0} : "unknown", a->nwarnings,
                 a->nwarnings == 1 ? "" : "s");
        if (isfinite(f.r0_mohm)) {
            /* fill the R0 figure in place of the placeholder above */
            snprintf(line, cap,
                     "imported %s: %.16s (date from %s), %.0f mAh, R0 %.2f mOhm, %zu "
                     "warning%s",
                     name, when, f.date_source, f.charge_used_mah, f.r0_mohm, a->nwarnings,
                     a->nwarnings == 1 ? "" : "s");
        }
        out = OUT_STORED;
    }
cleanup:
    free(json);
    analysis_free(a);
    XXH3_freeState(hs);
    return out;
}

static void progress(size_t done, size_t total)
{
    int width = 30, filled = (int)(width * done / (total ? total : 1));
    fprintf(stderr, "\r[%.*s%*s] %zu/%zu", filled, "##############################", width - filled,
            "", done, total);
    if (done == total)
        fprintf(stderr, "\r%*s\r", width + 24, "");
    fflush(stderr);
}

enum pb_code cmd_import(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct import_cli cli = {0};
    int c;
    logopts_init(&cli.log);
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, "h", longopts, NULL)) != -1) {
        int taken = logopts_take(c, optarg, &cli.log, err);
        if (taken < 0)
            return PB_EUSAGE;
        if (taken)
            continue;
        switch (c) {
        case I_PACK:
            cli.pack = optarg;
            break;
        case I_DB:
            cli.db = optarg;
            break;
        case I_QUIET:
            cli.quiet = 1;
            break;
        case I_FORCE:
            cli.force = 1;
            break;
        case I_DATE:
            if (isotime_parse(optarg, strlen(optarg), &cli.date_epoch_s, NULL) != 0)
                return pb_error_set(err, PB_EUSAGE,
                                    "--date: expected an ISO 8601 date such as "
                                    "2026-04-18 or 2026-04-18T07:30:00Z, got '%s'",
                                    optarg);
            cli.have_date = 1;
            break;
        case 'h':
            fputs(usage_head, stdout);
            fputs(logopts_usage, stdout);
            return cmd_finish_stdout(err);
        default:
            return cmd_bad_option("import", argc, argv, err);
        }
    }
    enum pb_code rc = logopts_finish(&cli.log, err);
    if (rc != PB_OK)
        return rc;
    if (!cli.pack)
        return pb_error_set(err, PB_EUSAGE, "import: say which pack flew with --pack ID");
    if (optind >= argc)
        return pb_error_set(err, PB_EUSAGE, "import: no logs given");

    struct store *st = NULL;
    struct path_list paths = {0};
    rc = packview_open_store(cli.db, 1, &st, err);
    if (rc != PB_OK)
        return rc;
    struct pack_rec pack;
    rc = store_pack_get(st, cli.pack, &pack, err);
    if (rc != PB_OK)
        goto cleanup;
    if (pack.retired_at[0]) {
        rc = pb_error_set(err, PB_EUSAGE, "pack '%s' was retired on %s: not importing into it",
                          pack.label, pack.retired_at);
        goto cleanup;
    }
    for (int k = optind; k < argc; k++)
        if ((rc = expand(argv[k], &paths, err)) != PB_OK)
            goto cleanup;
    size_t stored = 0, dups = 0, failed = 0;
    int bar = isatty(STDERR_FILENO) && paths.n > 1;
    for (size_t k = 0; k < paths.n; k++) {
        char line[600];
        struct pb_error e = {PB_OK, ""};
        enum outcome o = import_one(st, &pack, &cli, paths.v[k], line, sizeof line, &e);
        if (bar)
            fprintf(stderr, "\r%*s\r", 60, "");
        if (o == OUT_FAILED) {
            failed++;
            if (e.code == PB_ESTORE || e.code == PB_ENOMEM) {
                /* the store itself failed: later logs would fail the same way */
                printf("%zu imported, %zu already there; stopped at %s\n", stored, dups,
                       paths.v[k]);
                rc = pb_error_set(err, e.code, "%s", e.msg);
                goto cleanup;
            }
            fprintf(stderr, "packbook: not imported: %s\n", e.msg);
        } else {
            stored += o == OUT_STORED;
            dups += o == OUT_DUPLICATE;
            if (!cli.quiet)
                printf("%s\n", line);
        }
        if (bar)
            progress(k + 1, paths.n);
    }
    printf("%zu imported, %zu already there, %zu failed (pack %s)\n", stored, dups, failed,
           pack.label);
    app->some_failed = failed > 0;
    rc = cmd_finish_stdout(err);
cleanup:
    for (size_t k = 0; k < paths.n; k++)
        free(paths.v[k]);
    free(paths.v);
    store_close(st);
    return rc;
}
