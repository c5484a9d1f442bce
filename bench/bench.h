/* bench: what the benchmarks share: the monotonic clock in seconds.
 * Not a library; each benchmark is its own program. */
#ifndef PRECESS_BENCH_H
#define PRECESS_BENCH_H

#include <stdio.h>
#include <stdlib.h>
#include <time.h>
#include <unistd.h>

static inline double bench_now(void) {
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

/* The command that runs dir/plan.yaml under --fast into dir/out, quietly. */
static inline void bench_run_cmd(const char *precess, const char *dir, const char *out, char *cmd,
                                 size_t n) {
    snprintf(cmd, n, "%s run %s/plan.yaml --fast --out %s/%s >/dev/null 2>&1", precess, dir,
             dir, out);
}

/* A temporary folder (dir: a mkdtemp template) holding plan.yaml, the plan
 * text plan_fmt with this folder's path for its one %s (the rig's path is
 * relative to the tree), and the command that runs it under --fast into
 * dir/run. Returns 0, or -1 when the folder or file cannot be made. */
static inline int bench_plan(char *dir, const char *plan_fmt, const char *precess, char *cmd,
                             size_t n) {
    char cwd[2048], path[4096];
    if (!getcwd(cwd, sizeof cwd) || !mkdtemp(dir)) return -1;
    snprintf(path, sizeof path, "%s/plan.yaml", dir);
    FILE *f = fopen(path, "w");
    if (!f) return -1;
    fprintf(f, plan_fmt, cwd);
    fclose(f);
    bench_run_cmd(precess, dir, "run", cmd, n);
    return 0;
}

#endif
