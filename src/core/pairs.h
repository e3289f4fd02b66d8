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
 * Proposals are greedy: of all allowed pairs, the closest first, then the
 * closest among the packs left, and so on. Greedy matching is not always
 * optimal; for costs that obey the triangle inequality its total is at most
 * (4/3) n^(log2 1.5) - 1/3 times the optimum's for n packs (Reingold and
 * Tarjan, SIAM J. Comput. 10, 1981; from memory), and each greedy pair is
 * the best available when it is taken, which is what an operator pairing
 * packs one aircraft at a time would do. */
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

/* Greedy proposals among n packs (usable[k] == 0 skips pack k, e.g. one
 * paired already): up to n / 2 pairs into out, closest first. Returns how
 * many, or -1 when out of memory. */
int pairs_propose(const struct pair_pack *p, size_t n, const int *usable, struct pair_match *out);

#endif
