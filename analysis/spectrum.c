/* spectrum: a record's trace cut to its window (DC removed, receiver sign
 * applied), its spectrum through FFTW with plans kept per length, peaks and
 * the noise rms of a spectrum; and the quick strongest-line estimate of the
 * run's progress line. Not for fitting lines (fit.c) nor for line noise
 * (mains.c).
 *
 * Plans are FFTW_ESTIMATE: FFTW_MEASURE would take ~0.9 s to plan 32768
 * points for 0.04 ms saved a transform. an_find_peaks gives at most 64. */
#include "analysis_internal.h"

#include <fftw3.h>
#include <math.h>
#include <pthread.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>

#define MAX_PLANS 8             /* FFT lengths whose plans are kept */

/* FFTW's planner is not thread-safe (only fftw_execute is): every plan of
 * the analysis is made and destroyed under this lock (an_planner_lock), the
 * one process-wide state here, because the library's state is too. */
static pthread_mutex_t planner_lock = PTHREAD_MUTEX_INITIALIZER;

void an_planner_lock(void) { pthread_mutex_lock(&planner_lock); }
void an_planner_unlock(void) { pthread_mutex_unlock(&planner_lock); }

typedef struct {
    size_t n;
    fftw_plan plan;
} plan_slot;

struct an_work {
    double *y;                  /* the prepared trace */
    size_t ycap;
    double *in;                 /* FFT input and output (fftw_malloc, so every */
    fftw_complex *out;          /* buffer has the alignment the plans assume) */
    size_t fftcap;
    double *spec;               /* the last spectrum: re, then im */
    size_t speccap;
    double *scratch;
    size_t scratchcap;
    plan_slot plans[MAX_PLANS];
    size_t nplans, next;        /* next: the slot to reuse when all are taken */
    an_fit_space *fit;
};

an_work *an_work_new(void) { return calloc(1, sizeof(an_work)); }

void an_work_free(an_work *w) {
    if (!w) return;
    pthread_mutex_lock(&planner_lock);
    for (size_t i = 0; i < w->nplans; i++) fftw_destroy_plan(w->plans[i].plan);
    pthread_mutex_unlock(&planner_lock);
    fftw_free(w->in);
    fftw_free(w->out);
    free(w->y);
    free(w->spec);
    free(w->scratch);
    an_fit_space_free(w->fit);
    free(w);
}

an_fit_space **an_work_fit_space(an_work *w) { return &w->fit; }

/* Grows *buf to at least n doubles (contents not kept). */
static int reserve(double **buf, size_t *cap, size_t n) {
    if (*cap >= n) return 0;
    double *grown = malloc(n * sizeof *grown);
    if (!grown) return -1;
    free(*buf);
    *buf = grown;
    *cap = n;
    return 0;
}

double *an_work_scratch(an_work *w, size_t n) {
    return reserve(&w->scratch, &w->scratchcap, n ? n : 1) ? NULL : w->scratch;
}

/* ---- the trace -------------------------------------------------------------- */

/* The first sample at or after time t from the acquisition's start (t in
 * samples rounded up, with a margin for rounding of t itself). */
static size_t sample_at(double t, double rate, size_t n) {
    double i = ceil(t * rate - 1e-9);
    if (!(i > 0)) return 0;
    return i >= (double)n ? n : (size_t)i;
}

int an_prepare(an_work *w, const float *samples, size_t n, double rate, double t0, int sign,
               double from, double to, an_trace *out) {
    if (!w || !samples || !out || !(rate > 0) || !isfinite(rate)) return -1;
    size_t i0 = sample_at(from, rate, n), i1 = to > 0 ? sample_at(to, rate, n) : n;
    if (i1 < i0 + 16) return -1;
    size_t m = i1 - i0;
    if (reserve(&w->y, &w->ycap, m)) return -1;
    /* four sums side by side: one alone waits on each addition */
    double part[4] = {0, 0, 0, 0};
    size_t i = i0;
    for (; i + 4 <= i1; i += 4)
        for (int j = 0; j < 4; j++) part[j] += samples[i + (size_t)j];
    for (; i < i1; i++) part[0] += samples[i];
    double mean = ((part[0] + part[1]) + (part[2] + part[3])) / (double)m;
    double s = sign < 0 ? -1.0 : 1.0;
    for (i = 0; i < m; i++) w->y[i] = s * ((double)samples[i0 + i] - mean);
    *out = (an_trace){w->y, m, rate, t0 + (double)i0 / rate, mean};
    return 0;
}

/* ---- spectra ------------------------------------------------------------------ */

/* The smallest 2^a 3^b 5^c 7^d >= n: lengths FFTW transforms fast. */
static size_t fast_length(size_t n) {
    for (size_t m = n < 2 ? 2 : n;; m++) {
        size_t r = m;
        while (r % 2 == 0) r /= 2;
        while (r % 3 == 0) r /= 3;
        while (r % 5 == 0) r /= 5;
        while (r % 7 == 0) r /= 7;
        if (r == 1) return m;
    }
}

static int reserve_fft(an_work *w, size_t m) {
    if (w->fftcap >= m) return 0;
    double *in = fftw_malloc(m * sizeof *in);
    fftw_complex *out = fftw_malloc((m / 2 + 1) * sizeof *out);
    if (!in || !out) {
        fftw_free(in);
        fftw_free(out);
        return -1;
    }
    fftw_free(w->in);
    fftw_free(w->out);
    w->in = in;
    w->out = out;
    w->fftcap = m;
    return 0;
}

/* The r2c plan of length m, made once (FFTW_ESTIMATE, which leaves the
 * buffers alone) and kept; later buffers of the same alignment reuse it. */
static fftw_plan plan_for(an_work *w, size_t m) {
    for (size_t i = 0; i < w->nplans; i++)
        if (w->plans[i].n == m) return w->plans[i].plan;
    pthread_mutex_lock(&planner_lock);
    fftw_plan p = fftw_plan_dft_r2c_1d((int)m, w->in, w->out, FFTW_ESTIMATE);
    if (p) {
        size_t slot;
        if (w->nplans < MAX_PLANS) {
            slot = w->nplans++;
        } else {
            slot = w->next++ % MAX_PLANS;
            fftw_destroy_plan(w->plans[slot].plan);
        }
        w->plans[slot] = (plan_slot){m, p};
    }
    pthread_mutex_unlock(&planner_lock);
    return p;
}

int an_spectrum_of(an_work *w, const double *y, size_t n, double rate, double apodization,
                   int zero_fill, an_spectrum *out) {
    if (!w || !y || !out || n < 2 || !(rate > 0)) return -1;
    size_t target = n * (size_t)(zero_fill > 1 ? zero_fill : 1);
    size_t m = fast_length(target), nb = m / 2 + 1;
    if (m > 2147483647u || reserve_fft(w, m) || reserve(&w->spec, &w->speccap, 2 * nb))
        return -1;
    fftw_plan p = plan_for(w, m);
    if (!p) return -1;
    if (apodization != 0) {
        /* exp(-pi LB t) by recurrence, set exactly every 1024 samples */
        double q = exp(-M_PI * apodization / rate), e = 1;
        for (size_t i = 0; i < n; i++, e *= q) {
            if (i % 1024 == 0) e = exp(-M_PI * apodization * (double)i / rate);
            w->in[i] = y[i] * e;
        }
    } else {
        memcpy(w->in, y, n * sizeof *y);
    }
    memset(w->in + n, 0, (m - n) * sizeof *w->in);
    fftw_execute_dft_r2c(p, w->in, w->out);
    double *re = w->spec, *im = w->spec + nb;
    for (size_t k = 0; k < nb; k++) {
        re[k] = w->out[k][0];
        im[k] = w->out[k][1];
    }
    *out = (an_spectrum){nb, rate / (double)m, re, im, 2.0 / (double)n};
    return 0;
}

/* ---- peaks and noise ------------------------------------------------------------ */

static double power(const an_spectrum *s, size_t k) {
    return s->re[k] * s->re[k] + s->im[k] * s->im[k];
}

/* The strongest local maximum above thr2 (power, unscaled) farther than
 * guard from 0 Hz and at least sep from every bin in taken; 0 when none. */
static size_t strongest_left(const an_spectrum *s, double thr2, double sep, double guard,
                             const size_t *taken, size_t ntaken) {
    size_t best = 0;
    double best_p = thr2;
    for (size_t k = 1; k + 1 < s->n; k++) {
        double p = power(s, k);
        if (!(p > best_p) || p <= power(s, k - 1) || p < power(s, k + 1)) continue;
        double f = (double)k * s->df;
        if (f <= guard) continue;
        size_t j = 0;
        while (j < ntaken && taken[j] != k && fabs(f - (double)taken[j] * s->df) >= sep) j++;
        if (j < ntaken) continue;
        best = k;
        best_p = p;
    }
    return best;
}

/* Frequency and height of the peak at bin k, refined by a parabola through
 * the log magnitudes of bins k-1, k, k+1. */
static void refine(const an_spectrum *s, size_t k, double *frequency, double *height) {
    double pm = power(s, k - 1), p0 = power(s, k), pp = power(s, k + 1);
    double delta = 0, l0 = 0.5 * log(p0);
    if (pm > 0 && pp > 0) {
        double lm = 0.5 * log(pm), lp = 0.5 * log(pp), curve = lm - 2 * l0 + lp;
        if (curve < 0) {
            delta = 0.5 * (lm - lp) / curve;
            if (delta > 0.5) delta = 0.5;
            if (delta < -0.5) delta = -0.5;
            l0 -= 0.25 * (lm - lp) * delta;
        }
    }
    *frequency = ((double)k + delta) * s->df;
    *height = s->scale * exp(l0);
}

#define CANDIDATES 256

typedef struct {
    size_t k;
    double p;
} candidate;

static int by_power(const void *a, const void *b) {
    const candidate *x = a, *y = b;
    return (x->p < y->p) - (x->p > y->p);
}

/* The CANDIDATES strongest local maxima above thr2 and farther than guard
 * from 0 Hz, strongest first; *dropped set when there were more. */
static size_t candidates(const an_spectrum *s, double thr2, double guard, candidate *c,
                         bool *dropped) {
    size_t nc = 0, weakest = 0;
    *dropped = false;
    for (size_t k = 1; k + 1 < s->n; k++) {
        double p = power(s, k);
        if (!(p > thr2) || p <= power(s, k - 1) || p < power(s, k + 1) ||
            (double)k * s->df <= guard)
            continue;
        if (nc < CANDIDATES) {
            c[nc++] = (candidate){k, p};
            if (nc == CANDIDATES)
                for (size_t j = 0; j < nc; j++) weakest = c[j].p < c[weakest].p ? j : weakest;
            continue;
        }
        *dropped = true;
        if (p <= c[weakest].p) continue;
        c[weakest] = (candidate){k, p};
        for (size_t j = 0; j < nc; j++) weakest = c[j].p < c[weakest].p ? j : weakest;
    }
    qsort(c, nc, sizeof *c, by_power);
    return nc;
}

size_t an_find_peaks(const an_spectrum *s, double min_height, double min_separation,
                     double guard, size_t max, double *frequency, double *height) {
    if (!s || !s->re || !s->im || s->n < 3 || !frequency || !height) return 0;
    if (max > 64) max = 64;
    double thr = min_height > 0 ? min_height / s->scale : 0;
    size_t taken[64], found = 0;
    candidate c[CANDIDATES];
    bool dropped;
    /* one pass for the strongest local maxima, then strongest first, each
     * clear of those taken */
    size_t nc = candidates(s, thr * thr, guard, c, &dropped);
    for (size_t i = 0; i < nc && found < max; i++) {
        double f = (double)c[i].k * s->df;
        size_t j = 0;
        while (j < found && fabs(f - (double)taken[j] * s->df) >= min_separation) j++;
        if (j == found) taken[found++] = c[i].k;
    }
    /* more local maxima than kept (a line's ragged skirt): passes over the
     * whole spectrum for what is missing */
    while (dropped && found < max) {
        size_t k = strongest_left(s, thr * thr, min_separation, guard, taken, found);
        if (!k) break;
        taken[found++] = k;
    }
    for (size_t i = 0; i < found; i++) refine(s, taken[i], &frequency[i], &height[i]);
    return found;
}

/* Bins [lo, hi] within e Hz of c (hi < lo when none). */
static void band(const an_spectrum *s, double c, double e, long *lo, long *hi) {
    double a = ceil((c - e) / s->df - 1e-9), b = floor((c + e) / s->df + 1e-9);
    if (!isfinite(a) || !isfinite(b)) {
        *lo = 1, *hi = 0;
        return;
    }
    *lo = a < 0 ? 0 : a > (double)s->n ? (long)s->n : (long)a;
    *hi = b < -1 ? -1 : b >= (double)s->n ? (long)s->n - 1 : (long)b;
}

double an_noise_rms(const an_spectrum *s, const double *centre, const double *exclude,
                    size_t ncentres, double exclude_dc) {
    if (!s || !s->re || !s->im || !s->n || (ncentres && (!centre || !exclude))) return NAN;
    long dc_lo, dc_hi;
    band(s, 0, exclude_dc > 0 ? exclude_dc : 0, &dc_lo, &dc_hi);
    long pos = dc_hi + 1, n = (long)s->n;
    double sum = 0;
    size_t count = 0;
    /* walk the bins once, jumping over each excluded band: the next band is
     * the one that has not ended yet and starts first */
    while (pos < n) {
        long next_lo = n, next_hi = n;
        for (size_t j = 0; j < ncentres; j++) {
            long lo, hi;
            band(s, centre[j], exclude[j] > 0 ? exclude[j] : 0, &lo, &hi);
            if (hi < lo || hi < pos) continue;
            if (lo < next_lo || (lo == next_lo && hi > next_hi)) next_lo = lo, next_hi = hi;
        }
        if (next_lo < pos) next_lo = pos;
        for (long k = pos; k < next_lo; k++) sum += power(s, (size_t)k);
        count += (size_t)(next_lo - pos);
        pos = next_hi + 1;
    }
    return count ? s->scale * sqrt(sum / (double)count) : NAN;
}

/* ---- the quick estimate of the progress line ------------------------------------ */

/* f sampled at rate: where it shows, folded about the Nyquist frequency. */
static double folded(double f, double rate) {
    f = fmod(fabs(f), rate);
    return f > 0.5 * rate ? rate - f : f;
}

/* power[k] set to -1 (no candidate, no noise) for the bins near harmonic
 * h = 1 .. AN_QUICK_MAINS_HARMONICS of mains, where it falls once sampled
 * at rate: within skip plus AN_QUICK_MAINS_WANDER * h * mains of it; but
 * not a harmonic whose band holds expect (> 0). None when mains is 0. */
static void mark_mains(const an_spectrum *sp, double rate, double mains, double expect,
                       double skip, double *power) {
    if (!(mains > 0) || !isfinite(mains)) return;
    double x = expect > 0 ? folded(expect, rate) : -1;
    for (int h = 1; h <= AN_QUICK_MAINS_HARMONICS; h++) {
        double f = folded(h * mains, rate), e = skip + AN_QUICK_MAINS_WANDER * h * mains;
        if (fabs(x - f) <= e) continue;
        double lo = ceil((f - e) / sp->df), hi = floor((f + e) / sp->df);
        for (double k = lo < 0 ? 0 : lo; k <= hi && k < (double)sp->n; k++) power[(size_t)k] = -1;
    }
}

/* Into sum[0..3] and *count: power[k] >= 0 for k in [from, to), four sums
 * side by side (one alone waits on each addition). */
static void kept_power(const double *power, size_t from, size_t to, double sum[4],
                       size_t *count) {
    size_t k = from;
    for (; k + 4 <= to; k += 4)
        for (int j = 0; j < 4; j++) {
            double p = power[k + (size_t)j];
            sum[j] += p >= 0 ? p : 0;
            *count += p >= 0;
        }
    for (; k < to; k++) {
        sum[0] += power[k] >= 0 ? power[k] : 0;
        *count += power[k] >= 0;
    }
}

int an_quick_line(an_work *w, const float *samples, size_t n, double rate, int sign,
                  const an_quick_opts *o, an_line *out) {
    an_trace tr;
    an_spectrum sp;
    if (!w || !o || n < 16 || rate <= 0 || an_prepare(w, samples, n, rate, 0, sign, 0, 0, &tr) ||
        an_spectrum_of(w, tr.y, tr.n, tr.rate, 0, 1, &sp))
        return -1;
    double guard = o->guard;
    double *power = an_work_scratch(w, sp.n);
    if (!power) return -1;
    for (size_t k = 0; k < sp.n; k++) power[k] = sp.re[k] * sp.re[k] + sp.im[k] * sp.im[k];
    /* the bins next to a mains harmonic are no candidates and no noise: as
     * far as the resolution smears it, and as far as the mains may wander */
    mark_mains(&sp, rate, o->mains, o->expect,
               fmax(AN_QUICK_MAINS_HZ, AN_QUICK_MAINS_BINS * sp.df), power);
    double best = -1;
    size_t peak = 0;
    for (size_t k = 1; k < sp.n; k++)
        if (power[k] > best) {
            best = power[k];
            peak = k;
        }
    if (!peak) return -1;       /* no line */
    /* the noise: every kept bin above guard and farther than guard from the
     * line, i.e. [lo, a) and [b, n) */
    double fp = (double)peak * sp.df;
    size_t lo = 1, a = peak, b = guard >= 0 ? peak + 1 : peak;
    while (lo < sp.n && (double)lo * sp.df <= guard) lo++;
    while (a > lo && fabs((double)(a - 1) * sp.df - fp) <= guard) a--;
    while (b < sp.n && fabs((double)b * sp.df - fp) <= guard) b++;
    if (a < lo) a = lo;
    if (b < lo) b = lo;
    double part[4] = {0, 0, 0, 0};
    size_t count = 0;
    kept_power(power, lo, a, part, &count);
    kept_power(power, b, sp.n, part, &count);
    if (!count) return -1;      /* no noise to measure it by */
    double sum = (part[0] + part[1]) + (part[2] + part[3]);
    out->frequency = (double)peak * sp.df;
    out->height = sp.scale * sqrt(best);
    out->noise = sp.scale * sqrt(sum / (double)count);
    out->snr = out->noise > 0 ? out->height / out->noise : INFINITY;
    return 0;
}
