/* libFuzzer target: the store's import path, through the commands as the
 * tool runs them (pack add, import, pack show --json, pack list --json,
 * fleet --json) on a fresh database per input.
 * Build: CC=clang meson setup build-fuzz -Dfuzz=true && ninja -C build-fuzz
 * Run:   build-fuzz/tests/fuzz_store -max_len=4096 CORPUS_DIR
 * Input: three lines, then the log: the pack ID, its --note, the log's
 * file name (any bytes but '/'). Every stored flight must come back in the
 * JSON views: a view that fails to say so, or says it with fewer flights
 * than the pack's health counts, aborts (a silent loss). */
#define _GNU_SOURCE
#include <fcntl.h>
#include <gsl/gsl_errno.h>
#include <jansson.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "../../src/cmd/cmd.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static char dir[64];

static void remove_dir(void)
{
    static const char *const names[] = {"p.db", "p.db-wal", "p.db-shm", "out.json"};
    char path[128];
    for (size_t k = 0; k < sizeof names / sizeof *names; k++) {
        snprintf(path, sizeof path, "%s/%s", dir, names[k]);
        unlink(path);
    }
    rmdir(dir);
}

static char *take_line(const uint8_t **p, size_t *n)
{
    const uint8_t *nl = memchr(*p, '\n', *n);
    size_t len = nl ? (size_t)(nl - *p) : *n;
    char *s = strndup((const char *)*p, len);
    *p += nl ? len + 1 : len;
    *n -= nl ? len + 1 : len;
    return s;
}

/* Runs one command with stdout into the file out (NULL: discarded). */
static enum pb_code run(char **argv, const char *out)
{
    int argc = 0;
    while (argv[argc])
        argc++;
    struct app app = {"packbook", 0};
    struct pb_error err = {PB_OK, ""};
    fflush(stdout);
    int saved = dup(1);
    int fd = open(out ? out : "/dev/null", O_WRONLY | O_CREAT | O_TRUNC, 0600);
    dup2(fd, 1);
    close(fd);
    enum pb_code rc = PB_OK;
    if (strcmp(argv[0], "pack") == 0)
        rc = cmd_pack(argc, argv, &app, &err);
    else if (strcmp(argv[0], "import") == 0)
        rc = cmd_import(argc, argv, &app, &err);
    else if (strcmp(argv[0], "fleet") == 0)
        rc = cmd_fleet(argc, argv, &app, &err);
    fflush(stdout);
    dup2(saved, 1);
    close(saved);
    if (rc == PB_OK && app.some_failed)
        rc = PB_EINPUT;
    return rc;
}

static json_t *load(const char *path, const char *what)
{
    json_error_t je;
    json_t *j = json_load_file(path, 0, &je);
    if (!j) {
        fprintf(stderr, "%s: not JSON: %s\n", what, je.text);
        abort();
    }
    return j;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (!dir[0]) {
        gsl_set_error_handler_off();
        /* tmpfs when there is one: a database per input is written many times a second */
        snprintf(dir, sizeof dir, "%s/fuzz_store.XXXXXX",
                 access("/dev/shm", W_OK) == 0 ? "/dev/shm" : "/tmp");
        if (!mkdtemp(dir))
            abort();
        atexit(remove_dir);
    }
    char *label = take_line(&data, &size);
    char *note = take_line(&data, &size);
    char *base = take_line(&data, &size);
    char db[96], log[400], out[96];
    snprintf(db, sizeof db, "%s/p.db", dir);
    snprintf(out, sizeof out, "%s/out.json", dir);
    for (char *c = base; *c; c++)
        if (*c == '/')
            *c = '_';
    snprintf(log, sizeof log, "%s/L%.200s", dir, base);
    unlink(db);
    FILE *fp = fopen(log, "wb");
    if (fp) {
        fwrite(data, 1, size, fp);
        fclose(fp);
    }
    char *add[] = {"pack", "add",    label, "--cells", "4", "--chemistry", "lipo", "--capacity",
                   "5000", "--note", note,  "--db",    db,  NULL};
    char *imp[] = {"import",  "--pack", label, "--date", "2026-01-02",
                   "--quiet", "--db",   db,    log,      NULL};
    char *show[] = {"pack", "show", label, "--json", "--db", db, NULL};
    char *list[] = {"pack", "list", "--json", "--db", db, NULL};
    char *fleet[] = {"fleet", "--all", "--json", "--db", db, NULL};
    if (fp && run(add, NULL) == PB_OK) {
        int stored = run(imp, NULL) == PB_OK;
        if (run(show, out) == PB_OK) {
            json_t *j = load(out, "pack show --json");
            size_t nf = json_array_size(json_object_get(j, "flights"));
            json_int_t hf =
                json_integer_value(json_object_get(json_object_get(j, "health"), "flights"));
            if (nf != (size_t)hf || nf != (size_t)stored ||
                !(json_is_string(json_object_get(j, "note")) ||
                  json_is_null(json_object_get(j, "note")))) {
                fprintf(stderr,
                        "pack show --json: %zu flights listed, health counts %lld, %d stored\n", nf,
                        (long long)hf, stored);
                abort();
            }
            json_decref(j);
        }
        if (run(list, out) == PB_OK) {
            json_t *j = load(out, "pack list --json");
            if (json_array_size(j) != 1) {
                fprintf(stderr, "pack list --json: %zu packs, 1 added\n", json_array_size(j));
                abort();
            }
            json_decref(j);
        }
        if (run(fleet, out) == PB_OK) {
            json_t *j = load(out, "fleet --json");
            json_decref(j);
        }
    }
    unlink(log);
    unlink(out);
    free(label);
    free(note);
    free(base);
    return 0;
}
