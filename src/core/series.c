#include "series.h"

#include <stdlib.h>
#include <string.h>

struct series *series_new(int has_current, int has_temp, int ncells)
{
    if (ncells < 0 || ncells > PB_MAX_CELLS)
        return NULL;
    struct series *s = calloc(1, sizeof *s);
    if (!s)
        return NULL;
    s->ncells = ncells;
    /* The optional columns start non-NULL only so the reserve loop grows
     * them; a zero-size placeholder is freed and replaced on first growth. */
    s->i_a = has_current ? malloc(sizeof(double)) : NULL;
    s->temp_c = has_temp ? malloc(sizeof(double)) : NULL;
    s->t_s = malloc(sizeof(double));
    s->v_v = malloc(sizeof(double));
    s->line = malloc(sizeof(uint32_t));
    int bad =
        !s->t_s || !s->v_v || !s->line || (has_current && !s->i_a) || (has_temp && !s->temp_c);
    for (int c = 0; c < ncells; c++) {
        s->cell_no[c] = c + 1;
        s->cell_v[c] = malloc(sizeof(double));
        bad |= !s->cell_v[c];
    }
    if (bad) {
        series_free(s);
        return NULL;
    }
    s->cap = 1;
    return s;
}

void series_free(struct series *s)
{
    if (!s)
        return;
    free(s->t_s);
    free(s->v_v);
    free(s->i_a);
    free(s->temp_c);
    free(s->line);
    free(s->seg_start);
    for (int c = 0; c < s->ncells; c++)
        free(s->cell_v[c]);
    free(s);
}

static int grow(double **col, size_t cap)
{
    if (!*col)
        return 0;
    double *p = realloc(*col, cap * sizeof(double));
    if (!p)
        return -1;
    *col = p;
    return 0;
}

int series_reserve_one(struct series *s)
{
    if (s->n < s->cap)
        return 0;
    /* Grow by half: large blocks are mremap'd by glibc, so growth costs no
     * copy and peak memory stays near 1.5x the data. */
    size_t cap = s->cap < 1024 ? 1024 : s->cap + s->cap / 2;
    if (grow(&s->t_s, cap) || grow(&s->v_v, cap) || grow(&s->i_a, cap) || grow(&s->temp_c, cap))
        return -1;
    uint32_t *l = realloc(s->line, cap * sizeof *l);
    if (!l)
        return -1;
    s->line = l;
    for (int c = 0; c < s->ncells; c++)
        if (grow(&s->cell_v[c], cap))
            return -1;
    s->cap = cap;
    return 0;
}

int series_add_segment(struct series *s, size_t start)
{
    size_t need = s->nseg ? s->nseg + 1 : 2;
    size_t *p = realloc(s->seg_start, need * sizeof *p);
    if (!p)
        return -1;
    s->seg_start = p;
    if (s->nseg == 0)
        p[s->nseg++] = 0;
    p[s->nseg++] = start;
    return 0;
}

int series_is_joint(const struct series *s, size_t k)
{
    if (s->nseg < 2 || k == 0)
        return 0;
    size_t lo = 1, hi = s->nseg; /* search seg_start[1..nseg-1] for k */
    while (lo < hi) {
        size_t mid = lo + (hi - lo) / 2;
        if (s->seg_start[mid] < k)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo < s->nseg && s->seg_start[lo] == k;
}
