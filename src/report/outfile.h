/* outfile: every file packbook writes (besides the database) goes through
 * here: a temporary file beside the target, renamed over it only when the
 * whole output was written, so a reader never sees half a file and a failed
 * or interrupted run leaves the old file as it was.
 *
 * Owns struct outfile (outfile_open, then outfile_commit or
 * outfile_discard; both free it, outfile_discard(NULL) is a no-op). The
 * temporary files of open outfiles are removed on SIGINT, SIGTERM and SIGHUP
 * (a handler installed on the first open), then the signal does what it would
 * have done. A symlink at the target is replaced, never followed. */
#ifndef PB_OUTFILE_H
#define PB_OUTFILE_H

#include <stddef.h>
#include <stdio.h>

#include "../core/pb_error.h"

struct outfile;

/* Starts writing path (through "PATH.tmp-XXXXXX"); NULL with err filled. */
struct outfile *outfile_open(const char *path, struct pb_error *err);

/* The stream to write to. */
FILE *outfile_fp(struct outfile *o);

/* Closes the stream and, when every write succeeded, renames the temporary
 * file over the target; otherwise removes it and fills err (PB_EOUTPUT, with
 * a hint when the disk is full). Frees o. */
enum pb_code outfile_commit(struct outfile *o, struct pb_error *err);

/* Removes the temporary file and frees o. */
void outfile_discard(struct outfile *o);

/* Refuses (PB_EUSAGE) an output that is the same file as an input or as
 * another output: the same name spelled another way, a link to it, or the
 * same name twice. "-" (standard input or output) and NULL entries are
 * skipped. what[k] names outputs[k] in the message (e.g. "--series"). */
enum pb_code outfile_check_distinct(const char *const *inputs, size_t nin,
                                    const char *const *outputs, const char *const *what,
                                    size_t nout, struct pb_error *err);

#endif
