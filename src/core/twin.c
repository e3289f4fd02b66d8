#define _POSIX_C_SOURCE 200809L /* sysconf */
#include "twin.h"

#include <pthread.h>
#include <unistd.h>

struct job {
    void (*fn)(void *arg);
    void *arg;
};

static void *job_run(void *vj)
{
    struct job *j = vj;
    j->fn(j->arg);
    return NULL;
}

void twin_run(void (*here_fn)(void *arg), void *here, void (*there_fn)(void *arg), void *there)
{
    struct job j = {there_fn, there};
    pthread_t tid;
    /* sysconf reads sysfs (a few microseconds): far below a half pass */
    if (sysconf(_SC_NPROCESSORS_ONLN) > 1 && pthread_create(&tid, NULL, job_run, &j) == 0) {
        here_fn(here);
        pthread_join(tid, NULL);
        return;
    }
    here_fn(here);
    there_fn(there);
}

size_t twin_split(size_t n)
{
    return n / 2 / 256 * 256;
}
