#include "plausible.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <string.h>

#include "coulomb.h"

static void add(struct plausible *p, const char *code, int impossible, const char *fmt, ...)
    __attribute__((format(printf, 4, 5)));

static void add(struct plausible *p, const char *code, int impossible, const char *fmt, ...)
{
    if (p->n == PLAUSIBLE_MAX_FINDINGS)
        return;
    struct plausible_finding *f = &p->f[p->n++];
    f->code = code;
    f->impossible = impossible;
    p->impossible |= impossible;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(f->message, sizeof f->message, fmt, ap);
    va_end(ap);
}

/* Steps of at least min_step: more than half of them means the median step
 * is that long (counted, so nothing is held beside the series). */
static int most_steps_at_least(const struct series *s, double min_step)
{
    size_t long_steps = 0;
    for (size_t k = 1; k < s->n; k++)
        long_steps += s->t_s[k] - s->t_s[k - 1] >= min_step;
    return 2 * long_steps > s->n - 1;
}

/* Relative numbers, with no unit given, that step by whole numbers of 10 or
 * more over what would be an hour or more: the steps of a millisecond clock
 * (a 1-100 Hz logger), read as seconds. */
static int looks_like_ms(const struct series *s, const struct logread_stats *st)
{
    if (st->time_unit_given || st->time_is_iso || st->time_is_epoch || s->nseg > 1 || s->n < 3)
        return 0;
    double span = s->t_s[s->n - 1];
    if (!(span >= PLAUSIBLE_MS_MIN_SPAN_S))
        return 0;
    for (size_t k = 0; k < s->n; k++)
        if (s->t_s[k] != floor(s->t_s[k]))
            return 0;
    return most_steps_at_least(s, PLAUSIBLE_MS_MIN_STEP);
}

void plausible_log(const struct series *s, const struct logread_stats *st, const char *name,
                   double rated_mah, struct plausible *out)
{
    memset(out, 0, sizeof *out);
    if (s->n < 2)
        return;
    int ms = looks_like_ms(s, st);
    char hint[160] = "";
    if (!st->time_unit_given && !st->time_is_iso && !st->time_is_epoch)
        snprintf(hint, sizeof hint,
                 "; if the time column counts milliseconds, give --map time_ms=%d",
                 st->time_column);
    double span_s = s->t_s[s->n - 1] - s->t_s[0];
    if (span_s > PLAUSIBLE_MAX_FLIGHT_S)
        add(out, "log_of_days", 1,
            "%s spans %.1f h: no flight lasts days (a bench or lab log, several flights in one "
            "file?)%s",
            name, span_s / 3600.0, hint);
    if (s->i_a && rated_mah > 0.0) {
        struct coulomb_result cc;
        coulomb_count_segments(s->t_s, s->v_v, s->i_a, s->n, s->seg_start, s->nseg, HUGE_VAL, &cc);
        double ratio = cc.discharged_mah / rated_mah;
        if (ratio > PLAUSIBLE_MAX_CHARGE_RATIO)
            add(out, "charge_beyond_rated", 1,
                "%s draws %.0f mAh, %.0f %% of the rated %.0f mAh: no single flight does "
                "(the wrong --capacity or current unit, several flights in one file?)%s",
                name, cc.discharged_mah, 100.0 * ratio, rated_mah, hint);
    }
    if (ms && !out->impossible)
        add(out, "time_maybe_ms", 0,
            "the time column (%d) has no unit and steps by whole numbers, mostly %.0f or more, "
            "over %.1f h: if it counts milliseconds, give --map time_ms=%d",
            st->time_column, PLAUSIBLE_MS_MIN_STEP, span_s / 3600.0, st->time_column);
}
