/* Test driver for tests/cli/test_assign.py: reads "n m" and then n x m
 * costs (row by row) from stdin, solves the assignment with assign_solve
 * and prints the total (%.17g) and then each row's column. Exit 1 on bad
 * input or a failed solve. Not installed. */
#include <stdio.h>
#include <stdlib.h>

#include "assign.h"

int main(void)
{
    size_t n, m;
    if (scanf("%zu %zu", &n, &m) != 2 || n == 0 || m == 0 || n > 1000 || m > 1000)
        return 1;
    double *c = malloc(n * m * sizeof *c);
    size_t *col = malloc(n * sizeof *col);
    if (!c || !col)
        return 1;
    for (size_t k = 0; k < n * m; k++)
        if (scanf("%lf", &c[k]) != 1)
            return 1;
    double total;
    if (assign_solve(c, n, m, col, &total) != 0)
        return 1;
    printf("%.17g\n", total);
    for (size_t i = 0; i < n; i++)
        printf("%zu%c", col[i], i + 1 < n ? ' ' : '\n');
    free(c);
    free(col);
    return 0;
}
