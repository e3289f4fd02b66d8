#include "packopts.h"

#include "config.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static const struct opt *by_val(int c)
{
    return opt_by_id(logopts_table, c);
}

static const struct opt *by_name(const char *name, size_t len)
{
    return opt_by_name(logopts_table, name, len);
}

/* The ADC scale and the sense chain say one thing: amps per count. */
static int adc_group(int c)
{
    return c == LO_ADC_SCALE || c == LO_ADC_OFFSET || c == LO_ADC_BITS || c == LO_ADC_VREF ||
           c == LO_SENSE_RATIO || c == LO_SENSE_OHM;
}

int packopts_note(struct packopts_seen *seen, int c, const char *arg, struct pb_error *err)
{
    if (!by_val(c))
        return 0;
    if (seen->n >= PACKOPTS_MAX) {
        pb_error_set(err, PB_EUSAGE, "too many reading options (at most %d)", PACKOPTS_MAX);
        return -1;
    }
    seen->c[seen->n] = c;
    seen->arg[seen->n++] = arg;
    return 1;
}

int packopts_known(const char *name, size_t len)
{
    return by_name(name, len) != NULL;
}

/* Whether the settings text holds option c (or, for an ADC option, any). */
static int text_has(const char *settings, int c)
{
    for (const char *p = settings ? settings : ""; *p;) {
        const char *end = strchr(p, '\n');
        size_t len = end ? (size_t)(end - p) : strlen(p);
        const char *eq = memchr(p, '=', len);
        const struct opt *o = eq ? by_name(p, (size_t)(eq - p)) : NULL;
        if (o && (o->id == c || (adc_group(c) && adc_group(o->id))))
            return 1;
        p += len + (end != NULL);
    }
    return 0;
}

static int seen_has(const struct packopts_seen *seen, int c)
{
    for (int k = 0; seen && k < seen->n; k++)
        if (seen->c[k] == c || (adc_group(c) && adc_group(seen->c[k])))
            return 1;
    return 0;
}

/* Calls take(c, value) for each line of settings not overridden by seen.
 * The value is copied into buf (NUL-terminated per line) so it lives on. */
typedef int (*take_fn)(void *ctx, int c, const char *value, struct pb_error *err);

static enum pb_code each_setting(const char *settings, const struct packopts_seen *seen,
                                 take_fn take, void *ctx, struct pb_error *err)
{
    for (const char *p = settings ? settings : ""; *p;) {
        const char *end = strchr(p, '\n');
        size_t len = end ? (size_t)(end - p) : strlen(p);
        const char *eq = memchr(p, '=', len);
        const struct opt *o = eq ? by_name(p, (size_t)(eq - p)) : NULL;
        if (!o)
            return pb_error_set(err, PB_ESTORE,
                                "a pack's settings hold '%.*s', not a reading "
                                "option",
                                (int)len, p);
        if (!seen_has(seen, o->id) && take(ctx, o->id, eq + 1, err) < 0)
            return err->code;
        p += len + (end != NULL);
    }
    return PB_OK;
}

enum pb_code packopts_apply(char *settings, const struct packopts_seen *seen, struct log_cli *log,
                            struct pb_error *err)
{
    int cells = log->an.cells, chem = log->an.chemistry;
    double cap = log->an.capacity_mah;
    size_t min_samples = log->read.min_samples; /* the verb's, not a reading option */
    logopts_init(log);
    log->an.cells = cells;
    log->an.chemistry = chem;
    log->an.capacity_mah = cap;
    log->read.min_samples = min_samples;
    /* the settings file's defaults, under the pack's and the command line's;
     * config_reading() is read-only text that lives as long as the process */
    static char defaults[1024];
    snprintf(defaults, sizeof defaults, "%s", config_reading());
    for (char *p = defaults; *p;) {
        char *end = strchr(p, '\n');
        if (end)
            *end = '\0';
        char *eq = strchr(p, '=');
        const struct opt *o = eq ? by_name(p, (size_t)(eq - p)) : NULL;
        if (o && !seen_has(seen, o->id) && !text_has(settings, o->id) &&
            logopts_take(o->id, eq + 1, log, err) < 0)
            return err->code;
        p = end ? end + 1 : p + strlen(p);
    }
    /* split in place: --map and --columns keep pointing into the lines */
    for (char *p = settings ? settings : (char *)""; *p;) {
        char *end = strchr(p, '\n');
        if (end)
            *end = '\0';
        char *eq = strchr(p, '=');
        const struct opt *o = eq ? by_name(p, (size_t)(eq - p)) : NULL;
        if (!o)
            return pb_error_set(err, PB_ESTORE, "a pack's settings hold '%s', not a reading option",
                                p);
        if (!seen_has(seen, o->id) && logopts_take(o->id, eq + 1, log, err) < 0)
            return err->code;
        p = end ? end + 1 : p + strlen(p);
    }
    for (int k = 0; seen && k < seen->n; k++)
        if (logopts_take(seen->c[k], seen->arg[k], log, err) < 0)
            return err->code;
    return logopts_finish(log, err);
}

struct merge_ctx {
    char *out;
    size_t cap, used;
    int overflow;
};

static void put(struct merge_ctx *m, int c, const char *value, size_t len)
{
    const struct opt *o = by_val(c);
    int n = snprintf(m->out + m->used, m->cap - m->used, "%s=%.*s\n", o->name, (int)len, value);
    if (n < 0 || (size_t)n >= m->cap - m->used)
        m->overflow = 1;
    else
        m->used += (size_t)n;
}

static int take_into_text(void *ctx, int c, const char *value, struct pb_error *err)
{
    (void)err;
    const char *end = strchr(value, '\n');
    put(ctx, c, value, end ? (size_t)(end - value) : strlen(value));
    return 0;
}

enum pb_code packopts_merge(const char *old, const struct packopts_seen *seen, int clear, char *out,
                            size_t cap, struct pb_error *err)
{
    struct merge_ctx m = {out, cap, 0, 0};
    out[0] = '\0';
    if (!clear) {
        enum pb_code rc = each_setting(old, seen, take_into_text, &m, err);
        if (rc != PB_OK)
            return rc;
    }
    for (int k = 0; k < seen->n; k++) {
        if (strchr(seen->arg[k], '\n'))
            return pb_error_set(err, PB_EUSAGE, "--%s: a value cannot hold a line break",
                                by_val(seen->c[k])->name);
        /* a later same option replaces an earlier one, as on a command line */
        int later = 0;
        for (int j = k + 1; j < seen->n; j++)
            later |= seen->c[j] == seen->c[k];
        if (!later)
            put(&m, seen->c[k], seen->arg[k], strlen(seen->arg[k]));
    }
    if (m.overflow)
        return pb_error_set(err, PB_EUSAGE,
                            "the pack's reading settings are too long (%zu bytes "
                            "at most)",
                            cap - 1);
    /* check them together, as a verb given --pack will apply them */
    struct log_cli scratch;
    size_t len = strlen(out) + 1;
    char *copy = malloc(len);
    if (!copy)
        return pb_error_set(err, PB_ENOMEM, "out of memory");
    memcpy(copy, out, len);
    logopts_init(&scratch);
    enum pb_code rc = packopts_apply(copy, NULL, &scratch, err);
    free(copy);
    return rc;
}

void packopts_describe(const char *settings, char *out, size_t cap)
{
    size_t used = 0;
    out[0] = '\0';
    for (const char *p = settings ? settings : ""; *p && used < cap;) {
        const char *end = strchr(p, '\n');
        size_t len = end ? (size_t)(end - p) : strlen(p);
        const char *eq = memchr(p, '=', len);
        if (eq) {
            int n = snprintf(out + used, cap - used, "%s--%.*s %.*s", used ? " " : "",
                             (int)(eq - p), p, (int)(len - (size_t)(eq - p) - 1), eq + 1);
            if (n > 0)
                used += (size_t)n;
        }
        p += len + (end != NULL);
    }
    if (!out[0])
        snprintf(out, cap, "(none)");
}
