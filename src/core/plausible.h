/* plausible: whole-log checks for what no single flight can be.
 *
 * Owns nothing; pure. The reader drops samples no pack can produce (see
 * logread.h); this looks at the log as a whole once it is read: a "flight"
 * of days, a charge far beyond the rated capacity, and a time column whose
 * steps look like milliseconds. Each finding is a warning; the first two
 * are impossible for one flight (impossible = 1): import refuses such a
 * log unless told --force, so nothing impossible reaches the store. */
#ifndef PB_PLAUSIBLE_H
#define PB_PLAUSIBLE_H

#include <stddef.h>

#include "logread.h"
#include "series.h"

#define PLAUSIBLE_MAX_FLIGHT_S (24.0 * 3600.0) /* no multirotor flies a day on one charge */
#define PLAUSIBLE_MAX_CHARGE_RATIO 2.0         /* discharged / rated: far beyond any flight */
#define PLAUSIBLE_MS_MIN_STEP 10.0             /* most steps 10+ "s", in whole numbers... */
#define PLAUSIBLE_MS_MIN_SPAN_S 3600.0         /* ...over an hour or more: likely ms */
#define PLAUSIBLE_MAX_FINDINGS 4

struct plausible_finding {
    const char *code; /* static: log_of_days, charge_beyond_rated, time_maybe_ms */
    int impossible;   /* 1: not a flight, import refuses it without --force */
    char message[320];
};

struct plausible {
    size_t n;
    int impossible; /* any finding is */
    struct plausible_finding f[PLAUSIBLE_MAX_FINDINGS];
};

/* Checks a log read into s (with its reader stats st; name for messages).
 * rated_mah: the pack's rated capacity, 0 when unknown (no charge check). */
void plausible_log(const struct series *s, const struct logread_stats *st, const char *name,
                   double rated_mah, struct plausible *out);

#endif
