#include "base/threads.h"

#include <pthread.h>
#include <signal.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

atomic_int brm_interrupted;

int brm_cpu_count(void)
{
    long n = sysconf(_SC_NPROCESSORS_ONLN);
    return n < 1 ? 1 : (int)n;
}

typedef struct pool {
    uint32_t count;
    atomic_uint next;
    atomic_uint done;
    brm_item_fn fn;
    void *ctx;
    const atomic_int *cancel;
} pool;

typedef struct worker_arg {
    pool *p;
    int id;
} worker_arg;

static void run(pool *p, int id)
{
    for (;;) {
        if (p->cancel && atomic_load(p->cancel)) break;
        uint32_t i = atomic_fetch_add(&p->next, 1);
        if (i >= p->count) break;
        p->fn(p->ctx, i, id);
        atomic_fetch_add(&p->done, 1);
    }
}

static void *worker_main(void *a)
{
    worker_arg *w = a;
    run(w->p, w->id);
    return NULL;
}

uint32_t brm_parallel_for(uint32_t count, int threads, brm_item_fn fn, void *ctx, const atomic_int *cancel)
{
    pool p;
    p.count = count;
    atomic_init(&p.next, 0);
    atomic_init(&p.done, 0);
    p.fn = fn;
    p.ctx = ctx;
    p.cancel = cancel;
    if (threads < 1) threads = 1;
    if ((uint32_t)threads > count) threads = count ? (int)count : 1;
    pthread_t *tids = NULL;
    worker_arg *args = NULL;
    int started = 0;
    if (threads > 1) {
        tids = calloc((size_t)threads, sizeof *tids);
        args = calloc((size_t)threads, sizeof *args);
        if (tids && args) {
            for (int t = 1; t < threads; t++) {
                args[t].p = &p;
                args[t].id = t;
                if (pthread_create(&tids[t], NULL, worker_main, &args[t]) != 0) break;
                started = t;
            }
        }
    }
    run(&p, 0);
    for (int t = 1; t <= started; t++) pthread_join(tids[t], NULL);
    free(tids);
    free(args);
    return atomic_load(&p.done);
}

static void on_signal(int sig)
{
    (void)sig;
    atomic_store(&brm_interrupted, 1);
}

void brm_install_interrupt_handlers(void)
{
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_signal;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGINT, &sa, NULL);
    sigaction(SIGTERM, &sa, NULL);
}

double brm_now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}
