/* twin: a job beside the caller's, on workers kept between jobs.
 * No numbers to check against a source: what is checked is the contract of
 * twin.h. Each job runs exactly once and is done when twin_run or twin_join
 * returns; with a second core the job runs in another thread, beside the
 * caller (it sees the caller's flag change while both run); the workers are
 * kept (over many jobs one after another, at most TWIN_WORKERS threads ever
 * run them: kernel thread ids, which a new thread does not reuse at once);
 * a worker takes no signal meant for the process (SIGTERM blocked in it,
 * so an output's handler runs in the thread that made the output);
 * more callers at once than workers still get every job run (a thread of
 * its own, or in the caller), as do jobs that hand out jobs themselves (the
 * tau search cuts its walks in two). */
#define _GNU_SOURCE /* syscall(SYS_gettid) */
#include <pthread.h>
#include <setjmp.h>
#include <signal.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <sys/syscall.h>
#include <time.h>
#include <unistd.h>

#include <cmocka.h>

#include "twin.h"

static long tid_now(void)
{
    return (long)syscall(SYS_gettid);
}

struct cell {
    int runs;
    long tid;
    int term_blocked; /* SIGTERM in the running thread's mask */
};

static void mark(void *vc)
{
    struct cell *c = vc;
    __atomic_add_fetch(&c->runs, 1, __ATOMIC_SEQ_CST);
    c->tid = tid_now();
    sigset_t now;
    pthread_sigmask(SIG_BLOCK, NULL, &now);
    c->term_blocked = sigismember(&now, SIGTERM);
}

static int two_cores(void)
{
    return sysconf(_SC_NPROCESSORS_ONLN) > 1;
}

static void test_once_each_and_kept(void **state)
{
    (void)state;
    long seen[64];
    int distinct = 0;
    for (int k = 0; k < 64; k++) {
        struct cell here = {0, 0, 0}, there = {0, 0, 0};
        twin_run(mark, &here, mark, &there);
        assert_int_equal(here.runs, 1);
        assert_int_equal(there.runs, 1);
        assert_true(here.tid == tid_now()); /* here: the caller's own thread */
        if (!two_cores())
            continue;
        assert_true(there.tid != tid_now());
        assert_int_equal(there.term_blocked, 1);
        assert_int_equal(here.term_blocked, 0);
        int known = 0;
        for (int j = 0; j < distinct; j++)
            known |= seen[j] == there.tid;
        if (!known)
            seen[distinct++] = there.tid;
    }
    /* 64 jobs one after another: the same few workers, not 64 threads */
    if (two_cores())
        assert_true(distinct >= 1 && distinct <= TWIN_WORKERS);
}

/* A job that waits (up to 5 s) for the caller's flag: it can only see it
 * set while the caller runs beside it. */
struct meet {
    int flag, saw;
};

static void wait_flag(void *vm)
{
    struct meet *m = vm;
    struct timespec t0, t;
    clock_gettime(CLOCK_MONOTONIC, &t0);
    do {
        if (__atomic_load_n(&m->flag, __ATOMIC_SEQ_CST)) {
            m->saw = 1;
            return;
        }
        clock_gettime(CLOCK_MONOTONIC, &t);
    } while ((double)(t.tv_sec - t0.tv_sec) + 1e-9 * (double)(t.tv_nsec - t0.tv_nsec) < 5.0);
}

static void test_start_runs_beside(void **state)
{
    (void)state;
    if (!two_cores()) {
        skip();
        return;
    }
    struct meet m = {0, 0};
    struct twin_job job;
    assert_int_equal(twin_start(&job, wait_flag, &m), 0);
    __atomic_store_n(&m.flag, 1, __ATOMIC_SEQ_CST);
    twin_join(&job);
    assert_int_equal(m.saw, 1);
    twin_join(&job); /* a second join of the same job is a no-op */
}

/* A caller thread: many twin_runs, each job handing out one of its own. */
#define CALLERS 6
#define ROUNDS 40

struct nested {
    struct cell inner_here, inner_there;
};

static void nest(void *vn)
{
    struct nested *n = vn;
    twin_run(mark, &n->inner_here, mark, &n->inner_there);
}

static void *caller(void *vcount)
{
    int *count = vcount;
    for (int r = 0; r < ROUNDS; r++) {
        struct cell here = {0, 0, 0};
        struct nested n = {{0, 0, 0}, {0, 0, 0}};
        twin_run(mark, &here, nest, &n);
        *count += here.runs + n.inner_here.runs + n.inner_there.runs;
    }
    return NULL;
}

static void test_more_callers_than_workers(void **state)
{
    (void)state;
    pthread_t t[CALLERS];
    int count[CALLERS] = {0};
    for (int i = 0; i < CALLERS; i++)
        assert_int_equal(pthread_create(&t[i], NULL, caller, &count[i]), 0);
    for (int i = 0; i < CALLERS; i++) {
        assert_int_equal(pthread_join(t[i], NULL), 0);
        assert_int_equal(count[i], 3 * ROUNDS); /* every job of every round, once */
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_once_each_and_kept),
        cmocka_unit_test(test_start_runs_beside),
        cmocka_unit_test(test_more_callers_than_workers),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
