/* bench/compile: compile speed and memory of plans of 10^3 to 10^6 shots
 * on the example bench: shots per second and bytes per shot, against the
 * targets (>= 10^6 shots/s, 10^5 at the least; memory growing with points,
 * not samples). A field ramp with two scan variables and 10 averages per
 * point, so a plan of N shots has N/10 points to solve and time.
 * Each size is compiled three times and the best time kept.
 * Not a test: timing lives here, never in make check. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "bench.h"

#include "compile.h"

static const char *const PLAN =
    "version: 1\n"
    "title: compile benchmark\n"
    "rig: rigs/sim-bench.yaml\n"
    "sample: {nuclei: [1H, 19F]}\n"
    "vary:\n"
    "  b_detect: {from: 2 uT, to: 50 uT, steps: %zu, spacing: log}\n"
    "  t_wait: {from: 10 ms, to: 100 ms, steps: %zu}\n"
    "averages: %d\n"
    "shot:\n"
    "  - polarize: {coil: prepol, field: 30 mT, for: 1 s}\n"
    "  - field: {sample: b_detect, sensor: tune, settle: 5 ms}\n"
    "  - wait: {for: t_wait}\n"
    "  - pulse: {coil: tip, angle: 90 deg, alternate: true}\n"
    "  - acquire: {for: 500 ms, rate: 10 kHz}\n";

static int one(size_t shots, int averages, double *rate, double *bytes) {
    size_t points = shots / (size_t)averages, a = 1;
    while (a * a < points) a++;
    size_t b = points / a;
    char text[2048];
    snprintf(text, sizeof text, PLAN, a, b, averages);
    diag_list d;
    diag_init(&d);
    plan *p = plan_read_bytes("plans/bench-compile.yaml", text, strlen(text), &d);
    scan *s = p ? scan_expand(p, &d) : NULL;
    /* Best of three: the first run also warms the caches. */
    compiled *c = NULL;
    double t0 = 0, t1 = 1e300;
    for (int k = 0; k < 3 && s; k++) {
        compile_free(c);
        double a0 = bench_now();
        c = compile_plan(p, s, &d);
        double a1 = bench_now();
        if (a1 - a0 < t1 - t0) t0 = a0, t1 = a1;
        if (!c) break;
    }
    int rc = c ? 0 : -1;
    if (c) {
        *rate = (double)s->nshots / (t1 - t0);
        *bytes = (double)arena_used(c->arena) / (double)s->nshots;
        printf("  %8zu shots (%7zu points): %10.0f shots/s, %7.1f bytes/shot, %.3f s\n",
               s->nshots, s->npoints, *rate, *bytes, t1 - t0);
    } else {
        for (size_t i = 0; i < d.n; i++) fprintf(stderr, "%s\n", d.items[i].message);
    }
    compile_free(c);
    scan_free(s);
    plan_free(p);
    diag_free(&d);
    return rc;
}

int main(void) {
    printf("bench/compile: compile_plan on the example bench (10 averages per point)\n");
    double rate = 0, bytes = 0, worst = 1e300;
    for (size_t n = 1000; n <= 1000000; n *= 10) {
        if (one(n, 10, &rate, &bytes)) return 1;
        if (rate < worst) worst = rate;
    }
    printf("  slowest %.0f shots/s: %.2fx the target of 1e6 shots/s, %.2fx the floor of 1e5\n",
           worst, worst / 1e6, worst / 1e5);
    printf("bench/compile: every shot its own point (1 average), the costliest case\n");
    double single = 1e300;
    for (size_t n = 1000; n <= 100000; n *= 10) {
        if (one(n, 1, &rate, &bytes)) return 1;
        if (rate < single) single = rate;
    }
    printf("  slowest %.0f shots/s: %.2fx the floor of 1e5 shots/s\n", single, single / 1e5);
    return 0;
}
