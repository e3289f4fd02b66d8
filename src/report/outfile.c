#define _GNU_SOURCE /* mkstemp, fchmod, realpath */
#include "outfile.h"

#include <errno.h>
#include <limits.h>
#include <signal.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

struct outfile {
    char *path;
    char *tmp_path;
    FILE *fp;
    int slot; /* in pending[], -1 none */
};

/* The temporary files a signal must remove. A handler can only reach them
 * through static storage; unlink is async-signal-safe. */
#define PENDING_MAX 8
static char pending[PENDING_MAX][PATH_MAX];
static volatile sig_atomic_t pending_used[PENDING_MAX];
static int handlers_installed;

static void on_signal(int sig)
{
    for (int k = 0; k < PENDING_MAX; k++)
        if (pending_used[k])
            unlink(pending[k]);
    signal(sig, SIG_DFL);
    raise(sig);
}

static void install_handlers(void)
{
    static const int sigs[] = {SIGINT, SIGTERM, SIGHUP};
    if (handlers_installed)
        return;
    handlers_installed = 1;
    for (size_t k = 0; k < sizeof sigs / sizeof *sigs; k++) {
        struct sigaction old, sa;
        memset(&sa, 0, sizeof sa);
        sa.sa_handler = on_signal;
        sigemptyset(&sa.sa_mask);
        /* a signal ignored by whoever started us (nohup) stays ignored */
        if (sigaction(sigs[k], NULL, &old) == 0 && old.sa_handler != SIG_IGN)
            sigaction(sigs[k], &sa, NULL);
    }
}

static int pending_add(const char *tmp)
{
    if (strlen(tmp) >= PATH_MAX)
        return -1;
    for (int k = 0; k < PENDING_MAX; k++) {
        if (!pending_used[k]) {
            memcpy(pending[k], tmp, strlen(tmp) + 1);
            pending_used[k] = 1; /* after the name is complete */
            return k;
        }
    }
    return -1;
}

static void pending_drop(int slot)
{
    if (slot >= 0)
        pending_used[slot] = 0;
}

struct outfile *outfile_open(const char *path, struct pb_error *err)
{
    struct outfile *o = calloc(1, sizeof *o);
    size_t len = strlen(path) + 16;
    if (!o || !(o->path = strdup(path)) || !(o->tmp_path = malloc(len))) {
        if (o)
            free(o->path);
        free(o);
        pb_error_set(err, PB_ENOMEM, "out of memory");
        return NULL;
    }
    o->slot = -1;
    snprintf(o->tmp_path, len, "%s.tmp-XXXXXX", path);
    install_handlers();
    /* signals held while the file comes into being and is registered, so
     * none can leave it behind unregistered */
    sigset_t block, prev;
    sigemptyset(&block);
    sigaddset(&block, SIGINT);
    sigaddset(&block, SIGTERM);
    sigaddset(&block, SIGHUP);
    sigprocmask(SIG_BLOCK, &block, &prev);
    int fd = mkstemp(o->tmp_path);
    int saved = errno;
    if (fd >= 0)
        o->slot = pending_add(o->tmp_path);
    sigprocmask(SIG_SETMASK, &prev, NULL);
    if (fd < 0) {
        pb_error_set(err, PB_EOUTPUT, "cannot write '%s': %s", path, strerror(saved));
        o->tmp_path[0] = '\0';
        outfile_discard(o);
        return NULL;
    }
    /* mkstemp makes the file private; an output is a document like any other */
    mode_t mask = umask(0);
    umask(mask);
    (void)fchmod(fd, 0666 & ~mask);
    o->fp = fdopen(fd, "wb");
    if (!o->fp) {
        saved = errno;
        close(fd);
        pb_error_set(err, PB_EOUTPUT, "cannot write '%s': %s", path, strerror(saved));
        outfile_discard(o);
        return NULL;
    }
    return o;
}

FILE *outfile_fp(struct outfile *o)
{
    return o->fp;
}

enum pb_code outfile_commit(struct outfile *o, struct pb_error *err)
{
    int bad = ferror(o->fp);
    errno = 0;
    if (fflush(o->fp) != 0)
        bad = 1;
    int saved = errno;
    if (fclose(o->fp) != 0) {
        bad = 1;
        saved = saved ? saved : errno;
    }
    o->fp = NULL;
    enum pb_code rc = PB_OK;
    if (bad)
        rc = pb_error_set(err, PB_EOUTPUT, "cannot write '%s': %s%s", o->path,
                          saved ? strerror(saved) : "write failed",
                          saved == ENOSPC || saved == EDQUOT || saved == EFBIG
                              ? " (disk full, or a file-size limit reached: free some space "
                                "and retry; the old file is unchanged)"
                              : "");
    else if (rename(o->tmp_path, o->path) != 0)
        rc = pb_error_set(err, PB_EOUTPUT, "cannot write '%s': %s", o->path, strerror(errno));
    else
        o->tmp_path[0] = '\0'; /* it is the target now */
    outfile_discard(o);
    return rc;
}

void outfile_discard(struct outfile *o)
{
    if (!o)
        return;
    if (o->fp)
        fclose(o->fp);
    if (o->tmp_path && o->tmp_path[0])
        unlink(o->tmp_path);
    pending_drop(o->slot);
    free(o->path);
    free(o->tmp_path);
    free(o);
}

/* The file's full name without following its last component: a folder that
 * exists resolved by realpath, and the file's own name. -1 when the folder
 * cannot be resolved (then nothing can be written there either). */
static int canonical(const char *path, char *out)
{
    char dir[PATH_MAX], res[PATH_MAX];
    const char *slash = strrchr(path, '/');
    const char *base = slash ? slash + 1 : path;
    if (!slash)
        snprintf(dir, sizeof dir, ".");
    else if (slash == path)
        snprintf(dir, sizeof dir, "/");
    else
        snprintf(dir, sizeof dir, "%.*s", (int)(slash - path), path);
    if (!realpath(dir, res))
        return -1;
    if (snprintf(out, PATH_MAX, "%s/%s", strcmp(res, "/") == 0 ? "" : res, base) >= PATH_MAX)
        return -1;
    return 0;
}

static int same_file(const char *a, const char *b)
{
    struct stat sa, sb;
    if (stat(a, &sa) == 0 && stat(b, &sb) == 0)
        return sa.st_dev == sb.st_dev && sa.st_ino == sb.st_ino;
    char ca[PATH_MAX], cb[PATH_MAX];
    return canonical(a, ca) == 0 && canonical(b, cb) == 0 && strcmp(ca, cb) == 0;
}

static int skip(const char *p)
{
    return !p || strcmp(p, "-") == 0;
}

enum pb_code outfile_check_distinct(const char *const *inputs, size_t nin,
                                    const char *const *outputs, const char *const *what,
                                    size_t nout, struct pb_error *err)
{
    for (size_t k = 0; k < nout; k++) {
        if (skip(outputs[k]))
            continue;
        for (size_t j = 0; j < nin; j++)
            if (!skip(inputs[j]) && same_file(outputs[k], inputs[j]))
                return pb_error_set(err, PB_EUSAGE,
                                    "%s '%s' is the input '%s': refusing to overwrite it", what[k],
                                    outputs[k], inputs[j]);
        for (size_t j = 0; j < k; j++)
            if (!skip(outputs[j]) && same_file(outputs[k], outputs[j]))
                return pb_error_set(err, PB_EUSAGE,
                                    "%s '%s' and %s '%s' are the same file: give each output "
                                    "its own name",
                                    what[j], outputs[j], what[k], outputs[k]);
    }
    return PB_OK;
}
