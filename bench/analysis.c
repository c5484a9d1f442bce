/* bench/analysis: shots per second through the whole per-shot pipeline
 * (record read, window, DC, receiver sign, line-noise removal, spectrum,
 * peaks, damped-sinusoid fit, SNR) for 1000 simulated shots of 16384
 * samples, against bench/analysis_ref.py doing the same steps with
 * numpy/scipy on the same files in the same run; and the memory after 100
 * and after 1000 shots (flat: the pipeline keeps nothing per shot).
 * Target: at least 5x the script's speed. Not a test: never in make check. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <unistd.h>

#include "analysis.h"
#include "bench.h"

#define SHOTS 1000
#define SCRIPT_SHOTS 100        /* the script is slow: the first 100 files */

static const char PLAN[] =
    "version: 1\ntitle: analysis benchmark\nrig: %s/plans/rigs/sim-bench.yaml\n"
    "sample: {nuclei: [1H], model: {t1: 1 s, t2: 0.3 s, signal_per_field: 2e-10}}\n"
    "vary:\n  b: {from: 5 uT, to: 40 uT, steps: 100}\n"
    "averages: 10\n"
    "shot:\n"
    "  - polarize: {magnet: halbach, for: 1 s}\n"
    "  - field: {sample: b, sensor: tune, settle: 10 ms}\n"
    "  - pulse: {coil: tip, angle: 90 deg}\n"
    "  - acquire: {for: 1.6384 s, rate: 10 kHz}\n";

static long rss_kb(void) {
    struct rusage u;
    getrusage(RUSAGE_SELF, &u);
    return u.ru_maxrss;
}

/* The pipeline over the first n records; *lines counts those with a line. */
static double pipeline(const char *run, size_t n, const an_settings *s, size_t *lines,
                       long *rss100) {
    an_work *w = an_work_new();
    char path[4200], err[512];
    double t0 = bench_now();
    *lines = 0;
    for (size_t k = 1; k <= n; k++) {
        snprintf(path, sizeof path, "%s/records/%06zu.h5", run, k);
        an_record r;
        an_shot out;
        if (an_record_read(path, &r, err, sizeof err) != 0) {
            fprintf(stderr, "bench/analysis: %s\n", err);
            exit(1);
        }
        if (an_reduce(w, &r, s, &out, err, sizeof err) == 0 && out.nlines) (*lines)++;
        an_record_free(&r);
        if (k == 100 && rss100) *rss100 = rss_kb();
    }
    double t = bench_now() - t0;
    an_work_free(w);
    return t;
}

int main(int argc, char **argv) {
    const char *precess = argc > 1 ? argv[1] : "build/precess";
    char dir[] = "/tmp/precess-bench-analysis-XXXXXX", cmd[8192];
    if (bench_plan(dir, PLAN, precess, cmd, sizeof cmd) != 0) return 1;
    if (system(cmd) != 0) {
        fprintf(stderr, "bench/analysis: the simulated run failed (%s)\n", cmd);
        return 1;
    }
    char run[4200];
    snprintf(run, sizeof run, "%s/run", dir);
    an_settings s;
    an_settings_default(&s);
    s.line_noise = 50;
    s.window_from = 2e-3;
    size_t lines, lines_sub;
    long rss100 = 0;
    double t_sub = pipeline(run, SCRIPT_SHOTS, &s, &lines_sub, NULL);
    double t_all = pipeline(run, SHOTS, &s, &lines, &rss100);
    long rss1000 = rss_kb();
    snprintf(cmd, sizeof cmd, "/usr/bin/python3 bench/analysis_ref.py %s %d", run,
             SCRIPT_SHOTS);
    FILE *py = popen(cmd, "r");
    double t_py = -1;
    int py_lines = -1;
    if (py && fscanf(py, "%lf %d", &t_py, &py_lines) != 2) t_py = -1;
    if (py) pclose(py);
    snprintf(cmd, sizeof cmd, "rm -rf %s", dir);
    if (system(cmd)) {
    }
    if (t_py <= 0) {
        fprintf(stderr, "bench/analysis: the numpy/scipy script failed\n");
        return 1;
    }
    double ours = SCRIPT_SHOTS / t_sub, script = SCRIPT_SHOTS / t_py;
    printf("bench/analysis: per-shot pipeline, records of 16384 samples, 50 Hz line noise\n");
    printf("  precess (C)          %8.1f shots/s over %d shots, %8.1f over %d (%zu with a line)\n",
           ours, SCRIPT_SHOTS, SHOTS / t_all, SHOTS, lines);
    printf("  numpy/scipy script   %8.1f shots/s over the same %d files (%d with a line)\n",
           script, SCRIPT_SHOTS, py_lines);
    printf("  ratio %.1fx the script (target >= 5x)\n", ours / script);
    printf("  memory: max RSS %ld kB after 100 shots, %ld kB after %d (flat: growth %ld kB)\n",
           rss100, rss1000, SHOTS, rss1000 - rss100);
    return 0;
}
