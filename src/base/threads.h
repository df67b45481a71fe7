/* Work sharing: a pool of worker threads that take item indices from a shared counter.
 * Which worker runs an item never changes the item's result (results are keyed by index). */
#ifndef BRM_THREADS_H
#define BRM_THREADS_H

#include <stdatomic.h>
#include <stdint.h>

/* Number of online processors (at least 1). */
int brm_cpu_count(void);

/* Calls fn(ctx, item, worker) for every item in [0, count) on `threads` workers (the calling
 * thread is worker 0). Stops handing out items once *cancel becomes nonzero (may be NULL).
 * Returns the number of items that ran. */
typedef void (*brm_item_fn)(void *ctx, uint32_t item, int worker);
uint32_t brm_parallel_for(uint32_t count, int threads, brm_item_fn fn, void *ctx, const atomic_int *cancel);

/* Set by SIGINT/SIGTERM handlers installed with brm_install_interrupt_handlers(); the bake
 * loops poll it. */
extern atomic_int brm_interrupted;
void brm_install_interrupt_handlers(void);

/* Monotonic seconds. */
double brm_now(void);

#endif
