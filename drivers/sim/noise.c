/* noise: the simulated rig's environment and ADC, and the record of one
 * acquisition made from the sample's lines (sample.c): the residual field's
 * random walk, mains interference, the detector's white noise, and every
 * input's range, clipping and quantization.
 * Not for the sample's physics (sample.c) nor the DAQ's timing (sim.c).
 *
 * - Drift: a Wiener process of the residual along z at the sample and the
 *   sensor places alike (a uniform field, as from a shield), rms
 *   drift_per_hour per sqrt(hour), from zero at the first shot the driver
 *   sees; seeded from the run only, so it is one walk for the whole run.
 * - Mains: sum over k = 1..harmonics of (mains_field / k) cos(2 pi k f t +
 *   phase_k) at the sensor, t the absolute time, phases seeded from the run.
 * - White noise at the detector's input: Gaussian, sigma = noise x
 *   sqrt(rate / 2) (a density over the Nyquist band), seeded from the run,
 *   the shot and the attempt. Other inputs record a zero field.
 * - ADC: field / field_per_volt, clipped to the range, quantized to codes
 *   0 .. 2^bits - 1 of (range_hi - range_lo) / 2^bits volts each (so the
 *   top code is range_hi less one step, as a card's), back to tesla. */
#include "sim.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <gsl/gsl_randist.h>

/* source: splitmix64's finalizer (Steele, Lea, Flood, "Fast splittable
 * pseudorandom number generators", OOPSLA 2014), constants from memory. */
static uint64_t splitmix(uint64_t z) {
    z += 0x9e3779b97f4a7c15ULL;
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
    return z ^ (z >> 31);
}

uint64_t sim_mix(uint64_t a, uint64_t b, uint64_t c) {
    return splitmix(splitmix(splitmix(a) ^ b) ^ c);
}

/* mt19937 takes a 32-bit seed: fold the 64 bits into it. */
static unsigned long seed32(uint64_t x) { return (unsigned long)((x ^ (x >> 32)) & 0xffffffffULL); }

int sim_env_init(sim_env *e, const plan_rig *rig, uint64_t run_seed) {
    memset(e, 0, sizeof *e);
    e->drift_time = NAN;
    e->drift_rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng *mains = gsl_rng_alloc(gsl_rng_mt19937);
    if (!e->drift_rng || !mains) {
        gsl_rng_free(mains);
        sim_env_free(e);
        return -1;
    }
    gsl_rng_set(e->drift_rng, seed32(sim_mix(run_seed, 0x6472696674ULL, 1)));  /* "drift" */
    gsl_rng_set(mains, seed32(sim_mix(run_seed, 0x6d61696e73ULL, 2)));        /* "mains" */
    if (rig->environment.present && rig->environment.mains > 0 &&
        rig->environment.mains_field != 0) {
        int h = rig->environment.harmonics < 1 ? 1 : rig->environment.harmonics;
        e->harmonics = h > SIM_MAX_HARMONICS ? SIM_MAX_HARMONICS : h;
    }
    for (int k = 0; k < e->harmonics; k++) e->mains_phase[k] = 2 * M_PI * gsl_rng_uniform(mains);
    gsl_rng_free(mains);
    return 0;
}

void sim_env_free(sim_env *e) {
    if (e->drift_rng) gsl_rng_free(e->drift_rng);
    e->drift_rng = NULL;
}

static double drift_rate(const plan_rig *rig) {
    return rig->environment.present ? fabs(rig->environment.drift_per_hour) : 0;
}

void sim_env_drift_to(sim_env *e, const plan_rig *rig, double t) {
    if (isnan(e->drift_time)) {
        e->drift_time = t;
        return;
    }
    if (!(t > e->drift_time)) return;
    double rate = drift_rate(rig);
    if (rate > 0)
        e->drift += gsl_ran_gaussian(e->drift_rng, rate * sqrt((t - e->drift_time) / 3600.0));
    e->drift_time = t;
}

double sim_volts_per_count(const rig_input *in) {
    return (in->range_hi - in->range_lo) / ldexp(1.0, in->bits);
}

double sim_adc(const rig_input *in, double field) {
    if (in->field_per_volt == 0) return field;
    double v = field / in->field_per_volt;
    if (v < in->range_lo) v = in->range_lo;
    if (v > in->range_hi) v = in->range_hi;
    if (in->bits <= 0) return v * in->field_per_volt;
    double step = sim_volts_per_count(in), top = ldexp(1.0, in->bits) - 1;
    double code = floor((v - in->range_lo) / step + 0.5);
    if (code > top) code = top;
    if (code < 0) code = 0;
    return (in->range_lo + code * step) * in->field_per_volt;
}

/* ---- the record -------------------------------------------------------- */

/* The sample's field at the sensor, sample by sample, with the drift
 * walking on. field has a->nsamples entries. */
static int sample_trace(sim_env *e, const sim_scene *sc, const sim_signal *sig,
                        const drv_acquisition *a, double *field) {
    double *phase = calloc(sig->nlines + 1, sizeof *phase);
    if (!phase) return -1;
    double dt = 1 / a->rate, b[3];
    double walk = drift_rate(sc->rig) * sqrt(dt / 3600.0);
    bool steady = sim_scene_steady(sc, a->start, a->start + (double)a->nsamples * dt);
    bool started = false;
    sim_sample_field(sc, a->start, b);
    for (size_t k = 0; k < a->nsamples; k++) {
        double t = a->start + (double)k * dt;
        if (k && walk > 0) e->drift += gsl_ran_gaussian(e->drift_rng, walk);
        if (!steady) sim_sample_field(sc, t, b);
        double bz = b[2] + e->drift, babs = sqrt(b[0] * b[0] + b[1] * b[1] + bz * bz);
        double s = 0;
        if (!isnan(sig->t_end) && t >= sig->t_end) {
            double decay = isinf(sig->t2) ? 1 : exp(-(t - sig->t_end) / sig->t2);
            for (size_t i = 0; i < sig->nlines; i++) {
                const sim_line *l = &sig->lines[i];
                double f = fabs(l->gamma) * babs / (2 * M_PI) + l->offset;
                phase[i] = started ? phase[i] + 2 * M_PI * f * dt : 2 * M_PI * f * (t - sig->t_end);
                s += l->amplitude * decay * cos(phase[i]);
            }
            started = true;
        }
        field[k] = s;
    }
    if (a->nsamples) e->drift_time = a->start + (double)(a->nsamples - 1) * dt;
    free(phase);
    return 0;
}

/* Mains and white noise on top of the trace. */
static int add_environment(const sim_env *e, const plan_rig *rig, const drv_acquisition *a,
                           uint64_t noise_seed, double *field) {
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    if (!r) return -1;
    gsl_rng_set(r, seed32(noise_seed));
    double sigma = rig->detector.present ? rig->detector.noise * sqrt(a->rate / 2) : 0;
    double fm = rig->environment.mains, bm = rig->environment.mains_field;
    for (size_t k = 0; k < a->nsamples; k++) {
        double t = a->start + (double)k / a->rate;
        for (int h = 1; h <= e->harmonics; h++)
            field[k] += bm / h * cos(2 * M_PI * h * fm * t + e->mains_phase[h - 1]);
        if (sigma > 0) field[k] += gsl_ran_gaussian(r, sigma);
    }
    gsl_rng_free(r);
    return 0;
}

/* The input that sees the sample: the detector's, else the first. */
static int signal_input(const plan_rig *rig) {
    if (rig->detector.present && rig->detector.input >= 0) return rig->detector.input;
    return rig->ninputs ? 0 : -1;
}

int sim_record(sim_env *e, const sim_scene *sc, const sim_signal *sig,
               const drv_acquisition *a, uint64_t noise_seed, float *out) {
    const plan_rig *rig = sc->rig;
    int det = signal_input(rig);
    size_t slot = a->ninputs;
    for (size_t i = 0; i < a->ninputs; i++)
        if (a->inputs[i] == det) slot = i;
    double *field = NULL;
    if (slot < a->ninputs) {
        field = malloc((a->nsamples + 1) * sizeof *field);
        if (!field || sample_trace(e, sc, sig, a, field) ||
            add_environment(e, rig, a, noise_seed, field)) {
            free(field);
            return -1;
        }
    } else {
        sim_env_drift_to(e, rig, a->start + (double)a->nsamples / a->rate);
    }
    for (size_t k = 0; k < a->nsamples; k++)
        for (size_t i = 0; i < a->ninputs; i++)
            out[k * a->ninputs + i] =
                (float)sim_adc(&rig->inputs[a->inputs[i]], i == slot ? field[k] : 0);
    free(field);
    return 0;
}
