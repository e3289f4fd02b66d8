/* Helpers shared by the unit tests: tolerance checks that say what failed. */
#ifndef PB_TESTUTIL_H
#define PB_TESTUTIL_H

#include <math.h>

/* |got - want| <= tol, or the test fails naming the check. */
#define check_close(got, want, tol, what)                                                          \
    do {                                                                                           \
        double g_ = (got), w_ = (want), t_ = (tol);                                                \
        if (!(fabs(g_ - w_) <= t_))                                                                \
            fail_msg("%s: got %.12g, want %.12g (tolerance %g)", (what), g_, w_, t_);              \
    } while (0)

/* Relative form: |got - want| <= rel * |want|. */
#define check_rel(got, want, rel, what) check_close(got, want, fabs(want) * (rel), what)

#endif
