/* twin: one piece of work run beside another on the second core.
 *
 * Owns nothing. The long passes of a fit (fit.c) and of its residual checks
 * (ecm.c) are cut in two fixed halves whatever the machine: the halves'
 * sums are added in the same order either way, so a result never depends on
 * whether a second core was free, only the time does. */
#ifndef PB_TWIN_H
#define PB_TWIN_H

#include <stddef.h>

/* Passes of at least this many rows are cut in two halves. */
#define TWIN_MIN_ROWS 200000

/* Runs there_fn(there) in a second thread when more than one core is online
 * and a thread starts, and here_fn(here) in this one; returns when both are
 * done. Without a second thread both run here, here first. */
void twin_run(void (*here_fn)(void *arg), void *here, void (*there_fn)(void *arg), void *there);

/* Where [0, n) is cut: near the middle, on a multiple of 256 rows (the
 * fits' block) so that each half's blocks are whole. */
size_t twin_split(size_t n);

#endif
