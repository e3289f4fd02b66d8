#define _GNU_SOURCE
#include "logread.h"

#include <csv.h>
#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "isotime.h"
#include "numparse.h"
#include "twin.h"

#define BLOCK_BYTES (1u << 20)
#define SNIFF_LINES 32
#define HEADER_KEEP 128 /* bytes of each first-row field kept for mapping */

enum slot { SLOT_T = 0, SLOT_V, SLOT_I, SLOT_TEMP, SLOT_DATE, SLOT_CELL0 };
#define NSLOTS (SLOT_CELL0 + PB_MAX_CELLS)

enum bad_kind { BAD_NONE = 0, BAD_NUMBER, BAD_NONFINITE, BAD_EMPTY };

enum tmode { TM_UNDECIDED = 0, TM_NUMBER, TM_ISO, TM_CLOCK };

struct reader {
    const struct logread_opts *opts;
    const char *name;
    struct logread_stats *st;
    struct pb_error *err;
    int failed;

    size_t line;        /* physical line being read, 1-based */
    int after_cr;       /* the last line end was a CR (an LF now completes it) */
    size_t record_line; /* line where the next record starts */
    size_t row_line;    /* line where the current record began */
    int field;          /* index of the next field in the record */
    int comment;        /* current record is a # comment */

    int mapped;       /* columns are known */
    int ncols;        /* fields in the layout */
    char **first_row; /* first record's fields, until mapped */
    int first_row_n;

    int slot_col[NSLOTS]; /* column index of each slot, -1 none */
    struct col_spec spec[NSLOTS];
    int *col_slot;   /* slot of each column, -1 none */
    int need_fields; /* fields a record must have */
    int ncells;

    enum tmode tmode;
    int clock_seen, clock_days; /* TM_CLOCK: a time was read; midnights passed */
    double clock_prev;
    double t_scale;
    double t_first; /* first kept absolute/raw time, in seconds */
    double t_prev;
    double temp_prev;
    int have_temp_prev;
    int not_rising; /* a kept time was not above the one before (order_times has work) */
    double max_a;   /* |current| above this is a glitch */
    double peak_a;  /* the largest |current| of the series (kept_peak_a) */
    size_t peak_n;  /* the sample count peak_a holds for (samples are only dropped after reading) */
    int counted;    /* the sign check's counts, made by spikes_and_counts, still hold */
    size_t counted_loaded[2]; /* loaded samples, negative ones */

    double val[NSLOTS];
    enum bad_kind bad;
    int bad_col;

    /* Cells are judged per column once the whole log is in (settle_cells):
     * a cell value that is no voltage leaves a NAN in the sample and is
     * counted here by kind (BAD_NONE's slot: outside the cell range); a
     * column with no voltage at all is dropped, not the log. */
    enum bad_kind cell_kind[PB_MAX_CELLS]; /* of the record being read */
    size_t cell_ok[PB_MAX_CELLS];          /* samples with a voltage for the cell */
    struct logread_event cell_ev[PB_MAX_CELLS][4];
    int cell_map_missing[PB_MAX_CELLS]; /* --map named a column that is not there */

    struct series *s;
};

/* fmin and fmax as the C library defines them (a NaN loses to a number),
 * inline: through the PLT they cost more than the rest of a pass's step. */
static inline double min_of(double a, double b)
{
    return a < b ? a : b == b ? b : a;
}

static inline double max_of(double a, double b)
{
    return a > b ? a : b == b ? b : a;
}

static void count_event(struct logread_event *ev, size_t line, int column)
{
    if (ev->count++ == 0) {
        ev->first_line = line;
        ev->first_column = column;
    }
}

/* A temperature sample as kept: tc, or where it is not a number the last
 * one kept (NAN before any), the repair counted in ev at line, column. */
static inline double temp_kept(double tc, double *prev, int *have_prev, struct logread_event *ev,
                               size_t line, int column)
{
    if (!isfinite(tc)) {
        count_event(ev, line, column);
        tc = *have_prev ? *prev : NAN;
    }
    if (isfinite(tc)) {
        *prev = tc;
        *have_prev = 1;
    }
    return tc;
}

static void fail(struct reader *r, enum pb_code code, size_t line, int column, const char *fmt,
                 const char *detail)
{
    char what[PB_ERRMSG_MAX];
    if (r->failed)
        return;
    r->failed = 1;
    snprintf(what, sizeof what, fmt, detail ? detail : "");
    if (column > 0)
        pb_error_set(r->err, code, "%s:%zu:%d: %s", r->name, line, column, what);
    else if (line > 0)
        pb_error_set(r->err, code, "%s:%zu: %s", r->name, line, what);
    else
        pb_error_set(r->err, code, "%s: %s", r->name, what);
}

/* libcsv's buffer grows through this hook, which is how one field's
 * length (and so the memory one line can take) is bounded. */
static void *bounded_realloc(void *p, size_t size)
{
    if (size > LOGREAD_MAX_FIELD_BYTES + 64)
        return NULL;
    return realloc(p, size);
}

static int space_only(unsigned char c)
{
    return c == CSV_SPACE;
}

/* ---- dialect ---------------------------------------------------------- */

/* UTF-16 (what some Windows loggers and spreadsheet exports write): a byte-order
 * mark FF FE or FE FF, or ASCII with a NUL in every other byte. */
static int looks_utf16(const char *buf, size_t len)
{
    const unsigned char *u = (const unsigned char *)buf;
    if (len >= 2 && ((u[0] == 0xff && u[1] == 0xfe) || (u[0] == 0xfe && u[1] == 0xff)))
        return 1;
    size_t n = len < 64 ? len - len % 2 : 64, nul_even = 0, nul_odd = 0;
    for (size_t k = 0; k < n; k++)
        if (u[k] == 0 && k % 2)
            nul_odd++;
        else if (u[k] == 0)
            nul_even++;
    return n >= 8 && (nul_odd == n / 2 || nul_even == n / 2) && nul_odd + nul_even == n / 2;
}

static int count_outside_quotes(const char *p, size_t len, char d)
{
    int n = 0, q = 0;
    for (size_t k = 0; k < len; k++) {
        if (p[k] == '"')
            q = !q;
        else if (!q && p[k] == d)
            n++;
    }
    return n;
}

/* Picks the delimiter whose count is the same on most of the first lines,
 * then whether numbers use a decimal comma. */
static void sniff(const char *buf, size_t len, char *delim, char *decimal)
{
    static const char cands[] = {',', ';', '\t'};
    const char *lines[SNIFF_LINES];
    size_t lens[SNIFF_LINES];
    int nl = 0;
    size_t at = 0;
    while (at < len && nl < SNIFF_LINES) {
        const char *e = memchr(buf + at, '\n', len - at);
        size_t l = e ? (size_t)(e - (buf + at)) : len - at;
        const char *p = buf + at;
        size_t skip = 0;
        while (skip < l && (p[skip] == ' ' || p[skip] == '\r'))
            skip++;
        if (skip < l && p[skip] != '#') {
            lines[nl] = p;
            lens[nl] = l;
            nl++;
        }
        if (!e)
            break;
        at += l + 1;
    }
    /* the last line may be cut by the block end: leave it out if others exist */
    if (nl > 2)
        nl--;
    double best_score = -1.0;
    char best = ',';
    for (size_t c = 0; c < sizeof cands; c++) {
        int counts[SNIFF_LINES];
        for (int k = 0; k < nl; k++)
            counts[k] = count_outside_quotes(lines[k], lens[k], cands[c]);
        /* agreement with the count of the data lines' mode */
        int mode = 0, mode_n = 0;
        for (int k = 0; k < nl; k++) {
            int same = 0;
            for (int j = 0; j < nl; j++)
                same += counts[j] == counts[k];
            if (counts[k] > 0 && (same > mode_n || (same == mode_n && counts[k] > mode))) {
                mode = counts[k];
                mode_n = same;
            }
        }
        if (mode == 0)
            continue;
        double score = (double)mode_n / nl + 0.001 * mode;
        if (score > best_score) {
            best_score = score;
            best = cands[c];
        }
    }
    *delim = best;
    *decimal = '.';
    if (best == ',')
        return;
    /* decimal comma: fields like "16,82" and no "16.82" on data lines */
    int comma_nums = 0, dot_nums = 0;
    for (int k = 1; k < nl; k++) {
        const char *p = lines[k];
        for (size_t j = 1; j + 1 < lens[k]; j++) {
            if (isdigit((unsigned char)p[j - 1]) && isdigit((unsigned char)p[j + 1])) {
                comma_nums += p[j] == ',';
                dot_nums += p[j] == '.';
            }
        }
    }
    if (comma_nums > 0 && dot_nums == 0)
        *decimal = ',';
}

/* ---- layout ----------------------------------------------------------- */

static int slot_for(const struct col_spec *sp)
{
    switch (sp->role) {
    case COL_TIME:
        return SLOT_T;
    case COL_VOLTAGE:
        return SLOT_V;
    case COL_CURRENT:
    case COL_CURRENT_RAW:
        return SLOT_I;
    case COL_TEMP:
        return SLOT_TEMP;
    case COL_CELL:
        return sp->cell <= PB_MAX_CELLS ? SLOT_CELL0 + sp->cell - 1 : -1;
    case COL_DATE:
        return SLOT_DATE;
    case COL_IGNORE:
        return -1;
    }
    return -1;
}

static int assign(struct reader *r, int col, const struct col_spec *sp, int override)
{
    int slot = slot_for(sp);
    if (slot < 0) {
        r->st->ignored_columns++;
        return 0;
    }
    if (r->slot_col[slot] >= 0 && !override) {
        /* a physical current beats raw counts; otherwise the first column wins */
        if (slot == SLOT_I && r->spec[slot].role == COL_CURRENT_RAW && sp->role == COL_CURRENT) {
            r->col_slot[r->slot_col[slot]] = -1;
        } else {
            count_event(&r->st->duplicate_role, r->row_line, col + 1);
            r->st->ignored_columns++;
            return 0;
        }
    }
    if (r->slot_col[slot] >= 0)
        r->col_slot[r->slot_col[slot]] = -1;
    for (int s = 0; s < NSLOTS; s++) /* an override moves a column out of its old slot */
        if (override && r->slot_col[s] == col)
            r->slot_col[s] = -1;
    r->slot_col[slot] = col;
    r->spec[slot] = *sp;
    r->col_slot[col] = slot;
    return 0;
}

static int parse_name(struct reader *r, const char *name, size_t len, struct col_spec *sp,
                      int column, const char *what)
{
    if (colname_parse(name, len, sp) != 0) {
        char shown[80];
        snprintf(shown, sizeof shown, "%.*s", (int)(len > 60 ? 60 : len), name);
        char msg[160];
        snprintf(msg, sizeof msg, "%s '%%s' has a unit that does not fit its quantity", what);
        fail(r, PB_EINPUT, r->row_line, column, msg, shown);
        return -1;
    }
    return 0;
}

/* Applies "ROLE[_UNIT]=NAME|INDEX,..." on top of the detected layout. A name
 * is looked up among the header's fields and the --columns entries (each list
 * with its own length: the two can differ); an index may be any of the ncols
 * columns. */
static int find_name(char **names, int n, const char *target, size_t tlen)
{
    for (int c = 0; names && c < n; c++)
        if (names[c] && strlen(names[c]) == tlen && strncasecmp(names[c], target, tlen) == 0)
            return c;
    return -1;
}

static int apply_map(struct reader *r, char **header, int nheader, char **layout, int nlayout)
{
    const char *p = r->opts->map;
    while (p && *p) {
        const char *end = strchr(p, ',');
        size_t len = end ? (size_t)(end - p) : strlen(p);
        const char *eq = memchr(p, '=', len);
        if (!eq) {
            pb_error_set(r->err, PB_EUSAGE, "--map: expected ROLE=COLUMN, got '%.*s'", (int)len, p);
            r->failed = 1;
            return -1;
        }
        struct col_spec sp;
        if (colname_parse(p, (size_t)(eq - p), &sp) != 0 || sp.role == COL_IGNORE) {
            pb_error_set(r->err, PB_EUSAGE,
                         "--map: unknown quantity '%.*s' (try time_s, voltage_v, "
                         "current_a, current_adc, temp_c, cell1_v)",
                         (int)(eq - p), p);
            r->failed = 1;
            return -1;
        }
        const char *target = eq + 1;
        size_t tlen = len - (size_t)(target - p);
        int col = -1;
        char *iend = NULL;
        long idx = strtol(target, &iend, 10);
        if (tlen > 0 && iend == target + tlen && idx >= 1 && idx <= r->ncols)
            col = (int)idx - 1;
        if (col < 0)
            col = find_name(header, nheader, target, tlen);
        if (col < 0)
            col = find_name(layout, nlayout, target, tlen);
        if (col < 0 && sp.role == COL_CELL && sp.cell >= 1 && sp.cell <= PB_MAX_CELLS) {
            /* one cell's column missing drops that cell, not the log (settle_cells) */
            r->cell_map_missing[sp.cell - 1] = 1;
            p = end ? end + 1 : NULL;
            continue;
        }
        if (col < 0) {
            pb_error_set(r->err, PB_EUSAGE, "--map: no column '%.*s' in %s", (int)tlen, target,
                         r->name);
            r->failed = 1;
            return -1;
        }
        assign(r, col, &sp, 1);
        p = end ? end + 1 : NULL;
    }
    return 0;
}

static int field_is_number(const char *f, char decimal)
{
    double v;
    enum num_status st = num_parse(f, strlen(f), decimal, &v);
    return st == NUM_OK || st == NUM_NONFINITE;
}

/* Decides the layout from the first record (or --columns). Returns 1 when
 * the first record is a header, 0 when it is data, -1 on failure. */
static int map_columns(struct reader *r)
{
    /* a header has a field that is neither a number nor a date; with
     * --columns only the columns it maps count (data lines may carry text
     * in the skipped ones) */
    int is_header = 0;
    const char *lp = r->opts->columns;
    for (int c = 0; c < r->first_row_n; c++) {
        const char *f = r->first_row[c];
        int mapped = 1;
        if (lp) {
            const char *e = lp ? strchr(lp, ',') : NULL;
            size_t l = e ? (size_t)(e - lp) : strlen(lp);
            mapped = *lp && !(l == 1 && lp[0] == '-');
            lp = e ? e + 1 : lp + l;
        }
        if (mapped && f[0] != '\0' && !field_is_number(f, r->st->decimal) &&
            isotime_parse(f, strlen(f), &(double){0}, NULL) != 0)
            is_header = 1;
    }
    r->st->has_header = is_header;
    r->st->header_line = is_header ? r->row_line : 0;

    char **names = r->first_row;
    int n = r->first_row_n;
    char **layout = NULL;
    int nlayout = 0;
    if (r->opts->columns) {
        /* positional layout from the command line */
        const char *p = r->opts->columns;
        nlayout = 1;
        for (const char *q = p; *q; q++)
            nlayout += *q == ',';
        if (nlayout > LOGREAD_MAX_COLUMNS) {
            fail(r, PB_EUSAGE, 0, 0, "--columns lists too many columns%s", NULL);
            return -1;
        }
        layout = calloc((size_t)nlayout, sizeof *layout);
        if (!layout) {
            fail(r, PB_ENOMEM, 0, 0, "out of memory%s", NULL);
            return -1;
        }
        for (int c = 0; c < nlayout; c++) {
            const char *e = strchr(p, ',');
            size_t l = e ? (size_t)(e - p) : strlen(p);
            layout[c] = strndup(p, l);
            if (!layout[c]) {
                fail(r, PB_ENOMEM, 0, 0, "out of memory%s", NULL);
                goto cleanup;
            }
            p = e ? e + 1 : p + l;
        }
        names = layout;
        n = nlayout;
    } else if (!is_header) {
        fail(r, PB_EINPUT, r->row_line, 0,
             "no header line: give the column layout with --columns (for example --columns "
             "time_s,voltage_v,current_a)%s",
             NULL);
        return -1;
    }

    r->ncols = n > r->first_row_n ? n : r->first_row_n;
    r->col_slot = malloc((size_t)r->ncols * sizeof *r->col_slot);
    if (!r->col_slot) {
        fail(r, PB_ENOMEM, 0, 0, "out of memory%s", NULL);
        goto cleanup;
    }
    for (int c = 0; c < r->ncols; c++)
        r->col_slot[c] = -1;
    for (int c = 0; c < n; c++) {
        struct col_spec sp;
        if (strcmp(names[c], "-") == 0)
            continue;
        if (parse_name(r, names[c], strlen(names[c]), &sp, c + 1,
                       layout ? "--columns entry" : "column") != 0)
            goto cleanup;
        assign(r, c, &sp, 0);
    }
    if (r->opts->map && apply_map(r, is_header ? r->first_row : NULL,
                                  is_header ? r->first_row_n : 0, layout, nlayout) != 0)
        goto cleanup;

    const char *where = layout ? "--columns" : "the header";
    if (r->slot_col[SLOT_T] < 0) {
        fail(r, PB_EINPUT, r->row_line, 0,
             "no time column found in %s (name one with --map time_s=COLUMN)", where);
        goto cleanup;
    }
    /* a cell numbered below the highest but with no column is dropped by
     * settle_cells and named there, as is one whose --map column is missing */
    r->ncells = 0;
    int cell_columns = 0;
    for (int c = 0; c < PB_MAX_CELLS; c++) {
        if (r->slot_col[SLOT_CELL0 + c] >= 0 || r->cell_map_missing[c])
            r->ncells = c + 1;
        cell_columns += r->slot_col[SLOT_CELL0 + c] >= 0;
    }
    if (r->slot_col[SLOT_V] < 0 && cell_columns == 0) {
        fail(r, PB_EINPUT, r->row_line, 0,
             "no voltage column found in %s (name one with --map voltage_v=COLUMN)", where);
        goto cleanup;
    }
    r->st->voltage_from_cells = r->slot_col[SLOT_V] < 0;
    if (r->slot_col[SLOT_I] >= 0 && r->spec[SLOT_I].role == COL_CURRENT_RAW) {
        r->st->current_is_raw = 1;
        if (!r->opts->have_adc) {
            fail(r, PB_EUSAGE, r->row_line, r->slot_col[SLOT_I] + 1,
                 "this column holds current as ADC counts: give --adc-scale A_PER_COUNT, or the "
                 "sense chain --adc-bits, --adc-vref, --sense-ratio and --sense-ohm%s",
                 NULL);
            goto cleanup;
        }
    }
    r->need_fields = 0;
    for (int s = 0; s < NSLOTS; s++)
        if (r->slot_col[s] >= 0 && r->slot_col[s] + 1 > r->need_fields)
            r->need_fields = r->slot_col[s] + 1;
    r->st->time_column = r->slot_col[SLOT_T] + 1;
    r->st->voltage_column = r->slot_col[SLOT_V] + 1;
    r->st->current_column = r->slot_col[SLOT_I] + 1;
    r->st->temp_column = r->slot_col[SLOT_TEMP] + 1;
    r->st->date_column = r->slot_col[SLOT_DATE] + 1;
    r->t_scale = r->spec[SLOT_T].scale;
    r->st->time_unit_given = r->spec[SLOT_T].unit_given;
    /* every named column that carries nothing read, by name, so the report can say so */
    for (int c = 0; c < n; c++) {
        if (r->col_slot[c] >= 0 || strcmp(names[c], "-") == 0)
            continue;
        char *buf = r->st->ignored_names;
        size_t used = strlen(buf), cap = sizeof r->st->ignored_names;
        const char *nm = names[c][0] ? names[c] : "(no name)";
        if (used + strlen(nm) + 6 < cap)
            snprintf(buf + used, cap - used, "%s%s", used ? ", " : "", nm);
        else if (used >= 3 && used + 5 < cap && strcmp(buf + used - 3, "...") != 0)
            snprintf(buf + used, cap - used, ", ...");
    }

    r->s = series_new(r->slot_col[SLOT_I] >= 0, r->slot_col[SLOT_TEMP] >= 0, r->ncells);
    if (!r->s) {
        fail(r, PB_ENOMEM, 0, 0, "out of memory%s", NULL);
        goto cleanup;
    }
    r->mapped = 1;
cleanup:
    if (layout) {
        for (int c = 0; c < nlayout; c++)
            free(layout[c]);
        free(layout);
    }
    if (r->failed)
        return -1;
    return is_header;
}

/* ---- records ---------------------------------------------------------- */

/* A time of day "HH:MM:SS" or "HH:MM:SS.fff" (a '.' or ',' before the
 * fraction): seconds since midnight, or -1. */
static double clock_seconds(const char *f, size_t len)
{
    size_t k = 0;
    while (k < len && f[k] == ' ')
        k++;
    int part[3] = {0, 0, 0};
    for (int p = 0; p < 3; p++) {
        if (k + 2 > len || !isdigit((unsigned char)f[k]) || !isdigit((unsigned char)f[k + 1]))
            return -1;
        part[p] = (f[k] - '0') * 10 + (f[k + 1] - '0');
        k += 2;
        if (p < 2 && (k >= len || f[k++] != ':'))
            return -1;
    }
    if (part[0] > 23 || part[1] > 59 || part[2] > 60)
        return -1;
    double frac = 0.0, scale = 0.1;
    if (k < len && (f[k] == '.' || f[k] == ',')) {
        k++;
        if (k >= len || !isdigit((unsigned char)f[k]))
            return -1;
        for (; k < len && isdigit((unsigned char)f[k]); k++, scale *= 0.1)
            frac += (f[k] - '0') * scale;
    }
    while (k < len && f[k] == ' ')
        k++;
    return k == len ? part[0] * 3600.0 + part[1] * 60.0 + part[2] + frac : -1;
}

/* A field's number parsed ahead of the reader (see struct ahead). */
struct pre_num {
    double v;
    unsigned char st; /* enum num_status */
};

/* num_parse of the field, or what was parsed ahead for it. */
static inline enum num_status field_number(const struct reader *r, const char *f, size_t len,
                                           const struct pre_num *pre, double *v)
{
    if (pre) {
        *v = pre->v;
        return (enum num_status)pre->st;
    }
    return num_parse(f, len, r->st->decimal, v);
}

static void take_time(struct reader *r, const char *f, size_t len, int column,
                      const struct pre_num *pre)
{
    double v = 0.0;
    if (r->tmode == TM_UNDECIDED) {
        enum num_status st = field_number(r, f, len, pre, &v);
        if (st == NUM_OK || st == NUM_NONFINITE)
            r->tmode = TM_NUMBER;
        else if (isotime_parse(f, len, &v, NULL) == 0)
            r->tmode = TM_ISO;
        else if (clock_seconds(f, len) >= 0)
            r->tmode = TM_CLOCK;
        else
            r->tmode = TM_NUMBER; /* reported as a bad number below */
        r->st->time_is_iso = r->tmode == TM_ISO;
        r->st->time_is_clock = r->tmode == TM_CLOCK;
    }
    if (r->tmode == TM_CLOCK) {
        double c = clock_seconds(f, len);
        if (c < 0) {
            size_t k = 0;
            while (k < len && f[k] == ' ')
                k++;
            r->bad = k == len ? BAD_EMPTY : BAD_NUMBER;
            r->bad_col = column;
            return;
        }
        /* a clock that falls back by more than 12 h passed midnight (unless a
         * date column says which day it is) */
        c += r->clock_days * 86400.0;
        if (r->clock_seen && c < r->clock_prev - 43200.0 && r->slot_col[SLOT_DATE] < 0) {
            r->clock_days++;
            c += 86400.0;
        }
        r->clock_seen = 1;
        r->clock_prev = c;
        r->val[SLOT_T] = c;
        return;
    }
    if (r->tmode == TM_ISO) {
        if (isotime_parse(f, len, &v, NULL) != 0) {
            size_t k = 0;
            while (k < len && f[k] == ' ')
                k++;
            r->bad = k == len ? BAD_EMPTY : BAD_NUMBER;
            r->bad_col = column;
            return;
        }
        r->val[SLOT_T] = v;
        return;
    }
    enum num_status st = field_number(r, f, len, pre, &v);
    if (st != NUM_OK) {
        r->bad = st == NUM_EMPTY ? BAD_EMPTY : st == NUM_NONFINITE ? BAD_NONFINITE : BAD_NUMBER;
        r->bad_col = column;
        return;
    }
    r->val[SLOT_T] = v * r->t_scale;
}

/* One field of the record being read; f holds no line break (the caller
 * counted them). pre: its number when parsed ahead, else NULL. */
static void take_field(struct reader *r, const char *f, size_t len, size_t start_line,
                       const struct pre_num *pre)
{
    if (r->failed)
        return;
    int col = r->field++;
    if (col == 0) {
        size_t k = 0;
        while (k < len && f[k] == ' ')
            k++;
        r->comment = k < len && f[k] == '#';
        r->row_line = start_line;
        r->bad = BAD_NONE;
    }
    if (r->comment)
        return;
    if (col >= LOGREAD_MAX_COLUMNS) {
        if (col == LOGREAD_MAX_COLUMNS)
            fail(r, PB_EINPUT, r->line, col + 1, "more than %s fields on one line", "1024");
        return;
    }
    if (!r->mapped) {
        /* keep the first record until the layout is known */
        char **row = realloc(r->first_row, (size_t)(col + 1) * sizeof *row);
        if (!row) {
            fail(r, PB_ENOMEM, 0, 0, "out of memory%s", NULL);
            return;
        }
        r->first_row = row;
        row[col] = strndup(f, len < HEADER_KEEP ? len : HEADER_KEEP);
        r->first_row_n = col + 1;
        if (!row[col])
            fail(r, PB_ENOMEM, 0, 0, "out of memory%s", NULL);
        return;
    }
    if (col >= r->ncols || r->bad != BAD_NONE)
        return;
    int slot = r->col_slot[col];
    if (slot < 0)
        return;
    if (slot == SLOT_T) {
        take_time(r, f, len, col + 1, pre);
        return;
    }
    if (slot == SLOT_DATE) {
        double d;
        if (isotime_parse(f, len, &d, NULL) == 0) {
            r->val[SLOT_DATE] = d;
        } else {
            size_t k = 0;
            while (k < len && f[k] == ' ')
                k++;
            r->bad = k == len ? BAD_EMPTY : BAD_NUMBER;
            r->bad_col = col + 1;
        }
        return;
    }
    double v;
    enum num_status st = field_number(r, f, len, pre, &v);
    if (slot >= SLOT_CELL0) {
        /* judged with the whole column (settle_cells) */
        r->cell_kind[slot - SLOT_CELL0] = st == NUM_OK          ? BAD_NONE
                                          : st == NUM_EMPTY     ? BAD_EMPTY
                                          : st == NUM_NONFINITE ? BAD_NONFINITE
                                                                : BAD_NUMBER;
        r->val[slot] = st == NUM_OK ? v * r->spec[slot].scale + r->spec[slot].offset : NAN;
        return;
    }
    if (st == NUM_OK) {
        r->val[slot] = v * r->spec[slot].scale + r->spec[slot].offset;
        return;
    }
    if (slot == SLOT_TEMP) {
        /* temperature is context, not a reason to lose the sample */
        r->val[slot] = NAN;
        return;
    }
    r->bad = st == NUM_EMPTY ? BAD_EMPTY : st == NUM_NONFINITE ? BAD_NONFINITE : BAD_NUMBER;
    r->bad_col = col + 1;
}

static void on_field(void *data, size_t len, void *ctx)
{
    struct reader *r = ctx;
    const char *f = data ? data : "";
    if (r->failed)
        return;
    /* a quoted field's own line breaks: later lines keep their numbers
     * (the record is placed where it started) */
    size_t start_line = r->line;
    for (const char *q = memchr(f, '\n', len); q;
         q = memchr(q + 1, '\n', len - (size_t)(q + 1 - f)))
        r->line++;
    take_field(r, f, len, start_line, NULL);
}

/* The current of the record being read, in A (raw ADC counts converted). */
static double current_a(const struct reader *r)
{
    double i = r->val[SLOT_I];
    if (r->st->current_is_raw)
        i = (i - r->opts->adc_offset_counts) * r->opts->adc_a_per_count;
    return i;
}

/* A sample no pack can produce: counted and dropped (see logread.h). */
static int is_glitch(struct reader *r)
{
    struct logread_stats *st = r->st;
    /* cells are judged per column by settle_cells */
    if (!st->voltage_from_cells) {
        /* the cell count when given; else at least one cell per cell column */
        int given = r->opts->cells;
        double v = r->val[SLOT_V];
        double lo = LOGREAD_CELL_MIN_V * (given > 0 ? given : r->ncells > 0 ? r->ncells : 1);
        double hi = LOGREAD_CELL_MAX_V * (given > 0 ? given : PB_MAX_CELLS);
        if (!(v >= lo && v <= hi)) {
            count_event(&st->glitch_voltage, r->row_line, r->slot_col[SLOT_V] + 1);
            return 1;
        }
    }
    if (r->slot_col[SLOT_I] >= 0) {
        double i = current_a(r);
        if (!(fabs(i) <= r->max_a)) {
            count_event(&st->glitch_current, r->row_line, r->slot_col[SLOT_I] + 1);
            return 1;
        }
    }
    return 0;
}

__attribute__((always_inline)) static inline void keep_sample(struct reader *r)
{
    struct logread_stats *st = r->st;
    struct series *s = r->s;
    double t = r->val[SLOT_T];
    /* a date column and times of day make absolute times */
    if (r->slot_col[SLOT_DATE] >= 0 && r->tmode == TM_CLOCK)
        t += r->val[SLOT_DATE];
    if (s->n == 0) {
        r->t_first = t;
        /* numbers that only make sense as Unix time (years 2000..2099) */
        if (r->tmode == TM_ISO || r->spec[SLOT_T].time == TIME_EPOCH || (t >= 9.4e8 && t < 4.1e9)) {
            s->has_epoch = 1;
            s->start_epoch_s = t;
            st->time_is_epoch = r->tmode != TM_ISO && r->tmode != TM_CLOCK;
        } else if (t >= 9.4e11 && t < 4.1e12 && r->spec[SLOT_T].time == TIME_AUTO) {
            /* epoch milliseconds in a column without a unit */
            r->t_scale = 1e-3;
            t *= 1e-3;
            r->t_first = t;
            s->has_epoch = 1;
            s->start_epoch_s = r->t_first;
            st->time_is_epoch = 1;
        }
    }
    double rel = t - r->t_first;
    /* times out of order are kept as read here and sorted out once the
     * whole log is in (order_times: strays and restarts) */
    if (s->n > 0 && rel == r->t_prev) {
        count_event(&st->duplicate_time, r->row_line, r->slot_col[SLOT_T] + 1);
        return;
    }
    if (is_glitch(r))
        return;
    r->not_rising |= s->n > 0 && !(rel > r->t_prev);
    if (s->n >= s->cap && series_reserve_one(s) != 0) {
        fail(r, PB_ENOMEM, 0, 0, "out of memory%s", NULL);
        return;
    }
    size_t k = s->n;
    s->t_s[k] = rel;
    s->line[k] = r->row_line < UINT32_MAX ? (uint32_t)r->row_line : UINT32_MAX;
    double v_sum = 0.0;
    for (int c = 0; c < r->ncells; c++) {
        int col = r->slot_col[SLOT_CELL0 + c];
        double v = col >= 0 ? r->val[SLOT_CELL0 + c] : NAN;
        if (col >= 0 && r->cell_kind[c] != BAD_NONE) {
            count_event(&r->cell_ev[c][r->cell_kind[c]], r->row_line, col + 1);
            v = NAN;
        } else if (col >= 0 && !(v >= LOGREAD_CELL_MIN_V && v <= LOGREAD_CELL_MAX_V)) {
            count_event(&r->cell_ev[c][BAD_NONE], r->row_line, col + 1); /* a glitch */
            v = NAN;
        } else if (col >= 0) {
            r->cell_ok[c]++;
        }
        s->cell_v[c][k] = v;
        v_sum += s->cell_v[c][k];
    }
    s->v_v[k] = st->voltage_from_cells ? v_sum : r->val[SLOT_V];
    if (s->i_a) {
        double i = current_a(r);
        s->i_a[k] = i;
        r->peak_a = max_of(r->peak_a, fabs(i));
    }
    if (s->temp_c) {
        s->temp_c[k] = temp_kept(r->val[SLOT_TEMP], &r->temp_prev, &r->have_temp_prev,
                                 &st->temp_repaired, r->row_line, r->slot_col[SLOT_TEMP] + 1);
    }
    r->t_prev = rel;
    s->n++;
    st->kept++;
}

static void end_record(struct reader *r);

static void on_row(int c, void *ctx)
{
    struct reader *r = ctx;
    end_record(r);
    /* a CR, an LF or a CR LF pair ends one line */
    if (c == '\r' || (c == '\n' && !r->after_cr))
        r->line++;
    r->after_cr = c == '\r';
    r->record_line = r->line;
}

static void end_record(struct reader *r)
{
    int nfields = r->field;
    r->field = 0;
    if (r->failed)
        return;
    if (r->comment || nfields == 0) {
        r->st->comment_lines += r->comment != 0;
        r->comment = 0;
        return;
    }
    if (!r->mapped) {
        int header = map_columns(r);
        if (header < 0)
            return;
        if (header == 1)
            return;
        /* the first record was data: run it through the field path again */
        int n = r->first_row_n;
        char **row = r->first_row;
        r->first_row = NULL;
        r->first_row_n = 0;
        for (int k = 0; k < n; k++)
            on_field(row[k], strlen(row[k]), r);
        for (int k = 0; k < n; k++)
            free(row[k]);
        free(row);
        nfields = r->field;
        r->field = 0;
    }
    r->st->records++;
    if (nfields < r->need_fields) {
        count_event(&r->st->short_row, r->row_line, nfields + 1);
        return;
    }
    if (nfields > r->ncols)
        count_event(&r->st->long_row, r->row_line, r->ncols + 1);
    switch (r->bad) {
    case BAD_NONE:
        keep_sample(r);
        break;
    case BAD_NUMBER:
        count_event(&r->st->bad_number, r->row_line, r->bad_col);
        break;
    case BAD_NONFINITE:
        count_event(&r->st->nonfinite, r->row_line, r->bad_col);
        break;
    case BAD_EMPTY:
        count_event(&r->st->empty_field, r->row_line, r->bad_col);
        break;
    }
    r->bad = BAD_NONE;
}

/* ---- time order and spikes -------------------------------------------- */

/* The largest |x[k]| of x[0..n) (NaNs left out, as fmax leaves them), 0
 * when none: four running maxima, so the pass is not one long chain of
 * dependent steps (a maximum is the same in any order). */
static double abs_max(const double *x, size_t n)
{
    double m0 = 0.0, m1 = 0.0, m2 = 0.0, m3 = 0.0;
    size_t k = 0;
    for (; k + 4 <= n; k += 4) {
        m0 = max_of(m0, fabs(x[k]));
        m1 = max_of(m1, fabs(x[k + 1]));
        m2 = max_of(m2, fabs(x[k + 2]));
        m3 = max_of(m3, fabs(x[k + 3]));
    }
    for (; k < n; k++)
        m0 = max_of(m0, fabs(x[k]));
    return max_of(max_of(m0, m1), max_of(m2, m3));
}

/* Copies sample from into place to (to <= from) in every column. */
static inline void move_sample(struct series *s, size_t from, size_t to)
{
    if (from == to)
        return;
    s->t_s[to] = s->t_s[from];
    s->v_v[to] = s->v_v[from];
    s->line[to] = s->line[from];
    if (s->i_a)
        s->i_a[to] = s->i_a[from];
    if (s->temp_c)
        s->temp_c[to] = s->temp_c[from];
    for (int c = 0; c < s->ncells; c++)
        s->cell_v[c][to] = s->cell_v[c][from];
}

/* Merges a cell's counted events into the log's (the earliest place wins). */
static void merge_event(struct logread_event *into, const struct logread_event *ev)
{
    if (!ev->count)
        return;
    if (!into->count || ev->first_line < into->first_line ||
        (ev->first_line == into->first_line && ev->first_column < into->first_column)) {
        into->first_line = ev->first_line;
        into->first_column = ev->first_column;
    }
    into->count += ev->count;
}

/* Once the whole log is in: a cell column without a voltage in most samples
 * (absent, empty, text, or outside the cell range) is dropped and named in
 * stats with the count; in the columns kept, a sample whose cell value was
 * no voltage is dropped and counted as before. A pack voltage made from cells
 * with one missing is the kept cells' mean times the pack's cells. */
static void settle_cells(struct reader *r)
{
    struct series *s = r->s;
    struct logread_stats *st = r->st;
    if (r->ncells == 0 || s->n == 0)
        return; /* no samples: the caller says why */
    int live[PB_MAX_CELLS] = {0}, nlive = 0, top = 0;
    for (int c = 0; c < r->ncells; c++) {
        const struct logread_event *ev = r->cell_ev[c];
        size_t bad = ev[BAD_NONE].count + ev[BAD_NUMBER].count + ev[BAD_NONFINITE].count +
                     ev[BAD_EMPTY].count;
        /* a column mostly without a voltage loses the cell, not the samples */
        live[c] = r->slot_col[SLOT_CELL0 + c] >= 0 && r->cell_ok[c] > bad;
        nlive += live[c];
        top = live[c] ? c + 1 : top;
    }
    if (nlive == 0 && st->voltage_from_cells) {
        fail(r, PB_EINPUT, st->header_line, 0,
             "no voltage: no cell column holds a cell voltage in most samples (empty, text or "
             "outside 0.5..5 V) and there is no pack voltage column%s",
             " (name one with --map voltage_v=COLUMN)");
        return;
    }
    size_t n = s->n, w = 0;
    for (size_t k = 0; k < n; k++) {
        int bad = 0;
        for (int c = 0; c < r->ncells && !bad; c++)
            bad = live[c] && isnan(s->cell_v[c][k]);
        if (!bad)
            move_sample(s, k, w++);
    }
    st->kept -= n - w;
    s->n = w;
    int given = r->opts->cells ? r->opts->cells : r->opts->pack_cells;
    int pack_cells = given > top ? given : top;
    int kept = 0;
    for (int c = 0; c < r->ncells; c++) {
        const struct logread_event *ev = r->cell_ev[c];
        if (live[c]) {
            merge_event(&st->glitch_voltage, &ev[BAD_NONE]);
            merge_event(&st->bad_number, &ev[BAD_NUMBER]);
            merge_event(&st->nonfinite, &ev[BAD_NONFINITE]);
            merge_event(&st->empty_field, &ev[BAD_EMPTY]);
            s->cell_v[kept] = s->cell_v[c];
            s->cell_no[kept++] = c + 1;
            continue;
        }
        struct logread_cell_drop *d = &st->cell_dropped[st->ncells_dropped++];
        d->cell = c + 1;
        d->column = r->slot_col[SLOT_CELL0 + c] + 1;
        d->read = r->cell_ok[c];
        d->unreadable = ev[BAD_NONE].count + ev[BAD_NUMBER].count + ev[BAD_NONFINITE].count +
                        ev[BAD_EMPTY].count;
        d->above_pack = pack_cells > 0 && c + 1 > pack_cells;
        free(s->cell_v[c]);
    }
    for (int c = kept; c < r->ncells; c++)
        s->cell_v[c] = NULL;
    s->ncells = kept;
    s->cells_in_pack = kept ? pack_cells : 0;
    st->cells_in_pack = s->cells_in_pack;
    if (st->voltage_from_cells) {
        st->cells_voltage_estimated = kept < pack_cells;
        for (size_t k = 0; k < s->n; k++) {
            double sum = 0.0;
            for (int c = 0; c < kept; c++)
                sum += s->cell_v[c][k];
            s->v_v[k] = sum * (double)pack_cells / (double)kept;
        }
    }
}

/* The times were kept as read; here each sample that steps back is sorted
 * out, in place: a lone row behind its neighbours (the row after it goes on
 * from the row before) is a stray, and so is a lone row ahead of them (the
 * row after it goes back to between its neighbours, or the first row when
 * the rows after it go on from below it); anything else that goes back is
 * a restart, which starts a new segment whose times are shifted to follow
 * on after a placeholder step (series.h). */
static void order_times(struct reader *r)
{
    struct series *s = r->s;
    struct logread_stats *st = r->st;
    int tcol = r->slot_col[SLOT_T] + 1;
    size_t n = s->n, w = 1;
    double off = 0.0;                            /* added to this segment's logged times */
    double last = s->t_s[0], before = -HUGE_VAL; /* logged times of the last two kept */
    int last_starts = 1;                         /* the last kept sample starts a segment */
    for (size_t k = 1; k < n; k++) {
        double t = s->t_s[k];
        if (t > last) {
            move_sample(s, k, w);
            s->t_s[w++] = t + off;
            before = last;
            last = t;
            last_starts = 0;
            continue;
        }
        if (t == last) { /* possible again once a stray between them is gone */
            count_event(&st->duplicate_time, s->line[k], tcol);
            continue;
        }
        st->time_back_steps++;
        if (k + 1 == n || s->t_s[k + 1] > last) {
            count_event(&st->stray_time, s->line[k], tcol); /* behind: drop it */
            continue;
        }
        if (!last_starts && t > before && s->t_s[k + 1] > t) {
            /* the last kept row was ahead of its neighbours: drop that one
             * (the sample before it, logged at `before`, stays before this) */
            w--;
            count_event(&st->stray_time, s->line[w], tcol);
            move_sample(s, k, w);
            s->t_s[w++] = t + off;
            last = t;
            continue;
        }
        if (w == 1 && s->t_s[k + 1] > t) {
            /* the first row was ahead of all that follows: a stray too; times
             * are now relative to this sample, the first kept */
            count_event(&st->stray_time, s->line[0], tcol);
            if (s->has_epoch)
                s->start_epoch_s += t;
            off = -t;
            move_sample(s, k, 0);
            s->t_s[0] = 0.0;
            last = t;
            continue;
        }
        /* a placeholder for the unknown time between segments (series.h) */
        double step = w >= 2 ? s->t_s[w - 1] - s->t_s[w - 2] : 1.0;
        double at = s->t_s[w - 1] + fmax(1e-3 * step, 1e-9 * fabs(s->t_s[w - 1]));
        if (series_add_segment(s, w) != 0) {
            fail(r, PB_ENOMEM, 0, 0, "out of memory%s", NULL);
            return;
        }
        count_event(&st->clock_restart, s->line[k], tcol);
        off = at - t;
        move_sample(s, k, w);
        s->t_s[w++] = at;
        before = -HUGE_VAL;
        last = t;
        last_starts = 1;
    }
    st->kept -= n - w;
    s->n = w;
}

/* Drops a voltage that leaves both its neighbours (in its segment) by more
 * than LOGREAD_SPIKE_FRACTION for one sample while the current holds steady
 * across all three: no cell does that, a sensor or a logger does. */
/* The largest |current| now in the series (0 without a current): the one
 * taken while reading, walked again only after samples were dropped. */
static double kept_peak_a(struct reader *r)
{
    const struct series *s = r->s;
    if (!s->i_a)
        return 0.0;
    if (s->n != r->peak_n) {
        r->peak_a = abs_max(s->i_a, s->n);
        r->peak_n = s->n;
    }
    return r->peak_a;
}

/* The spike test of sample k against its neighbours kp (the last kept) and
 * k + 1: a voltage that leaves both by more than LOGREAD_SPIKE_FRACTION
 * while the current holds within tol_a across the three (a current that
 * moves on either side explains the voltage: a load switched off right
 * after the cut-off sample, say). */
static inline int is_spike(const double *vv, const double *ia, size_t kp, size_t k, double tol_a)
{
    double vp = vv[kp], v = vv[k], vn = vv[k + 1];
    /* minsd and maxsd, no branch to mispredict on noise; fmin's and fmax's
     * answer where a NaN is in (none is: the voltage checks) */
    double lo = vp < vn ? vp : vn, hi = vp > vn ? vp : vn;
    if (vp != vp || vn != vn) {
        lo = min_of(vp, vn);
        hi = max_of(vp, vn);
    }
    int spike =
        (v < lo * (1.0 - LOGREAD_SPIKE_FRACTION)) | (v > hi * (1.0 + LOGREAD_SPIKE_FRACTION));
    if (spike && ia) {
        double i = ia[k];
        spike = fabs(i - ia[kp]) <= tol_a && fabs(i - ia[k + 1]) <= tol_a;
    }
    return spike;
}

/* drop_spikes' current tolerance: 5 % of the peak, at least 0.1 A */
static double spike_tol_a(double peak_a)
{
    return max_of(0.1, 0.05 * peak_a);
}

static void drop_spikes(struct reader *r)
{
    struct series *s = r->s;
    size_t n = s->n, w = 1;
    if (n < 3)
        return;
    double tol_a = spike_tol_a(kept_peak_a(r));
    size_t seg = 1; /* the next segment start, by index as read */
    size_t seg_at = seg < s->nseg ? s->seg_start[seg] : SIZE_MAX;
    int vcol = r->st->voltage_from_cells ? r->slot_col[SLOT_CELL0] + 1 : r->slot_col[SLOT_V] + 1;
    const double *vv = s->v_v, *ia = s->i_a;
    for (size_t k = 1; k < n; k++) {
        if (k == seg_at) {
            s->seg_start[seg++] = w; /* a segment's first sample stays, at its new index */
            seg_at = seg < s->nseg ? s->seg_start[seg] : SIZE_MAX;
            move_sample(s, k, w++);
            continue;
        }
        /* neighbours: the last kept sample (w - 1, same segment: segment starts
         * are kept) and the next one read, unless a segment starts there */
        if (k + 1 != n && k + 1 != seg_at && is_spike(vv, ia, w - 1, k, tol_a)) {
            count_event(&r->st->glitch_spike, s->line[k], vcol);
            continue;
        }
        if (w != k) /* nothing dropped yet: every sample is in its place */
            move_sample(s, k, w);
        w++;
    }
    r->st->kept -= n - w;
    s->n = w;
}

/* Counts samples k in [from, to) with |current| above loaded_a, and of
 * those the negative ones. */
static void count_loaded(const double *i_a, size_t from, size_t to, double loaded_a, size_t *loaded,
                         size_t *neg)
{
    size_t nl = 0, nn = 0;
    for (size_t k = from; k < to; k++) { /* no branch: a load comes and goes */
        double i = i_a[k];
        int on = fabs(i) > loaded_a;
        nl += (size_t)on;
        nn += (size_t)(on & (i < 0.0));
    }
    *loaded = nl;
    *neg = nn;
}

/* ---- spikes and the sign's counts on two cores ------------------------
 * While nothing is dropped, drop_spikes tests each sample against the
 * samples read beside it; so when that test fires for no sample (most
 * logs), it would drop nothing and leave the series as it is, and the sign
 * check's counts of loaded samples can be made in the same pass. The pass
 * is split between two threads on a long log; where a spike is found,
 * drop_spikes runs as before and the sign check counts afresh. */
#define POST_SPLIT_MIN 65536 /* samples, below which one thread does the pass */

struct post_part {
    const struct series *s;
    size_t from, to;
    double tol_a, loaded_a;
    int spike;
    size_t loaded[2];
};

static void post_scan(void *vp)
{
    struct post_part *pp = vp;
    const struct series *s = pp->s;
    const double *vv = s->v_v, *ia = s->i_a;
    size_t n = s->n;
    /* drop_spikes tests 1..n-2, not a segment's first sample nor its last */
    size_t k = pp->from > 1 ? pp->from : 1, end = pp->to < n - 1 ? pp->to : n - 1;
    size_t seg = 1;
    while (seg < s->nseg && s->seg_start[seg] < k)
        seg++;
    size_t seg_at = seg < s->nseg ? s->seg_start[seg] : SIZE_MAX;
    int spikes = 0;
    for (; k < end; k++) {
        if (k == seg_at) {
            seg++;
            seg_at = seg < s->nseg ? s->seg_start[seg] : SIZE_MAX;
            continue;
        }
        if (k + 1 == seg_at)
            continue;
        spikes |= is_spike(vv, ia, k - 1, k, pp->tol_a); /* drop_spikes' w - 1 is k - 1 */
    }
    pp->spike = spikes;
    if (ia)
        count_loaded(ia, pp->from, pp->to, pp->loaded_a, &pp->loaded[0], &pp->loaded[1]);
}

/* drop_spikes, and the sign check's counts made where they will hold. */
static void spikes_and_counts(struct reader *r)
{
    struct series *s = r->s;
    size_t n = s->n;
    r->counted = 0;
    if (n < 3)
        return; /* drop_spikes has nothing to test */
    /* drop_spikes' peak, and the sign check's while nothing is dropped */
    double peak = kept_peak_a(r);
    struct post_part part[2];
    for (int h = 0; h < 2; h++)
        part[h] = (struct post_part){.s = s,
                                     .from = h ? n / 2 : 0,
                                     .to = h ? n : n / 2,
                                     .tol_a = spike_tol_a(peak),
                                     .loaded_a = 0.1 * peak};
    if (n >= POST_SPLIT_MIN) {
        twin_run(post_scan, &part[0], post_scan, &part[1]);
    } else {
        post_scan(&part[0]);
        post_scan(&part[1]);
    }
    if (part[0].spike || part[1].spike) {
        drop_spikes(r);
        return;
    }
    r->counted = s->i_a != NULL;
    r->counted_loaded[0] = part[0].loaded[0] + part[1].loaded[0];
    r->counted_loaded[1] = part[0].loaded[1] + part[1].loaded[1];
}

/* ---- sign ------------------------------------------------------------- */

/* Discharge-negative logs: most loaded samples negative while the voltage
 * falls from start to end. Charging logs (voltage rising) are left alone.
 * imax: the largest |current| of the series; counted: count_loaded's answer
 * for the whole series with imax's threshold, or NULL (counted here). */
static int looks_discharge_negative(const struct series *s, double imax, const size_t *counted)
{
    size_t neg = 0, loaded = 0;
    if (imax <= 0.0)
        return 0;
    if (counted) {
        loaded = counted[0];
        neg = counted[1];
    } else {
        count_loaded(s->i_a, 0, s->n, 0.1 * imax, &loaded, &neg);
    }
    size_t w = s->n / 20 + 1;
    double v0 = 0.0, v1 = 0.0;
    for (size_t k = 0; k < w; k++) {
        v0 += s->v_v[k];
        v1 += s->v_v[s->n - 1 - k];
    }
    return loaded > 0 && (double)neg > 0.8 * (double)loaded && v1 < v0;
}

static void resolve_sign(struct reader *r)
{
    struct series *s = r->s;
    int flip = 0;
    if (!s->i_a)
        return;
    if (r->opts->sign == SIGN_DISCHARGE_NEGATIVE)
        flip = 1;
    else if (r->opts->sign == SIGN_AUTO &&
             looks_discharge_negative(s, kept_peak_a(r), r->counted ? r->counted_loaded : NULL)) {
        flip = 1;
        r->st->sign_flipped = 1;
    }
    if (flip)
        for (size_t k = 0; k < s->n; k++)
            s->i_a[k] = -s->i_a[k];
}

/* ---- driver ----------------------------------------------------------- */

double logread_adc_a_per_count(int bits, double vref_v, double ratio, double r_ohm)
{
    /* volts per count / volts per amp; the sense output is I/ratio in r_ohm */
    double v_per_count = vref_v / ldexp(1.0, bits);
    double v_per_a = r_ohm / ratio;
    return v_per_count / v_per_a;
}

static void feed_csv(struct reader *r, struct csv_parser *p, const char *buf, size_t len)
{
    if (csv_parse(p, buf, len, on_field, on_row, r) != len && !r->failed) {
        int e = csv_error(p);
        if (e == CSV_ENOMEM)
            fail(r, PB_EINPUT, r->line, r->field + 1, "field longer than %s bytes", "65536");
        else
            fail(r, PB_EINPUT, r->line, r->field + 1, "cannot parse: %s", csv_strerror(e));
    }
}

/* Byte classes of the fast path: a line made only of FAST_PLAIN bytes and
 * delimiters is split exactly as libcsv splits it (no quotes, no spaces to
 * trim); anything else goes to libcsv. */
enum { FAST_PLAIN = 0, FAST_DELIM, FAST_CR, FAST_LF, FAST_OTHER };
#define FAST_MAX_FIELDS 64
#define FAST_MAX_LINE 4096 /* longer lines (and their field-length bound) go to libcsv */

/* Plain lines at a record boundary are split here and handed to the same
 * field and row code; a line with a quote or a space, a long line, the
 * header (columns not yet mapped) and a line cut by the block's end go
 * through libcsv, which then finishes its record before the fast path
 * resumes. The output is the same either way (tests/unit/test_logread.c
 * compares both on every file in tests/data and samples/). Lines are
 * counted in on_row, which CSV_REPALL_NL calls for every unquoted CR and
 * LF. */
/* The line from at: returns its end (the first CR or LF at or after at, or
 * len when the block holds none), with its fields' starts (*nf of them, then
 * the end + 1), whether it is plain (only plain bytes and delimiters, at
 * most FAST_MAX_FIELDS fields) and the class of the byte that ends it. */
static inline size_t split_line(const unsigned char *cls, const unsigned char *u, size_t at,
                                size_t len, size_t *starts, int *nf, int *plain,
                                unsigned char *term)
{
    int n = 0, pl = 1;
    size_t e = at;
    starts[n++] = at;
    unsigned char c = FAST_PLAIN;
    while (e < len) {
        c = cls[u[e]];
        if (c == FAST_PLAIN) {
            e++;
            continue;
        }
        if (c == FAST_DELIM) {
            if (n == FAST_MAX_FIELDS)
                pl = 0;
            else
                starts[n++] = e + 1;
            e++;
            continue;
        }
        if (c == FAST_OTHER)
            pl = 0;
        if (c != FAST_OTHER)
            break;
        e++;
    }
    if (e < len)
        starts[n] = e + 1;
    *nf = n;
    *plain = pl;
    *term = c;
    return e;
}

static void fast_classes(unsigned char cls[256], char delimiter)
{
    memset(cls, FAST_PLAIN, 256);
    cls['"'] = cls[' '] = cls['\0'] = FAST_OTHER;
    cls['\r'] = FAST_CR;
    cls['\n'] = FAST_LF;
    cls[(unsigned char)delimiter] = FAST_DELIM;
}

/* libcsv between records (ROW_NOT_BEGUN is state 0); after a failure
 * libcsv still counts the block's lines */
static inline int at_record_start(const struct reader *r, const struct csv_parser *p)
{
    return p->pstate == 0 && !p->quoted && p->entry_pos == 0 && !r->failed;
}

/* ---- numeric lines ------------------------------------------------------
 * Most lines of a long log are nothing but numbers in the mapped columns:
 * such a line is read in one walk (each number's digits as they pass, no
 * field table, no per-field dispatch) and its sample taken straight into
 * the keep logic. Anything else about a line (a comment, an empty field,
 * an exponent, a quote or a space, a short or long row, a line cut by the
 * block's end) sends that line down the general path; so does every line
 * while the log has cell or date columns or times that are not numbers. */

#define NUMLINE_CRLF 1 /* the term of a line ended by CR LF */

/* What the numeric-line scanner needs, copied so a second thread can use it. */
struct numline {
    unsigned char cls[256];
    unsigned char delimiter, decimal;
    const int *col_slot;
    int ncols, need_fields;
};

/* The reader's state allows numeric lines: mapped, numeric times, no cells
 * and no dates (their checks are per column), few enough columns. */
static int numline_ok(const struct reader *r)
{
    return r->mapped && !r->failed && !r->opts->no_fast_path && r->tmode == TM_NUMBER &&
           r->slot_col[SLOT_DATE] < 0 && r->ncells == 0 && r->ncols <= FAST_MAX_FIELDS;
}

static void numline_init(struct numline *nl, const struct reader *r)
{
    fast_classes(nl->cls, r->st->delimiter);
    nl->delimiter = (unsigned char)r->st->delimiter;
    nl->decimal = (unsigned char)r->st->decimal;
    nl->col_slot = r->col_slot;
    nl->ncols = r->ncols;
    nl->need_fields = r->need_fields;
}

/* The line at u[at]: 1 when it is a numeric line, with its line end's
 * offset in *end, that byte in *term and each mapped column's number in
 * val[slot] (exactly as num_parse reads the field: the field is
 * [-]digits[decimal digits], 1 to 19 digits, at most 21 bytes, a mantissa
 * of at most 2^53, so one correctly rounded division); else 0. The block
 * must hold a byte after its end that is no digit, mark, delimiter or line
 * end (the scan stops there: a line cut by the block's end is not one). */
__attribute__((always_inline)) static inline int numline_scan(const struct numline *nl,
                                                              const unsigned char *u, size_t at,
                                                              size_t *end, unsigned char *term,
                                                              double *val)
{
    const unsigned char *p = u + at;
    if (*p == '#')
        return 0;
    for (int col = 0;; col++) {
        if (col >= nl->ncols)
            return 0; /* a long row: counted by the general path */
        int slot = nl->col_slot[col];
        if (slot < 0) {
            while (nl->cls[*p] == FAST_PLAIN)
                p++;
        } else {
            const unsigned char *f = p;
            int neg = *p == '-';
            p += neg;
            const unsigned char *d0 = p;
            uint64_t m = 0;
            unsigned d;
            while ((d = (unsigned)*p - '0') <= 9) {
                m = m * 10 + d;
                p++;
            }
            long nd = (long)(p - d0);
            int frac = 0;
            if (*p == nl->decimal) {
                const unsigned char *f0 = ++p;
                while ((d = (unsigned)*p - '0') <= 9) {
                    m = m * 10 + d;
                    p++;
                }
                frac = (int)(p - f0);
                nd += frac;
            }
            if (nd <= 0 || nd > 19 || p - f > 21 || m > (UINT64_C(1) << 53))
                return 0;
            double x = (double)m;
            if (frac > 0)
                x /= num_exact_pow10[frac];
            val[slot] = neg ? -x : x;
        }
        unsigned char c = *p;
        if (c == nl->delimiter) {
            p++;
            continue;
        }
        if ((c != '\n' && c != '\r') || col + 1 < nl->need_fields ||
            (size_t)(p - u) - at > FAST_MAX_LINE)
            return 0;
        /* a CR LF pair ends the line at its LF (the empty record between
         * the two would change nothing) */
        *term = c == '\r' && p[1] == '\n' ? NUMLINE_CRLF : c;
        *end = (size_t)(p - u) + (*term == NUMLINE_CRLF);
        return 1;
    }
}

/* A numeric line's sample (numline_scan's val), as take_field, on_row and
 * end_record would take it field by field; the reader is at a record's
 * start. */
__attribute__((always_inline)) static inline void take_numline(struct reader *r, const double *val,
                                                               unsigned char term)
{
    r->row_line = r->line;
    r->st->records++;
    r->val[SLOT_T] = val[SLOT_T] * r->t_scale;
    for (int slot = SLOT_V; slot <= SLOT_TEMP; slot++)
        if (r->slot_col[slot] >= 0)
            r->val[slot] = val[slot] * r->spec[slot].scale + r->spec[slot].offset;
    keep_sample(r);
    /* as on_row counts a CR, an LF or a CR LF pair */
    if (term != '\n' || !r->after_cr)
        r->line++;
    r->after_cr = term == '\r';
    r->record_line = r->line;
}

/* A run of numeric lines taken with the reader's state in locals: what
 * take_numline and keep_sample do for each, once the log has a sample (the
 * first one decides the time's origin and scale) and while nothing but
 * numeric lines come (libcsv is not fed meanwhile, so the reader stays at a
 * record's start). numrun_end puts the state back. */
struct numrun {
    struct reader *r;
    struct logread_stats *st;
    double *t_s, *v_v, *i_a, *temp_c;
    uint32_t *line_of;
    size_t n, cap, line, row, records, kept;
    int after_cr, not_rising, have_temp_prev, raw;
    double t_first, t_prev, t_scale, peak_a, temp_prev;
    double v_scale, v_offset, i_scale, i_offset, tc_scale, tc_offset;
    double v_lo, v_hi, max_a, adc_offset, adc_a;
    int tcol, vcol, icol, tempcol;
};

static int numrun_ok(const struct reader *r)
{
    return numline_ok(r) && r->s->n > 0 && !r->st->voltage_from_cells;
}

static void numrun_begin(struct numrun *q, struct reader *r)
{
    const struct series *s = r->s;
    int given = r->opts->cells;
    *q = (struct numrun){
        .r = r,
        .st = r->st,
        .t_s = s->t_s,
        .v_v = s->v_v,
        .i_a = s->i_a,
        .temp_c = s->temp_c,
        .line_of = s->line,
        .n = s->n,
        .cap = s->cap,
        .line = r->line,
        .row = r->row_line,
        .records = r->st->records,
        .kept = r->st->kept,
        .after_cr = r->after_cr,
        .not_rising = r->not_rising,
        .have_temp_prev = r->have_temp_prev,
        .raw = r->st->current_is_raw,
        .t_first = r->t_first,
        .t_prev = r->t_prev,
        .t_scale = r->t_scale,
        .peak_a = r->peak_a,
        .temp_prev = r->temp_prev,
        .v_scale = r->spec[SLOT_V].scale,
        .v_offset = r->spec[SLOT_V].offset,
        .i_scale = r->spec[SLOT_I].scale,
        .i_offset = r->spec[SLOT_I].offset,
        .tc_scale = r->spec[SLOT_TEMP].scale,
        .tc_offset = r->spec[SLOT_TEMP].offset,
        /* as is_glitch works them out */
        .v_lo = LOGREAD_CELL_MIN_V * (given > 0       ? given
                                      : r->ncells > 0 ? r->ncells
                                                      : 1),
        .v_hi = LOGREAD_CELL_MAX_V * (given > 0 ? given : PB_MAX_CELLS),
        .max_a = r->max_a,
        .adc_offset = r->opts->adc_offset_counts,
        .adc_a = r->opts->adc_a_per_count,
        .tcol = r->slot_col[SLOT_T] + 1,
        .vcol = r->slot_col[SLOT_V] + 1,
        .icol = r->slot_col[SLOT_I] + 1,
        .tempcol = r->slot_col[SLOT_TEMP] + 1,
    };
}

static void numrun_end(struct numrun *q)
{
    struct reader *r = q->r;
    r->s->n = q->n;
    r->line = q->line;
    r->record_line = q->line;
    r->row_line = q->row;
    r->after_cr = q->after_cr;
    r->st->records = q->records;
    r->st->kept = q->kept;
    r->not_rising = q->not_rising;
    r->t_prev = q->t_prev;
    r->peak_a = q->peak_a;
    r->have_temp_prev = q->have_temp_prev;
    r->temp_prev = q->temp_prev;
    /* r->val is left as it was: a record's values are all set by its own
     * fields before they are read */
}

/* One numeric line of a run (take_numline and keep_sample for a log with a
 * sample); -1 when the series cannot grow (the reader has failed; the run
 * must still be ended). */
__attribute__((always_inline)) static inline int numrun_line(struct numrun *q, const double *val,
                                                             unsigned char term)
{
    int ok = 0;
    size_t row = q->line;
    q->row = row;
    q->records++;
    double t = val[SLOT_T] * q->t_scale;
    double rel = t - q->t_first;
    if (rel == q->t_prev) {
        count_event(&q->st->duplicate_time, row, q->tcol);
        goto next;
    }
    double v = val[SLOT_V] * q->v_scale + q->v_offset;
    if (!(v >= q->v_lo && v <= q->v_hi)) {
        count_event(&q->st->glitch_voltage, row, q->vcol);
        goto next;
    }
    double i = 0.0;
    if (q->i_a) {
        i = val[SLOT_I] * q->i_scale + q->i_offset;
        if (q->raw)
            i = (i - q->adc_offset) * q->adc_a;
        if (!(fabs(i) <= q->max_a)) {
            count_event(&q->st->glitch_current, row, q->icol);
            goto next;
        }
    }
    q->not_rising |= !(rel > q->t_prev);
    if (q->n >= q->cap) {
        struct reader *r = q->r;
        numrun_end(q);
        if (series_reserve_one(r->s) != 0) {
            fail(r, PB_ENOMEM, 0, 0, "out of memory%s", NULL);
            ok = -1;
            goto next;
        }
        numrun_begin(q, r); /* the columns have moved */
    }
    size_t k = q->n;
    q->t_s[k] = rel;
    q->line_of[k] = row < UINT32_MAX ? (uint32_t)row : UINT32_MAX;
    q->v_v[k] = v;
    if (q->i_a) {
        q->i_a[k] = i;
        q->peak_a = max_of(q->peak_a, fabs(i));
    }
    if (q->temp_c) {
        q->temp_c[k] = temp_kept(val[SLOT_TEMP] * q->tc_scale + q->tc_offset, &q->temp_prev,
                                 &q->have_temp_prev, &q->st->temp_repaired, row, q->tempcol);
    }
    q->t_prev = rel;
    q->n++;
    q->kept++;
next:
    /* as on_row counts a CR, an LF or a CR LF pair */
    if (term != '\n' || !q->after_cr)
        q->line++;
    q->after_cr = term == '\r';
    return ok;
}

/* Plain lines at a record boundary are split here and handed to the same
 * field and row code; a line with a quote or a space, a long line, the
 * header (columns not yet mapped) and a line cut by the block's end go
 * through libcsv, which then finishes its record before the fast path
 * resumes. The output is the same either way (tests/unit/test_logread.c
 * compares both on every file in tests/data and samples/). Lines are
 * counted in on_row, which CSV_REPALL_NL calls for every unquoted CR and
 * LF. Numeric lines take their own path (numline_scan, runs of them
 * numrun_line); buf[len] must be a stop byte for it ('\0'). */
static void feed(struct reader *r, struct csv_parser *p, const char *buf, size_t len)
{
    if (r->opts->no_fast_path) {
        feed_csv(r, p, buf, len);
        return;
    }
    unsigned char cls[256];
    fast_classes(cls, r->st->delimiter);
    const unsigned char *u = (const unsigned char *)buf;
    size_t at = 0;
    struct numline nl;
    int num = numline_ok(r);
    if (num)
        numline_init(&nl, r);
    double val[SLOT_TEMP + 1];
    struct numrun q;
    int run = 0;
    while (at < len) {
        size_t e;
        unsigned char term;
        if (num && (run || at_record_start(r, p)) && numline_scan(&nl, u, at, &e, &term, val)) {
            if (!run && numrun_ok(r)) {
                numrun_begin(&q, r);
                run = 1;
            }
            if (!run)
                take_numline(r, val, term);
            else if (numrun_line(&q, val, term) != 0) {
                numrun_end(&q); /* out of memory: the reader has failed */
                return;
            }
            at = e + 1;
            continue;
        }
        if (run) {
            numrun_end(&q);
            run = 0;
        }
        if (!num && numline_ok(r)) { /* the layout and the time's form are known now */
            numline_init(&nl, r);
            num = 1;
            continue;
        }
        size_t starts[FAST_MAX_FIELDS + 1];
        int nf, plain;
        unsigned char c;
        e = split_line(cls, u, at, len, starts, &nf, &plain, &c);
        if (e == len) {
            /* no line end in the block: libcsv keeps the piece */
            feed_csv(r, p, buf + at, len - at);
            return;
        }
        if (!(plain && r->mapped && at_record_start(r, p)) || e - at > FAST_MAX_LINE) {
            feed_csv(r, p, buf + at, e + 1 - at);
            at = e + 1;
            continue;
        }
        /* an empty line has no fields: libcsv reports only its line end */
        if (e > at) {
            size_t line = r->line;
            for (int k = 0; k < nf; k++)
                take_field(r, buf + starts[k], starts[k + 1] - 1 - starts[k], line, NULL);
        }
        on_row(c == FAST_CR ? '\r' : '\n', r);
        at = e + 1;
    }
    if (run)
        numrun_end(&q);
}

/* ---- reading ahead ----------------------------------------------------
 * With a core free, a second thread reads the blocks after the first into
 * a ring of AHEAD_BLOCKS buffers and splits and parses the oldest block read
 * (its numeric lines' numbers, its plain lines' fields and numbers) into the
 * block's tables, while this thread runs the reader over the blocks in
 * order. Both cores parse: a block that this thread finds read but not yet
 * claimed it reads itself with feed(), and while the next block is still
 * being parsed it parses a later one into its tables. The splitting and
 * the numbers are the same either way (numline_scan, split_line and
 * num_parse), so the reader takes the same fields and numbers in the same
 * order as feed() would give them. */
#define AHEAD_BYTES (256u << 10)
#define AHEAD_BLOCKS 4
#define AHEAD_START (64u << 10) /* of the first block read before the thread starts */

enum ahead_state { BLK_FREE = 0, BLK_READ, BLK_PARSING, BLK_PARSED };

struct ahead_line {
    size_t end;    /* its CR or LF (a CR LF pair's LF); len: cut by the block's end */
    size_t field0; /* its first field in start[] and pre[]; a numeric line's in num[] */
    int nf, plain;
    unsigned char term, numeric;
};

#define NUMLINE_VALS (SLOT_TEMP + 1) /* a numeric line's values, by slot */

struct ahead_block {
    enum ahead_state state; /* under the ring's mutex */
    char *buf;
    size_t len;
    int read_errno; /* a read error's errno, else 0 */
    int oom;
    struct ahead_line *line;
    size_t nline, cap_line;
    size_t *start; /* each plain line's field starts, then its end + 1 */
    struct pre_num *pre;
    size_t nfield, cap_start, cap_pre;
    double *num; /* each numeric line's values (NUMLINE_VALS, by slot) */
    size_t nnum, cap_num;
};

struct ahead {
    FILE *fp;
    struct numline nl;
    int numeric; /* the reader takes numeric lines (numline_ok) */
    unsigned char cls[256];
    char decimal;
    const int *col_slot;
    int ncols;
    struct ahead_block blk[AHEAD_BLOCKS];
    size_t nread;    /* blocks read so far; block k is blk[k % AHEAD_BLOCKS] */
    size_t ntaken;   /* blocks the reader has taken (the oldest one in the ring) */
    int ended, stop; /* the last block (empty, or a read error) is read; leave */
    int split;       /* who parses (logread_opts.ahead_split) */
    pthread_mutex_t mu;
    pthread_cond_t cv;
    struct twin_job job; /* the second thread (twin.h) */
};

static int grow(void **p, size_t *cap, size_t need, size_t size)
{
    if (need <= *cap)
        return 0;
    size_t c = *cap ? *cap : 1024;
    while (c < need)
        c *= 2;
    void *g = realloc(*p, c * size);
    if (!g)
        return -1;
    *p = g;
    *cap = c;
    return 0;
}

/* What split_parse_line saw of a field: its digits as one mantissa, where
 * its decimal mark is, and whether it is nothing but [-]digits[.digits]. */
struct field_scan {
    uint64_t mant;
    int nd, frac_at, ok;
};

/* split_line that also reads each field's digits as it passes them, so a
 * plain number costs no second walk (the same fields, starts and ends). */
static inline size_t split_parse_line(const unsigned char *cls, const unsigned char *u, size_t at,
                                      size_t len, unsigned char decimal, size_t *starts,
                                      struct field_scan *fs, int *nf, int *plain,
                                      unsigned char *term)
{
    int n = 1, pl = 1;
    size_t e = at;
    starts[0] = at;
    struct field_scan cur = {0, 0, -1, 1};
    unsigned char c = FAST_PLAIN;
    while (e < len) {
        unsigned char byte = u[e];
        c = cls[byte];
        if (c == FAST_PLAIN) {
            unsigned d = (unsigned)byte - '0';
            if (d <= 9) {
                cur.mant = cur.mant * 10 + d;
                cur.nd++;
            } else if (byte == decimal && cur.frac_at < 0) {
                cur.frac_at = (int)(e - starts[n - 1]);
            } else if (!(byte == '-' && e == starts[n - 1])) {
                cur.ok = 0;
            }
            e++;
            continue;
        }
        if (c == FAST_DELIM) {
            if (n == FAST_MAX_FIELDS) {
                pl = 0;
            } else {
                fs[n - 1] = cur;
                starts[n++] = e + 1;
            }
            cur = (struct field_scan){0, 0, -1, 1};
            e++;
            continue;
        }
        if (c == FAST_OTHER)
            pl = 0;
        if (c != FAST_OTHER)
            break;
        e++;
    }
    fs[n - 1] = cur;
    if (e < len)
        starts[n] = e + 1;
    *nf = n;
    *plain = pl;
    *term = c;
    return e;
}

/* The number of field f[0..len) from its scan: num_parse_plain's result
 * when the scan says the field has that shape, else num_parse's. */
static inline enum num_status scanned_number(const struct field_scan *fs, const char *f, size_t len,
                                             char decimal, double *v)
{
    if (fs->ok && fs->nd > 0 && fs->nd <= 19 && len <= 21 && fs->mant <= (UINT64_C(1) << 53)) {
        double x = (double)fs->mant;
        int frac = fs->frac_at >= 0 ? (int)len - fs->frac_at - 1 : -1;
        if (frac > 0)
            x /= num_exact_pow10[frac];
        *v = f[0] == '-' ? -x : x;
        return NUM_OK;
    }
    return num_parse(f, len, decimal, v);
}

/* Reads the next block; returns 0 at the end of the file or a read error
 * (the block says which), else 1. */
static int ahead_read(struct ahead *a, struct ahead_block *b)
{
    b->len = fread(b->buf, 1, AHEAD_BYTES, a->fp);
    b->buf[b->len] = '\0'; /* numline_scan's stop byte */
    b->read_errno = ferror(a->fp) ? (errno ? errno : EIO) : 0;
    return b->len > 0 && !b->read_errno;
}

static inline int room(void **p, size_t *cap, size_t need, size_t size)
{
    return need <= *cap || grow(p, cap, need, size) == 0;
}

/* Splits a block read into its tables (b->oom when they cannot grow). */
static void ahead_parse(const struct ahead *a, struct ahead_block *b)
{
    b->nline = b->nfield = b->nnum = 0;
    b->oom = 0;
    const unsigned char *u = (const unsigned char *)b->buf;
    size_t at = 0;
    while (at < b->len) {
        size_t starts[FAST_MAX_FIELDS + 1];
        struct field_scan fs[FAST_MAX_FIELDS];
        struct ahead_line l = {0};
        if (!room((void **)&b->line, &b->cap_line, b->nline + 1, sizeof *b->line) ||
            !room((void **)&b->num, &b->cap_num, b->nnum + NUMLINE_VALS, sizeof *b->num)) {
            b->oom = 1;
            return;
        }
        /* the numbers go straight into place (a copy through a local would
         * wait on each division's store) */
        if (a->numeric && numline_scan(&a->nl, u, at, &l.end, &l.term, b->num + b->nnum)) {
            l.numeric = 1;
            l.field0 = b->nnum;
            b->nnum += NUMLINE_VALS;
            b->line[b->nline++] = l;
            at = l.end + 1;
            continue;
        }
        l.end = split_parse_line(a->cls, u, at, b->len, (unsigned char)a->decimal, starts, fs,
                                 &l.nf, &l.plain, &l.term);
        l.plain = l.plain && l.end < b->len && l.end - at <= FAST_MAX_LINE;
        l.field0 = b->nfield;
        if (l.plain) {
            size_t need = b->nfield + (size_t)l.nf + 1;
            if (!room((void **)&b->start, &b->cap_start, need, sizeof *b->start) ||
                !room((void **)&b->pre, &b->cap_pre, need, sizeof *b->pre)) {
                b->oom = 1;
                return;
            }
            for (int k = 0; k <= l.nf; k++)
                b->start[b->nfield + (size_t)k] = starts[k];
            for (int k = 0; k < l.nf; k++) {
                struct pre_num *pn = &b->pre[b->nfield + (size_t)k];
                pn->st = NUM_BAD;
                if (k < a->ncols && a->col_slot[k] >= 0) {
                    const char *f = b->buf + starts[k];
                    size_t flen = starts[k + 1] - 1 - starts[k];
                    double v = 0.0;
                    pn->st = (unsigned char)scanned_number(&fs[k], f, flen, a->decimal, &v);
                    pn->v = v;
                }
            }
            b->nfield += (size_t)l.nf + 1;
        }
        b->line[b->nline++] = l;
        if (l.end == b->len)
            break;
        at = l.end + 1;
    }
}

/* The oldest block read and not yet claimed, from block k on, or NULL;
 * under the mutex. */
static struct ahead_block *unclaimed(struct ahead *a, size_t k)
{
    for (; k < a->nread; k++)
        if (a->blk[k % AHEAD_BLOCKS].state == BLK_READ)
            return &a->blk[k % AHEAD_BLOCKS];
    return NULL;
}

/* Parses a claimed block and hands it back; called without the mutex. */
static void parse_claimed(struct ahead *a, struct ahead_block *b)
{
    ahead_parse(a, b);
    pthread_mutex_lock(&a->mu);
    b->state = BLK_PARSED;
    pthread_cond_broadcast(&a->cv);
    pthread_mutex_unlock(&a->mu);
}

/* The second thread: reads while the ring has room, else parses the oldest
 * block read. */
static void ahead_run(void *va)
{
    struct ahead *a = va;
    pthread_mutex_lock(&a->mu);
    while (!a->stop) {
        struct ahead_block *b = &a->blk[a->nread % AHEAD_BLOCKS];
        if (!a->ended && b->state == BLK_FREE && a->nread - a->ntaken < AHEAD_BLOCKS) {
            pthread_mutex_unlock(&a->mu);
            int more = ahead_read(a, b);
            pthread_mutex_lock(&a->mu);
            b->state = BLK_READ;
            a->nread++;
            a->ended = !more;
            pthread_cond_broadcast(&a->cv);
            continue;
        }
        b = a->split == LOGREAD_SPLIT_READER ? NULL : unclaimed(a, a->ntaken);
        if (b) {
            b->state = BLK_PARSING;
            pthread_mutex_unlock(&a->mu);
            parse_claimed(a, b);
            pthread_mutex_lock(&a->mu);
            continue;
        }
        if (a->ended)
            break;
        pthread_cond_wait(&a->cv, &a->mu);
    }
    pthread_mutex_unlock(&a->mu);
}

/* feed() of a block split ahead: the same decisions, line by line. */
static void feed_ahead(struct reader *r, struct csv_parser *p, const struct ahead_block *b)
{
    size_t at = 0;
    struct numrun q;
    int run = 0;
    for (size_t li = 0; li < b->nline; li++) {
        const struct ahead_line *l = &b->line[li];
        if (l->numeric && (run || at_record_start(r, p))) {
            if (!run && numrun_ok(r)) {
                numrun_begin(&q, r);
                run = 1;
            }
            if (!run)
                take_numline(r, b->num + l->field0, l->term);
            else if (numrun_line(&q, b->num + l->field0, l->term) != 0) {
                numrun_end(&q); /* out of memory: the reader has failed */
                return;
            }
            at = l->end + 1;
            continue;
        }
        if (run) {
            numrun_end(&q);
            run = 0;
        }
        if (l->end == b->len) {
            feed_csv(r, p, b->buf + at, b->len - at);
            return;
        }
        if (!(l->plain && !l->numeric && r->mapped && at_record_start(r, p))) {
            feed_csv(r, p, b->buf + at, l->end + 1 - at);
            at = l->end + 1;
            continue;
        }
        if (l->end > at) {
            size_t line = r->line;
            const size_t *st = b->start + l->field0;
            for (int k = 0; k < l->nf; k++)
                take_field(r, b->buf + st[k], st[k + 1] - 1 - st[k], line,
                           &b->pre[l->field0 + (size_t)k]);
        }
        on_row(l->term == FAST_CR ? '\r' : '\n', r);
        at = l->end + 1;
    }
    if (run)
        numrun_end(&q);
}

static void ahead_release(struct ahead *a)
{
    for (int i = 0; i < AHEAD_BLOCKS; i++) {
        free(a->blk[i].buf);
        free(a->blk[i].line);
        free(a->blk[i].start);
        free(a->blk[i].pre);
        free(a->blk[i].num);
    }
}

/* The next block in order for the reader, read (and parsed, or claimed for
 * this thread to read with feed(): *own); NULL when every block is taken.
 * While it waits, this thread parses a later block. */
static struct ahead_block *next_block(struct ahead *a, int *own)
{
    pthread_mutex_lock(&a->mu);
    struct ahead_block *b = &a->blk[a->ntaken % AHEAD_BLOCKS];
    for (;;) {
        if (a->ntaken < a->nread && b->state == BLK_PARSED) {
            *own = 0;
            break;
        }
        if (a->ntaken < a->nread && b->state == BLK_READ && a->split != LOGREAD_SPLIT_THREAD) {
            b->state = BLK_PARSING;
            *own = 1;
            break;
        }
        if (a->ntaken == a->nread && a->ended) {
            b = NULL;
            break;
        }
        struct ahead_block *later =
            a->split == LOGREAD_SPLIT_BOTH ? unclaimed(a, a->ntaken + 1) : NULL;
        if (later) {
            later->state = BLK_PARSING;
            pthread_mutex_unlock(&a->mu);
            parse_claimed(a, later);
            pthread_mutex_lock(&a->mu);
            continue;
        }
        pthread_cond_wait(&a->cv, &a->mu);
    }
    pthread_mutex_unlock(&a->mu);
    return b;
}

/* Starts the second thread reading the rest of fp (the reader's layout is
 * known); returns 0, or -1 when it cannot start (nothing read: the caller
 * reads on). */
static int ahead_start(struct ahead *a_out, const struct reader *r, FILE *fp)
{
    *a_out = (struct ahead){.fp = fp,
                            .decimal = r->st->decimal,
                            .col_slot = r->col_slot,
                            .ncols = r->ncols,
                            .split = r->opts->ahead_split};
    struct ahead *a = a_out;
    fast_classes(a->cls, r->st->delimiter);
    a->numeric = numline_ok(r);
    numline_init(&a->nl, r);
    /* the tables sized here for lines of 16 bytes or more, so that the
     * thread, which grows them only for shorter lines, keeps no heap of
     * its own */
    for (int i = 0; i < AHEAD_BLOCKS; i++) {
        struct ahead_block *b = &a->blk[i];
        b->buf = malloc(AHEAD_BYTES + 1);
        if (!b->buf || grow((void **)&b->line, &b->cap_line, AHEAD_BYTES / 16, sizeof *b->line) ||
            grow((void **)&b->num, &b->cap_num, AHEAD_BYTES / 16 * NUMLINE_VALS, sizeof *b->num) ||
            grow((void **)&b->start, &b->cap_start, AHEAD_BYTES / 4, sizeof *b->start) ||
            grow((void **)&b->pre, &b->cap_pre, AHEAD_BYTES / 4, sizeof *b->pre)) {
            ahead_release(a);
            return -1;
        }
    }
    if (pthread_mutex_init(&a->mu, NULL) != 0) {
        ahead_release(a);
        return -1;
    }
    if (pthread_cond_init(&a->cv, NULL) != 0) {
        pthread_mutex_destroy(&a->mu);
        ahead_release(a);
        return -1;
    }
    if (twin_start(&a->job, ahead_run, a) != 0) {
        pthread_cond_destroy(&a->cv);
        pthread_mutex_destroy(&a->mu);
        ahead_release(a);
        return -1;
    }
    return 0;
}

/* Takes the blocks of the rest of the file in order (the last one's last
 * byte in *last), then stops the second thread and frees the ring. */
static void ahead_take(struct ahead *a, struct reader *r, struct csv_parser *p, char *last)
{
    while (!r->failed) {
        int own = 0;
        struct ahead_block *b = next_block(a, &own);
        if (!b)
            break;
        if (!own && b->oom) {
            fail(r, PB_ENOMEM, 0, 0, "out of memory%s", NULL);
            break;
        }
        if (b->len > 0) {
            if (r->opts->on_block)
                r->opts->on_block(r->opts->block_ctx, b->buf, b->len);
            if (own)
                feed(r, p, b->buf, b->len);
            else
                feed_ahead(r, p, b);
            *last = b->buf[b->len - 1];
        }
        if (b->read_errno) {
            pb_error_set(r->err, PB_EINPUT, "%s: read error: %s", r->name, strerror(b->read_errno));
            r->failed = 1;
            break;
        }
        if (b->len == 0)
            break;
        pthread_mutex_lock(&a->mu);
        b->state = BLK_FREE;
        a->ntaken++;
        pthread_cond_broadcast(&a->cv);
        pthread_mutex_unlock(&a->mu);
    }
    pthread_mutex_lock(&a->mu);
    a->stop = 1;
    pthread_cond_broadcast(&a->cv);
    pthread_mutex_unlock(&a->mu);
    twin_join(&a->job);
    pthread_cond_destroy(&a->cv);
    pthread_mutex_destroy(&a->mu);
    ahead_release(a);
}

/* The earliest line any sample was dropped at, 0 when none was. */
static size_t first_problem_line(const struct logread_stats *st)
{
    const struct logread_event *evs[] = {
        &st->bad_number,     &st->nonfinite,      &st->empty_field,
        &st->short_row,      &st->duplicate_time, &st->glitch_voltage,
        &st->glitch_current, &st->glitch_spike,   &st->stray_time};
    size_t first = 0;
    for (size_t k = 0; k < sizeof evs / sizeof *evs; k++)
        if (evs[k]->count && (first == 0 || evs[k]->first_line < first))
            first = evs[k]->first_line;
    return first;
}

/* The line of the first time step back (a stray or a restart). */
static size_t first_back_line(const struct logread_stats *st)
{
    size_t a = st->stray_time.count ? st->stray_time.first_line : 0;
    size_t b = st->clock_restart.count ? st->clock_restart.first_line : 0;
    return a && (!b || a < b) ? a : b;
}

/* Why most samples went, when it was a plausibility check: a hint for the
 * message of a log left with too few samples ("" otherwise). */
static const char *glitch_hint(const struct logread_stats *st)
{
    size_t most = st->bad_number.count + st->nonfinite.count + st->empty_field.count +
                  st->short_row.count + st->duplicate_time.count;
    if (st->glitch_current.count > most && st->glitch_current.count >= st->glitch_voltage.count)
        return "; most had a current no pack delivers: if the column holds mA, give --map "
               "current_ma=COLUMN (and check --capacity)";
    if (st->glitch_voltage.count > most)
        return "; most had a voltage no cell shows: if the column holds mV, give --map "
               "voltage_mv=COLUMN (and check --cells)";
    return "";
}

size_t logread_dropped(const struct logread_stats *st)
{
    return st->bad_number.count + st->nonfinite.count + st->empty_field.count +
           st->short_row.count + st->duplicate_time.count + st->glitch_voltage.count +
           st->glitch_current.count + st->glitch_spike.count + st->stray_time.count;
}

void logread_warnings(const struct logread_stats *st, const char *name,
                      void (*emit)(void *ctx, const char *code, const char *message), void *ctx)
{
    const struct {
        const struct logread_event *ev;
        const char *code;
        const char *what;
    } evs[] = {
        {&st->glitch_voltage, "dropped_glitch_voltage",
         "sample(s) dropped: a voltage no cell shows (per cell outside 0.5..5 V)"},
        {&st->glitch_current, "dropped_glitch_current",
         "sample(s) dropped: a current no pack delivers (a logger's sentinel, or over 200 C of "
         "the rated capacity)"},
        {&st->glitch_spike, "dropped_voltage_spike",
         "sample(s) dropped: the voltage left both neighbours by over 20 % for one sample at a "
         "steady current (a sensor glitch, not a floor crossing)"},
        {&st->stray_time, "dropped_stray_time", "sample(s) dropped: a lone row out of time order"},
    };
    char msg[320];
    for (size_t k = 0; k < sizeof evs / sizeof *evs; k++) {
        const struct logread_event *ev = evs[k].ev;
        if (!ev->count)
            continue;
        snprintf(msg, sizeof msg, "%zu %s (first at %s:%zu:%d)", ev->count, evs[k].what, name,
                 ev->first_line, ev->first_column);
        emit(ctx, evs[k].code, msg);
    }
    for (int k = 0; k < st->ncells_dropped; k++) {
        const struct logread_cell_drop *d = &st->cell_dropped[k];
        const char *then = d->above_pack ? "; taken as a cell the pack does not have (give "
                                           "--cells if it has)"
                                         : "; the other cells are analysed";
        if (d->column == 0)
            snprintf(msg, sizeof msg, "cell %d dropped: the log has no column for it%s", d->cell,
                     then);
        else
            snprintf(msg, sizeof msg,
                     "cell %d dropped: its column (%s:%d) holds no cell voltage in %zu of %zu "
                     "sample(s) (empty, text or outside 0.5..5 V)%s",
                     d->cell, name, d->column, d->unreadable, d->unreadable + d->read, then);
        emit(ctx, d->above_pack ? "cell_unused" : "cell_dropped", msg);
    }
    if (st->cells_voltage_estimated) {
        snprintf(msg, sizeof msg,
                 "pack voltage estimated as %d x the mean of the cells read: a missing cell's "
                 "sag cannot be seen, so the voltage, SoC and cut-off checks may read high",
                 st->cells_in_pack);
        emit(ctx, "pack_voltage_estimated", msg);
    }
    if (st->clock_restart.count) {
        size_t nseg = st->clock_restart.count + 1;
        snprintf(msg, sizeof msg,
                 "the clock restarted %zu time(s) (first at %s:%zu:%d): analysed as %zu segments "
                 "together, charge summed; the time between them is unknown and not counted",
                 st->clock_restart.count, name, st->clock_restart.first_line,
                 st->clock_restart.first_column, nseg);
        emit(ctx, "clock_restart", msg);
    }
}

struct series *logread_file(FILE *fp, const char *name, const struct logread_opts *opts,
                            struct logread_stats *stats, struct pb_error *err)
{
    struct reader r = {0};
    struct csv_parser p;
    struct series *out = NULL;
    char *buf = NULL;
    int parser_ready = 0;

    memset(stats, 0, sizeof *stats);
    r.opts = opts;
    r.name = name;
    r.st = stats;
    r.err = err;
    r.line = 1;
    r.record_line = 1;
    r.max_a = LOGREAD_MAX_CURRENT_A;
    if (opts->rated_mah > 0.0)
        r.max_a = fmin(r.max_a, LOGREAD_MAX_C_RATE * opts->rated_mah / 1000.0);
    for (int s = 0; s < NSLOTS; s++)
        r.slot_col[s] = -1;

    buf = malloc(BLOCK_BYTES + 1); /* + a stop byte for numline_scan */
    if (!buf) {
        pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
    size_t len = fread(buf, 1, BLOCK_BYTES, fp);
    buf[len] = '\0';
    if (opts->on_block && len)
        opts->on_block(opts->block_ctx, buf, len);
    if (ferror(fp)) {
        pb_error_set(err, PB_EINPUT, "%s: read error: %s", name, strerror(errno));
        goto cleanup;
    }
    if (len == 0) {
        pb_error_set(err, PB_EINPUT, "%s: empty file", name);
        goto cleanup;
    }
    size_t start = 0;
    if (len >= 3 && memcmp(buf, "\xEF\xBB\xBF", 3) == 0) {
        stats->bom = 1;
        start = 3;
    }
    if (looks_utf16(buf, len)) {
        pb_error_set(err, PB_EINPUT,
                     "%s: UTF-16 text: convert it to UTF-8 (e.g. iconv -f UTF-16 -t UTF-8)", name);
        goto cleanup;
    }
    const char *nul = memchr(buf, '\0', len);
    if (nul) {
        size_t line = 1, col = 1;
        for (const char *q = buf; q < nul; q++) {
            col = *q == '\n' ? 1 : col + 1;
            line += *q == '\n';
        }
        pb_error_set(err, PB_EINPUT,
                     "%s:%zu:%zu: not a text log (a NUL byte): is this a binary "
                     "file?",
                     name, line, col);
        goto cleanup;
    }
    char delim, decimal;
    sniff(buf + start, len - start, &delim, &decimal);
    stats->delimiter = opts->delimiter ? opts->delimiter : delim;
    stats->decimal = opts->decimal ? opts->decimal : decimal;
    if (stats->delimiter == stats->decimal) {
        pb_error_set(err, PB_EUSAGE, "%s: the delimiter and the decimal separator are both '%c'",
                     name, stats->delimiter);
        goto cleanup;
    }

    if (csv_init(&p, CSV_REPALL_NL) != 0) {
        pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
    parser_ready = 1;
    csv_set_delim(&p, (unsigned char)stats->delimiter);
    csv_set_space_func(&p, space_only);
    csv_set_realloc_func(&p, bounded_realloc);
    csv_set_free_func(&p, free);

    /* a long log (its first block full) is read ahead when a core is free:
     * the second thread starts once the layout is known, at the first line
     * end past AHEAD_START, and reads and parses the blocks after the first
     * while this thread reads the rest of it */
    int can_ahead = len == BLOCK_BYTES && !opts->no_fast_path && sysconf(_SC_NPROCESSORS_ONLN) > 1;
    size_t cut = len - start;
    const char *eol = can_ahead && cut > AHEAD_START
                          ? memchr(buf + start + AHEAD_START, '\n', cut - AHEAD_START)
                          : NULL;
    if (eol) /* every line scanned before the cut ends before it: no stop byte needed */
        cut = (size_t)(eol + 1 - (buf + start));
    struct ahead a;
    feed(&r, &p, buf + start, cut);
    int ahead = can_ahead && r.mapped && !r.failed && ahead_start(&a, &r, fp) == 0;
    feed(&r, &p, buf + start + cut, len - start - cut);
    if (!ahead && can_ahead && r.mapped && !r.failed)
        ahead = ahead_start(&a, &r, fp) == 0;
    char last = buf[len - 1];
    if (ahead)
        ahead_take(&a, &r, &p, &last);
    while (!ahead && !r.failed && (len = fread(buf, 1, BLOCK_BYTES, fp)) > 0) {
        buf[len] = '\0';
        if (opts->on_block)
            opts->on_block(opts->block_ctx, buf, len);
        feed(&r, &p, buf, len);
        last = buf[len - 1];
    }
    if (!r.failed && ferror(fp)) {
        pb_error_set(err, PB_EINPUT, "%s: read error: %s", name, strerror(errno));
        goto cleanup;
    }
    if (!r.failed) {
        size_t short_before = stats->short_row.count;
        /* the file ended inside a quoted field (libcsv.c's FIELD_BEGUN is
         * state 2; CSV_STRICT_FINI alone needs strict mode, which would
         * refuse stray quotes that the lenient mode reads well) */
        if (p.quoted && p.pstate == 2)
            fail(&r, PB_EINPUT, r.record_line, r.field + 1,
                 "this quoted field is never closed, so the rest of the file would be one "
                 "field%s",
                 NULL);
        else
            csv_fini(&p, on_field, on_row, &r);
        if (last != '\n' && last != '\r' && stats->short_row.count > short_before)
            stats->truncated_last_line = 1;
    }
    stats->lines = r.line - (last == '\n' || last == '\r' ? 1 : 0);
    if (r.failed)
        goto cleanup;
    if (!r.mapped) {
        pb_error_set(err, PB_EINPUT, "%s: no data: the file has only comments or blank lines",
                     name);
        goto cleanup;
    }
    r.peak_n = r.s->n;
    settle_cells(&r);
    if (r.failed)
        goto cleanup;
    if (r.s->n > 1) {
        /* times that only rise (most logs) leave order_times nothing to do */
        if (r.not_rising)
            order_times(&r);
        if (r.failed)
            goto cleanup;
        /* a clock restarts now and then, a buffered logger writes a row late
         * now and then; a column that goes back at one row in 20 is not a clock */
        if (stats->time_back_steps > 10 && stats->time_back_steps > stats->records / 20) {
            pb_error_set(err, PB_EINPUT,
                         "%s:%zu:%d: the time column goes back at %zu places (this is the "
                         "first): is it the time? (name the time column with --map "
                         "time_s=COLUMN, or sort the rows by time)",
                         name, first_back_line(stats), stats->time_column, stats->time_back_steps);
            goto cleanup;
        }
        spikes_and_counts(&r);
    }
    size_t need = opts && opts->min_samples ? opts->min_samples : 2;
    if (r.s->n < need || r.s->n == 0) {
        if (stats->records == 0)
            pb_error_set(err, PB_EINPUT, "%s:%zu: header only, no samples", name,
                         stats->header_line);
        else {
            size_t first = first_problem_line(stats);
            char where[48] = "";
            if (first)
                snprintf(where, sizeof where, " (first problem at line %zu)", first);
            pb_error_set(err, PB_EINPUT,
                         "%s: %zu usable sample%s of %zu records; at least %zu %s "
                         "needed%s%s",
                         name, r.s->n, r.s->n == 1 ? "" : "s", stats->records, need,
                         need == 1 ? "is" : "are", where, glitch_hint(stats));
        }
        goto cleanup;
    }
    resolve_sign(&r);
    out = r.s;
    r.s = NULL;
cleanup:
    if (parser_ready)
        csv_free(&p);
    free(buf);
    for (int k = 0; k < r.first_row_n; k++)
        free(r.first_row[k]);
    free(r.first_row);
    free(r.col_slot);
    series_free(r.s);
    return out;
}
