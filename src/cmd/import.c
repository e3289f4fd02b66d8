/* packbook import: analyse logs and store each as a flight of a pack. */
#define _GNU_SOURCE
#include <dirent.h>
#include <getopt.h>
#include <math.h>
#include <pthread.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>
#include <unistd.h>
#include <xxhash.h>

#include "../core/isotime.h"
#include "../core/packfit.h"
#include "../core/utf8.h"
#include "../report/report.h"
#include "cmd.h"
#include "logopts.h"
#include "packopts.h"
#include "packview.h"

static const char usage_head[] =
    "usage: packbook import --pack ID [-r] [options] LOG|DIR|- ...\n"
    "\n"
    "Analyses each log with the pack's cells, chemistry and capacity and stores\n"
    "the flight. A log already imported is recognised and skipped: the same bytes,\n"
    "or the same samples however written (another delimiter, a changed comment).\n"
    "A log starting at the same logged time and lasting as long as a stored flight\n"
    "is stored with a warning. A log that clearly is another pack's (other cell\n"
    "columns, pack voltages no cell of the chemistry reaches, more charge than\n"
    "the pack holds) is refused with the reason, unless --force.\n"
    "The flight date is the log's absolute time, else --date, else the file's\n"
    "modification time (with a warning). A failing log does not stop the batch\n"
    "(exit status 1). When the pack's status changes, it is printed.\n"
    "The pack's remembered reading settings (pack add/edit) apply; the options\n"
    "below override them.\n"
    "A flight that left its pack's trend (IR or cell imbalance up, capacity down\n"
    "by 4 standard deviations or more) is named after the summary, with how to\n"
    "acknowledge it once inspected ('packbook flight ack').\n"
    "A DIR's files that are not logs (another name than .csv, .tsv, .txt, .log,\n"
    ".dat or none, or binary) are skipped with a note, not counted as failures.\n"
    "\n";

#define IMPORT_MAX_JOBS 64

struct import_cli {
    struct log_cli log;
    struct packopts_seen seen;
    const char *pack, *db, *date;
    int have_date, quiet, force, recursive;
    int jobs; /* analysing threads (1: none besides the writer; 0: the cores) */
    double date_epoch_s;
    double wait_s; /* --wait */
};

#define IMP_AT(field) offsetof(struct import_cli, field)

/* clang-format off */
static const struct opt import_table[] = {
    {.name = "pack", .kind = OPT_STRING, .off = IMP_AT(pack), .meta = "ID",
     .help = "the pack that flew (see 'packbook pack list')"},
    {.name = "date", .kind = OPT_STRING, .off = IMP_AT(date), .meta = "DATE",
     .help = "date for logs without absolute time (ISO 8601)"},
    {.name = "force", .kind = OPT_FLAG, .off = IMP_AT(force), .set = 1,
     .help = "store logs that contradict the pack, or that cannot be\n"
     "one flight (over a day long, or over twice the rated\n"
     "charge drawn), all the same; the warnings are kept"},
    {.name = "recursive", .letter = 'r', .kind = OPT_FLAG, .off = IMP_AT(recursive), .set = 1,
     .help = "also the logs in sub-folders of a DIR"},
    {.name = "db", .kind = OPT_PATH, .off = IMP_AT(db), .meta = "PATH",
     .help = "history database (default: $PACKBOOK_DB, else the\n"
     "settings file's db, else $XDG_DATA_HOME/packbook/packbook.db;\n"
     "see 'packbook config')"},
    {.name = "quiet", .kind = OPT_FLAG, .off = IMP_AT(quiet), .set = 1,
     .help = "no line per log, only the summary"},
    {.name = "jobs", .letter = 'j', .kind = OPT_INT, .off = IMP_AT(jobs), .lo = 1,
     .hi = IMPORT_MAX_JOBS, .meta = "N", .what = "a count",
     .help = "logs analysed at once (default: the number of\n"
     "cores); one thread writes the store, in order"},
    {.name = "wait", .kind = OPT_DOUBLE, .off = IMP_AT(wait_s), .lo = 0, .hi = 86400,
     .def = CMD_STR(STORE_WAIT_DEFAULT_S), .meta = "S",
     .help = "wait up to S seconds for another process's lock on the\n"
     "database, for each flight"},
    {0},
};
/* clang-format on */

static int import_hook(void *ctx, const struct opt *o, const char *v, struct pb_error *err)
{
    struct import_cli *cli = ctx;
    if (logopts_is_reading(o))
        return packopts_note(&cli->seen, o->id, v, err) < 0 ? -1 : 0;
    if (o == &import_table[1]) {
        char why[128];
        if (isotime_parse_why(v, strlen(v), &cli->date_epoch_s, NULL, why, sizeof why) != 0)
            return pb_error_set(err, PB_EUSAGE,
                                "--date: expected an ISO 8601 date such as 2026-04-18 or "
                                "2026-04-18T07:30:00Z, got '%s': %s",
                                v, why);
        cli->have_date = 1;
    }
    return 0;
}

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

/* Whether a file found in a folder is worth reading as a log: a log's name
 * (.csv, .tsv, .txt, .log, .dat, or none) and no NUL byte in its first
 * 4 KiB. why says what it is otherwise. Named files are always read. */
static int looks_like_log(const char *path, char *why, size_t cap)
{
    static const char *const exts[] = {"csv", "tsv", "txt", "log", "dat"};
    const char *base = strrchr(path, '/') ? strrchr(path, '/') + 1 : path;
    const char *dot = strrchr(base, '.');
    if (dot) {
        int known = 0;
        for (size_t k = 0; k < sizeof exts / sizeof *exts; k++)
            known |= strcasecmp(dot + 1, exts[k]) == 0;
        if (!known) {
            snprintf(why, cap, "its name ends in '%s', not .csv, .tsv, .txt, .log or .dat", dot);
            return 0;
        }
    }
    FILE *f = fopen(path, "rb");
    if (!f)
        return 1; /* reading it will say why it cannot be read */
    char buf[4096];
    size_t n = fread(buf, 1, sizeof buf, f);
    fclose(f);
    if (memchr(buf, '\0', n)) {
        snprintf(why, cap, "it holds binary data");
        return 0;
    }
    return 1;
}

struct expand_ctx {
    int recursive;
    size_t skipped; /* files that are not logs, and sub-folders without -r */
};

/* A directory's files (not hidden) that look like logs, sorted by name, and
 * with recursive those of its sub-folders after them; a file or "-" as is. */
static enum pb_code expand(const char *arg, int depth, struct expand_ctx *x, struct path_list *out,
                           struct pb_error *err)
{
    struct stat sb;
    if (strcmp(arg, "-") == 0 || stat(arg, &sb) != 0 || !S_ISDIR(sb.st_mode))
        return push(out, arg) ? pb_error_set(err, PB_ENOMEM, "out of memory") : PB_OK;
    if (depth > 32)
        return pb_error_set(err, PB_EINPUT, "'%s': folders nested over 32 deep", arg);
    DIR *d = opendir(arg);
    if (!d)
        return pb_error_set(err, PB_EINPUT, "cannot read folder '%s': %m", arg);
    struct path_list files = {0}, dirs = {0};
    enum pb_code rc = PB_OK;
    struct dirent *e;
    while (rc == PB_OK && (e = readdir(d)) != NULL) {
        if (e->d_name[0] == '.')
            continue;
        char *p = NULL;
        if (asprintf(&p, "%s/%s", arg, e->d_name) < 0) {
            rc = pb_error_set(err, PB_ENOMEM, "out of memory");
            break;
        }
        if (stat(p, &sb) == 0 && S_ISDIR(sb.st_mode)) {
            if (push(&dirs, p) != 0)
                rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        } else if (stat(p, &sb) == 0 && S_ISREG(sb.st_mode)) {
            if (push(&files, p) != 0)
                rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        }
        free(p);
    }
    closedir(d);
    /* qsort's array may not be NULL, even for no elements */
    if (files.n)
        qsort(files.v, files.n, sizeof *files.v, by_name);
    if (dirs.n)
        qsort(dirs.v, dirs.n, sizeof *dirs.v, by_name);
    for (size_t k = 0; rc == PB_OK && k < files.n; k++) {
        char why[160];
        if (!looks_like_log(files.v[k], why, sizeof why)) {
            x->skipped++;
            fprintf(stderr, "packbook: note: skipped %s: not a log (%s)\n", files.v[k], why);
        } else if (push(out, files.v[k]) != 0) {
            rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        }
    }
    for (size_t k = 0; rc == PB_OK && k < dirs.n; k++) {
        if (x->recursive) {
            rc = expand(dirs.v[k], depth + 1, x, out, err);
        } else {
            x->skipped++;
            fprintf(stderr, "packbook: note: skipped folder %s (give -r to import sub-folders)\n",
                    dirs.v[k]);
        }
    }
    for (size_t k = 0; k < files.n; k++)
        free(files.v[k]);
    for (size_t k = 0; k < dirs.n; k++)
        free(dirs.v[k]);
    free(files.v);
    free(dirs.v);
    return rc;
}

static void hash_block(void *ctx, const char *buf, size_t len)
{
    XXH3_128bits_update(ctx, buf, len);
}

/* Feeds one value, rounded to a micro-unit so that the same reading
 * written with other digits of noise-free formatting hashes the same. */
static void hash_value(XXH3_state_t *h, double v)
{
    int64_t q = (int64_t)llround(v * 1e6);
    XXH3_128bits_update(h, &q, sizeof q);
}

/* A hash of what the log says, not how it is written: every sample's time,
 * voltage, current, temperature and cell voltages, and the start time. */
static int samples_hash(const struct series *s, char *out, size_t cap)
{
    XXH3_state_t *h = XXH3_createState();
    if (!h)
        return -1;
    XXH3_128bits_reset(h);
    int32_t shape[4] = {(int32_t)s->has_epoch, s->i_a != NULL, s->temp_c != NULL, s->ncells};
    XXH3_128bits_update(h, shape, sizeof shape);
    hash_value(h, s->has_epoch ? s->start_epoch_s : 0.0);
    for (size_t k = 0; k < s->n; k++) {
        hash_value(h, s->t_s[k]);
        hash_value(h, s->v_v[k]);
        if (s->i_a)
            hash_value(h, s->i_a[k]);
        if (s->temp_c)
            hash_value(h, s->temp_c[k]);
        for (int c = 0; c < s->ncells; c++)
            hash_value(h, s->cell_v[c][k]);
    }
    XXH128_hash_t d = XXH3_128bits_digest(h);
    XXH3_freeState(h);
    snprintf(out, cap, "xxh128:%016llx%016llx", (unsigned long long)d.high64,
             (unsigned long long)d.low64);
    return 0;
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
    int misfit;    /* stored with --force though it does not fit the pack */
    char why[320]; /* how it does not fit */
    struct pb_error err;
    char line[600];  /* the line printed for it */
    char note[1600]; /* its warnings (stderr), empty when none */
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
    int64_t id = 0;
    char label[128] = "";
    if (store_flight_find_hash(st, hash, &found, &id, label, sizeof label, &j->err) != PB_OK) {
        j->out = OUT_FAILED;
        return;
    }
    if (found) {
        snprintf(j->line, sizeof j->line, "already imported as flight %lld for pack %s (%s): %s",
                 (long long)id, label, "same bytes", j->path);
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
    struct series *ser = NULL;
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
    lc.read_without_cells = 1;           /* packfit_check names another cell count */
    const char *path = j->path;
    int is_stdin = strcmp(path, "-") == 0;
    const char *name = is_stdin ? "(stdin)" : path;
    if (logopts_analyze(path, &lc, &stats, &a, &ser, err) != PB_OK)
        goto cleanup;
    char *why = j->why;
    struct packfit_pack pf = {pack->cells, chem, pack->capacity_mah};
    int misfit = packfit_check(a, &pf, why, sizeof j->why);
    if (misfit && !cli->force) {
        pb_error_set(err, PB_EINPUT,
                     "%s: does not fit pack '%s' (%dS %s, %.0f mAh): %s; --force stores it "
                     "all the same",
                     name, pack->label, pack->cells, chem->name, pack->capacity_mah, why);
        goto cleanup;
    }

    struct flight_rec *f = &j->f;
    fill_flight(f, a, pack);
    if (samples_hash(ser, f->samples_hash, sizeof f->samples_hash) != 0) {
        pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
    XXH128_hash_t h = XXH3_128bits_digest(hs);
    snprintf(f->content_hash, sizeof f->content_hash, "xxh128:%016llx%016llx",
             (unsigned long long)h.high64, (unsigned long long)h.low64);
    /* the name as valid UTF-8 (a Latin-1 file name gets U+FFFD), cut at a character */
    utf8_repair(f->source, sizeof f->source, name, strlen(name));
    struct stat sb;
    if (a->has_epoch &&
        !(a->start_epoch_s >= ISOTIME_EPOCH_MIN_S && a->start_epoch_s < ISOTIME_EPOCH_END_S)) {
        /* a Unix-time column can hold any number; the history keeps 1970-2100 */
        pb_error_set(err, PB_EINPUT, "%s: the log starts at Unix time %.0f, outside %d-%d", name,
                     a->start_epoch_s, ISOTIME_YEAR_MIN, ISOTIME_YEAR_MAX);
        goto cleanup;
    }
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
    j->misfit = misfit;
    j->out = OUT_ANALYSED;
cleanup:
    free(json);
    analysis_free(a);
    series_free(ser);
    XXH3_freeState(hs);
}

/* Stores an analysed log (the writer's part); sets j->out, j->line and
 * j->note. */
static void store_job(struct store *st, const struct pack_rec *pack, struct job *j)
{
    const struct flight_rec *f = &j->f;
    const char *name = f->source;
    j->out = OUT_FAILED;
    j->note[0] = '\0';
    struct store_dup dup;
    if (store_flight_put(st, f, j->json, &dup, &j->err) != PB_OK)
        return;
    char when[40];
    isotime_format(f->flown_epoch_s, when, sizeof when);
    if (dup.kind != DUP_NONE) {
        snprintf(j->line, sizeof j->line, "already imported as flight %lld for pack %s (%s): %s",
                 (long long)dup.id, dup.label,
                 dup.kind == DUP_BYTES ? "same bytes" : "same samples", name);
        j->out = OUT_DUPLICATE;
        return;
    }
    char r0[48] = "not identifiable";
    if (isfinite(f->r0_mohm))
        snprintf(r0, sizeof r0, "%.2f %s", f->r0_mohm, report_mohm());
    snprintf(j->line, sizeof j->line,
             "imported %s: %.16s (date from %s), %.0f mAh, IR %s, %zu warning%s", name, when,
             f->date_source, f->charge_used_mah, r0, j->nwarnings, j->nwarnings == 1 ? "" : "s");

    size_t used = 0;
    if (j->misfit)
        used += (size_t)snprintf(j->note + used, sizeof j->note - used,
                                 "packbook: warning: %s: stored with --force though it does not "
                                 "fit pack '%s': %s\n",
                                 name, pack->label, j->why);
    if (used < sizeof j->note && strcmp(f->date_source, "mtime") == 0)
        used += (size_t)snprintf(j->note + used, sizeof j->note - used,
                                 "packbook: warning: %s: the log has no absolute time; its date "
                                 "%.10s is the file's modification time, which copying changes "
                                 "(give --date)\n",
                                 name, when);
    if (used < sizeof j->note && dup.near_id)
        snprintf(j->note + used, sizeof j->note - used,
                 "packbook: warning: %s: starts at the same time and lasts as long as flight "
                 "%lld of pack %s: the same flight logged twice? ('packbook flight remove ID' "
                 "undoes one)\n",
                 name, (long long)dup.near_id, dup.near_label);
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

/* The flights just stored (by content hash) that left the pack's trend
 * (departure.h), each with how to acknowledge it. Printed even with
 * --quiet: it is why the operator should look at the pack now. */
/* The flights just stored (hashes) that left their trend, from the pack's
 * view as import kept it (the flags do not depend on the rules). */
static void report_departures(const struct pack_view *v, char (*hashes)[40], size_t nh)
{
    for (size_t k = 0; k < v->nflights; k++) {
        const struct flight_rec *f = &v->flights[k];
        if (!v->dep[k].flagged || pack_view_ack(v, f->id))
            continue;
        int fresh = 0;
        for (size_t j = 0; j < nh && !fresh; j++)
            fresh = strcmp(hashes[j], f->content_hash) == 0;
        if (!fresh)
            continue;
        char what[128], day[40];
        departure_text(&v->dep[k], what, sizeof what);
        isotime_format(f->flown_epoch_s, day, sizeof day);
        printf("inspect: flight %lld (%.10s, %s): %s; after inspecting the pack: packbook flight "
               "ack %lld --note TEXT\n",
               (long long)f->id, day,
               utf8_printable((char[4 * 256 + 4]){0}, 4 * 256 + 4, f->source),
               report_units(what, (char[160]){0}, 160), (long long)f->id);
    }
}

static void progress(size_t done, size_t total)
{
    int width = 30, filled = (int)((size_t)width * done / (total ? total : 1));
    fprintf(stderr, "\r[%.*s%*s] %zu/%zu", filled, "##############################", width - filled,
            "", done, total);
    if (done == total)
        fprintf(stderr, "\r%*s\r", width + 24, "");
    fflush(stderr);
}

enum pb_code cmd_import(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct import_cli cli = {0};
    logopts_init(&cli.log);
    opt_defaults(import_table, &cli);
    int done = 0;
    struct opt_cmd cmd = {
        "import", usage_head,  NULL, {{NULL, import_table, &cli, NULL}, LOGOPTS_GROUP(&cli.log)},
        2,        import_hook, &cli};
    enum pb_code parsed = opt_parse(&cmd, argc, argv, &done, err);
    if (parsed != PB_OK || done)
        return parsed;
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
    char(*hashes)[40] = NULL; /* content hashes of the flights stored now */
    rc = packview_open_store_wait(cli.db, STORE_WRITE, cli.wait_s, &st, err);
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
    /* the summaries below copy the pack before its settings are split */
    struct pack_rec settings_owner = pack;
    rc = packopts_apply(settings_owner.settings, &cli.seen, &cli.log, err);
    if (rc != PB_OK)
        goto cleanup;
    struct expand_ctx ex = {cli.recursive, 0};
    for (int k = optind; k < argc; k++)
        if ((rc = expand(argv[k], 0, &ex, &paths, err)) != PB_OK)
            goto cleanup;
    size_t stored = 0, dups = 0, failed = 0;
    int bar = isatty(STDERR_FILENO) && paths.n > 1;
    struct pack_summary before, after;
    rc = packview_summary(st, &pack, &before, err);
    if (rc != PB_OK)
        goto cleanup;
    hashes = calloc(paths.n ? paths.n : 1, sizeof *hashes);
    if (!hashes) {
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
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
        char shown[4 * sizeof pool.jobs[0].line]; /* names and messages escaped for the terminal */
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
            store_job(st, &pack, j);
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
                       utf8_printable(shown, sizeof shown, paths.v[k]));
                rc = pb_error_set(err, j->err.code, "%s", j->err.msg);
                break;
            }
            fprintf(stderr, "packbook: not imported: %s\n",
                    utf8_printable(shown, sizeof shown, j->err.msg));
        } else {
            if (j->out == OUT_STORED)
                memcpy(hashes[stored], j->f.content_hash, sizeof hashes[0]);
            stored += j->out == OUT_STORED;
            dups += j->out == OUT_DUPLICATE;
            if (!cli.quiet)
                printf("%s\n", utf8_printable(shown, sizeof shown, j->line));
            if (j->out == OUT_STORED && j->note[0])
                fputs(j->note, stderr);
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
    char lb[4 * sizeof pack.label];
    if (ex.skipped)
        printf("%zu imported, %zu already there, %zu failed, %zu skipped as not logs (pack %s)\n",
               stored, dups, failed, ex.skipped, utf8_printable(lb, sizeof lb, pack.label));
    else
        printf("%zu imported, %zu already there, %zu failed (pack %s)\n", stored, dups, failed,
               utf8_printable(lb, sizeof lb, pack.label));
    if (stored > 0) {
        /* one assessment: kept for fleet, and the new flights' departures from it */
        struct pack_view v;
        rc = packview_keep(st, &pack, &after, &v, err);
        if (rc != PB_OK)
            goto cleanup;
        if (strcmp(before.status, after.status) != 0)
            printf("pack %s: status %s -> %s (%s)\n", lb, before.status, after.status,
                   after.reason);
        report_departures(&v, hashes, stored);
        pack_view_release(&v);
    }
    app->some_failed = failed > 0;
    rc = cmd_finish_stdout(err);
cleanup:
    free(hashes);
    for (size_t k = 0; k < paths.n; k++)
        free(paths.v[k]);
    free(paths.v);
    store_close(st);
    return rc;
}
