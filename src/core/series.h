/* series: one flight log as columns of samples.
 *
 * Owns its arrays (series_new/series_free). Invariants after a successful
 * read: n >= 1; t_s strictly increasing and t_s[0] == 0 (times are relative
 * to the first kept sample, whose absolute time is start_epoch_s when
 * has_epoch); i_a is NULL when the log has no current; temp_c is NULL when
 * it has no temperature; cell_v[c] for c < ncells holds cell cell_no[c]'s voltage;
 * line[k] is the input line sample k came from (saturating at UINT32_MAX).
 * Current is positive when discharging. Values are finite.
 *
 * Segments: a log whose clock restarted (time jumped back and went on) is
 * kept as segments of one series. seg_start[0..nseg-1] are the indices of
 * each segment's first sample, increasing, seg_start[0] == 0; nseg == 0 (a
 * series built by hand, seg_start NULL) means one segment. The interval
 * that ends at seg_start[j], j >= 1, is a joint of UNKNOWN length: its t_s
 * step is a placeholder, a thousandth of the step before it, so code that
 * does not know about segments bridges next to nothing across it and the
 * duration is about the sum of the segments; charge counting and the fits
 * should still not bridge it (coulomb_count_segments, series_is_joint), nor
 * take it as a time scale. Within a segment the logged times are kept as
 * they were, shifted. */
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
    int cell_no[PB_MAX_CELLS]; /* cell_v[c]'s 1-based number in the log (a dropped cell
                                  leaves a gap); 0 in a series built by hand: c + 1 */
    int cells_in_pack;         /* cells the log's cell columns stand for, dropped ones
                                  too; 0: ncells */
    int has_epoch;
    double start_epoch_s;
    size_t nseg;       /* segments; 0 or 1: one */
    size_t *seg_start; /* first sample of each segment, NULL when nseg == 0 */
};

/* New empty series with the given columns; NULL when out of memory. */
struct series *series_new(int has_current, int has_temp, int ncells);

/* Frees s and its arrays; NULL is a no-op. */
void series_free(struct series *s);

/* Makes room for one more sample; returns 0, or -1 when out of memory. */
int series_reserve_one(struct series *s);

/* Records that a new segment starts at sample index start (after the last
 * one recorded; the first call also records segment 0 at index 0). Returns
 * 0, or -1 when out of memory. */
int series_add_segment(struct series *s, size_t start);

/* 1 when the interval from sample k-1 to k is a joint between segments (of
 * unknown length), else 0. O(log nseg). */
int series_is_joint(const struct series *s, size_t k);

#endif
