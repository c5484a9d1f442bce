/* analysis: reducing shot records to results. For now the per-shot
 * estimator the run's progress line uses: the strongest line of a record's
 * spectrum and its signal-to-noise ratio. Reads samples only; never the
 * plan or the rig. Not for fits across points (a later version). */
#ifndef PRECESS_ANALYSIS_H
#define PRECESS_ANALYSIS_H

#include <stddef.h>

typedef struct {
    double frequency;   /* Hz: the strongest line's bin */
    double height;      /* its height in the unapodized magnitude spectrum */
    double noise;       /* rms of the spectrum away from the line and DC */
    double snr;         /* height / noise */
} an_line;

/* The strongest line of n samples at rate (multiplied by sign first, the
 * record's receiver_sign), with its SNR: the line's height in the
 * unapodized spectrum over the rms of the spectrum outside +-guard Hz of it
 * and of 0 Hz. Returns 0, or -1 when there are too few samples. */
int an_quick_line(const float *samples, size_t n, double rate, int sign, double guard,
                  an_line *out);

#endif
