/* assign: the linear assignment problem (rows to columns at least total
 * cost), solved exactly by the Hungarian method (Kuhn 1955, Munkres 1957)
 * in its shortest-augmenting-path form with row and column potentials:
 * O(n^2 m) for n rows and m >= n columns.
 *
 * Owns nothing (plain arrays in and out). Pure. Used by pairs.c as a bound
 * and, when its answer happens to be a set of pairs, as the optimum of the
 * (non-bipartite) pairing problem; see pairs.h. */
#ifndef PB_ASSIGN_H
#define PB_ASSIGN_H

#include <stddef.h>

/* Assigns each of n rows a distinct column of m (n <= m) so that the sum
 * of cost[row * m + col] is least. Fills col_of_row[0..n) and *total.
 * Returns 0, or -1 when n > m, a cost is not finite, or out of memory. */
int assign_solve(const double *cost, size_t n, size_t m, size_t *col_of_row, double *total);

#endif
