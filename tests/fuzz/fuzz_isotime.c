/* libFuzzer target: ISO 8601 text -> epoch -> text -> epoch round trips.
 * Build: CC=clang meson setup build-fuzz -Dfuzz=true && ninja -C build-fuzz
 * Run:   build-fuzz/tests/fuzz_isotime -max_len=64 CORPUS_DIR
 * Whatever isotime_parse accepts must format to text it accepts again, to
 * the same instant (to the millisecond the text keeps), and to the same
 * text a second time; the ISO week of an accepted time must exist. A
 * mismatch aborts, which libFuzzer reports as a crash. */
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "isotime.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    double t1, t2, t3;
    if (isotime_parse((const char *)data, size, &t1, NULL) != 0)
        return 0;
    if (!isfinite(t1))
        abort();
    char a[64], b[64];
    isotime_format(t1, a, sizeof a);
    if (isotime_parse(a, strlen(a), &t2, NULL) != 0) {
        fprintf(stderr, "'%s' (from %.3f) does not parse again\n", a, t1);
        abort();
    }
    if (fabs(t2 - t1) > 0.0005 + 1e-9 * fabs(t1)) {
        fprintf(stderr, "'%s' reads %.6f, written from %.6f\n", a, t2, t1);
        abort();
    }
    isotime_format(t2, b, sizeof b);
    if (strcmp(a, b) != 0 || isotime_parse(b, strlen(b), &t3, NULL) != 0 || t3 != t2) {
        fprintf(stderr, "'%s' -> '%s': not a fixed point\n", a, b);
        abort();
    }
    int year, week;
    if (isotime_week(t1, &year, &week) != 0 || week < 1 || week > 53 || year < 1969 ||
        year > 2101) {
        fprintf(stderr, "'%s': ISO week %d-W%02d\n", a, year, week);
        abort();
    }
    return 0;
}
