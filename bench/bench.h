/* bench: what the benchmarks share: the monotonic clock in seconds.
 * Not a library; each benchmark is its own program. */
#ifndef PRECESS_BENCH_H
#define PRECESS_BENCH_H

#include <time.h>

static inline double bench_now(void) {
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

#endif
