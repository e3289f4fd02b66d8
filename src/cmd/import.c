/* packbook import: analyse logs and store each as a flight of a pack. */
#define _GNU_SOURCE
#include <dirent.h>
#include <getopt.h>
#include <math.h>
#include <pthread.h>
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
    "  -j, --jobs N           logs analysed at once (default: the number of\n"
    "                         cores); one thread writes the store, in order\n"
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
    {"jobs", required_argument, NULL, 'j'},
    {"help", no_argument, NULL, 'h'},
    LOGOPTS_LONG,
    {NULL, 0, NULL, 0},
};

struct import_cli {
    struct log_cli log;
    const char *pack, *db;
    int have_date, quiet, force;
    int jobs; /* analysing threads (1: none besides the writer) */
    double date_epoch_s;
};

#define IMPORT_MAX_JOBS 64

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

enum outcome { OUT_PENDING = 0, OUT_ANALYSED, OUT_STORED, OUT_DUPLICATE, OUT_FAILED };

/* One log of the batch: found stored by its hash, or analysed (by a
 * worker) into a flight and its report, then stored (by the one writer). */
struct job {
    const char *path;
    enum outcome out;
    int done; /* the analysis is over (guarded by the pool's lock) */
    struct flight_rec f;
    char *json;
    size_t nwarnings;
    struct pb_error err;
    char line[600];
};

/* Looks the log's hash up in the store before anything is analysed, so
 * re-importing a folder costs reading it, not analysing it. Sets the job
 * OUT_DUPLICATE with its line when stored; OUT_FAILED when the store fails. */
static void find_stored(struct store *st, struct job *j)
{
    char hash[40];
    if (strcmp(j->path, "-") == 0 || hash_file(j->path, hash, sizeof hash) != 0)
        return; /* stdin is hashed as it is read; an unreadable file fails in the reader */
    int found = 0;
    char dup_label[128] = "";
    if (store_flight_find_hash(st, hash, &found, dup_label, sizeof dup_label, &j->err) != PB_OK) {
        j->out = OUT_FAILED;
        return;
    }
    if (found) {
        snprintf(j->line, sizeof j->line, "already imported%s%s: %s",
                 dup_label[0] ? " for pack " : "", dup_label, j->path);
        j->out = OUT_DUPLICATE;
    }
}

/* Analyses one log into j->f and j->json (OUT_ANALYSED), or OUT_FAILED
 * with j->err. Touches nothing shared: workers run it side by side. */
static void analyse_job(const struct pack_rec *pack, const struct import_cli *cli, struct job *j)
{
    struct log_cli lc = cli->log;
    struct pb_error *err = &j->err;
    XXH3_state_t *hs = XXH3_createState();
    struct analysis *a = NULL;
    struct logread_stats stats;
    char *json = NULL;
    size_t json_len = 0;
    j->out = OUT_FAILED;
    if (!hs) {
        pb_error_set(err, PB_ENOMEM, "out of memory");
        return;
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
        return;
    }
    lc.an.chemistry = (int)chem->id;
    lc.an.capacity_mah = pack->capacity_mah;
    lc.refuse_implausible = !cli->force; /* nothing impossible reaches the store */
    const char *path = j->path;
    int is_stdin = strcmp(path, "-") == 0;
    const char *name = is_stdin ? "(stdin)" : path;
    if (logopts_analyze(path, &lc, &stats, &a, NULL, err) != PB_OK)
        goto cleanup;

    struct flight_rec *f = &j->f;
    fill_flight(f, a, pack);
    XXH128_hash_t h = XXH3_128bits_digest(hs);
    snprintf(f->content_hash, sizeof f->content_hash, "xxh128:%016llx%016llx",
             (unsigned long long)h.high64, (unsigned long long)h.low64);
    snprintf(f->source, sizeof f->source, "%s", name);
    struct stat sb;
    if (a->has_epoch) {
        f->flown_epoch_s = a->start_epoch_s;
        snprintf(f->date_source, sizeof f->date_source, "log");
    } else if (cli->have_date) {
        f->flown_epoch_s = cli->date_epoch_s;
        snprintf(f->date_source, sizeof f->date_source, "option");
    } else if (!is_stdin && stat(path, &sb) == 0) {
        f->flown_epoch_s = (double)sb.st_mtim.tv_sec;
        snprintf(f->date_source, sizeof f->date_source, "mtime");
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
    j->json = json;
    json = NULL;
    j->nwarnings = a->nwarnings;
    j->out = OUT_ANALYSED;
cleanup:
    free(json);
    analysis_free(a);
    XXH3_freeState(hs);
}

/* Stores an analysed log (the writer's part); sets j->out and j->line. */
static void store_job(struct store *st, struct job *j)
{
    const struct flight_rec *f = &j->f;
    int dup = 0;
    char dup_label[128] = "";
    j->out = OUT_FAILED;
    if (store_flight_put(st, f, j->json, &dup, dup_label, sizeof dup_label, &j->err) != PB_OK)
        return;
    char when[40];
    isotime_format(f->flown_epoch_s, when, sizeof when);
    if (dup) {
        snprintf(j->line, sizeof j->line, "already imported%s%s: %s",
                 dup_label[0] ? " for pack " : "", dup_label, f->source);
        j->out = OUT_DUPLICATE;
        return;
    }
    char r0[32] = "unknown";
    if (isfinite(f->r0_mohm))
        snprintf(r0, sizeof r0, "%.2f", f->r0_mohm);
    snprintf(j->line, sizeof j->line,
             "imported %s: %.16s (date from %s), %.0f mAh, R0 %s mOhm, %zu warning%s", f->source,
             when, f->date_source, f->charge_used_mah, r0, j->nwarnings,
             j->nwarnings == 1 ? "" : "s");
    j->out = OUT_STORED;
}

/* Workers analyse logs ahead of the writer, at most IMPORT_AHEAD per
 * worker: memory stays bounded however many logs are given. */
#define IMPORT_AHEAD 4

struct pool {
    pthread_mutex_t mu;
    pthread_cond_t done_cv, room_cv;
    struct job *jobs;
    size_t n, next, written, ahead;
    int stop;
    const struct pack_rec *pack;
    const struct import_cli *cli;
};

static void *worker(void *vp)
{
    struct pool *p = vp;
    pthread_mutex_lock(&p->mu);
    for (;;) {
        while (!p->stop && p->next < p->n && p->next >= p->written + p->ahead)
            pthread_cond_wait(&p->room_cv, &p->mu);
        if (p->stop || p->next >= p->n)
            break;
        struct job *j = &p->jobs[p->next++];
        pthread_mutex_unlock(&p->mu);
        if (j->out == OUT_PENDING)
            analyse_job(p->pack, p->cli, j);
        pthread_mutex_lock(&p->mu);
        j->done = 1;
        pthread_cond_broadcast(&p->done_cv);
    }
    pthread_mutex_unlock(&p->mu);
    return NULL;
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
    while ((c = getopt_long(argc, argv, "hj:", longopts, NULL)) != -1) {
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
        case 'j': {
            char *end;
            long v = strtol(optarg, &end, 10);
            if (*end || end == optarg || v < 1 || v > IMPORT_MAX_JOBS)
                return pb_error_set(err, PB_EUSAGE,
                                    "--jobs: expected a count from 1 to %d, got '%s'",
                                    IMPORT_MAX_JOBS, optarg);
            cli.jobs = (int)v;
            break;
        }
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
    if (cli.jobs == 0) {
        long cores = sysconf(_SC_NPROCESSORS_ONLN);
        cli.jobs = cores < 1 ? 1 : cores > IMPORT_MAX_JOBS ? IMPORT_MAX_JOBS : (int)cores;
    }
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
    struct pool pool = {.n = paths.n, .pack = &pack, .cli = &cli};
    pool.ahead = (size_t)cli.jobs * IMPORT_AHEAD;
    pool.jobs = calloc(paths.n ? paths.n : 1, sizeof *pool.jobs);
    if (!pool.jobs) {
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
    for (size_t k = 0; k < paths.n; k++)
        pool.jobs[k].path = paths.v[k];
    /* every hash is looked up before any analysis starts (a few ms a
     * hundred logs), so the workers never analyse a log already stored */
    for (size_t k = 0; k < paths.n; k++)
        find_stored(st, &pool.jobs[k]);
    /* -j 1: no threads; else the workers analyse while this thread writes
     * the store in the logs' order, one transaction per flight as before */
    pthread_t tids[IMPORT_MAX_JOBS];
    int nthreads = 0;
    pthread_mutex_init(&pool.mu, NULL);
    pthread_cond_init(&pool.done_cv, NULL);
    pthread_cond_init(&pool.room_cv, NULL);
    for (int t = 0; cli.jobs > 1 && t < cli.jobs; t++)
        if (pthread_create(&tids[nthreads], NULL, worker, &pool) == 0)
            nthreads++;
    for (size_t k = 0; k < paths.n; k++) {
        struct job *j = &pool.jobs[k];
        if (nthreads == 0) {
            if (j->out == OUT_PENDING)
                analyse_job(&pack, &cli, j);
        } else {
            pthread_mutex_lock(&pool.mu);
            while (!j->done)
                pthread_cond_wait(&pool.done_cv, &pool.mu);
            pthread_mutex_unlock(&pool.mu);
        }
        if (j->out == OUT_ANALYSED)
            store_job(st, j);
        free(j->json);
        j->json = NULL;
        pthread_mutex_lock(&pool.mu);
        pool.written = k + 1;
        pthread_cond_broadcast(&pool.room_cv);
        pthread_mutex_unlock(&pool.mu);
        if (bar)
            fprintf(stderr, "\r%*s\r", 60, "");
        if (j->out == OUT_FAILED) {
            failed++;
            if (j->err.code == PB_ESTORE || j->err.code == PB_ENOMEM) {
                /* the store itself failed: later logs would fail the same way */
                printf("%zu imported, %zu already there; stopped at %s\n", stored, dups,
                       paths.v[k]);
                rc = pb_error_set(err, j->err.code, "%s", j->err.msg);
                break;
            }
            fprintf(stderr, "packbook: not imported: %s\n", j->err.msg);
        } else {
            stored += j->out == OUT_STORED;
            dups += j->out == OUT_DUPLICATE;
            if (!cli.quiet)
                printf("%s\n", j->line);
        }
        if (bar)
            progress(k + 1, paths.n);
    }
    pthread_mutex_lock(&pool.mu);
    pool.stop = 1;
    pthread_cond_broadcast(&pool.room_cv);
    pthread_mutex_unlock(&pool.mu);
    for (int t = 0; t < nthreads; t++)
        pthread_join(tids[t], NULL);
    for (size_t k = 0; k < paths.n; k++)
        free(pool.jobs[k].json);
    free(pool.jobs);
    pthread_cond_destroy(&pool.room_cv);
    pthread_cond_destroy(&pool.done_cv);
    pthread_mutex_destroy(&pool.mu);
    if (rc != PB_OK)
        goto cleanup;
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
