#include "assign.h"

#include <math.h>
#include <stdlib.h>

/* Rows are added one at a time; each addition grows a tree of tight edges
 * (reduced cost zero under the potentials u, v) from the new row by
 * Dijkstra-like steps until it reaches a free column, then flips the path.
 * Arrays are 1-based; column 0 stands for the row being added. */
int assign_solve(const double *cost, size_t n, size_t m, size_t *col_of_row, double *total)
{
    if (n > m)
        return -1;
    for (size_t k = 0; k < n * m; k++)
        if (!isfinite(cost[k]))
            return -1;
    double *u = calloc(n + 1, sizeof *u), *v = calloc(m + 1, sizeof *v);
    double *minv = malloc((m + 1) * sizeof *minv);
    size_t *row_at = calloc(m + 1, sizeof *row_at), *way = calloc(m + 1, sizeof *way);
    unsigned char *used = malloc(m + 1);
    int rc = -1;
    if (!u || !v || !minv || !row_at || !way || !used)
        goto cleanup;
    for (size_t i = 1; i <= n; i++) {
        row_at[0] = i;
        size_t j0 = 0;
        for (size_t j = 0; j <= m; j++) {
            minv[j] = HUGE_VAL;
            used[j] = 0;
        }
        do {
            used[j0] = 1;
            size_t i0 = row_at[j0], j1 = 0;
            double delta = HUGE_VAL;
            for (size_t j = 1; j <= m; j++) {
                if (used[j])
                    continue;
                double reduced = cost[(i0 - 1) * m + (j - 1)] - u[i0] - v[j];
                if (reduced < minv[j]) {
                    minv[j] = reduced;
                    way[j] = j0;
                }
                if (minv[j] < delta) {
                    delta = minv[j];
                    j1 = j;
                }
            }
            /* finite costs and a free column left (n <= m): some column is reachable */
            if (j1 == 0)
                goto cleanup;
            for (size_t j = 0; j <= m; j++) {
                if (used[j]) {
                    u[row_at[j]] += delta;
                    v[j] -= delta;
                } else {
                    minv[j] -= delta;
                }
            }
            j0 = j1;
        } while (row_at[j0] != 0);
        do { /* flip the alternating path back to the new row */
            size_t j1 = way[j0];
            row_at[j0] = row_at[j1];
            j0 = j1;
        } while (j0 != 0);
    }
    double sum = 0.0;
    for (size_t j = 1; j <= m; j++)
        if (row_at[j]) {
            col_of_row[row_at[j] - 1] = j - 1;
            sum += cost[(row_at[j] - 1) * m + (j - 1)];
        }
    *total = sum;
    rc = 0;
cleanup:
    free(u), free(v), free(minv), free(row_at), free(way), free(used);
    return rc;
}
