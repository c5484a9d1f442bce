/* test_sim: the simulated rig driven by hand through drv_ops as the scheduler
 * would, against physics written out here apart from the driver: frequency,
 * amplitude, multiplets, ADC, seeds, faults, interlock, limits, real time and
 * the safe state's log; writes $B/tests/sim-signal.json for tests/ref/sim_signal.py.
 * Not for the scheduler. Plans are read from memory as plans/sim-test.yaml. */
#include <math.h>
#include <poll.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>
#include <cmocka.h>
#include <gsl/gsl_multifit.h>
#include <jansson.h>

#include "compile.h"
#include "driver.h"
#include "sim/sim.h"

#define PLAN_FILE "plans/sim-test.yaml"
#define ERRLEN 256
#define T0 10.0                 /* s: the first shot's start on the virtual clock */

/* The bench as written in plans/rigs/sim-bench.yaml, typed in again here so
 * the expectations do not go through the rig reader. */
#define TRUE_SAMPLE_MAIN 151.2e-6
#define TRUE_SAMPLE_BIAS 0.5e-6
#define TRUE_SENSOR_MAIN 2.5e-6
#define TRUE_SENSOR_BIAS 59.4e-6
#define SAMPLE_RESIDUAL_Z 2e-9
#define TIP_PER_CURRENT 100e-6
#define DETECTOR_HZ_PER_T 7.0e9
#define DETECTOR_BANDWIDTH 200.0
#define NOISE_DENSITY 15e-15
#define MAINS 50.0
#define HARMONICS 5
#define VOLTS_PER_COUNT (20.0 / 65536.0)
#define FIELD_PER_VOLT 1e-9
#define HALBACH 1.2
enum { PREPOL, MAIN, BIAS, TIP };

/* source: CODATA 2018 (mu0, the free proton's gamma) and SI 2019 (hbar, k_B),
 * value from memory. */
#define MU0 1.25663706212e-6
#define HBAR 1.054571817e-34
#define KB 1.380649e-23
#define GAMMA_1H 2.6752218744e8
/* source: IUPAC recommendations 2001, Pure Appl. Chem. 73, 1795 (value from memory) */
#define GAMMA_13C 6.728284e7

static double prepol_per_current(void) {
    /* source: finite solenoid at its centre, B = mu0 N I / sqrt(L^2 + 4 R^2)
     * (electromagnetism handbooks): 400 turns, 15 mm radius, 60 mm long. */
    return MU0 * 400 / sqrt(0.06 * 0.06 + 4 * 0.015 * 0.015);
}

static const char *const PLAN_CURIE =
    "version: 1\n"
    "title: sim driver test, Curie-law water\n"
    "rig: rigs/sim-bench.yaml\n"
    "sample:\n"
    "  label: water, 0.5 mL\n"
    "  nuclei: [1H]\n"
    "  temperature: 295 K\n"
    "  model: {t1: 1 s, t2: 0.5 s, spin_density: 6.6e28 m^-3, volume: 0.5 mL, "
    "distance: 8 mm}\n"
    "averages: 2\n"
    "shot:\n"
    "  - polarize: {coil: prepol, current: 6 A, for: 2 s, off: 20 ms}\n"
    "  - field:    {sample: 20 uT, sensor: tune, settle: 10 ms}\n"
    "  - pulse:    {coil: tip, angle: 90 deg, alternate: true}\n"
    "  - acquire:  {for: 1 s, rate: 10 kHz, inputs: [sensor]}\n"
    "  - wait:     {for: 100 ms}\n";

/* %s: signal_per_field */
static const char *const PLAN_MAGNET =
    "version: 1\n"
    "title: sim driver test, magnet\n"
    "rig: rigs/sim-bench.yaml\n"
    "sample:\n"
    "  label: test liquid\n"
    "  nuclei: [1H]\n"
    "  model:\n"
    "    t1: {table: [[50 uT, 0.8 s], [100 mT, 1.5 s], [2 T, 2.5 s]]}\n"
    "    t2: 0.6 s\n"
    "    signal_per_field: %s\n"
    "shot:\n"
    "  - polarize: {magnet: halbach, for: 3 s}\n"
    "  - line:     {name: shuttle, state: on}\n"
    "  - wait:     {for: 150 ms}\n"
    "  - line:     {name: shuttle, state: off}\n"
    "  - field:    {sample: 20 uT, sensor: tune, settle: 20 ms}\n"
    "  - pulse:    {coil: tip, angle: 90 deg}\n"
    "  - acquire:  {for: 1 s, rate: 10 kHz}\n"
    "  - wait:     {for: 100 ms}\n";

static const char *const PLAN_MULTIPLET =
    "version: 1\n"
    "title: sim driver test, labelled methyl group\n"
    "rig: rigs/sim-bench.yaml\n"
    "sample:\n"
    "  label: 13C methyl\n"
    "  nuclei: [1H, 13C]\n"
    "  model:\n"
    "    t1: 3 s\n"
    "    t2: 0.8 s\n"
    "    signal_per_field: 2e-11\n"
    "    spins: {Ha: 1H, Hb: 1H, Hc: 1H, C: 13C}\n"
    "    couplings: {Ha-C: 128 Hz, Hb-C: 128 Hz, Hc-C: 128 Hz}\n"
    "shot:\n"
    "  - polarize: {magnet: halbach, for: 2 s}\n"
    "  - line:     {name: shuttle, state: on}\n"
    "  - wait:     {for: 150 ms}\n"
    "  - line:     {name: shuttle, state: off}\n"
    "  - field:    {sample: 40 uT, sensor: 0 T, settle: 20 ms}\n"
    "  - pulse:    {coil: tip, angle: 90 deg, nucleus: 1H}\n"
    "  - acquire:  {for: 1 s, rate: 5 kHz}\n"
    "  - wait:     {for: 100 ms}\n";

#define assert_near(got, want, tol)                                                     \
    do {                                                                                \
        double g_ = (got), w_ = (want), t_ = (tol);                                     \
        if (!(fabs(g_ - w_) <= t_))                                                     \
            fail_msg("%s = %.10g, want %.10g within %.3g", #got, g_, w_, t_);            \
    } while (0)

/* ---- fixture: a plan compiled, a driver opened -------------------------------- */

typedef struct {
    diag_list d;
    plan *p;
    scan *s;
    compiled *c;
    drv *drv[3];
    const drv_ops *ops;
    char err[ERRLEN];
    float *x;                   /* the last record */
    size_t n;
    char log[64];
    rig_fault faults[1];
} fixture;

static int setup(void **state) {
    fixture *f = calloc(1, sizeof *f);
    if (!f) return -1;
    diag_init(&f->d);
    f->ops = drv_find("sim");
    *state = f;
    return f->ops ? 0 : -1;
}

static int teardown(void **state) {
    fixture *f = *state;
    for (int i = 0; i < 3; i++)
        if (f->drv[i]) f->ops->close(f->drv[i]);
    free(f->x);
    compile_free(f->c);
    scan_free(f->s);
    plan_free(f->p);
    diag_free(&f->d);
    if (f->log[0]) unlink(f->log);
    free(f);
    return 0;
}

static const compiled *compile_text(fixture *f, const char *text) {
    f->p = plan_read_bytes(PLAN_FILE, text, strlen(text), &f->d);
    if (f->p) f->s = scan_expand(f->p, &f->d);
    if (f->s) f->c = compile_plan(f->p, f->s, &f->d);
    for (size_t i = 0; !f->c && i < f->d.n; i++)
        fprintf(stderr, "%s:%d:%d: %s\n", f->d.items[i].file, f->d.items[i].line,
                f->d.items[i].col, f->d.items[i].message);
    assert_non_null(f->c);
    return f->c;
}

static const compiled *compile_magnet(fixture *f, const char *signal_per_field) {
    char text[4096];
    snprintf(text, sizeof text, PLAN_MAGNET, signal_per_field);
    return compile_text(f, text);
}

static drv *open_sim(fixture *f, int slot, uint64_t seed, bool virtual_time, const char *log) {
    drv_context ctx = {&f->p->rig, f->c, seed, virtual_time, log};
    assert_int_equal(f->ops->open(&ctx, &f->drv[slot], f->err, ERRLEN), 0);
    return f->drv[slot];
}

static double shot_start(const compiled *c, uint32_t shot) { return T0 + c->shot_start[shot - 1]; }

/* Every segment and line edge of the shot's timeline. */
static int load_shot(fixture *f, drv *d, uint32_t shot, uint32_t attempt) {
    const compile_timeline *tl = compile_shot_timeline(f->c, shot);
    double t0 = shot_start(f->c, shot);
    int rc = f->ops->begin_shot(d, shot, attempt, tl, t0, f->err, ERRLEN);
    for (size_t k = 0; rc == 0 && k < tl->nevents; k++) {
        const compile_event *e = &tl->events[k];
        drv_segment s = {e->channel, t0 + e->start, e->length, e->from, e->to, NULL, 0};
        if (e->kind == EV_PULSE) {
            const compile_pulse *pu = &tl->pulses[e->index];
            s.pulse = &pu->shape_at_sample;
            s.peak = pu->current * compile_pulse_polarity(f->c, shot, pu);
            s.from = s.to = 0;
        }
        if (e->kind == EV_RAMP || e->kind == EV_PULSE)
            rc = f->ops->load_segment(d, &s, f->err, ERRLEN);
        else if (e->kind == EV_LINE)
            rc = f->ops->set_line(d, e->channel, e->to != 0, t0 + e->start, f->err, ERRLEN);
    }
    return rc;
}

static const compile_event *first_acquire(const compile_timeline *tl) {
    for (size_t k = 0; k < tl->nevents; k++)
        if (tl->events[k].kind == EV_ACQUIRE) return &tl->events[k];
    return NULL;
}

/* Start the shot's first acquisition and read it to its end in chunks. */
static int acquire(fixture *f, drv *d, uint32_t shot, uint32_t attempt) {
    const compile_timeline *tl = compile_shot_timeline(f->c, shot);
    const compile_event *e = first_acquire(tl);
    assert_non_null(e);
    const compile_acquire *ca = &tl->acquisitions[e->index];
    size_t n = (size_t)llround(ca->length * ca->rate);
    drv_acquisition a = {ca->ninputs, ca->inputs, ca->rate, shot_start(f->c, shot) + e->start,
                         n, shot, attempt};
    free(f->x);
    f->x = calloc(n * ca->ninputs + 1, sizeof *f->x);
    f->n = 0;
    int fd, rc = f->ops->start_acquisition(d, &a, &fd, f->err, ERRLEN);
    bool done = false;
    for (int guard = 0; rc == 0 && !done && guard < 100000; guard++) {
        size_t got = 0, room = n * ca->ninputs - f->n;
        rc = f->ops->read_samples(d, f->x + f->n, room < 4096 ? room : 4096, &got, &done,
                                  f->err, ERRLEN);
        f->n += got;
    }
    if (rc == 0) {
        struct pollfd p = {fd, POLLIN, 0};
        assert_int_equal(poll(&p, 1, 0), 0);    /* read out: the watcher rests */
        assert_int_equal(f->n, n * ca->ninputs);
    }
    f->ops->stop_acquisition(d);
    return rc;
}

static void run_shot(fixture *f, drv *d, uint32_t shot, uint32_t attempt) {
    if (load_shot(f, d, shot, attempt) || acquire(f, d, shot, attempt))
        fail_msg("shot %u attempt %u: %s", shot, attempt, f->err);
}

/* ---- the physics, written out independently ------------------------------------ */

static double coil_current(const compiled *c, const compile_timeline *tl, int coil, double t) {
    return compile_current_at(c, tl, coil, t);
}

/* |B| at the sample with the true calibration, from the compiled currents. */
static double sample_field(const compiled *c, const compile_timeline *tl, double t) {
    double bz = SAMPLE_RESIDUAL_Z + TRUE_SAMPLE_MAIN * coil_current(c, tl, MAIN, t) +
                TRUE_SAMPLE_BIAS * coil_current(c, tl, BIAS, t) +
                prepol_per_current() * coil_current(c, tl, PREPOL, t);
    double bx = TIP_PER_CURRENT * coil_current(c, tl, TIP, t);
    return hypot(bx, bz);
}

static double sensor_field(const compiled *c, const compile_timeline *tl, double t) {
    double bz = 0.4e-9 + TRUE_SENSOR_MAIN * coil_current(c, tl, MAIN, t) +
                TRUE_SENSOR_BIAS * coil_current(c, tl, BIAS, t);
    return sqrt(0.3e-9 * 0.3e-9 + 0.1e-9 * 0.1e-9 + bz * bz);
}

static double response(double f, double f_res) {
    double x = (f - f_res) / DETECTOR_BANDWIDTH;
    return 1 / sqrt(1 + x * x);
}

/* source: the longitudinal Bloch equation dP/dt = (B - P)/T1 (Bloch, Phys.
 * Rev. 70, 460 (1946)), solved exactly for B linear in t over each stretch
 * between the timeline's events. */
static double relax_linear(double p, double ba, double bb, double t1, double dt) {
    double k = (bb - ba) / dt, e = exp(-dt / t1);
    return bb - k * t1 + (p - ba + k * t1) * e;
}

static int cmp_double(const void *a, const void *b) {
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y ? 1 : 0;
}

/* P carried from t_from to t_to: in the magnet until stay_end at t1_stay,
 * then in the coils' field at t1_low. */
static double evolve(const compiled *c, const compile_timeline *tl, double p, double t_from,
                     double t_to, double stay_end, double t1_stay, double t1_low) {
    double edge[256];
    size_t n = 0;
    edge[n++] = stay_end;
    edge[n++] = t_to;
    for (size_t k = 0; k < tl->nevents && n < 250; k++) {
        edge[n++] = tl->events[k].start;
        edge[n++] = tl->events[k].start + tl->events[k].length;
    }
    qsort(edge, n, sizeof *edge, cmp_double);
    double t = t_from;
    for (size_t i = 0; i < n && t < t_to; i++) {
        double b = fmin(edge[i], t_to);
        if (b <= t) continue;
        if (b <= stay_end)
            p = relax_linear(p, HALBACH, HALBACH, t1_stay, b - t);
        else
            p = relax_linear(p, sample_field(c, tl, t), sample_field(c, tl, b), t1_low, b - t);
        t = b;
    }
    return p;
}

/* P at t_end, from 0 at the shot's start. */
static double expected_polarization(const compiled *c, const compile_timeline *tl,
                                    double stay_end, double t1_stay, double t1_low,
                                    double t_end) {
    return evolve(c, tl, 0, 0, t_end, stay_end, t1_stay, t1_low);
}

static const compile_event *pulse_event(const compile_timeline *tl) {
    for (size_t k = 0; k < tl->nevents; k++)
        if (tl->events[k].kind == EV_PULSE) return &tl->events[k];
    return NULL;
}

/* White noise over the Nyquist band and quantization, per sample. */
static double noise_sigma(double rate) {
    double q = VOLTS_PER_COUNT * FIELD_PER_VOLT;
    return sqrt(NOISE_DENSITY * NOISE_DENSITY * rate / 2 + q * q / 12);
}

/* Weighted least squares of x on decaying lines at freqs (cos and sin each)
 * and the mains harmonics (not decaying): the cos amplitudes and their
 * standard deviations from the known noise. t_first: the first sample's time
 * from the pulse's end. */
static void fit_lines(const float *x, size_t n, double rate, double t_first, const double *freqs,
                      size_t nf, double t2, double *amp, double *sd) {
    size_t np = 2 * nf + 2 * HARMONICS;
    gsl_matrix *X = gsl_matrix_alloc(n, np), *cov = gsl_matrix_alloc(np, np);
    gsl_vector *y = gsl_vector_alloc(n), *w = gsl_vector_alloc(n), *c = gsl_vector_alloc(np);
    gsl_multifit_linear_workspace *ws = gsl_multifit_linear_alloc(n, np);
    double sigma = noise_sigma(rate), chisq;
    for (size_t k = 0; k < n; k++) {
        double t = t_first + (double)k / rate, decay = exp(-t / t2);
        for (size_t j = 0; j < nf; j++) {
            gsl_matrix_set(X, k, 2 * j, decay * cos(2 * M_PI * freqs[j] * t));
            gsl_matrix_set(X, k, 2 * j + 1, decay * sin(2 * M_PI * freqs[j] * t));
        }
        for (size_t h = 0; h < HARMONICS; h++) {
            gsl_matrix_set(X, k, 2 * nf + 2 * h, cos(2 * M_PI * MAINS * (double)(h + 1) * t));
            gsl_matrix_set(X, k, 2 * nf + 2 * h + 1, sin(2 * M_PI * MAINS * (double)(h + 1) * t));
        }
        gsl_vector_set(y, k, x[k]);
        gsl_vector_set(w, k, 1 / (sigma * sigma));
    }
    gsl_multifit_wlinear(X, w, y, c, cov, &chisq, ws);
    for (size_t j = 0; j < nf; j++) {
        amp[j] = gsl_vector_get(c, 2 * j);
        sd[j] = sqrt(gsl_matrix_get(cov, 2 * j, 2 * j));
    }
    gsl_multifit_linear_free(ws);
    gsl_vector_free(c);
    gsl_vector_free(w);
    gsl_vector_free(y);
    gsl_matrix_free(cov);
    gsl_matrix_free(X);
}

/* The frequency from upward zero crossings, with a Schmitt trigger of
 * +-h against noise, over the first `span` seconds. */
static double crossing_frequency(const float *x, size_t n, double rate, double span, double h) {
    size_t last = (size_t)(span * rate);
    double first_t = NAN, last_t = NAN;
    int state = x[0] > 0 ? 1 : -1;
    size_t count = 0;
    double zero = NAN;
    for (size_t k = 1; k < n && k < last; k++) {
        if (x[k - 1] <= 0 && x[k] > 0)
            zero = ((double)k - 1 + x[k - 1] / (x[k - 1] - x[k])) / rate;
        if (state < 0 && x[k] > h && !isnan(zero)) {
            state = 1;
            if (isnan(first_t)) first_t = zero;
            last_t = zero;
            count++;
        } else if (state > 0 && x[k] < -h) {
            state = -1;
        }
    }
    return count > 1 ? (double)(count - 1) / (last_t - first_t) : NAN;
}

/* ---- the signal ------------------------------------------------------------------ */

static double curie_signal_per_field(void) {
    /* source: Abragam, The Principles of Nuclear Magnetism, ch. II (Curie
     * law M0 = N gamma^2 hbar^2 I(I+1) B / (3 k T)), and the field on the
     * axis of a small magnetized sphere, B = mu0 2 M V / (4 pi r^3). */
    double m = 6.6e28 * GAMMA_1H * GAMMA_1H * HBAR * HBAR * 0.75 / (3 * KB * 295);
    return MU0 * 2 * m * 0.5e-6 / (4 * M_PI * pow(8e-3, 3));
}

static void write_record(const float *x, size_t n, double rate, double t_first, double f,
                         double amplitude, double t2) {
    const char *b = getenv("B") ? getenv("B") : "build";
    char dir[512], path[600];
    snprintf(dir, sizeof dir, "%s/tests", b);
    mkdir(b, 0755);
    mkdir(dir, 0755);
    snprintf(path, sizeof path, "%s/sim-signal.json", dir);
    json_t *time = json_array(), *samples = json_array();
    for (size_t k = 0; k < n; k++) {
        json_array_append_new(time, json_real(t_first + (double)k / rate));
        json_array_append_new(samples, json_real(x[k]));
    }
    json_t *doc = json_pack("{s:f, s:f, s:f, s:f, s:f, s:o, s:o}", "rate", rate, "frequency", f,
                            "amplitude", amplitude, "t2", t2, "noise_sigma", noise_sigma(rate),
                            "time", time, "samples", samples);
    assert_non_null(doc);
    assert_int_equal(json_dump_file(doc, path, JSON_COMPACT), 0);
    json_decref(doc);
}

/* What shot `shot` of the Curie plan should give: frequency, amplitude. */
static void curie_expectation(const compiled *c, uint32_t shot, double *f, double *amplitude,
                              double *t_first) {
    const compile_timeline *tl = compile_shot_timeline(c, shot);
    const compile_event *pe = pulse_event(tl), *ae = first_acquire(tl);
    double t_end = pe->start + pe->length;
    double p = expected_polarization(c, tl, 0, 1.0, 1.0, t_end);
    /* About the build-up 45 mT (1 - exp(-2 s / 1 s)), less what relaxes in the
     * 20 ms off ramp and the field step before the pulse. */
    assert_true(p > 0.8 * prepol_per_current() * 6 * (1 - exp(-2.0)) * exp(-0.07));
    *f = GAMMA_1H * sample_field(c, tl, ae->start) / (2 * M_PI);
    double f_res = DETECTOR_HZ_PER_T * sensor_field(c, tl, ae->start);
    *amplitude = compile_pulse_polarity(c, shot, &tl->pulses[0]) * curie_signal_per_field() * p *
                 sin(tl->pulses[0].angles[0]) * response(*f, f_res);
    *t_first = ae->start - t_end;
}

static void test_signal_has_the_true_frequency_and_the_curie_law_amplitude(void **state) {
    fixture *f = *state;
    const compiled *c = compile_text(f, PLAN_CURIE);
    drv *d = open_sim(f, 0, 42, true, NULL);
    run_shot(f, d, 1, 1);
    double freq, amplitude, t_first;
    curie_expectation(c, 1, &freq, &amplitude, &t_first);
    double rate = 10e3, amp, sd;
    fit_lines(f->x, f->n, rate, t_first, &freq, 1, 0.5, &amp, &sd);
    assert_near(amp, amplitude, 3 * sd);
    assert_true(amplitude > 10e-12 && amplitude < 40e-12);   /* order 10 pT, as the trade says */
    /* The true calibration (151.2 uT/A, not the nominal 150) sets the line. */
    double nominal = GAMMA_1H * 20e-6 / (2 * M_PI);
    assert_true(fabs(freq - nominal) > 5);
    assert_near(crossing_frequency(f->x, f->n, rate, 0.3, 3 * noise_sigma(rate)), freq, 0.3);
    write_record(f->x, f->n, rate, t_first, freq, amplitude, 0.5);
}

static void test_alternate_pulse_flips_the_recorded_sign(void **state) {
    fixture *f = *state;
    const compiled *c = compile_text(f, PLAN_CURIE);
    drv *d = open_sim(f, 0, 42, true, NULL);
    run_shot(f, d, 1, 1);
    run_shot(f, d, 2, 1);
    double freq, amplitude, t_first, amp, sd;
    curie_expectation(c, 2, &freq, &amplitude, &t_first);
    assert_true(amplitude < 0);
    fit_lines(f->x, f->n, 10e3, t_first, &freq, 1, 0.5, &amp, &sd);
    assert_near(amp, amplitude, 3 * sd);
}

static double table_t1_at_halbach(void) {
    /* log-log interpolation between [100 mT, 1.5 s] and [2 T, 2.5 s] */
    double x = log(HALBACH / 0.1) / log(2.0 / 0.1);
    return exp(log(1.5) + x * log(2.5 / 1.5));
}

static void test_magnet_stay_polarizes_and_signal_per_field_scales(void **state) {
    fixture *f = *state;
    const compiled *c = compile_magnet(f, "8e-12");
    drv *d = open_sim(f, 0, 7, true, NULL);
    run_shot(f, d, 1, 1);
    const compile_timeline *tl = compile_shot_timeline(c, 1);
    const compile_event *pe = pulse_event(tl), *ae = first_acquire(tl);
    double t_end = pe->start + pe->length;
    /* In the magnet for the first step; below 50 uT the table's first row. */
    double p = expected_polarization(c, tl, tl->steps[0].length, table_t1_at_halbach(), 0.8, t_end);
    double freq = GAMMA_1H * sample_field(c, tl, ae->start) / (2 * M_PI);
    double f_res = DETECTOR_HZ_PER_T * sensor_field(c, tl, ae->start);
    double amplitude = 8e-12 * p * sin(tl->pulses[0].angles[0]) * response(freq, f_res);
    double amp, sd;
    fit_lines(f->x, f->n, 10e3, ae->start - t_end, &freq, 1, 0.6, &amp, &sd);
    assert_near(amp, amplitude, 3 * sd);
}

/* Weak coupling: each proton split by J to the carbon (a doublet); the
 * carbon split by three equivalent protons (a 1:3:3:1 quartet). */
static void test_coupled_spins_give_first_order_multiplets(void **state) {
    fixture *f = *state;
    const compiled *c = compile_text(f, PLAN_MULTIPLET);
    drv *d = open_sim(f, 0, 3, true, NULL);
    run_shot(f, d, 1, 1);
    const compile_timeline *tl = compile_shot_timeline(c, 1);
    const compile_event *pe = pulse_event(tl), *ae = first_acquire(tl);
    double t_end = pe->start + pe->length, j = 128;
    double p = expected_polarization(c, tl, tl->steps[0].length, 3.0, 3.0, t_end);
    double b = sample_field(c, tl, ae->start);
    double fh = GAMMA_1H * b / (2 * M_PI), fc = GAMMA_13C * b / (2 * M_PI);
    double f_res = DETECTOR_HZ_PER_T * sensor_field(c, tl, ae->start);
    double ah = 2e-11 * p * sin(tl->pulses[0].angles[0]);
    double ac = 2e-11 * p * sin(tl->pulses[0].angles[1]);
    double freqs[6] = {fh - j / 2, fh + j / 2, fc - 1.5 * j, fc - j / 2, fc + j / 2, fc + 1.5 * j};
    double share[6] = {ah / 2, ah / 2, ac / 8, 3 * ac / 8, 3 * ac / 8, ac / 8};
    double amp[6], sd[6];
    fit_lines(f->x, f->n, 5e3, ae->start - t_end, freqs, 6, 0.8, amp, sd);
    for (int i = 0; i < 6; i++) {
        double want = share[i] * response(freqs[i], f_res);
        assert_true(want > 5 * sd[i]);
        assert_near(amp[i], want, 3 * sd[i]);
    }
}

/* Inversion recovery: the first pulse leaves P cos(theta1), which relaxes
 * until the second pulse reads it, with the opposite sign. */
static void test_an_earlier_pulse_tips_the_polarization_left_for_the_next(void **state) {
    fixture *f = *state;
    const compiled *c = compile_text(f,
        "version: 1\n"
        "rig: rigs/sim-bench.yaml\n"
        "sample:\n"
        "  nuclei: [1H]\n"
        "  model: {t1: 1 s, t2: 0.5 s, signal_per_field: 1e-10}\n"
        "shot:\n"
        "  - polarize: {coil: prepol, current: 6 A, for: 2 s, off: 20 ms}\n"
        "  - field:    {sample: 20 uT, sensor: tune, settle: 10 ms}\n"
        "  - pulse:    {coil: tip, angle: 150 deg}\n"
        "  - wait:     {for: 200 ms}\n"
        "  - pulse:    {coil: tip, angle: 90 deg}\n"
        "  - acquire:  {for: 1 s, rate: 10 kHz}\n");
    drv *d = open_sim(f, 0, 11, true, NULL);
    run_shot(f, d, 1, 1);
    const compile_timeline *tl = compile_shot_timeline(c, 1);
    const compile_event *ae = first_acquire(tl), *p1 = NULL, *p2 = NULL;
    for (size_t k = 0; k < tl->nevents; k++)
        if (tl->events[k].kind == EV_PULSE) {
            if (p1) p2 = &tl->events[k];
            else p1 = &tl->events[k];
        }
    assert_non_null(p2);
    double end1 = p1->start + p1->length, end2 = p2->start + p2->length;
    double p = expected_polarization(c, tl, 0, 1, 1, end1) * cos(tl->pulses[0].angles[0]);
    p = evolve(c, tl, p, end1, end2, 0, 1, 1);
    assert_true(p < 0);
    double freq = GAMMA_1H * sample_field(c, tl, ae->start) / (2 * M_PI);
    double f_res = DETECTOR_HZ_PER_T * sensor_field(c, tl, ae->start);
    double amplitude = 1e-10 * p * sin(tl->pulses[1].angles[0]) * response(freq, f_res);
    double amp, sd;
    fit_lines(f->x, f->n, 10e3, ae->start - end2, &freq, 1, 0.5, &amp, &sd);
    assert_near(amp, amplitude, 3 * sd);
}

/* Without a plan (probe) there is no sample: the record is the mains
 * harmonics of 1 pT / k and the white noise. At 10 kS/s a mains period is
 * 200 samples, which the simulated rig works out once and repeats; at
 * 9973 S/s it works out every sample. */
static void test_without_a_sample_the_record_is_mains_and_white_noise(void **state) {
    fixture *f = *state;
    compile_text(f, PLAN_CURIE);
    drv_context ctx = {&f->p->rig, NULL, 8, true, NULL};
    assert_int_equal(f->ops->open(&ctx, &f->drv[0], f->err, ERRLEN), 0);
    const double rates[] = {10e3, 9973};
    for (size_t r = 0; r < 2; r++) {
        int input = 0, fd;
        double rate = rates[r];
        size_t n = 10000;
        drv_acquisition a = {1, &input, rate, 5.0, n, 1, 1};
        float *x = calloc(n, sizeof *x);
        size_t got;
        bool done;
        assert_int_equal(f->ops->start_acquisition(f->drv[0], &a, &fd, f->err, ERRLEN), 0);
        assert_int_equal(f->ops->read_samples(f->drv[0], x, n, &got, &done, f->err, ERRLEN), 0);
        assert_true(done && got == n);
        /* Least squares on cos and sin of each harmonic: x is a float
         * record starting at t = 5 s. */
        double sigma = noise_sigma(rate), sum2 = 0;
        for (int h = 1; h <= HARMONICS; h++) {
            double cc = 0, ss = 0;
            for (size_t k = 0; k < n; k++) {
                double t = 5.0 + (double)k / rate, w = 2 * M_PI * MAINS * h * t;
                cc += x[k] * cos(w);
                ss += x[k] * sin(w);
            }
            double amp = 2 * hypot(cc, ss) / (double)n, sd = sigma * sqrt(2.0 / (double)n);
            assert_near(amp, 1e-12 / h, 4 * sd);
            sum2 += 0.5 * (1e-12 / h) * (1e-12 / h);
        }
        double var = 0;
        for (size_t k = 0; k < n; k++) var += (double)x[k] * x[k];
        assert_near(sqrt(var / (double)n), sqrt(sigma * sigma + sum2), 0.03 * sigma);
        f->ops->stop_acquisition(f->drv[0]);
        free(x);
    }
}

/* The residual's drift: a Wiener process, rms drift_per_hour per sqrt(hour). */
static void test_drift_is_a_random_walk_of_the_given_rms(void **state) {
    fixture *f = *state;
    compile_text(f, PLAN_CURIE);
    double sum1 = 0, sum4 = 0;
    int runs = 2000;
    for (int i = 0; i < runs; i++) {
        sim_env e;
        assert_int_equal(sim_env_init(&e, &f->p->rig, (uint64_t)i), 0);
        sim_env_drift_to(&e, &f->p->rig, 100.0);
        assert_true(e.drift == 0);
        sim_env_drift_to(&e, &f->p->rig, 100.0 + 3600);
        sum1 += e.drift * e.drift;
        sim_env_drift_to(&e, &f->p->rig, 100.0 + 4 * 3600);
        sum4 += e.drift * e.drift;
        sim_env_free(&e);
    }
    assert_near(sqrt(sum1 / runs), 10e-12, 0.6e-12);
    assert_near(sqrt(sum4 / runs), 20e-12, 1.2e-12);
}

/* Every shot of an example plan on a clock far from zero (as
 * CLOCK_MONOTONIC is): each gives its record, and the longer the
 * polarization the larger the line. Edges a rounding apart once stalled the
 * integration of the polarization. */
static void test_every_shot_of_the_buildup_example_gives_its_record(void **state) {
    fixture *f = *state;
    alarm(60);                  /* a stuck integration ends the test run */
    f->p = plan_read_file("plans/buildup.yaml", &f->d);
    assert_non_null(f->p);
    f->s = scan_expand(f->p, &f->d);
    assert_non_null(f->s);
    f->c = compile_plan(f->p, f->s, &f->d);
    assert_non_null(f->c);
    drv *d = open_sim(f, 0, 5, true, NULL);
    double shortest = INFINITY, longest = 0;
    for (uint32_t shot = 1; shot <= f->s->nshots; shot++) {
        const compile_timeline *tl = compile_shot_timeline(f->c, shot);
        const compile_event *pe = pulse_event(tl), *ae = first_acquire(tl);
        double t0 = 123456.789 + f->c->shot_start[shot - 1];
        assert_int_equal(f->ops->begin_shot(d, shot, 1, tl, t0, f->err, ERRLEN), 0);
        for (size_t k = 0; k < tl->nevents; k++) {
            const compile_event *e = &tl->events[k];
            drv_segment s = {e->channel, t0 + e->start, e->length, e->from, e->to, NULL, 0};
            if (e->kind == EV_PULSE) {
                s.pulse = &tl->pulses[e->index].shape_at_sample;
                s.peak = tl->pulses[e->index].current;
                s.from = s.to = 0;
            }
            if (e->kind == EV_RAMP || e->kind == EV_PULSE)
                assert_int_equal(f->ops->load_segment(d, &s, f->err, ERRLEN), 0);
        }
        const compile_acquire *ca = &tl->acquisitions[ae->index];
        size_t n = (size_t)llround(ca->length * ca->rate), got;
        float *x = calloc(n * ca->ninputs, sizeof *x);
        drv_acquisition a = {ca->ninputs, ca->inputs, ca->rate, t0 + ae->start, n, shot, 1};
        int fd;
        bool done;
        assert_int_equal(f->ops->start_acquisition(d, &a, &fd, f->err, ERRLEN), 0);
        assert_int_equal(f->ops->read_samples(d, x, n * ca->ninputs, &got, &done, f->err,
                                              ERRLEN), 0);
        assert_true(done && got == n * ca->ninputs);
        f->ops->stop_acquisition(d);
        double freq = GAMMA_1H * sample_field(f->c, tl, ae->start) / (2 * M_PI), amp, sd;
        fit_lines(x, n, ca->rate, ae->start - pe->start - pe->length, &freq, 1,
                  f->p->sample.t2.value, &amp, &sd);
        free(x);
        double t_pol = tl->values[0];
        if (t_pol < 0.2) shortest = amp;
        if (t_pol > 7) longest = amp;
    }
    alarm(0);
    assert_true(shortest > 0 && longest > 5 * shortest);
}

/* ---- the ADC ----------------------------------------------------------------------- */

static void test_samples_fall_on_the_quantization_step(void **state) {
    fixture *f = *state;
    compile_magnet(f, "8e-12");
    drv *d = open_sim(f, 0, 5, true, NULL);
    double vpc;
    int bits;
    f->ops->input_scale(d, 0, &vpc, &bits);
    assert_int_equal(bits, 16);
    assert_near(vpc, VOLTS_PER_COUNT, 1e-15);
    run_shot(f, d, 1, 1);
    double step = vpc * FIELD_PER_VOLT, smallest = INFINITY;
    for (size_t k = 0; k < f->n; k++) {
        double code = (f->x[k] / FIELD_PER_VOLT + 10) / vpc;
        assert_near(code, round(code), 1e-3);
        if (k && f->x[k] != f->x[k - 1]) smallest = fmin(smallest, fabs(f->x[k] - f->x[k - 1]));
    }
    assert_near(smallest, step, step * 1e-4);
}

/* source: uniform quantization, each input to the nearest code: the error
 * lies within half a step and, for inputs spread evenly over many steps,
 * its rms is step / sqrt(12) (Bennett, "Spectra of quantized signals",
 * Bell Syst. Tech. J. 27, 446 (1948); value from memory). */
static void test_adc_rounds_to_the_nearest_code(void **state) {
    (void)state;
    rig_input in = {.range_lo = -10, .range_hi = 10, .field_per_volt = FIELD_PER_VOLT, .bits = 16};
    double step = VOLTS_PER_COUNT * FIELD_PER_VOLT, sum2 = 0, worst = 0;
    size_t n = 200000;
    for (size_t k = 0; k < n; k++) {
        double field = -3e-9 + 6e-9 * ((double)k + 0.5) / (double)n, e = sim_adc(&in, field) - field;
        worst = fmax(worst, fabs(e));
        sum2 += e * e;
    }
    assert_true(worst <= 0.5 * step * (1 + 1e-9));
    assert_near(sqrt(sum2 / (double)n), step / sqrt(12), 0.01 * step / sqrt(12));
    /* 0.4 of a step above a code goes down to it, 0.6 up to the next */
    double code = -10 + 1000 * VOLTS_PER_COUNT;
    assert_near(sim_adc(&in, (code + 0.4 * VOLTS_PER_COUNT) * FIELD_PER_VOLT), code * FIELD_PER_VOLT,
                1e-6 * step);
    assert_near(sim_adc(&in, (code + 0.6 * VOLTS_PER_COUNT) * FIELD_PER_VOLT),
                (code + VOLTS_PER_COUNT) * FIELD_PER_VOLT, 1e-6 * step);
    /* the top code is range_hi less a step; a field not a number stays one */
    assert_near(sim_adc(&in, 1), (10 - VOLTS_PER_COUNT) * FIELD_PER_VOLT, 1e-6 * step);
    assert_near(sim_adc(&in, -1), -10 * FIELD_PER_VOLT, 1e-6 * step);
    assert_true(isnan(sim_adc(&in, NAN)));
    /* a sensor wired the other way round, and one of 32 bits */
    rig_input neg = in, wide = in;
    neg.field_per_volt = -FIELD_PER_VOLT;
    wide.bits = 32;
    for (int k = -50; k <= 50; k++) {
        double field = 1.37e-11 * k;
        assert_true(fabs(sim_adc(&neg, field) - field) <= 0.5 * step * (1 + 1e-9));
        assert_true(fabs(sim_adc(&wide, field) - field) <= 0.5 * step / 65536 * (1 + 1e-6));
    }
    /* a field_per_volt too small to have a reciprocal still converts */
    rig_input tiny = in;
    tiny.field_per_volt = 1e-310;
    assert_true(sim_adc(&tiny, 0) == 0);
    assert_near(sim_adc(&tiny, 5e-310), 5e-310, 1e-312);     /* 5 V: a code exactly */
}

static void test_adc_clips_at_the_input_range(void **state) {
    fixture *f = *state;
    compile_magnet(f, "3e-8");
    drv *d = open_sim(f, 0, 5, true, NULL);
    run_shot(f, d, 1, 1);
    double top = (10 - VOLTS_PER_COUNT) * FIELD_PER_VOLT, bottom = -10 * FIELD_PER_VOLT;
    size_t at_top = 0, at_bottom = 0;
    for (size_t k = 0; k < f->n; k++) {
        assert_true(f->x[k] <= top * (1 + 1e-6) && f->x[k] >= bottom * (1 + 1e-6));
        at_top += fabs(f->x[k] - top) < 1e-6 * top;
        at_bottom += fabs(f->x[k] - bottom) < 1e-6 * -bottom;
    }
    assert_true(at_top > 100 && at_bottom > 100);
}

/* ---- seeding ------------------------------------------------------------------------- */

static void test_same_seed_same_samples_other_attempt_other_noise(void **state) {
    fixture *f = *state;
    compile_text(f, PLAN_CURIE);
    drv *a = open_sim(f, 0, 99, true, NULL), *b = open_sim(f, 1, 99, true, NULL);
    run_shot(f, a, 1, 1);
    size_t n = f->n;
    float *first = malloc(n * sizeof *first);
    memcpy(first, f->x, n * sizeof *first);
    run_shot(f, b, 1, 1);
    assert_memory_equal(first, f->x, n * sizeof *first);
    run_shot(f, b, 1, 2);
    double diff = 0;
    for (size_t k = 0; k < n; k++) diff += (first[k] - f->x[k]) * (first[k] - f->x[k]);
    /* Two independent noises: the difference has sqrt(2) sigma, not zero. */
    assert_near(sqrt(diff / (double)n), sqrt(2) * noise_sigma(10e3), 0.1 * noise_sigma(10e3));
    drv *other = open_sim(f, 2, 100, true, NULL);
    run_shot(f, other, 1, 1);
    assert_true(memcmp(first, f->x, n * sizeof *first) != 0);
    free(first);
}

/* ---- faults ----------------------------------------------------------------------------- */

static void with_fault(fixture *f, int shot, rig_fault_kind kind) {
    f->faults[0] = (rig_fault){.shot = shot, .kind = kind};
    f->p->rig.faults = f->faults;
    f->p->rig.nfaults = 1;
}

static void test_read_error_fails_the_named_shots_first_attempt(void **state) {
    fixture *f = *state;
    compile_text(f, PLAN_CURIE);
    with_fault(f, 2, FAULT_READ_ERROR);
    drv *d = open_sim(f, 0, 1, true, NULL);
    run_shot(f, d, 1, 1);
    assert_int_equal(load_shot(f, d, 2, 1), 0);
    assert_int_equal(acquire(f, d, 2, 1), -1);
    assert_string_equal(f->err, "simulated read error");
    run_shot(f, d, 2, 2);
}

static void test_overrun_says_samples_were_lost(void **state) {
    fixture *f = *state;
    compile_text(f, PLAN_CURIE);
    with_fault(f, 1, FAULT_OVERRUN);
    drv *d = open_sim(f, 0, 1, true, NULL);
    assert_int_equal(load_shot(f, d, 1, 1), 0);
    assert_int_equal(acquire(f, d, 1, 1), -1);
    assert_string_equal(f->err, "acquisition overrun: samples were lost");
    run_shot(f, d, 1, 2);
}

static void test_device_gone_fails_every_call_from_its_shot_on(void **state) {
    fixture *f = *state;
    compile_text(f, PLAN_CURIE);
    with_fault(f, 2, FAULT_DEVICE_GONE);
    drv *d = open_sim(f, 0, 1, true, NULL);
    run_shot(f, d, 1, 1);
    assert_int_equal(load_shot(f, d, 2, 1), SIM_GONE);
    assert_string_equal(f->err, "device gone");
    bool high;
    f->err[0] = 0;
    assert_int_equal(f->ops->read_line(d, 1, &high, f->err, ERRLEN), SIM_GONE);
    assert_string_equal(f->err, "device gone");
    assert_int_equal(f->ops->set_current(d, MAIN, 0.1, 30, f->err, ERRLEN), SIM_GONE);
    assert_int_equal(f->ops->safe_state(d, 31, f->err, ERRLEN), SIM_GONE);
    assert_int_equal(load_shot(f, d, 1, 2), SIM_GONE);
}

static void test_interlock_fault_flips_the_line_from_the_first_acquisition(void **state) {
    fixture *f = *state;
    compile_text(f, PLAN_CURIE);
    with_fault(f, 1, FAULT_INTERLOCK);
    drv *d = open_sim(f, 0, 1, true, NULL);
    int line = rig_find_line(&f->p->rig, "interlock", 9);
    assert_true(line >= 0);
    bool high = false;
    assert_int_equal(load_shot(f, d, 1, 1), 0);
    assert_int_equal(f->ops->read_line(d, line, &high, f->err, ERRLEN), 0);
    assert_true(high);          /* require: high */
    assert_int_equal(acquire(f, d, 1, 1), 0);
    assert_int_equal(f->ops->read_line(d, line, &high, f->err, ERRLEN), 0);
    assert_false(high);
    assert_int_equal(load_shot(f, d, 2, 1), 0);
    assert_int_equal(f->ops->read_line(d, line, &high, f->err, ERRLEN), 0);
    assert_true(high);
}

/* ---- the DAQ itself -------------------------------------------------------------------- */

static void test_caps_say_what_the_simulated_card_does(void **state) {
    fixture *f = *state;
    compile_text(f, PLAN_CURIE);
    drv *d = open_sim(f, 0, 1, true, NULL);
    drv_caps caps;
    f->ops->caps(d, &caps);
    assert_near(caps.time_resolution, 1e-6, 1e-15);
    assert_near(caps.max_rate, 1e6, 1e-6);
    assert_true(caps.timed_outputs && caps.timed_inputs);
    assert_false(caps.is_hardware);
    assert_int_equal(caps.outputs, 4);
    assert_int_equal(caps.inputs, 1);
    assert_int_equal(caps.lines, 2);
    f->ops->close(d);
    f->p->rig.acts_as_hardware = true;
    d = open_sim(f, 0, 1, true, NULL);
    f->ops->caps(d, &caps);
    assert_true(caps.is_hardware);
}

static void test_history_follows_steps_ramps_and_pulses(void **state) {
    fixture *f = *state;
    const compiled *c = compile_text(f, PLAN_CURIE);
    drv *d = open_sim(f, 0, 1, true, NULL);
    assert_int_equal(f->ops->set_current(d, MAIN, 0.1, 1.0, f->err, ERRLEN), 0);
    drv_segment ramp = {MAIN, 2.0, 0.1, 0.1, 0.3, NULL, 0};
    assert_int_equal(f->ops->load_segment(d, &ramp, f->err, ERRLEN), 0);
    const compile_pulse *pu = &c->timelines[0].pulses[0];
    drv_segment pulse = {TIP, 3.0, pu->length, 0, 0, &pu->shape_at_sample, -pu->current};
    assert_int_equal(f->ops->load_segment(d, &pulse, f->err, ERRLEN), 0);
    assert_near(sim_current_at(d, MAIN, 0.5), 0, 1e-15);
    assert_near(sim_current_at(d, MAIN, 1.5), 0.1, 1e-15);
    assert_near(sim_current_at(d, MAIN, 2.05), 0.2, 1e-12);
    assert_near(sim_current_at(d, MAIN, 2.5), 0.3, 1e-15);
    assert_near(sim_current_at(d, TIP, 3.0 + pu->length / 2), -pu->current, 1e-12);
    assert_near(sim_current_at(d, TIP, 3.0 + pu->length + 1e-6), 0, 1e-15);
}

/* Steady: no change of the current within the window. A ramp that ends
 * where the window starts, its end rounded an ulp past it (0.1 + 0.2), has
 * ended; one that ends a microsecond in has not; a pulse gets no slack but
 * its rounding (an ulp past the window's start). */
static void test_history_is_steady_only_where_nothing_changes(void **state) {
    (void)state;
    sim_segment seg[3] = {
        {.kind = SIM_RAMP, .start = 0.1, .length = 0.2, .from = 0, .to = 0.1},
        {.kind = SIM_PULSE, .start = 1.0, .length = 1e-3, .peak = 1, .until = INFINITY},
        {.kind = SIM_RAMP, .start = 2.0, .length = 0.5, .from = 0.1, .to = 0},
    };
    sim_history h = {0, 3, 3, seg};
    assert_true(0.1 + 0.2 > 0.3);                        /* the rounding itself */
    assert_true(sim_history_steady(&h, 0.3, 0.9));       /* the ramp has ended */
    assert_false(sim_history_steady(&h, 0.3 - 1e-6, 0.9));
    assert_false(sim_history_steady(&h, 0.2, 0.9));      /* within the ramp */
    assert_false(sim_history_steady(&h, 0.5, 1.0005));   /* the pulse starts inside */
    assert_false(sim_history_steady(&h, 1.0005, 1.9));   /* it is still on at the start */
    assert_true(sim_history_steady(&h, 1.0011, 1.99));   /* over before it */
    assert_false(sim_history_steady(&h, 1.001 - 0.5e-9, 1.99));  /* on half a ns more */
    double end = 1.0 + 1e-3;                             /* the pulse's end as summed */
    assert_true(sim_history_steady(&h, end, 1.99));      /* a window opening as it ends */
    assert_true(sim_history_steady(&h, nextafter(end, 0), 1.99));   /* an ulp before */
    assert_false(sim_history_steady(&h, end - 1e-12, 1.99));        /* a picosecond */
    assert_true(sim_history_steady(&h, 1.0011, 2.0));    /* the ramp starts as it closes */
    assert_false(sim_history_steady(&h, 1.0011, 2.0 + 1e-6));
    seg[1].until = 1.0005;                               /* a pulse cut short */
    assert_true(sim_history_steady(&h, 1.0005, 1.9));
}

/* A record in a steady field, without noise, mains or drift, through an
 * input without quantization: sample by sample the sum of the lines,
 * A exp(-t/T2) cos((gamma |B| + 2 pi offset) t), t from the end of the
 * pulse (phase 0 there); before it, nothing. Over a second of 10 kS/s
 * every sample within 1.1e-6 of the lines' summed amplitude: float32's
 * rounding and a phase slip of 1e-6 rad at most (a step off by 1e-7 of
 * itself slips 5e-4 rad by the end, and fails). */
/* One record of three lines at a steady 20 uT (plus residual x and y) into
 * out: drift (T/sqrt(h)) the environment's, moving a coil that reaches no
 * place (an unsteady scene, so the record is made sample by sample) or not. */
static sim_line STEADY_LINES[3] = {{2e-11, 0, GAMMA_1H}, {-1e-11, 7.5, GAMMA_1H},
                                   {5e-12, -3, GAMMA_13C}};

static void steady_record(double start, double t_end, size_t n, double drift, bool moving,
                          float *out) {
    rig_place place = {.name = "sample", .residual = {3e-7, -2e-7, 20e-6}};
    rig_input in = {.name = "sensor", .range_lo = -10, .range_hi = 10, .field_per_volt = 1e-9};
    rig_coil coil = {.name = "elsewhere", .axis = -1};
    plan_rig rig = {.nplaces = 1, .places = &place, .ninputs = 1, .inputs = &in,
                    .ncoils = moving ? 1 : 0, .coils = &coil};
    rig.environment.present = drift > 0;
    rig.environment.drift_per_hour = drift;
    sim_env e;
    assert_int_equal(sim_env_init(&e, &rig, 1), 0);
    sim_segment ramp = {.kind = SIM_RAMP, .start = start + 0.5, .length = 0.1, .from = 0,
                        .to = 1};
    sim_history h = {0, 1, 1, &ramp};
    double current[1];
    sim_scene sc = {.rig = &rig, .sample_place = 0, .sensor_place = -1, .shot_start = NAN,
                    .coils = &h, .scratch = current};
    assert_true(sim_scene_steady(&sc, start, start + 1.0) == !moving);
    sim_signal sig = {3, STEADY_LINES, t_end, 0.3, 0, 0};
    int input = 0;
    drv_acquisition a = {1, &input, 10e3, start, n, 1, 1};
    assert_int_equal(sim_record(&e, &sc, &sig, &a, 7, out), 0);
    sim_env_free(&e);
}

static double steady_worst(double start, double t_end, size_t n, float *out) {
    steady_record(start, t_end, n, 0, false, out);
    double babs = sqrt(3e-7 * 3e-7 + 2e-7 * 2e-7 + 20e-6 * 20e-6), worst = 0;
    for (size_t k = 0; k < n; k++) {
        double t = start + (double)k / 10e3 - t_end, want = 0;
        for (size_t i = 0; t >= 0 && i < 3; i++)
            want += STEADY_LINES[i].amplitude * exp(-t / 0.3) *
                    cos((STEADY_LINES[i].gamma * babs + 2 * M_PI * STEADY_LINES[i].offset) * t);
        worst = fmax(worst, fabs(out[k] - want));
    }
    return worst;
}

static void test_steady_record_is_the_lines_sample_by_sample(void **state) {
    (void)state;
    static float out[10000];
    double tolerance = 3.5e-11 * 1.1e-6;       /* 3.5e-11: the amplitudes summed */
    assert_true(steady_worst(20.0, 20.0 - 0.004, 10000, out) < tolerance);
    /* the window opening before the pulse's end: zeros up to it, and a
     * stretch starting in the middle of a drift step */
    assert_true(steady_worst(20.0, 20.0 + 0.0123, 10000, out) < tolerance);
    for (size_t k = 0; k < 123; k++) assert_true(out[k] == 0);
    assert_true(out[124] != 0);
    /* with the residual drifting (1 nT per sqrt(hour), a hundred times the
     * bench's), stretch by stretch as sample by sample: the same walk, the
     * phase through |B| summed either way */
    static float moving[10000];
    steady_record(20.0, 20.0 - 0.004, 10000, 1e-9, false, out);
    steady_record(20.0, 20.0 - 0.004, 10000, 1e-9, true, moving);
    double worst = 0;
    for (size_t k = 0; k < 10000; k++) worst = fmax(worst, fabs(out[k] - moving[k]));
    assert_true(worst < tolerance);
    assert_true(worst > 0);         /* two ways, not one */
}

static void test_limits_are_checked_again_in_the_driver(void **state) {
    fixture *f = *state;
    compile_text(f, PLAN_CURIE);
    drv *d = open_sim(f, 0, 1, true, NULL);
    drv_segment over = {PREPOL, 1.0, 1.0, 0, 9, NULL, 0};
    assert_int_equal(f->ops->load_segment(d, &over, f->err, ERRLEN), DRV_LIMIT);
    assert_non_null(strstr(f->err, "max_current"));
    drv_segment fast = {MAIN, 1.0, 0.01, 0, 0.2, NULL, 0};    /* 20 A/s > 4 A/s */
    assert_int_equal(f->ops->load_segment(d, &fast, f->err, ERRLEN), DRV_LIMIT);
    assert_non_null(strstr(f->err, "max_slew"));
    assert_int_equal(f->ops->set_current(d, BIAS, 0.05, 1.0, f->err, ERRLEN), DRV_LIMIT);
    int line = rig_find_line(&f->p->rig, "interlock", 9);
    assert_int_equal(f->ops->set_line(d, line, true, 1.0, f->err, ERRLEN), -1);
    assert_non_null(strstr(f->err, "input"));
    int input = 0, fd;
    drv_acquisition a = {1, &input, 2e6, 1.0, 10, 1, 1};
    assert_int_equal(f->ops->start_acquisition(d, &a, &fd, f->err, ERRLEN), -1);
    size_t got;
    bool done;
    float buf[4];
    assert_int_equal(f->ops->read_samples(d, buf, 4, &got, &done, f->err, ERRLEN), -1);
}

static double now(void) {
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

/* Real time: samples come in 10 ms chunks, never before their time. */
static void test_real_time_samples_arrive_at_the_pace_of_a_card(void **state) {
    fixture *f = *state;
    compile_text(f, PLAN_CURIE);
    drv *d = open_sim(f, 0, 1, false, NULL);
    int input = 0, fd;
    double start = now() + 0.02, rate = 1000;
    drv_acquisition a = {1, &input, rate, start, 60, 1, 1};
    assert_int_equal(f->ops->start_acquisition(d, &a, &fd, f->err, ERRLEN), 0);
    float buf[64];
    size_t total = 0, wakeups = 0;
    bool done = false;
    while (!done && now() < start + 1.0) {
        struct pollfd p = {fd, POLLIN, 0};
        assert_true(poll(&p, 1, 500) >= 0);
        wakeups++;
        size_t got;
        assert_int_equal(f->ops->read_samples(d, buf + total, 64 - total, &got, &done, f->err,
                                              ERRLEN), 0);
        total += got;
        double passed = floor((now() - start) * rate) + 1;
        assert_true((double)total <= fmax(passed, 0));
    }
    assert_true(done);
    assert_int_equal(total, 60);
    assert_true(now() >= start + 0.059);
    assert_true(wakeups <= 12);                 /* ~7 chunks: the watcher does not spin */
    f->ops->stop_acquisition(d);
}

static void test_real_time_safe_state_waits_for_the_ramps(void **state) {
    fixture *f = *state;
    compile_text(f, PLAN_CURIE);
    drv *d = open_sim(f, 0, 1, false, NULL);
    double t = now();
    assert_int_equal(f->ops->set_current(d, BIAS, 0.02, t, f->err, ERRLEN), 0);
    assert_int_equal(f->ops->safe_state(d, t, f->err, ERRLEN), 0);
    assert_true(now() >= t + 0.02 - 1e-4);     /* 20 mA at 1 A/s */
}

static char *slurp(const char *path) {
    FILE *fp = fopen(path, "r");
    assert_non_null(fp);
    char *buf = calloc(1, 1 << 20);
    size_t n = fread(buf, 1, (1 << 20) - 1, fp);
    buf[n] = 0;
    fclose(fp);
    return buf;
}

/* The magnet plan's rig opened in virtual time, its commands logged to a
 * fresh file f->log (removed by the teardown). */
static drv *open_logged_magnet(fixture *f) {
    compile_magnet(f, "8e-12");
    snprintf(f->log, sizeof f->log, "/tmp/test_sim_log_XXXXXX");
    int fd = mkstemp(f->log);
    assert_true(fd >= 0);
    close(fd);
    return open_sim(f, 0, 1, true, f->log);
}

static void test_safe_state_ramps_every_coil_to_zero_and_lines_inactive(void **state) {
    fixture *f = *state;
    drv *d = open_logged_magnet(f);
    const plan_rig *rig = &f->p->rig;
    assert_int_equal(load_shot(f, d, 1, 1), 0);
    assert_int_equal(f->ops->set_current(d, PREPOL, 4.0, T0 + 3.05, f->err, ERRLEN), 0);
    double at = T0 + 3.1;       /* the shuttle is out, prepol at 4 A */
    assert_int_equal(f->ops->safe_state(d, at, f->err, ERRLEN), 0);
    char *log = slurp(f->log), *tail = strstr(log, "safe_state");
    assert_non_null(tail);
    assert_non_null(strstr(log, "line shuttle 1"));
    for (size_t c = 0; c < rig->ncoils; c++) {
        char want[128];
        double from = c == PREPOL ? 4.0 : 0.0, length = from / rig->coils[c].max_slew;
        snprintf(want, sizeof want, "%.6f segment %s ramp %.9g 0 %.9g", at, rig->coils[c].name,
                 from, length);
        if (!strstr(tail, want)) fail_msg("no '%s' after safe_state in:\n%s", want, log);
        assert_near(sim_current_at(d, (int)c, at + length), 0, 1e-12);
    }
    assert_near(sim_current_at(d, PREPOL, at + 0.005), 2.0, 1e-9);   /* 400 A/s */
    /* The field step planned after `at` was dropped. */
    assert_near(sim_current_at(d, MAIN, T0 + 3.5), 0, 1e-15);
    for (size_t l = 0; l < rig->nlines; l++) {
        char want[128];
        snprintf(want, sizeof want, "%.6f line %s 0", at, rig->lines[l].name);
        bool output = rig->lines[l].direction == LINE_OUTPUT;
        assert_true(output == (strstr(tail, want) != NULL));
        bool high;
        if (output) {
            assert_int_equal(f->ops->read_line(d, (int)l, &high, f->err, ERRLEN), 0);
            assert_true(high != rig->lines[l].active_high);
        }
    }
    free(log);
}

/* In virtual time a shot's command lines reach the log together, when the
 * next shot begins (or at the safe state, or the close); in real time each
 * as its command is given. */
static void test_command_log_in_virtual_time_is_written_a_shot_at_a_time(void **state) {
    fixture *f = *state;
    drv *d = open_logged_magnet(f);
    assert_int_equal(load_shot(f, d, 1, 1), 0);
    assert_int_equal(f->ops->set_current(d, PREPOL, 1.5, T0 + 3.05, f->err, ERRLEN), 0);
    char *log = slurp(f->log);
    assert_null(strstr(log, "set_current"));        /* held with the rest of shot 1 */
    free(log);
    assert_int_equal(load_shot(f, d, 2, 1), 0);
    log = slurp(f->log);
    assert_non_null(strstr(log, "begin_shot 1 1"));
    assert_non_null(strstr(log, "set_current prepol 1.5"));
    assert_null(strstr(log, "begin_shot 2 1"));
    free(log);
    f->ops->close(d);
    f->drv[0] = NULL;
    log = slurp(f->log);
    const char *second = strstr(log, "begin_shot 2 1");
    assert_non_null(second);
    assert_true(strstr(log, "set_current prepol 1.5") < second);     /* in the order given */
    free(log);
    /* real time: at once */
    assert_int_equal(truncate(f->log, 0), 0);
    d = open_sim(f, 1, 1, false, f->log);
    assert_int_equal(f->ops->begin_shot(d, 1, 1, compile_shot_timeline(f->c, 1),
                                        shot_start(f->c, 1), f->err, ERRLEN), 0);
    log = slurp(f->log);
    assert_non_null(strstr(log, "begin_shot 1 1"));
    free(log);
}

/* ---- the sample's models ------------------------------------------------------------- */

static void test_relaxation_models_follow_their_formulas(void **state) {
    (void)state;
    /* source: Bloembergen, Purcell, Pound, Phys. Rev. 73, 679 (1948) */
    plan_relax_model bpp = {.kind = MODEL_BPP, .tau = 5e-9, .strength = 2e9};
    double w = GAMMA_1H * 0.05, tau = 5e-9;
    double r = 2e9 * (tau / (1 + w * w * tau * tau) + 4 * tau / (1 + 4 * w * w * tau * tau));
    assert_near(sim_relax_time(&bpp, GAMMA_1H, 0.05), 1 / r, 1e-9 / r);
    double rate[] = {2.0}, corner[] = {40e-6};
    plan_relax_model lor = {.kind = MODEL_LORENTZIANS, .base = 0.3, .n = 1, .rate = rate,
                            .corner = corner};
    assert_near(sim_relax_time(&lor, GAMMA_1H, 40e-6), 1 / 1.3, 1e-12);
    double field[] = {1e-6, 1e-4}, time[] = {0.5, 2.0};
    plan_relax_model tab = {.kind = MODEL_TABLE, .n = 2, .field = field, .time = time};
    assert_near(sim_relax_time(&tab, GAMMA_1H, 1e-5), 1.0, 1e-12);   /* geometric midpoint */
    assert_near(sim_relax_time(&tab, GAMMA_1H, 1e-9), 0.5, 1e-15);
    assert_near(sim_relax_time(&tab, GAMMA_1H, 1.0), 2.0, 1e-15);
    plan_relax_model none = {.kind = MODEL_NONE};
    assert_true(isnan(sim_relax_time(&none, GAMMA_1H, 1.0)));
}

static void test_curie_law_gives_the_proton_susceptibility_of_water(void **state) {
    (void)state;
    /* Volume 2 pi r^3 makes the dipole factor 2 V / (4 pi r^3) one, so the
     * result is mu0 M0 / B. Water protons at 298 K: chi ~ 4.0e-9 (common
     * practice, no source; value from memory). */
    plan_sample s = {.spin_density = 6.68e28, .volume = 2 * M_PI * 1e-6, .distance = 1e-2,
                     .temperature = 298};
    double chi = sim_curie_signal_per_field(&s, nuc_find("1H", 2));
    assert_near(chi, 4.0e-9, 0.15e-9);
    s.temperature = 149;        /* 1/T */
    assert_near(sim_curie_signal_per_field(&s, nuc_find("1H", 2)), 2 * chi, 1e-6 * chi);
}

int main(void) {
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
    const struct CMUnitTest tests[] = {
        T(test_signal_has_the_true_frequency_and_the_curie_law_amplitude),
        T(test_alternate_pulse_flips_the_recorded_sign),
        T(test_magnet_stay_polarizes_and_signal_per_field_scales),
        T(test_coupled_spins_give_first_order_multiplets),
        T(test_an_earlier_pulse_tips_the_polarization_left_for_the_next),
        T(test_without_a_sample_the_record_is_mains_and_white_noise),
        T(test_drift_is_a_random_walk_of_the_given_rms),
        T(test_every_shot_of_the_buildup_example_gives_its_record),
        T(test_samples_fall_on_the_quantization_step),
        T(test_adc_rounds_to_the_nearest_code),
        T(test_adc_clips_at_the_input_range),
        T(test_same_seed_same_samples_other_attempt_other_noise),
        T(test_read_error_fails_the_named_shots_first_attempt),
        T(test_overrun_says_samples_were_lost),
        T(test_device_gone_fails_every_call_from_its_shot_on),
        T(test_interlock_fault_flips_the_line_from_the_first_acquisition),
        T(test_caps_say_what_the_simulated_card_does),
        T(test_history_follows_steps_ramps_and_pulses),
        cmocka_unit_test(test_history_is_steady_only_where_nothing_changes),
        cmocka_unit_test(test_steady_record_is_the_lines_sample_by_sample),
        T(test_limits_are_checked_again_in_the_driver),
        T(test_real_time_samples_arrive_at_the_pace_of_a_card),
        T(test_real_time_safe_state_waits_for_the_ramps),
        T(test_safe_state_ramps_every_coil_to_zero_and_lines_inactive),
        T(test_command_log_in_virtual_time_is_written_a_shot_at_a_time),
        cmocka_unit_test(test_relaxation_models_follow_their_formulas),
        cmocka_unit_test(test_curie_law_gives_the_proton_susceptibility_of_water),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
