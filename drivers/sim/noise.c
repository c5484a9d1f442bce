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

/* L'Ecuyer's maximally equidistributed combined Tausworthe generator
 * (GSL's taus2, period 2^88): of GSL's generators of simulation quality
 * the quickest to draw from (a Gaussian by the ziggurat in 8 ns here,
 * against 13 for mt19937) and to seed again, which the noise is for every
 * record. */
#define SIM_RNG gsl_rng_taus2

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

/* GSL's generators take a 32-bit seed: fold the 64 bits into it. */
static unsigned long seed32(uint64_t x) { return (unsigned long)((x ^ (x >> 32)) & 0xffffffffULL); }

int sim_env_init(sim_env *e, const plan_rig *rig, uint64_t run_seed) {
    memset(e, 0, sizeof *e);
    e->drift_time = NAN;
    e->drift_rng = gsl_rng_alloc(SIM_RNG);
    e->noise_rng = gsl_rng_alloc(SIM_RNG);
    gsl_rng *mains = gsl_rng_alloc(SIM_RNG);
    if (!e->drift_rng || !e->noise_rng || !mains) {
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
    if (e->noise_rng) gsl_rng_free(e->noise_rng);
    free(e->field);
    free(e->osc);
    e->drift_rng = e->noise_rng = NULL;
    e->field = NULL;
    e->osc = NULL;
    e->field_cap = e->osc_cap = 0;
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

/* An input's ADC with its constants worked out once: the conversion of
 * every sample is then multiplications, no divisions. */
typedef struct {
    const rig_input *in;
    double step, top, per_volt, per_step;   /* V per code, top code, 1/field_per_volt, 1/step */
    double lo, hi, fpv;                     /* the input's range and field_per_volt */
    bool quick;     /* 1 to 30 bits, a reciprocal: every code an int, no branch a sample */
} adc;

static adc adc_of(const rig_input *in) {
    double step = sim_volts_per_count(in);
    double per_volt = in->field_per_volt != 0 ? 1 / in->field_per_volt : 0;
    return (adc){in, step, ldexp(1.0, in->bits) - 1, per_volt, 1 / step, in->range_lo,
                 in->range_hi, in->field_per_volt,
                 in->field_per_volt != 0 && isfinite(per_volt) && in->bits > 0 && in->bits <= 30};
}

/* A field that is not a number stays one (a fault of the model shows, and
 * is never quantized into a plausible code). */
static inline double adc_convert(const adc *c, double field) {
    if (c->quick) {     /* the same steps as below, as selections the loop can run through */
        double v = field * c->per_volt;
        v = v < c->lo ? c->lo : v;
        v = v > c->hi ? c->hi : v;
        v = isnan(v) ? c->lo : v;       /* set aside: no NaN is converted to an int */
        double code = (double)(int32_t)((v - c->lo) * c->per_step + 0.5);
        code = code > c->top ? c->top : code;
        double r = (c->lo + code * c->step) * c->fpv;
        return isnan(field) ? field : r;
    }
    const rig_input *in = c->in;
    if (in->field_per_volt == 0 || isnan(field)) return field;
    /* the reciprocal, unless field_per_volt is so small it has none */
    double v = isfinite(c->per_volt) ? field * c->per_volt : field / in->field_per_volt;
    if (v < in->range_lo) v = in->range_lo;
    if (v > in->range_hi) v = in->range_hi;
    if (in->bits <= 0) return v * in->field_per_volt;
    /* v >= range_lo: truncation is floor here, and a cheap one */
    double code = (double)(int64_t)((v - in->range_lo) * c->per_step + 0.5);
    if (code > c->top) code = c->top;
    return (in->range_lo + code * c->step) * in->field_per_volt;
}

double sim_adc(const rig_input *in, double field) {
    adc c = adc_of(in);
    return adc_convert(&c, field);
}

/* ---- the record -------------------------------------------------------- */

/* Oscillators turn by rotations between exact points: every SYNC-th sample
 * their cos and sin come from the phase itself again, so the rounding of
 * the rotations never outgrows SYNC of them (about 1e-13 of the amplitude). */
#define SYNC 1024
/* Below this |step - reference step| (rad) the rotation by the difference is
 * its Taylor series to the third order (error below 1e-17); above it, the
 * reference step moves to the step. */
#define SMALL_STEP 1e-4

static void osc_at(sim_osc *o, double phase) {
    o->c = cos(phase);
    o->s = sin(phase);
}

static void osc_reference(sim_osc *o, double step) {
    o->d0 = step;
    o->cd0 = cos(step);
    o->sd0 = sin(step);
}

static void osc_turn(sim_osc *o, double cr, double sr) {
    double c = o->c * cr - o->s * sr;
    o->s = o->s * cr + o->c * sr;
    o->c = c;
}

/* On by step (rad): the reference step's rotation and the rest's. */
static void osc_rotate(sim_osc *o, double step) {
    double e = step - o->d0;
    if (fabs(e) > SMALL_STEP) {
        osc_reference(o, step);
        e = 0;
    }
    double e2 = e * e, ce = 1 - 0.5 * e2, se = e * (1 - e2 * (1.0 / 6));
    osc_turn(o, o->cd0 * ce - o->sd0 * se, o->sd0 * ce + o->cd0 * se);
}

static int reserve_field(sim_env *e, size_t n) {
    if (n <= e->field_cap) return 0;
    double *g = realloc(e->field, n * sizeof *g);
    if (!g) return -1;
    e->field = g;
    e->field_cap = n;
    return 0;
}

static int reserve_osc(sim_env *e, size_t n) {
    if (n <= e->osc_cap) return 0;
    sim_osc *g = realloc(e->osc, n * sizeof *g);
    if (!g) return -1;
    e->osc = g;
    e->osc_cap = n;
    return 0;
}

/* The lines at one sample, |B| = babs: each phase summed step by step,
 * 2 pi f dt with f = |gamma| |B| / 2 pi + offset (2 pi f since_end at the
 * first sample), its cos by rotation or, at a sync, from the phase. */
static double lines_at(const sim_signal *sig, sim_osc *osc, double babs, double since_end,
                       bool first, bool sync, double decay) {
    double s = 0;
    for (size_t i = 0; i < sig->nlines; i++) {
        sim_osc *o = &osc[i];
        double step = o->per_field * babs + o->step0;
        if (first) {
            const sim_line *l = &sig->lines[i];
            o->phase = (fabs(l->gamma) * babs + 2 * M_PI * l->offset) * since_end;
            osc_at(o, o->phase);
            osc_reference(o, step);
        } else {
            o->phase += step;
            if (sync) osc_at(o, o->phase);
            else osc_rotate(o, step);
        }
        s += sig->lines[i].amplitude * decay * o->c;
    }
    return s;
}

/* The drift walking on: a step every DRIFT_STRIDE samples (of the variance
 * of that many), straight lines between, its value at each sample into
 * drift. A drift of picotesla per hour has nothing to show below a few
 * milliseconds, and one random number per sample cost a third of the
 * simulated rig's time. */
#define DRIFT_STRIDE 64
static void drift_walk(sim_env *e, double walk, size_t n, double *drift) {
    if (n == 0) return;
    drift[0] = e->drift;
    for (size_t a = 0; a + 1 < n;) {
        size_t b = a + DRIFT_STRIDE < n - 1 ? a + DRIFT_STRIDE : n - 1;
        double from = drift[a], to = from;
        if (walk > 0) to += gsl_ran_gaussian_ziggurat(e->drift_rng, walk * sqrt((double)(b - a)));
        double slope = (to - from) / (double)(b - a);
        int steps = (int)(b - a);       /* DRIFT_STRIDE at most: an int converts quickly */
        for (int j = 1; j <= steps; j++) drift[a + (size_t)j] = from + slope * j;
        a = b;
    }
    e->drift = drift[n - 1];
}

/* |B| at the sample: the steady field b with the drift d along z. */
static double field_abs(const double b[3], double d) {
    double bz = b[2] + d;
    return sqrt(b[0] * b[0] + b[1] * b[1] + bz * bz);
}

/* A steady scene: the field at the sample is b throughout but for the
 * drift, a straight line between its steps (drift_walk), picotesla over a
 * record. Each stretch between two steps precesses at its mean |B|: every
 * line set exactly from its summed phase at the stretch's start, then
 * turned by one fixed rotation a sample, its decay folded into the
 * rotation (an error below 1e-6 rad against |B| sample by sample, which
 * cost five times as much). field holds the drift on entry. */
static void steady_trace(const sim_signal *sig, sim_osc *osc, const drv_acquisition *a,
                         const double b[3], double *field) {
    size_t n = a->nsamples, k0 = 0;
    double dt = 1 / a->rate;
    if (isnan(sig->t_end)) k0 = n;
    while (k0 < n && a->start + (double)k0 * dt < sig->t_end) k0++;
    bool decays = !isinf(sig->t2);
    double per_sample = decays ? exp(-dt / sig->t2) : 1;
    double since = a->start + (double)k0 * dt - sig->t_end;
    for (size_t i = 0; k0 < n && i < sig->nlines; i++)
        osc[i].phase = (fabs(sig->lines[i].gamma) * field_abs(b, field[k0]) +
                        2 * M_PI * sig->lines[i].offset) * since;
    for (size_t k = 0; k < k0; k++) field[k] = 0;
    for (size_t from = k0, to; from < n; from = to) {
        to = (from / DRIFT_STRIDE + 1) * DRIFT_STRIDE;
        if (to > n) to = n;
        double babs = 0.5 * (field_abs(b, field[from]) + field_abs(b, field[to - 1]));
        double t = a->start + (double)from * dt;
        double decay = decays ? exp(-(t - sig->t_end) / sig->t2) : 1;
        for (size_t i = 0; i < sig->nlines; i++) {
            sim_osc *o = &osc[i];
            double step = o->per_field * babs + o->step0;
            double amp = sig->lines[i].amplitude * decay;
            double zc = amp * cos(o->phase), zs = amp * sin(o->phase);
            double wc = per_sample * cos(step), ws = per_sample * sin(step);
            for (size_t k = from; k < to; k++) {
                field[k] = i == 0 ? zc : field[k] + zc;
                double c = zc * wc - zs * ws;
                zs = zs * wc + zc * ws;
                zc = c;
            }
            o->phase += (double)(to - from) * step;
        }
        if (sig->nlines == 0)
            for (size_t k = from; k < to; k++) field[k] = 0;
    }
}

/* The sample's field at the sensor, with the drift walking on (e->osc has
 * room for every line). field has a->nsamples entries. While a coil
 * changes, sample by sample: the decay exact at every sync, a product in
 * between. */
static void sample_trace(sim_env *e, const sim_scene *sc, const sim_signal *sig,
                         const drv_acquisition *a, double *field) {
    double dt = 1 / a->rate, b[3];
    /* up to the last sample: a ramp that starts as the window closes (the
     * next rest) changes no sample, and a trace worked out sample by sample
     * costs ten times one worked out once */
    double last = a->start + (double)(a->nsamples ? a->nsamples - 1 : 0) * dt;
    bool steady = sim_scene_steady(sc, a->start, last + 0.5 * dt);
    bool started = false, decays = !isinf(sig->t2);
    double decay = 1, per_sample = decays ? exp(-dt / sig->t2) : 1;
    size_t since_sync = 0;
    for (size_t i = 0; i < sig->nlines; i++)
        e->osc[i] = (sim_osc){.per_field = fabs(sig->lines[i].gamma) * dt,
                              .step0 = 2 * M_PI * sig->lines[i].offset * dt};
    drift_walk(e, drift_rate(sc->rig) * sqrt(dt / 3600.0), a->nsamples, field);
    if (a->nsamples) e->drift_time = last;
    if (steady) {
        sim_sample_field(sc, a->start + SIM_STEADY_SLACK, b);
        steady_trace(sig, e->osc, a, b, field);
        return;
    }
    for (size_t k = 0; k < a->nsamples; k++) {
        double t = a->start + (double)k * dt;
        sim_sample_field(sc, t, b);
        double babs = field_abs(b, field[k]), s = 0;
        if (!isnan(sig->t_end) && t >= sig->t_end) {
            bool sync = !started || ++since_sync == SYNC;
            if (sync) {
                since_sync = 0;
                decay = decays ? exp(-(t - sig->t_end) / sig->t2) : 1;
            } else {
                decay *= per_sample;
            }
            s = lines_at(sig, e->osc, babs, t - sig->t_end, !started, sync, decay);
            started = true;
        }
        field[k] = s;
    }
}

/* n samples of mains from time t0 added into field: each harmonic by
 * rotation, exact at the start of every SYNC samples; the harmonics turn
 * side by side (independent chains of arithmetic, so they overlap in the
 * processor). */
static void mains_run(const sim_env *e, const plan_rig *rig, double t0, double rate, size_t n,
                      double *field) {
    double fm = rig->environment.mains, bm = rig->environment.mains_field;
    double c[SIM_MAX_HARMONICS], s[SIM_MAX_HARMONICS], cr[SIM_MAX_HARMONICS],
        sr[SIM_MAX_HARMONICS], amplitude[SIM_MAX_HARMONICS];
    int nh = e->harmonics;
    for (int h = 0; h < nh; h++) {
        cr[h] = cos(2 * M_PI * (h + 1) * fm / rate);
        sr[h] = sin(2 * M_PI * (h + 1) * fm / rate);
        amplitude[h] = bm / (h + 1);
    }
    for (size_t k0 = 0; nh > 0 && k0 < n; k0 += SYNC) {
        double t = t0 + (double)k0 / rate;
        for (int h = 0; h < nh; h++) {
            c[h] = cos(2 * M_PI * (h + 1) * fm * t + e->mains_phase[h]);
            s[h] = sin(2 * M_PI * (h + 1) * fm * t + e->mains_phase[h]);
        }
        size_t end = n - k0 < SYNC ? n : k0 + SYNC;
        for (size_t k = k0; k < end; k++)
            for (int h = 0; h < nh; h++) {
                field[k] += amplitude[h] * c[h];
                double ch = c[h] * cr[h] - s[h] * sr[h];
                s[h] = s[h] * cr[h] + c[h] * sr[h];
                c[h] = ch;
            }
    }
}

/* Mains on top of the trace. When a mains period is a whole number of
 * samples (10 kS/s at 50 Hz: 200) the mains repeat exactly from one period
 * to the next: the first period is worked out and added again for the rest,
 * a fifth of the work at five harmonics. */
#define MAINS_PERIOD_MAX 2048
static void add_mains(const sim_env *e, const plan_rig *rig, const drv_acquisition *a,
                      double *field) {
    if (e->harmonics <= 0) return;
    double per = a->rate / rig->environment.mains;
    size_t p = per >= 1 && per <= MAINS_PERIOD_MAX ? (size_t)llround(per) : 0;
    if (p == 0 || fabs(per - (double)p) > 1e-9 * per || a->nsamples < 4 * p) {
        mains_run(e, rig, a->start, a->rate, a->nsamples, field);
        return;
    }
    double period[MAINS_PERIOD_MAX];
    memset(period, 0, p * sizeof *period);
    mains_run(e, rig, a->start, a->rate, p, period);
    for (size_t k = 0, j = 0; k < a->nsamples; k++) {
        field[k] += period[j];
        if (++j == p) j = 0;
    }
}

/* Mains and white noise on top of the trace. */
static void add_environment(sim_env *e, const plan_rig *rig, const drv_acquisition *a,
                            uint64_t noise_seed, double *field) {
    add_mains(e, rig, a, field);
    double sigma = rig->detector.present ? rig->detector.noise * sqrt(a->rate / 2) : 0;
    if (!(sigma > 0)) return;
    gsl_rng *r = e->noise_rng;
    gsl_rng_set(r, seed32(noise_seed));
    for (size_t k = 0; k < a->nsamples; k++) field[k] += gsl_ran_gaussian_ziggurat(r, sigma);
}

/* The input that sees the sample: the detector's, else the first. */
static int signal_input(const plan_rig *rig) {
    if (rig->detector.present && rig->detector.input >= 0) return rig->detector.input;
    return rig->ninputs ? 0 : -1;
}

/* The buffers (e->field, e->osc) stay from one record to the next. */
int sim_record(sim_env *e, const sim_scene *sc, const sim_signal *sig,
               const drv_acquisition *a, uint64_t noise_seed, float *out) {
    const plan_rig *rig = sc->rig;
    int det = signal_input(rig);
    size_t slot = a->ninputs;
    for (size_t i = 0; i < a->ninputs; i++)
        if (a->inputs[i] == det) slot = i;
    if (slot < a->ninputs) {
        if (reserve_field(e, a->nsamples + 1) || reserve_osc(e, sig->nlines + 1)) return -1;
        sample_trace(e, sc, sig, a, e->field);
        add_environment(e, rig, a, noise_seed, e->field);
    } else {
        sim_env_drift_to(e, rig, a->start + (double)a->nsamples / a->rate);
    }
    for (size_t i = 0; i < a->ninputs; i++) {
        adc c = adc_of(&rig->inputs[a->inputs[i]]);
        float zero = (float)adc_convert(&c, 0), *o = out + i;
        if (i != slot)
            for (size_t k = 0; k < a->nsamples; k++, o += a->ninputs) *o = zero;
        else
            for (size_t k = 0; k < a->nsamples; k++, o += a->ninputs)
                *o = (float)adc_convert(&c, e->field[k]);
    }
    return 0;
}
