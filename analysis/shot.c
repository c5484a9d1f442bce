/* shot: one record reduced to its lines (window, DC, receiver sign, line
 * noise, spectrum, peaks, starting values, fit, SNR), and the coherent
 * average of the records of one point. Not for reading records (record.c),
 * nor for the spectra and fits themselves (spectrum.c, fit.c), nor for fits
 * across points (series.c).
 *
 * Choices where the specification is silent: the spectrum for peaks and SNR
 * is unapodized and zero filled as the settings say; "a natural bin" is the
 * record's resolution rate / n; a line's band left out of the noise is +-10
 * linewidths but never less than +-10 natural bins (a line narrower than a
 * bin is a bin wide in the spectrum), mains harmonics and 0 Hz get +-10
 * natural bins; a line's height is the largest |spectrum| within one natural
 * bin of its fitted frequency; lines come strongest (largest amplitude)
 * first. min_snr is the test of a peak when it is found, against a noise
 * that skirts do not reach (first_noise), not of the reported SNR (grade).
 * An average keeps the first record's shot, point and parameters. */
#include "analysis_internal.h"

#include <gsl/gsl_statistics_double.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MAX_PEAKS (AN_MAX_LINES + 32)   /* lines, and mains harmonics to skip */
#define PEAK_GUARD 3.0          /* natural bins (rate / n) kept clear of 0 Hz and mains */
#define PEAK_SEPARATION 2.0     /* natural bins between two peaks, at least */
#define NOISE_GUARD 10.0        /* linewidths (at least natural bins) left out of the noise */
#define MEDIAN_BINS 4096        /* bins the first noise estimate looks at */
#define PROMINENCE_REACH 50.0   /* natural bins a peak's surroundings span, at most */
#define LEAKAGE_MARGIN 3.0      /* a weaker peak must beat a stronger one's leakage by this */
#define BROAD_LINE 4.0          /* natural bins: a line at least this wide is resolved */

static int say(char *err, size_t errlen, const char *fmt, ...) {
    if (err && errlen) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(err, errlen, fmt, ap);
        va_end(ap);
    }
    return -1;
}

void an_settings_default(an_settings *s) {
    *s = (an_settings){0, 0, 0, 0, 2, 4, 5};
}

/* ---- starting values --------------------------------------------------------- */

/* sum of y_i exp(-2 pi i f t_i), t_i = i / rate, over [i0, i1). */
static void project(const double *y, size_t i0, size_t i1, double f, double rate, double *re,
                    double *im) {
    double w = 2 * M_PI * f / rate, qc = cos(w), qs = -sin(w), zc = 0, zs = 0, sr = 0, si = 0;
    for (size_t i = i0; i < i1; i++) {
        if ((i - i0) % 256 == 0) zc = cos(w * (double)i), zs = -sin(w * (double)i);
        sr += y[i] * zc;
        si += y[i] * zs;
        double nc = zc * qc - zs * qs;
        zs = zc * qs + zs * qc;
        zc = nc;
    }
    *re = sr;
    *im = si;
}

/* The width at half height of the magnitude peak at f, in Hz; 0 when it
 * does not fall to half within reach (a neighbour, or the record's end). */
static double half_width(const an_spectrum *sp, double f, double height, double reach) {
    size_t k = (size_t)llround(f / sp->df), limit = (size_t)ceil(reach / sp->df);
    if (k >= sp->n) return 0;
    double half = 0.5 * height / sp->scale, edge[2];
    for (int side = 0; side < 2; side++) {
        size_t j = k, steps = 0;
        double prev = hypot(sp->re[k], sp->im[k]), m = prev;
        while (steps++ < limit) {
            if ((side == 0 && j == 0) || (side == 1 && j + 1 >= sp->n)) return 0;
            j = side ? j + 1 : j - 1;
            m = hypot(sp->re[j], sp->im[j]);
            if (m < half) break;
            prev = m;
        }
        if (m >= half) return 0;
        double frac = (prev - half) / (prev - m);
        edge[side] = ((double)j + (side ? -1 : 1) * (1 - frac)) * sp->df;
    }
    return edge[1] - edge[0];
}

/* A line's frequency, amplitude and phase at the fit's t = 0 and linewidth,
 * from a peak: the trace projected on the peak's frequency over each half of
 * the record gives the decay (and so the width of a line narrower than the
 * spectrum resolves), the whole projection the amplitude and phase; a line
 * resolved by the spectrum takes its width from its half height (a
 * Lorentzian's magnitude is sqrt(3) linewidths wide there). */
static an_line_fit start_value(const an_trace *tr, const an_spectrum *sp, double f,
                               double height, double t_start) {
    size_t h = tr->n / 2;
    double r1, i1, r2, i2, res = tr->rate / (double)tr->n;
    project(tr->y, 0, h, f, tr->rate, &r1, &i1);
    project(tr->y, h, 2 * h, f, tr->rate, &r2, &i2);
    double ratio = hypot(r2, i2) / hypot(r1, i1);
    double width = ratio < 1 && ratio > 0 ? -log(ratio) * tr->rate / (M_PI * (double)h) : 0;
    double fwhm = half_width(sp, f, height, 50 * res);
    if (fwhm > BROAD_LINE * res) width = fwhm / sqrt(3.0);
    if (!(width <= 0.25 * tr->rate)) width = 0.25 * tr->rate;
    if (!(width >= 0)) width = 0;
    double re, im;
    project(tr->y, 0, tr->n, f, tr->rate, &re, &im);
    double q = exp(-M_PI * width / tr->rate);
    double sum = width > 0 ? (1 - pow(q, (double)tr->n)) / (1 - q) : (double)tr->n;
    an_line_fit l = {0};
    l.frequency = f;
    l.amplitude = 2 * hypot(re, im) / sum * exp(M_PI * width * t_start);
    l.phase = remainder(atan2(im, re) - 2 * M_PI * f * t_start, 2 * M_PI);
    l.linewidth = width;
    return l;
}

/* ---- peaks ------------------------------------------------------------------------ */

/* rms of |spectrum| for a threshold, from the median power of differences
 * of bins one natural bin (or just over) apart. Noise there is independent
 * (the difference has twice its power), while a line's smooth skirt, which
 * can cover the whole band of a short record, nearly cancels; narrow lines
 * are too few bins to move a median. The power of complex Gaussian noise is
 * exponential, median = mean ln 2. For speed the median is of at most
 * MEDIAN_BINS differences spread evenly (a 2 % estimate). buf holds sp->n
 * values. */
static double first_noise(const an_trace *tr, const an_spectrum *sp, size_t skip, double *buf) {
    size_t lag = (size_t)ceil(tr->rate / (double)tr->n / sp->df - 1e-9);
    if (lag < 1) lag = 1;
    if (skip + lag >= sp->n) return NAN;
    size_t count = sp->n - skip - lag;
    size_t stride = (count + MEDIAN_BINS - 1) / MEDIAN_BINS, m = 0;
    for (size_t k = skip; k + lag < sp->n; k += stride) {
        double dr = sp->re[k + lag] - sp->re[k], di = sp->im[k + lag] - sp->im[k];
        buf[m++] = dr * dr + di * di;
    }
    return sp->scale * sqrt(gsl_stats_median(buf, 1, m) / (2 * M_LN2));
}

static bool on_harmonic(const an_mains *mains, double f, double guard) {
    for (size_t j = 1; j <= mains->nharmonics && mains->fundamental > 0; j++)
        if (fabs(f - (double)j * mains->fundamental) <= guard) return true;
    return false;
}

/* How far the peak at f stands out: its height above the higher of the
 * lowest points between it and a higher bin (or reach Hz) on each side.
 * Noise riding on a strong line's skirt makes local maxima that stand out
 * by about the noise only. */
static double prominence(const an_spectrum *sp, double f, double reach) {
    size_t k = (size_t)llround(f / sp->df), limit = (size_t)ceil(reach / sp->df);
    if (k >= sp->n) return 0;
    double top = hypot(sp->re[k], sp->im[k]), col = 0;
    for (int side = 0; side < 2; side++) {
        double low = top;
        for (size_t j = k, steps = 0; steps < limit; steps++) {
            if (side ? j + 1 >= sp->n : j == 0) break;
            j = side ? j + 1 : j - 1;
            double m = hypot(sp->re[j], sp->im[j]);
            if (m > top) break;
            if (m < low) low = m;
        }
        if (low > col) col = low;
    }
    return (top - col) * sp->scale;
}

/* Whether a peak of height h at f could be the leakage of the stronger
 * peak at f0 of height h0 and half width at half height hw: a record's
 * ends give every line sidelobes of 1 / (pi k) at k natural bins, and a
 * Lorentzian's magnitude falls as (half width) / (distance). Such a peak is
 * left for the search in the residual, where the stronger line is gone. */
static bool in_leakage(double f, double h, double f0, double h0, double hw, double res) {
    double d = fabs(f - f0);
    if (d <= 0) return true;
    return h < LEAKAGE_MARGIN * h0 * fmax(res / (M_PI * d), hw / d);
}

/* Up to max peaks of sp, strongest first, above min_snr times its noise
 * and standing out by as much, on no mains harmonic, clear of the lines
 * already fitted (whose misfit a residual shows) and of the leakage of the
 * stronger peaks taken. */
static size_t peaks_of(const an_trace *tr, const an_spectrum *sp, double *buf,
                       const an_mains *mains, double min_snr, const an_line_fit *lines,
                       size_t nl, size_t max, double *frequency, double *height) {
    double res = tr->rate / (double)tr->n, f[MAX_PEAKS], h[MAX_PEAKS], hw[AN_MAX_LINES];
    double noise = first_noise(tr, sp, (size_t)ceil(PEAK_GUARD * res / sp->df) + 1, buf);
    if (!(noise > 0)) return 0;
    size_t found = an_find_peaks(sp, min_snr * noise, PEAK_SEPARATION * res, PEAK_GUARD * res,
                                 MAX_PEAKS, f, h), kept = 0;
    for (size_t k = 0; k < found && kept < max && kept < AN_MAX_LINES; k++) {
        if (on_harmonic(mains, f[k], PEAK_GUARD * res) ||
            prominence(sp, f[k], PROMINENCE_REACH * res) < min_snr * noise)
            continue;
        size_t j = 0;
        while (j < nl && fabs(f[k] - lines[j].frequency) >
                             fmax(PEAK_SEPARATION * res, fabs(lines[j].linewidth)))
            j++;
        size_t i = 0;
        while (i < kept && !in_leakage(f[k], h[k], frequency[i], height[i], hw[i], res)) i++;
        if (j < nl || i < kept) continue;
        frequency[kept] = f[k];
        height[kept] = h[k];
        hw[kept++] = 0.5 * half_width(sp, f[k], h[k], PROMINENCE_REACH * res);
    }
    return kept;
}

/* ---- SNR ----------------------------------------------------------------------------- */

/* The noise rms away from every line, mains harmonic and 0 Hz. */
static double band_noise(const an_trace *tr, const an_spectrum *sp, const an_mains *mains,
                         const an_line_fit *lines, size_t nl) {
    double res = tr->rate / (double)tr->n, centre[MAX_PEAKS], exclude[MAX_PEAKS];
    size_t nc = 0;
    for (size_t k = 0; k < nl; k++) {
        centre[nc] = lines[k].frequency;
        exclude[nc++] = NOISE_GUARD * fmax(fabs(lines[k].linewidth), res);
    }
    for (size_t j = 1; j <= mains->nharmonics && mains->fundamental > 0 && nc < MAX_PEAKS;
         j++) {
        centre[nc] = (double)j * mains->fundamental;
        exclude[nc++] = NOISE_GUARD * res;
    }
    return an_noise_rms(sp, centre, exclude, nc, NOISE_GUARD * res);
}

/* The largest |spectrum| within one natural bin of f. */
static double height_at(const an_trace *tr, const an_spectrum *sp, double f) {
    double res = tr->rate / (double)tr->n, best = 0;
    double lo = ceil((f - res) / sp->df), hi = floor((f + res) / sp->df);
    for (double k = lo < 0 ? 0 : lo; k <= hi && k < (double)sp->n; k++) {
        size_t i = (size_t)k;
        best = fmax(best, hypot(sp->re[i], sp->im[i]));
    }
    return best * sp->scale;
}

static int by_amplitude(const void *a, const void *b) {
    const an_line_fit *x = a, *y = b;
    return (x->amplitude < y->amplitude) - (x->amplitude > y->amplitude);
}

/* ---- the pipeline ---------------------------------------------------------------------- */

/* Fits the lines in start, dropping the weakest one until the fit converges. */
static size_t fit(an_work *w, const an_trace *tr, double t_start, an_line_fit *start,
                  size_t nl, an_line_fit *out, double *rms) {
    for (; nl > 0; nl--)
        if (an_fit_lines_in(an_work_fit_space(w), tr->y, tr->n, tr->rate, t_start, start, nl,
                            out, rms) == 0)
            return nl;
    return 0;
}

/* The first lines: the peaks that stand out, fitted together. When none
 * does, the spectrum may be all line (a line broad against the record's
 * band leaves no noise beside it to measure): the strongest peak is then
 * fitted on trial, and kept if it stands min_snr above the noise of what
 * the fit leaves. *tried is the first peak's frequency when a fit of it
 * failing is an error, else NAN. buf: n + sp->n values. */
static size_t first_lines(an_work *w, const an_trace *tr, const an_spectrum *sp, double *buf,
                          const an_settings *s, double t_start, an_shot *out, double *tried) {
    an_line_fit start[AN_MAX_LINES];
    double f[AN_MAX_LINES], h[AN_MAX_LINES], res = tr->rate / (double)tr->n;
    *tried = NAN;
    if (!s->max_lines) return 0;
    size_t np = peaks_of(tr, sp, buf, &out->mains, s->min_snr, NULL, 0, s->max_lines, f, h);
    bool trial = !np;
    if (trial && !(np = peaks_of(tr, sp, buf, &out->mains, 0, NULL, 0, 1, f, h))) return 0;
    for (size_t k = 0; k < np; k++) start[k] = start_value(tr, sp, f[k], h[k], t_start);
    size_t nl = fit(w, tr, t_start, start, np, out->lines, &out->rms);
    if (!trial) {
        *tried = f[0];
        return nl;
    }
    an_spectrum rs;
    if (!nl) return 0;
    an_lines_subtract(out->lines, 1, tr->rate, t_start, tr->y, tr->n, buf);
    if (an_spectrum_of(w, buf, tr->n, tr->rate, 0, s->zero_fill, &rs)) return 0;
    double noise = first_noise(tr, &rs, (size_t)ceil(PEAK_GUARD * res / rs.df) + 1, buf + tr->n);
    return h[0] >= s->min_snr * noise ? 1 : 0;
}

/* The first lines, then, while there is room, the strongest peak of what
 * the fit leaves, and all lines fitted again. Returns the lines fitted; sp
 * is left holding the last residual's spectrum. buf: n + sp->n values. */
static size_t find_lines(an_work *w, const an_trace *tr, an_spectrum *sp, double *buf,
                         const an_settings *s, double t_start, an_shot *out, double *tried) {
    an_line_fit start[AN_MAX_LINES], fitted[AN_MAX_LINES];
    double f, h, *resid = buf;
    size_t nl = first_lines(w, tr, sp, buf, s, t_start, out, tried);
    while (nl && nl < s->max_lines) {
        an_lines_subtract(out->lines, nl, tr->rate, t_start, tr->y, tr->n, resid);
        an_trace rt = *tr;
        rt.y = resid;
        if (an_spectrum_of(w, resid, tr->n, tr->rate, 0, s->zero_fill, sp) ||
            !peaks_of(&rt, sp, buf + tr->n, &out->mains, s->min_snr, out->lines, nl, 1, &f, &h))
            break;
        memcpy(start, out->lines, nl * sizeof *start);
        start[nl] = start_value(&rt, sp, f, h, t_start);
        double rms;
        if (an_fit_lines_in(an_work_fit_space(w), tr->y, tr->n, tr->rate, t_start, start,
                            nl + 1, fitted, &rms))
            break;
        memcpy(out->lines, fitted, ++nl * sizeof *fitted);
        out->rms = rms;
    }
    return nl;
}

/* Where the lines leave no signal-free band (broad lines over a short
 * spectrum), the noise is the rms of the spectrum of what the fit leaves,
 * away from 0 Hz and the mains harmonics. Not zero filled: the mean the
 * trace lost with its DC (a strong line's own) is a constant in what the
 * fit leaves, which zero filling would spread over every bin. buf: n
 * values. */
static double residual_noise(an_work *w, const an_trace *tr, double t_start,
                             const an_shot *out, size_t nl, double *buf) {
    an_lines_subtract(out->lines, nl, tr->rate, t_start, tr->y, tr->n, buf);
    an_spectrum rs;
    if (an_spectrum_of(w, buf, tr->n, tr->rate, 0, 1, &rs)) return NAN;
    return band_noise(tr, &rs, &out->mains, NULL, 0);
}

/* Noise and SNR of the fitted lines. A line the fit moved out of (0 Hz,
 * Nyquist) is left out and the rest fitted again, once. SNR does not leave
 * lines out: min_snr was their test when found, against a noise measured
 * where no skirt reaches (first_noise); the reported SNR is the
 * specification's, whose bands +-10 linewidths away still hold the
 * Lorentzian tails and sidelobes of strong lines, so it can be lower. sp
 * must not be the work space's own spectrum (this may take others). buf: n
 * values. */
static size_t grade(an_work *w, const an_trace *tr, const an_spectrum *sp, double t_start,
                    an_shot *out, size_t nl, double *buf) {
    for (int pass = 0; pass < 2; pass++) {
        size_t kept = 0;
        an_line_fit keep[AN_MAX_LINES];
        for (size_t k = 0; k < nl; k++)
            if (out->lines[k].frequency > 0 && out->lines[k].frequency < 0.5 * tr->rate)
                keep[kept++] = out->lines[k];
        if (kept < nl && pass == 0)
            nl = kept ? fit(w, tr, t_start, keep, kept, out->lines, &out->rms) : 0;
        else if (kept < nl)
            memcpy(out->lines, keep, (nl = kept) * sizeof *keep);
        else
            break;
    }
    out->noise = band_noise(tr, sp, &out->mains, out->lines, nl);
    if (isnan(out->noise) && nl) out->noise = residual_noise(w, tr, t_start, out, nl, buf);
    for (size_t k = 0; k < nl; k++)
        out->lines[k].snr = height_at(tr, sp, out->lines[k].frequency) / out->noise;
    return nl;
}

/* The line noise removed with the lines that outshine it taken out first:
 * a line far above the comb within reach of where a harmonic could drift
 * would pull the comb's fundamental onto itself and be taken out with it.
 * Those lines (above twice the comb's highest bin near its first
 * harmonics and outside every harmonic's reach, or ten times above it
 * anywhere; apart from each other by MASK_APART natural bins so a line's
 * sidelobes are not taken for lines) are fitted and subtracted from
 * a copy, the comb is fitted to the copy, and what was removed there is
 * removed from the trace. */
#define MAINS_SEARCH 0.5        /* Hz the fundamental may drift */
#define MASK_APART 20.0         /* natural bins between two lines taken out */
#define MASK_ABOVE 10.0         /* a peak this far above the comb is a line wherever it is */

/* The reach of harmonic h: where it may be when the fundamental drifts. */
static bool in_reach(double f, double nominal, double guard) {
    double h = fmax(1, round(f / nominal));
    return fabs(f - h * nominal) <= h * MAINS_SEARCH + guard;
}

/* The comb's highest bin near its first three harmonics (the higher ones
 * reach far enough to take in the skirts of lines). */
static double comb_top(const an_spectrum *sp, double nominal, double guard) {
    double top = 0;
    for (size_t k = 1; k < sp->n && (double)k * sp->df < 3.5 * nominal; k++) {
        double f = (double)k * sp->df;
        if (in_reach(f, nominal, guard)) top = fmax(top, hypot(sp->re[k], sp->im[k]));
    }
    return sp->scale * top;
}

static int remove_line_noise(an_work *w, an_trace *tr, double nominal, double t_start,
                             an_mains *mains) {
    an_spectrum sp;
    double f[AN_MAX_LINES], h[AN_MAX_LINES], res = tr->rate / (double)tr->n;
    if (an_spectrum_of(w, tr->y, tr->n, tr->rate, 0, 1, &sp)) return -1;
    double *buf = an_work_scratch(w, 2 * tr->n);
    if (!buf) return -1;
    double guard = PEAK_GUARD * res, top = comb_top(&sp, nominal, guard);
    size_t np = an_find_peaks(&sp, 2 * top, PEAK_SEPARATION * res, guard, AN_MAX_LINES, f, h);
    an_line_fit start[AN_MAX_LINES], lines[AN_MAX_LINES];
    size_t nl = 0;
    for (size_t i = 0; i < np; i++) {
        /* near a harmonic only when far above the comb: then it is no harmonic */
        bool apart = !in_reach(f[i], nominal, guard) || h[i] > MASK_ABOVE * top;
        for (size_t j = 0; apart && j < nl; j++)
            apart = fabs(f[i] - start[j].frequency) > MASK_APART * res;
        if (apart) start[nl++] = start_value(tr, &sp, f[i], h[i], t_start);
    }
    double rms;
    nl = nl ? fit(w, tr, t_start, start, nl, lines, &rms) : 0;
    if (nl == 0) return an_remove_mains(tr->y, tr->n, tr->rate, nominal, MAINS_SEARCH, mains);
    double *copy = buf, *before = buf + tr->n;
    an_lines_subtract(lines, nl, tr->rate, t_start, tr->y, tr->n, copy);
    memcpy(before, copy, tr->n * sizeof *copy);
    if (an_remove_mains(copy, tr->n, tr->rate, nominal, MAINS_SEARCH, mains)) return -1;
    for (size_t i = 0; i < tr->n; i++) tr->y[i] -= before[i] - copy[i];
    return 0;
}

static int check_input(const an_record *r, const an_settings *s, char *err, size_t errlen) {
    if (!r || !s) return say(err, errlen, "no record or no settings to reduce");
    if (!r->samples || !(r->rate > 0) || !isfinite(r->rate))
        return say(err, errlen, "shot %d: the record has no samples or no sample rate",
                   r->shot);
    if (s->max_lines > AN_MAX_LINES || s->zero_fill < 1 || !(s->min_snr >= 0) ||
        !(s->line_noise >= 0))
        return say(err, errlen, "analysis settings out of range: max_lines %zu (at most %d), "
                   "zero_fill %d (at least 1), min_snr %g, line_noise %g Hz", s->max_lines,
                   AN_MAX_LINES, s->zero_fill, s->min_snr, s->line_noise);
    return 0;
}

int an_trace_of(an_work *w, const an_record *r, const an_settings *s, an_trace *tr,
                an_mains *mains, char *err, size_t errlen) {
    if (!w || !tr || !mains || check_input(r, s, err, errlen)) return -1;
    memset(mains, 0, sizeof *mains);
    if (an_prepare(w, r->samples, r->n, r->rate, r->t0, r->receiver_sign, s->window_from,
                   s->window_to, tr))
        return say(err, errlen, "shot %d: the window from %g s to %g s leaves fewer than 16 "
                   "of the record's %zu samples", r->shot, s->window_from, s->window_to, r->n);
    if (!isfinite(tr->dc))
        return say(err, errlen, "shot %d: the record holds samples that are not finite "
                   "numbers (NaN or infinite) in the window", r->shot);
    double t_ref = isnan(r->pulse_end) ? tr->t_first : r->pulse_end;
    if (s->line_noise > 0 &&
        remove_line_noise(w, tr, s->line_noise, tr->t_first - t_ref, mains))
        return say(err, errlen, "shot %d: line noise at %g Hz could not be removed (is it "
                   "below the Nyquist frequency, %g Hz?)", r->shot, s->line_noise,
                   0.5 * tr->rate);
    return 0;
}

int an_reduce(an_work *w, const an_record *r, const an_settings *s, an_shot *out, char *err,
              size_t errlen) {
    if (!out) return -1;
    memset(out, 0, sizeof *out);
    an_trace tr;
    if (an_trace_of(w, r, s, &tr, &out->mains, err, errlen)) return -1;
    out->t_first = tr.t_first;
    out->t_ref = isnan(r->pulse_end) ? tr.t_first : r->pulse_end;
    out->n = tr.n;
    out->rate = tr.rate;
    double t_start = tr.t_first - out->t_ref;
    an_spectrum sp, first;
    double *buf = NULL, tried;
    if (an_spectrum_of(w, tr.y, tr.n, tr.rate, 0, s->zero_fill, &sp) ||
        !(buf = an_work_scratch(w, tr.n + 3 * sp.n)))
        return say(err, errlen, "shot %d: out of memory for the spectrum", r->shot);
    /* kept aside: the search in the residual takes spectra of its own */
    first = sp;
    first.re = memcpy(buf + tr.n + sp.n, sp.re, sp.n * sizeof *sp.re);
    first.im = memcpy(buf + tr.n + 2 * sp.n, sp.im, sp.n * sizeof *sp.im);
    size_t nl = find_lines(w, &tr, &sp, buf, s, t_start, out, &tried);
    if (!isnan(tried) && !nl)
        return say(err, errlen, "shot %d: the fit of the line near %g Hz did not converge",
                   r->shot, tried);
    sp = first;
    out->nlines = grade(w, &tr, &sp, t_start, out, nl, buf);
    if (!out->nlines) {
        out->noise = band_noise(&tr, &sp, &out->mains, NULL, 0);
        out->rms = sqrt(gsl_stats_tss_m(tr.y, 1, tr.n, 0) / (double)tr.n);
    }
    qsort(out->lines, out->nlines, sizeof *out->lines, by_amplitude);
    return 0;
}

/* ---- coherent averages ------------------------------------------------------------------ */

void an_average_init(an_average *a) { memset(a, 0, sizeof *a); }

static an_named *copy_named(const an_named *list, size_t n) {
    an_named *c = malloc((n ? n : 1) * sizeof *c);
    if (c && n) memcpy(c, list, n * sizeof *c);
    return c;
}

/* The first record fixes everything but the samples. */
static int average_start(an_average *a, const an_record *r, char *err, size_t errlen) {
    an_record *s = &a->sum;
    *s = *r;
    s->parameters = copy_named(r->parameters, r->nparameters);
    s->currents = copy_named(r->currents, r->ncurrents);
    s->fields = copy_named(r->fields, r->nfields);
    s->samples = NULL;
    s->receiver_sign = 1;
    a->acc = calloc(r->n ? r->n : 1, sizeof *a->acc);
    if (!s->parameters || !s->currents || !s->fields || !a->acc) {
        an_record_free(s);
        free(a->acc);
        a->acc = NULL;
        return say(err, errlen, "out of memory for the average of %zu samples", r->n);
    }
    return 0;
}

int an_average_add(an_average *a, const an_record *r, char *err, size_t errlen) {
    if (!a || !r || (!r->samples && r->n)) return say(err, errlen, "no record to average");
    if (a->count && !a->acc)
        return say(err, errlen, "shot %d: the average is already finished", r->shot);
    if (!a->count && average_start(a, r, err, errlen)) return -1;
    const an_record *s = &a->sum;
    if (a->count && (r->n != s->n || fabs(r->rate - s->rate) > 1e-9 * s->rate ||
                     fabs(r->t0 - s->t0) > 1e-3 / s->rate))
        return say(err, errlen, "shot %d: %zu samples at %g Hz from %.9g s cannot be averaged "
                   "with shot %d's %zu samples at %g Hz from %.9g s (the same length, rate and "
                   "start are needed)", r->shot, r->n, r->rate, r->t0, s->shot, s->n, s->rate,
                   s->t0);
    double sign = r->receiver_sign < 0 ? -1.0 : 1.0;
    for (size_t i = 0; i < r->n; i++) a->acc[i] += sign * (double)r->samples[i];
    a->count++;
    return 0;
}

/* The average's record goes to the caller: an_average_free leaves it alone
 * from here on (it frees only an unfinished average). */
int an_average_finish(an_average *a) {
    if (!a || !a->count || !a->acc) return -1;
    an_record *s = &a->sum;
    s->samples = malloc((s->n ? s->n : 1) * sizeof *s->samples);
    if (!s->samples) return -1;
    for (size_t i = 0; i < s->n; i++) s->samples[i] = (float)(a->acc[i] / (double)a->count);
    s->receiver_sign = 1;
    free(a->acc);
    a->acc = NULL;
    return 0;
}

void an_average_free(an_average *a) {
    if (!a) return;
    if (a->acc) an_record_free(&a->sum);
    free(a->acc);
    a->acc = NULL;
}
