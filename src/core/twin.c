#define _POSIX_C_SOURCE 200809L /* sysconf */
#include "twin.h"

#include <signal.h>
#include <stdlib.h>
#include <unistd.h>

/* A worker sleeps on go until handed a job, runs it, says so on fin. The
 * pool's state is under mu. */
struct worker {
    pthread_t tid;
    int started; /* its thread runs */
    int busy;    /* handed a job (from hand_over to wait_for) */
    int has_job, done, stop;
    void (*fn)(void *arg);
    void *arg;
    pthread_cond_t go, fin;
};

static pthread_mutex_t mu = PTHREAD_MUTEX_INITIALIZER;
static struct worker pool[TWIN_WORKERS];

static void *worker_main(void *vw)
{
    struct worker *w = vw;
    pthread_mutex_lock(&mu);
    for (;;) {
        while (!w->has_job && !w->stop)
            pthread_cond_wait(&w->go, &mu);
        if (!w->has_job)
            break; /* stopped (stop_workers), no job left to run */
        w->has_job = 0;
        pthread_mutex_unlock(&mu);
        w->fn(w->arg);
        pthread_mutex_lock(&mu);
        w->done = 1;
        pthread_cond_signal(&w->fin);
    }
    pthread_mutex_unlock(&mu);
    return NULL;
}

/* At exit: the workers stopped and joined (a clean end under valgrind). */
static void stop_workers(void)
{
    for (int i = 0; i < TWIN_WORKERS; i++) {
        struct worker *w = &pool[i];
        pthread_mutex_lock(&mu);
        int started = w->started;
        w->stop = 1;
        if (started)
            pthread_cond_signal(&w->go);
        pthread_mutex_unlock(&mu);
        if (started) {
            pthread_join(w->tid, NULL);
            pthread_cond_destroy(&w->go);
            pthread_cond_destroy(&w->fin);
        }
    }
}

/* pthread_create of a thread that takes no signal meant for the process
 * (every signal blocked, a mask it is born with): a worker outlives the
 * job it was made for, and a handler must run in the thread that set up
 * what it cleans up (the outputs' temporary files: report/outfile.c). */
static int spawn(pthread_t *tid, void *(*fn)(void *arg), void *arg)
{
    sigset_t all, prev;
    sigfillset(&all);
    pthread_sigmask(SIG_SETMASK, &all, &prev);
    int made = pthread_create(tid, NULL, fn, arg);
    pthread_sigmask(SIG_SETMASK, &prev, NULL);
    return made;
}

/* Starts w's thread, asleep until handed a job; under mu. 0 or -1. */
static int start_worker(struct worker *w)
{
    static int at_exit; /* stop_workers registered */
    if (w->stop || (!at_exit && atexit(stop_workers) != 0))
        return -1;
    at_exit = 1;
    if (pthread_cond_init(&w->go, NULL) != 0)
        return -1;
    if (pthread_cond_init(&w->fin, NULL) != 0) {
        pthread_cond_destroy(&w->go);
        return -1;
    }
    w->has_job = 0;
    if (spawn(&w->tid, worker_main, w) != 0) {
        pthread_cond_destroy(&w->go);
        pthread_cond_destroy(&w->fin);
        return -1;
    }
    w->started = 1;
    return 0;
}

/* A sleeping worker handed fn(arg), or NULL when none is free (or one
 * cannot be started). */
static struct worker *hand_over(void (*fn)(void *arg), void *arg)
{
    struct worker *got = NULL;
    pthread_mutex_lock(&mu);
    for (int i = 0; i < TWIN_WORKERS && !got; i++) {
        struct worker *w = &pool[i];
        if (w->busy || (!w->started && start_worker(w) != 0))
            continue;
        w->busy = 1;
        w->fn = fn;
        w->arg = arg;
        w->done = 0;
        w->has_job = 1;
        pthread_cond_signal(&w->go);
        got = w;
    }
    pthread_mutex_unlock(&mu);
    return got;
}

/* Waits until w has run its job and frees it for the next caller. */
static void wait_for(struct worker *w)
{
    pthread_mutex_lock(&mu);
    while (!w->done)
        pthread_cond_wait(&w->fin, &mu);
    w->busy = 0;
    pthread_mutex_unlock(&mu);
}

static void *thread_main(void *vj)
{
    struct twin_job *j = vj;
    j->fn(j->arg);
    return NULL;
}

int twin_start(struct twin_job *job, void (*fn)(void *arg), void *arg)
{
    *job = (struct twin_job){.how = 0, .fn = fn, .arg = arg};
    /* sysconf reads sysfs (a few microseconds): far below a half pass */
    if (sysconf(_SC_NPROCESSORS_ONLN) < 2)
        return -1;
    struct worker *w = hand_over(fn, arg);
    if (w) {
        job->how = 1;
        job->worker = w;
        return 0;
    }
    if (spawn(&job->tid, thread_main, job) == 0) {
        job->how = 2;
        return 0;
    }
    return -1;
}

void twin_join(struct twin_job *job)
{
    if (job->how == 1)
        wait_for(job->worker);
    else if (job->how == 2)
        pthread_join(job->tid, NULL);
    job->how = 0;
}

void twin_run(void (*here_fn)(void *arg), void *here, void (*there_fn)(void *arg), void *there)
{
    struct twin_job j;
    if (twin_start(&j, there_fn, there) == 0) {
        here_fn(here);
        twin_join(&j);
        return;
    }
    here_fn(here);
    there_fn(there);
}

size_t twin_split(size_t n)
{
    return n / 2 / 256 * 256;
}
