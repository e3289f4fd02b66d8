/* csvscan: the floor for any libcsv-based reader. Reads a file in 1 MiB blocks,
 * hands them to csv_parse with callbacks that only count, and prints the counts.
 * packbook's speed target is stated relative to this program.
 *
 *   cc -O2 -o csvscan bench/csvscan.c -lcsv && ./csvscan FILE
 */
#include <csv.h>
#include <stdio.h>
#include <stdlib.h>

enum { BLOCK = 1 << 20 };

struct counts {
    unsigned long long fields;
    unsigned long long rows;
};

static void on_field(void *data, size_t len, void *ctx)
{
    (void)data;
    (void)len;
    ((struct counts *)ctx)->fields++;
}

static void on_row(int term, void *ctx)
{
    (void)term;
    ((struct counts *)ctx)->rows++;
}

int main(int argc, char **argv)
{
    if (argc != 2) {
        fprintf(stderr, "usage: csvscan FILE\n");
        return 2;
    }
    FILE *f = fopen(argv[1], "rb");
    if (!f) {
        perror(argv[1]);
        return 1;
    }
    /* static: 1 MiB is too much for some default stacks, and it is reused anyway */
    static char buf[BLOCK];
    struct csv_parser p;
    struct counts c = {0, 0};
    if (csv_init(&p, 0) != 0) {
        fprintf(stderr, "csvscan: csv_init failed\n");
        return 1;
    }
    size_t n;
    while ((n = fread(buf, 1, sizeof buf, f)) > 0) {
        if (csv_parse(&p, buf, n, on_field, on_row, &c) != n) {
            fprintf(stderr, "csvscan: %s: %s\n", argv[1], csv_strerror(csv_error(&p)));
            return 1;
        }
    }
    if (ferror(f)) {
        perror(argv[1]);
        return 1;
    }
    csv_fini(&p, on_field, on_row, &c); /* flushes a last row without a newline */
    csv_free(&p);
    fclose(f);
    printf("rows %llu fields %llu\n", c.rows, c.fields);
    return 0;
}
