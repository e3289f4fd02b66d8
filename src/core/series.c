#define _GNU_SOURCE
#include "series.h"

#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <unistd.h>

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

#define HUGE_PAGE_BYTES ((size_t)2 << 20)

/* Room for cap items of size bytes, on huge pages as series_reserve says;
 * NULL when out of memory. */
static void *new_column(size_t cap, size_t size)
{
    size_t bytes = cap * size;
    if (bytes < SERIES_HUGE_BYTES)
        return malloc(bytes);
    void *p = NULL;
    if (posix_memalign(&p, HUGE_PAGE_BYTES, bytes) != 0)
        return NULL;
#ifdef MADV_HUGEPAGE
    /* a hint: where huge pages are off or run short, small ones; only the
     * pages written are ever taken */
    (void)madvise(p, bytes / HUGE_PAGE_BYTES * HUGE_PAGE_BYTES, MADV_HUGEPAGE);
#endif
    return p;
}

int series_reserve(struct series *s, size_t cap)
{
    if (cap <= s->cap)
        return 0;
    if (cap > SIZE_MAX / sizeof(double))
        return -1;
    void **cols[5 + PB_MAX_CELLS] = {(void **)&s->t_s, (void **)&s->v_v, (void **)&s->i_a,
                                     (void **)&s->temp_c, (void **)&s->line};
    size_t sizes[5 + PB_MAX_CELLS] = {sizeof(double), sizeof(double), sizeof(double),
                                      sizeof(double), sizeof *s->line};
    int ncol = 5;
    for (int c = 0; c < s->ncells; c++) {
        cols[ncol] = (void **)&s->cell_v[c];
        sizes[ncol++] = sizeof(double);
    }
    /* every new column first, so that a failure leaves s as it was */
    void *fresh[5 + PB_MAX_CELLS] = {0};
    for (int k = 0; k < ncol; k++) {
        if (*cols[k] && !(fresh[k] = new_column(cap, sizes[k]))) {
            for (int j = 0; j < k; j++)
                free(fresh[j]);
            return -1;
        }
    }
    for (int k = 0; k < ncol; k++) {
        if (!fresh[k])
            continue;
        memcpy(fresh[k], *cols[k], s->n * sizes[k]);
        free(*cols[k]);
        *cols[k] = fresh[k];
    }
    s->cap = cap;
    return 0;
}

/* The column's pages past its first n items given back (large columns:
 * series_reserve's). */
static void give_back(void *col, size_t n, size_t cap, size_t size)
{
    long page = sysconf(_SC_PAGESIZE);
    if (!col || cap * size < SERIES_HUGE_BYTES || page <= 0)
        return;
    uintptr_t from =
        ((uintptr_t)col + n * size + (uintptr_t)page - 1) / (uintptr_t)page * (uintptr_t)page;
    uintptr_t to = ((uintptr_t)col + cap * size) / (uintptr_t)page * (uintptr_t)page;
    if (from < to)
        (void)madvise((void *)from, to - from, MADV_DONTNEED);
}

void series_trim(struct series *s)
{
    if (!s)
        return;
    give_back(s->t_s, s->n, s->cap, sizeof(double));
    give_back(s->v_v, s->n, s->cap, sizeof(double));
    give_back(s->i_a, s->n, s->cap, sizeof(double));
    give_back(s->temp_c, s->n, s->cap, sizeof(double));
    give_back(s->line, s->n, s->cap, sizeof *s->line);
    for (int c = 0; c < s->ncells; c++)
        give_back(s->cell_v[c], s->n, s->cap, sizeof(double));
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
