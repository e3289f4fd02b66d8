/* twin: one piece of work run beside another on the second core.
 *
 * The long passes of a fit (fit.c) and of its residual checks (ecm.c) are
 * cut in two fixed halves whatever the machine: the halves' sums are added
 * in the same order either way, so a result never depends on whether a
 * second core was free, only the time does.
 *
 * Owns a few worker threads for the life of the process (at most
 * TWIN_WORKERS, each started for the first job it takes, asleep between
 * jobs, stopped and joined at exit): a job handed to a sleeping worker starts on a
 * free core within about 0.1 ms, where a thread made for it waits for the
 * scheduler to move it off its parent's busy core (2-5 ms on a shared
 * virtual machine, a tenth of a long log's analysis in all). When every
 * worker is busy (analyses in several threads), a thread is made for the
 * job as before; without one the job runs in the caller's thread. */
#ifndef PB_TWIN_H
#define PB_TWIN_H

#include <pthread.h>
#include <stddef.h>

/* Passes of at least this many rows are cut in two halves. */
#define TWIN_MIN_ROWS 200000

#define TWIN_WORKERS 3 /* the tau search, and a half beside it and beside the fits */

/* Runs there_fn(there) in another thread when more than one core is online
 * and one is to be had, and here_fn(here) in this one; returns when both
 * are done. Without another thread both run here, here first. */
void twin_run(void (*here_fn)(void *arg), void *here, void (*there_fn)(void *arg), void *there);

/* A job started beside the caller's work (twin_start) until twin_join. */
struct twin_job {
    int how; /* 0: not started; 1: a worker; 2: a thread of its own */
    void *worker;
    pthread_t tid;
    void (*fn)(void *arg);
    void *arg;
};

/* Starts fn(arg) in another thread: 0 when it runs there (twin_join waits
 * for it), -1 when no thread was to be had (the caller runs it itself). */
int twin_start(struct twin_job *job, void (*fn)(void *arg), void *arg);

/* Waits for a job twin_start started (a no-op for one it did not). */
void twin_join(struct twin_job *job);

/* Where [0, n) is cut: near the middle, on a multiple of 256 rows (the
 * fits' block) so that each half's blocks are whole. */
size_t twin_split(size_t n);

#endif
