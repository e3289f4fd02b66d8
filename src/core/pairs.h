/* pairs: which packs to fly together on an aircraft that takes two.
 *
 * Owns nothing (plain values in and out). Pure. Two packs in series or in
 * parallel share the load: the one with less capacity or more resistance is
 * driven harder and ages faster. Packs pair only with the same chemistry
 * and series cell count. Their mismatch is the distance
 *
 *   d = sqrt((dC / PAIR_CAPACITY_PCT)^2 + (dR / PAIR_R0_PCT)^2)
 *
 * with dC the capacity difference in % of the two's mean and dR the same of
 * their R0 per cell: d <= 1 is within the documented limits (a pair whose d
 * passes 1 has drifted apart).
 *
 * Proposals pair as many packs as each group (chemistry and cell count)
 * allows, one left out of an odd group. Pairing packs among themselves is a
 * matching on a general graph, not a bipartite assignment, so:
 *
 * - Optimal (the default) is exact by dynamic programming over subsets
 *   (the lowest unpaired pack with each other in turn; 2^g states) for a
 *   group of up to PAIR_EXACT_MAX packs; an odd group gets a dummy pack at
 *   distance 0 to all, whose partner is the one left out.
 * - Above that, the Hungarian method (assign.h) on the g x g matrix of d
 *   with the diagonal forbidden gives a least-cost cycle cover. Every
 *   pairing, each pair taken both ways, is such a cover, so half the
 *   cover's cost is a lower bound on the best pairing. When the cover has
 *   only even cycles (2-cycles are pairs), each cycle's alternate edges
 *   form two pairings whose costs add up to the cycle's (d is symmetric):
 *   the cheaper one costs at most half, which meets the bound, so the
 *   pairing is optimal. An odd cycle has no such split; then the group is
 *   paired greedily and the bound is reported beside it.
 * - Greedy (--method greedy, and the fallback): of all allowed pairs the
 *   closest first, then the closest among the packs left; each pair is the
 *   best available when it is taken, as an operator pairing one aircraft at
 *   a time would do.
 *
 * Greedy's bound against the optimum. The capacity term is a metric: with
 * x = ln C, |Ca - Cb| / ((Ca + Cb) / 2) = 2 tanh(|xa - xb| / 2), and tanh
 * is increasing, concave and 0 at 0, hence subadditive; the same holds for
 * R0, and the Euclidean combination of metrics is a metric. So d obeys the
 * triangle inequality among packs whose R0 are all known (or all unknown),
 * and there greedy's total is at most (4/3) n^(log2 1.5) - 1/3 times the
 * optimum's for n packs (Reingold and Tarjan, SIAM J. Comput. 10, 1981;
 * from memory) - a ratio that grows with n, not a constant 2. When only
 * some packs in a group have an R0, d drops the R0 term for pairs with an
 * unknown one and is not a metric (A and B of equal capacity, R0 unknown
 * for B: d(A,B) = d(B,C) = 0 while d(A,C) > 0); then greedy has no bound at
 * all (tests/unit/test_pairs.c shows a ratio as large as one likes), which
 * is why optimal is the default and the lower bound is reported. */
#ifndef PB_PAIRS_H
#define PB_PAIRS_H

#include <stddef.h>

/* Limits (common practice for packs flown together, from memory): capacity
 * within 5 % and R0 per cell within 15 % of the pair's mean. */
#define PAIR_CAPACITY_PCT 5.0
#define PAIR_R0_PCT 15.0

struct pair_pack {
    const char *chemistry;
    int cells;
    double capacity_pct; /* now, % of rated (NAN: unknown) */
    double capacity_mah; /* rated */
    double r0_mohm_cell; /* now (NAN: unknown) */
};

struct pair_match {
    size_t a, b;              /* indices into the packs given */
    double distance;          /* d above */
    double capacity_diff_pct; /* of the pair's mean */
    double r0_diff_pct;       /* of the pair's mean, NAN when a resistance is unknown */
};

/* The mismatch of two packs (fills m->distance and the differences; a and
 * b as given). Returns 0, or -1 when they cannot pair: different chemistry
 * or cell count, or no capacity known. An unknown R0 leaves only the
 * capacity term. */
int pairs_distance(const struct pair_pack *p, size_t a, size_t b, struct pair_match *m);

enum pair_method { PAIR_OPTIMAL = 0, PAIR_GREEDY };

/* Largest group solved by the subset DP: 2^(20 + 1) states of 9 bytes
 * (18 MB, a fraction of a second). */
#define PAIR_EXACT_MAX 20

struct pair_plan {
    int count;            /* pairs written to out */
    double total;         /* their summed d */
    double lower_bound;   /* no pairing of the same packs totals less */
    int exact;            /* total is proven least (== lower_bound, or exact DP) */
    size_t groups;        /* groups of two or more packs (chemistry, cell count) */
    size_t groups_greedy; /* of them paired greedily (asked, or above the exact limit
                             with an odd cycle in the cover) */
};

/* Proposals among n packs (usable[k] == 0 skips pack k, e.g. one paired
 * already; NULL: all) by method: up to n / 2 pairs into out, closest
 * first, and what was done in *plan. Returns the count, or -1 when out of
 * memory. */
int pairs_plan(const struct pair_pack *p, size_t n, const int *usable, enum pair_method method,
               struct pair_match *out, struct pair_plan *plan);

/* pairs_plan with the subset DP only up to exact_max (<= PAIR_EXACT_MAX)
 * packs a group, so tests reach the Hungarian path on small groups. */
int pairs_plan_limit(const struct pair_pack *p, size_t n, const int *usable,
                     enum pair_method method, size_t exact_max, struct pair_match *out,
                     struct pair_plan *plan);

/* "optimal" or "greedy". */
const char *pairs_method_name(enum pair_method m);

/* Greedy proposals among n packs (usable[k] == 0 skips pack k, e.g. one
 * paired already): up to n / 2 pairs into out, closest first. Returns how
 * many, or -1 when out of memory. */
int pairs_propose(const struct pair_pack *p, size_t n, const int *usable, struct pair_match *out);

#endif
