/* spectrum: magnitude spectra of shot records through FFTW, and the quick
 * strongest-line estimate the progress line of a run shows.
 * Not for fitting lines (a later version's fit.c). */
#include "analysis.h"

#include <fftw3.h>
#include <math.h>
#include <stdlib.h>

int an_quick_line(const float *samples, size_t n, double rate, int sign, double guard,
                  an_line *out) {
    if (n < 16 || rate <= 0) return -1;
    double *in = fftw_malloc(n * sizeof *in);
    size_t nf = n / 2 + 1;
    fftw_complex *spec = fftw_malloc(nf * sizeof *spec);
    if (!in || !spec) {
        fftw_free(in);
        fftw_free(spec);
        return -1;
    }
    double mean = 0;
    for (size_t i = 0; i < n; i++) mean += samples[i];
    mean /= (double)n;
    for (size_t i = 0; i < n; i++) in[i] = sign * (samples[i] - mean);
    fftw_plan plan = fftw_plan_dft_r2c_1d((int)n, in, spec, FFTW_ESTIMATE);
    fftw_execute(plan);
    double df = rate / (double)n, best = -1;
    size_t peak = 1;
    for (size_t k = 1; k < nf; k++) {
        double m = hypot(spec[k][0], spec[k][1]);
        if (m > best) {
            best = m;
            peak = k;
        }
    }
    double sum = 0;
    size_t count = 0;
    for (size_t k = 1; k < nf; k++) {
        double f = (double)k * df;
        if (fabs(f - (double)peak * df) <= guard || f <= guard) continue;
        double m = hypot(spec[k][0], spec[k][1]);
        sum += m * m;
        count++;
    }
    out->frequency = (double)peak * df;
    out->height = best;
    out->noise = count ? sqrt(sum / (double)count) : 0;
    out->snr = out->noise > 0 ? best / out->noise : INFINITY;
    fftw_destroy_plan(plan);
    fftw_free(in);
    fftw_free(spec);
    return 0;
}
