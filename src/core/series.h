/* series: one flight log as columns of samples.
 *
 * Owns its arrays (series_new/series_free). Invariants after a successful
 * read: n >= 1; t_s strictly increasing and t_s[0] == 0 (times are relative
 * to the first kept sample, whose absolute time is start_epoch_s when
 * has_epoch); i_a is NULL when the log has no current; temp_c is NULL when
 * it has no temperature; cell_v[c] for c < ncells holds cell c+1's voltage;
 * line[k] is the input line sample k came from (saturating at UINT32_MAX).
 * Current is positive when discharging. Values are finite. */
#ifndef PB_SERIES_H
#define PB_SERIES_H

#include <stddef.h>
#include <stdint.h>

#define PB_MAX_CELLS 24

struct series {
    size_t n;
    size_t cap;
    double *t_s;
    double *v_v;
    double *i_a;
    double *temp_c;
    uint32_t *line;
    int ncells;
    double *cell_v[PB_MAX_CELLS];
    int has_epoch;
    double start_epoch_s;
};

/* New empty series with the given columns; NULL when out of memory. */
struct series *series_new(int has_current, int has_temp, int ncells);

/* Frees s and its arrays; NULL is a no-op. */
void series_free(struct series *s);

/* Makes room for one more sample; returns 0, or -1 when out of memory. */
int series_reserve_one(struct series *s);

#endif
