#include "pairs.h"

#include "assign.h"

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

const char *pairs_method_name(enum pair_method m)
{
    return m == PAIR_GREEDY ? "greedy" : "optimal";
}

/* Least-cost pairing of the g nodes of c (g x g, symmetric, g even) by
 * dynamic programming over the set of nodes paired so far: best[mask] is
 * the least cost of pairing the nodes outside mask; the lowest of them
 * must pair with one of the others. Fills mate[]. Returns 0 or -1. */
static int pair_exact(const double *c, size_t g, size_t *mate)
{
    size_t states = (size_t)1 << g, full = states - 1;
    double *best = malloc(states * sizeof *best);
    unsigned char *pick = malloc(states);
    if (!best || !pick) {
        free(best);
        free(pick);
        return -1;
    }
    best[full] = 0.0;
    for (size_t mask = full; mask-- > 0;) {
        size_t i = 0;
        while (mask & ((size_t)1 << i))
            i++;
        best[mask] = HUGE_VAL;
        pick[mask] = 0;
        for (size_t j = i + 1; j < g; j++) {
            if (mask & ((size_t)1 << j))
                continue;
            double v = c[i * g + j] + best[mask | ((size_t)1 << i) | ((size_t)1 << j)];
            if (v < best[mask]) {
                best[mask] = v;
                pick[mask] = (unsigned char)j;
            }
        }
    }
    for (size_t mask = 0; mask != full;) {
        size_t i = 0;
        while (mask & ((size_t)1 << i))
            i++;
        size_t j = pick[mask];
        mate[i] = j;
        mate[j] = i;
        mask |= ((size_t)1 << i) | ((size_t)1 << j);
    }
    free(best);
    free(pick);
    return 0;
}

/* Half the least-cost cycle cover of c (g x g, g even, diagonal
 * forbidden) into *bound; when every cycle is even, the cheaper alternate
 * half of each into mate[] and *ok = 1 (optimal, pairs.h). Returns 0 or
 * -1. */
static int pair_by_cover(const double *c, size_t g, size_t *mate, double *bound, int *ok)
{
    double *m = malloc(g * g * sizeof *m), sum = 0.0;
    size_t *to = malloc(g * sizeof *to), *cyc = malloc(g * sizeof *cyc);
    unsigned char *seen = calloc(g, 1);
    int rc = -1;
    if (!m || !to || !cyc || !seen)
        goto cleanup;
    for (size_t k = 0; k < g * g; k++)
        sum += c[k];
    /* dearer than any cover without a fixed point (one exists: g >= 2) */
    double forbid = 2.0 * sum + 1.0, total;
    for (size_t i = 0; i < g; i++)
        for (size_t j = 0; j < g; j++)
            m[i * g + j] = i == j ? forbid : c[i * g + j];
    if (assign_solve(m, g, g, to, &total) != 0)
        goto cleanup;
    *bound = 0.5 * total;
    *ok = 1;
    for (size_t s = 0; s < g && *ok; s++) {
        size_t len = 0;
        for (size_t v = s; !seen[v]; v = to[v]) {
            seen[v] = 1;
            cyc[len++] = v;
        }
        if (len == 0)
            continue;
        if (len % 2) {
            *ok = 0;
            break;
        }
        double even = 0.0, odd = 0.0;
        for (size_t k = 0; k < len; k += 2) {
            even += c[cyc[k] * g + cyc[k + 1]];
            odd += c[cyc[k + 1] * g + cyc[(k + 2) % len]];
        }
        for (size_t k = even <= odd ? 0 : 1; k < len; k += 2) {
            size_t a = cyc[k], b = cyc[(k + 1) % len];
            mate[a] = b;
            mate[b] = a;
        }
    }
    rc = 0;
cleanup:
    free(m), free(to), free(cyc), free(seen);
    return rc;
}

int pairs_plan(const struct pair_pack *p, size_t n, const int *usable, enum pair_method method,
               struct pair_match *out, struct pair_plan *plan)
{
    return pairs_plan_limit(p, n, usable, method, PAIR_EXACT_MAX, out, plan);
}

int pairs_plan_limit(const struct pair_pack *p, size_t n, const int *usable,
                     enum pair_method method, size_t exact_max, struct pair_match *out,
                     struct pair_plan *plan)
{
    if (exact_max > PAIR_EXACT_MAX)
        exact_max = PAIR_EXACT_MAX;
    *plan = (struct pair_plan){0};
    plan->exact = 1;
    size_t *group = malloc((n ? n : 1) * sizeof *group), *node = NULL, *mate = NULL;
    int *in = calloc(n ? n : 1, sizeof *in), *left = NULL;
    double *c = NULL;
    int count = -1;
    if (!group || !in)
        goto cleanup;
    /* packs that can pair at all, and the first member of each one's group */
    for (size_t k = 0; k < n; k++) {
        struct pair_match m;
        in[k] = (!usable || usable[k]) && pairs_distance(p, k, k, &m) == 0;
        group[k] = k;
        for (size_t j = 0; j < k && in[k]; j++)
            if (in[j] && group[j] == j && pairs_distance(p, j, k, &m) == 0) {
                group[k] = j;
                break;
            }
    }
    node = malloc((n + 1) * sizeof *node);
    mate = malloc((n + 1) * sizeof *mate);
    left = malloc((n ? n : 1) * sizeof *left);
    if (!node || !mate || !left)
        goto cleanup;
    count = 0;
    for (size_t g0 = 0; g0 < n; g0++) {
        if (!in[g0] || group[g0] != g0)
            continue;
        size_t g = 0;
        for (size_t k = g0; k < n; k++)
            if (in[k] && group[k] == g0)
                node[g++] = k;
        if (g < 2)
            continue;
        plan->groups++;
        size_t gg = g + g % 2; /* an odd group's dummy is node g */
        free(c);
        c = calloc(gg * gg, sizeof *c);
        if (!c) {
            count = -1;
            goto cleanup;
        }
        for (size_t i = 0; i < g; i++)
            for (size_t j = 0; j < g; j++) {
                struct pair_match m;
                if (i != j && pairs_distance(p, node[i], node[j], &m) == 0)
                    c[i * gg + j] = m.distance;
            }
        double bound = 0.0;
        int ok = 0;
        if (method == PAIR_OPTIMAL && g <= exact_max) {
            if (pair_exact(c, gg, mate) != 0) {
                count = -1;
                goto cleanup;
            }
            ok = 1;
        } else if (pair_by_cover(c, gg, mate, &bound, &ok) != 0) {
            count = -1;
            goto cleanup;
        }
        if (method == PAIR_OPTIMAL && ok) {
            double sum = 0.0;
            for (size_t i = 0; i < g; i++) {
                if (mate[i] < i || mate[i] >= g)
                    continue; /* each pair once; the dummy's partner is left out */
                pairs_distance(p, node[i], node[mate[i]], &out[count]);
                sum += out[count++].distance;
            }
            plan->total += sum;
            plan->lower_bound += sum;
            continue;
        }
        /* greedy, asked or as the fallback, among this group's packs alone */
        for (size_t k = 0; k < n; k++)
            left[k] = in[k] && group[k] == g0;
        int got = pairs_propose(p, n, left, &out[count]);
        if (got < 0) {
            count = -1;
            goto cleanup;
        }
        double sum = 0.0;
        for (int k = 0; k < got; k++)
            sum += out[count + k].distance;
        count += got;
        plan->total += sum;
        plan->lower_bound += bound;
        plan->groups_greedy++;
        if (!(sum <= bound * (1.0 + 1e-12) + 1e-12))
            plan->exact = 0;
    }
    qsort(out, (size_t)count, sizeof *out, by_distance);
    plan->count = count;
cleanup:
    free(group), free(in), free(node), free(mate), free(left), free(c);
    return count;
}
