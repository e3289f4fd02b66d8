#include "pairs.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

int pairs_distance(const struct pair_pack *p, size_t a, size_t b, struct pair_match *m)
{
    const struct pair_pack *x = &p[a], *y = &p[b];
    if (!x->chemistry || !y->chemistry || strcmp(x->chemistry, y->chemistry) != 0 ||
        x->cells != y->cells)
        return -1;
    /* capacities compared in mAh: packs of different rated capacity can pair */
    double ca = x->capacity_pct * x->capacity_mah / 100.0;
    double cb = y->capacity_pct * y->capacity_mah / 100.0;
    if (!(ca > 0.0 && cb > 0.0))
        return -1;
    m->a = a;
    m->b = b;
    m->capacity_diff_pct = 100.0 * fabs(ca - cb) / (0.5 * (ca + cb));
    double ra = x->r0_mohm_cell, rb = y->r0_mohm_cell;
    m->r0_diff_pct = ra > 0.0 && rb > 0.0 ? 100.0 * fabs(ra - rb) / (0.5 * (ra + rb)) : NAN;
    double tc = m->capacity_diff_pct / PAIR_CAPACITY_PCT;
    double tr = isfinite(m->r0_diff_pct) ? m->r0_diff_pct / PAIR_R0_PCT : 0.0;
    m->distance = sqrt(tc * tc + tr * tr);
    return 0;
}

static int by_distance(const void *u, const void *v)
{
    const struct pair_match *a = u, *b = v;
    if (a->distance != b->distance)
        return (a->distance > b->distance) - (a->distance < b->distance);
    /* ties in the order given: the result does not depend on qsort */
    if (a->a != b->a)
        return (a->a > b->a) - (a->a < b->a);
    return (a->b > b->b) - (a->b < b->b);
}

int pairs_propose(const struct pair_pack *p, size_t n, const int *usable, struct pair_match *out)
{
    size_t cap = n * (n > 0 ? n - 1 : 0) / 2, m = 0;
    struct pair_match *all = malloc((cap ? cap : 1) * sizeof *all);
    int *taken = calloc(n ? n : 1, sizeof *taken);
    if (!all || !taken) {
        free(all);
        free(taken);
        return -1;
    }
    for (size_t a = 0; a < n; a++)
        for (size_t b = a + 1; b < n; b++)
            if ((!usable || (usable[a] && usable[b])) && pairs_distance(p, a, b, &all[m]) == 0)
                m++;
    qsort(all, m, sizeof *all, by_distance);
    int k = 0;
    for (size_t j = 0; j < m; j++) {
        if (taken[all[j].a] || taken[all[j].b])
            continue;
        taken[all[j].a] = taken[all[j].b] = 1;
        out[k++] = all[j];
    }
    free(all);
    free(taken);
    return k;
}
