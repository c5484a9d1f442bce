/* analysis: reducing shot records to results. Reads a run's shot records
 * (HDF5) and plain arrays; never the rig, never the scheduler, and never
 * prints: every function returns 0 or a negative code, with a message in
 * err where it takes one. The command line (sequencer/cli/) reads the plan's
 * analysis: section and the run folder and calls these.
 *
 *   record.c    a shot record read back (the first acquisition's samples)
 *   spectrum.c  window, DC, receiver sign, spectra through FFTW, peaks, noise
 *   mains.c     line-noise removal: a least-squares fit of the mains comb
 *   fit.c       damped-sinusoid fits of a record (GSL nonlinear least squares)
 *   shot.c      the whole per-shot pipeline, and coherent averaging
 *   series.c    relaxation, build-up and calibration fits across points
 *   plot.c      plots through PLplot (PNG and SVG)
 *   export.c    CSV and JCAMP-DX files of records and spectra */
#ifndef PRECESS_ANALYSIS_H
#define PRECESS_ANALYSIS_H

#include <stdbool.h>
#include <stddef.h>

#define AN_MAX_LINES 8          /* lines fitted per record, at most */
#define AN_NAME 64              /* longest name kept from a record, with its NUL */

/* ---- the quick estimate the run's progress line shows (spectrum.c) ---- */

typedef struct {
    double frequency;   /* Hz: the strongest line's bin */
    double height;      /* its height in the unapodized magnitude spectrum */
    double noise;       /* rms of the spectrum away from the line and DC */
    double snr;         /* height / noise */
} an_line;

typedef struct {
    double guard;       /* Hz: the noise is measured this far from the line and 0 Hz */
    double mains;       /* Hz: the mains whose harmonics are left out; 0: none */
    double expect;      /* Hz: where a line is planned; 0: nowhere in particular */
} an_quick_opts;

/* The strongest line of n samples at rate (multiplied by sign first, the
 * record's receiver_sign), with its SNR: the line's height in the
 * unapodized spectrum over the rms of the spectrum outside +-guard Hz of it
 * and of 0 Hz. With mains > 0 (Hz) the bins near each of the first
 * AN_QUICK_MAINS_HARMONICS harmonics h of mains (where it falls once
 * sampled: folded about the Nyquist frequency) are neither the line nor
 * noise: within AN_QUICK_MAINS_HZ or AN_QUICK_MAINS_BINS bins (the wider),
 * plus AN_QUICK_MAINS_WANDER times h * mains (grids hold their frequency to
 * about 0.2 %). A shot's mains pickup, often stronger than its signal, is
 * not what the progress line should report; a line within those bins of a
 * harmonic is missed, unless it is the harmonic near expect (the planned
 * line's frequency), which is kept. w keeps the FFTW plan from shot to shot. Returns 0,
 * or -1 when there are too few samples or no bin is left for the line or
 * for the noise. */
#define AN_QUICK_MAINS_HZ 1.0
#define AN_QUICK_MAINS_BINS 2.0
#define AN_QUICK_MAINS_WANDER 0.002
#define AN_QUICK_MAINS_HARMONICS 40
typedef struct an_work an_work;
int an_quick_line(an_work *w, const float *samples, size_t n, double rate, int sign,
                  const an_quick_opts *o, an_line *out);

/* ---- a shot record read back (record.c) -------------------------------- */

typedef struct {
    char name[AN_NAME];
    double value;       /* SI */
} an_named;

typedef struct {
    char run[AN_NAME], kind[16], status[16];
    char started_utc[40];       /* ISO 8601 UTC, as the record has it */
    int shot, attempt, point, average;
    size_t nparameters, ncurrents, nfields;
    an_named *parameters;       /* /parameters/NAME, in the file's order */
    an_named *currents;         /* /currents/COIL */
    an_named *fields;           /* /fields/PLACE */
    double pulse_end;           /* s from shot start: the first pulse's end (its
                                 * attribute `end`, else the start of the first
                                 * acquisition); NAN when the shot has no pulse */
    /* The first acquisition's first input: */
    char input[AN_NAME], units[16];
    double rate;                /* Hz */
    double t0;                  /* s from shot start of the first sample */
    int receiver_sign;          /* +1 or -1 */
    size_t n;
    float *samples;             /* n samples, in units */
} an_record;

/* Read the shot record at path into r (zeroed first; the caller frees it
 * with an_record_free). Returns 0, or -1 with a message in err naming the
 * file and what is missing or unreadable. */
int an_record_read(const char *path, an_record *r, char *err, size_t errlen);
void an_record_free(an_record *r);
/* The value of a parameter, current or field by name; NAN when absent. */
double an_named_value(const an_named *list, size_t n, const char *name);

/* ---- spectra (spectrum.c) ---------------------------------------------- */

/* Scratch space reused from record to record: FFTW plans by length and
 * buffers. One per thread; an_work_free frees it all. */
an_work *an_work_new(void);
void an_work_free(an_work *w);

/* A record cut to its window, ready to analyse: y = sign * (samples - mean)
 * over [from, to) s from the acquisition's start. */
typedef struct {
    double *y;          /* n values (owned by the work space; valid until its
                         * next an_prepare) */
    size_t n;
    double rate;        /* Hz */
    double t_first;     /* s from shot start of y[0] */
    double dc;          /* the mean removed, in the record's units (before sign) */
} an_trace;

/* Window (to <= 0: to the end), DC removal and receiver sign. Returns 0, or
 * -1 when fewer than 16 samples remain. */
int an_prepare(an_work *w, const float *samples, size_t n, double rate, double t0,
               int sign, double from, double to, an_trace *out);

typedef struct {
    size_t n;           /* bins from 0 Hz to the Nyquist frequency */
    double df;          /* Hz per bin */
    double *re, *im;    /* n each (owned by the work space; valid until its
                         * next an_spectrum) */
    double scale;       /* multiply re, im by this for amplitude in the trace's
                         * units: 2 / (samples before zero filling) */
} an_spectrum;

/* The spectrum of y (n values at rate): exponential apodization of
 * apodization Hz of line broadening (0: none), zero filled to
 * zero_fill * n rounded up to a length FFTW does fast (zero_fill >= 1).
 * The time origin is y[0]. Returns 0, or -1 when out of memory. */
int an_spectrum_of(an_work *w, const double *y, size_t n, double rate, double apodization,
                   int zero_fill, an_spectrum *out);

/* Up to max peaks of a spectrum's magnitude, strongest first: local maxima
 * above min_height, at least min_separation Hz apart, none within guard Hz
 * of 0 Hz. Frequencies are refined between bins (parabolic on the log
 * magnitude). Returns the number found. */
size_t an_find_peaks(const an_spectrum *s, double min_height, double min_separation,
                     double guard, size_t max, double *frequency, double *height);

/* The rms of |spectrum| (scaled) over bins farther than exclude[k] Hz from
 * every centre[k], and from 0 Hz by exclude_dc Hz. Returns the rms, or NAN
 * when no bin is left. */
double an_noise_rms(const an_spectrum *s, const double *centre, const double *exclude,
                    size_t ncentres, double exclude_dc);

/* ---- line noise (mains.c) ---------------------------------------------- */

typedef struct {
    double fundamental;         /* Hz as refined from the data */
    size_t nharmonics;          /* harmonics fitted (1: the fundamental only) */
    double amplitude[32];       /* of each harmonic, in the trace's units */
    double rms_removed;         /* rms of what was subtracted */
} an_mains;

/* Remove a comb at the harmonics of nominal Hz (every harmonic below
 * 0.45 * rate, at most 32) from y in place, by a linear least-squares fit
 * of a sine and cosine per harmonic, the fundamental refined within
 * +-search Hz to the value that explains most of the trace. Lines that are
 * not on a harmonic are left as they are. Returns 0, or -1 when nominal is
 * not below the Nyquist frequency or the fit fails. */
int an_remove_mains(double *y, size_t n, double rate, double nominal, double search,
                    an_mains *out);

/* ---- damped-sinusoid fits (fit.c) -------------------------------------- */

typedef struct {
    double frequency, frequency_err;    /* Hz */
    double amplitude, amplitude_err;    /* trace units, at t = 0 of the fit
                                         * (the end of the pulse); >= 0 */
    double phase, phase_err;            /* rad in (-pi, pi], at t = 0 */
    double linewidth, linewidth_err;    /* Hz, FWHM = 1 / (pi T2*) */
    double snr;                         /* spectrum height over noise rms */
} an_line_fit;

/* Fit y_i = sum_k A_k exp(-pi W_k t_i) cos(2 pi f_k t_i + phi_k), t_i =
 * t_start + i / rate, by GSL's nonlinear least squares from the nlines
 * starting values in start (frequency, amplitude, phase, linewidth used),
 * into out (nlines entries, in the order given; errors are one sigma, from
 * the covariance scaled by the residual variance). *rms gets the rms
 * residual. Returns 0, or -1 when the fit does not converge. */
int an_fit_lines(const double *y, size_t n, double rate, double t_start,
                 const an_line_fit *start, size_t nlines, an_line_fit *out, double *rms);

/* ---- the per-shot pipeline and averaging (shot.c) ---------------------- */

typedef struct {
    double window_from, window_to;      /* s from the acquisition's start;
                                         * window_to <= 0: to the end */
    double line_noise;                  /* Hz; 0: none removed */
    double apodization;                 /* Hz, for the displayed spectrum */
    int zero_fill;                      /* >= 1, for the displayed spectrum */
    size_t max_lines;                   /* <= AN_MAX_LINES */
    double min_snr;                     /* peaks below this are not fitted */
} an_settings;

/* The defaults: whole record, no line noise, no apodization, zero fill 2,
 * up to 4 lines, peaks of SNR 5 and more. */
void an_settings_default(an_settings *s);

typedef struct {
    size_t nlines;
    an_line_fit lines[AN_MAX_LINES];    /* strongest first */
    double noise;                       /* rms of the spectrum in signal-free
                                         * bands, trace units */
    double rms;                         /* rms residual of the time-domain fit */
    an_mains mains;                     /* what was removed (fundamental 0: none) */
    double t_first;                     /* s from shot start of the first sample used */
    double t_ref;                       /* s from shot start of the fit's t = 0 */
    size_t n;                           /* samples used */
    double rate;
} an_shot;

/* The record (or an average) ready to look at: its window, DC removed,
 * receiver sign applied, and with line_noise set the mains comb removed
 * (strong lines set aside while it is fitted, so that none is pulled onto
 * a harmonic). tr->y is the work space's, valid until its next use; mains
 * gets what was removed. Returns 0, or -1 with a message in err. */
int an_trace_of(an_work *w, const an_record *r, const an_settings *s, an_trace *tr,
                an_mains *mains, char *err, size_t errlen);

/* Reduce one record (or an average made by an_average_*): window, DC,
 * receiver sign, line noise, spectrum, peaks, fit, SNR. Returns 0, or -1
 * with a message in err. A record without a line above min_snr is not an
 * error: nlines is 0. */
int an_reduce(an_work *w, const an_record *r, const an_settings *s, an_shot *out,
              char *err, size_t errlen);

/* Coherent average of the records of one point: each multiplied by its
 * receiver_sign and summed. The first record added fixes the length, rate
 * and t0 (a record that differs is refused, -1); the result is a record
 * with receiver_sign +1, owned by the caller (an_record_free). */
typedef struct {
    an_record sum;
    double *acc;
    size_t count;
} an_average;
void an_average_init(an_average *a);
int an_average_add(an_average *a, const an_record *r, char *err, size_t errlen);
/* Finish: a->sum holds the averaged record, from then on the caller's to
 * free (an_record_free); returns 0, -1 when empty. */
int an_average_finish(an_average *a);
/* Frees what an unfinished average holds; a finished one's sum is left. */
void an_average_free(an_average *a);

/* ---- fits across points (series.c) ------------------------------------- */

typedef struct {
    double x, y, y_err;         /* y_err <= 0: unweighted */
} an_point;

typedef struct {
    double t1, t1_err;          /* s */
    double amplitude, amplitude_err;
    double offset, offset_err;
    double chi2_dof;            /* reduced chi-square (weighted) or residual variance */
    size_t n;
} an_decay_fit;

/* relaxation: y = A exp(-x / T1) + C; buildup: y = A (1 - exp(-x / T1)) + C.
 * Weighted by 1/y_err^2 when every y_err > 0. Errors are one sigma; with
 * weights, scaled by sqrt(chi2_dof) only when chi2_dof > 1. Returns 0, or -1
 * with fewer than 4 points or no convergence. */
int an_fit_relaxation(const an_point *p, size_t n, an_decay_fit *out);
int an_fit_buildup(const an_point *p, size_t n, an_decay_fit *out);

typedef struct {
    double k, k_err;            /* field per unit of x (T per T, or T/A) */
    double b_z, b_z_err;        /* T: the residual along the field */
    double b_perp, b_perp_err;  /* T: the residual across it, >= 0 */
    double chi2_dof;
    size_t n;
} an_calibration_fit;

/* f = gamma / 2pi * sqrt((k x + b_z)^2 + b_perp^2), with gamma_hz the
 * nucleus's |gamma| / 2pi in Hz/T. Returns 0, or -1 with fewer than 3
 * points or no convergence. */
int an_fit_calibration(const an_point *p, size_t n, double gamma_hz, an_calibration_fit *out);

/* ---- plots (plot.c) ---------------------------------------------------- *
 * Each writes BASE.png and BASE.svg (both drawn whole under temporary names
 * in BASE's folder, then renamed; on an error neither is left behind).
 * Returns 0, or -1 with a message in err. Points with a NaN (or, on a log
 * axis, a value <= 0) are left out; data with no point left is refused.
 * An axis is given as a quantity's name and its SI unit apart ("delay",
 * "s"): a unit of letters only (T, s, Hz, A, V) gets the SI prefix that
 * suits the data (20 pT, not 2e-11 T); another unit ("1/s", "T/A") or
 * none is written as given. Names and titles are plain text (UTF-8).
 * PLplot keeps global state: these functions are not reentrant and must
 * not run in two threads at once. */

typedef struct {
    const char *title;          /* e.g. "shot 12 (point 3): b_detect = 10 uT" */
    const char *units;          /* of the record's samples, e.g. "T" */
    size_t n;                   /* the trace */
    const double *t, *y;        /* s from shot start; trace units */
    const double *fit;          /* the fitted model at t, or NULL */
    size_t nspec;               /* the spectrum, magnitude */
    const double *f, *mag;      /* Hz; trace units */
    const double *fit_mag;      /* |spectrum| of the fitted model, or NULL */
    size_t nlines;
    const double *line_frequency;  /* marked on the spectrum */
} an_plot_shot;
int an_plot_record(const char *base, const an_plot_shot *d, char *err, size_t errlen);

typedef struct {
    const char *title;
    const char *x_name, *x_unit;            /* "delay", "s" */
    const char *y_name, *y_unit;            /* "amplitude", "T" */
    size_t n;
    const double *x, *y, *y_err;            /* y_err may be NULL */
    size_t ncurve;
    const double *curve_x, *curve_y;        /* the fit, drawn as a line */
    const double *residual;                 /* y - fit at x, or NULL: no panel */
    bool log_x, log_y;
} an_plot_curve;
int an_plot_series(const char *base, const an_plot_curve *d, char *err, size_t errlen);

typedef struct {
    const char *title;
    const char *x_name, *x_unit;            /* "relaxation field", "T" */
    const char *y_name, *y_unit;            /* "R1", "1/s" */
    size_t n;
    const double *x, *y, *y_err;            /* log axes on both; y_err may be NULL */
} an_plot_profile_data;
int an_plot_profile(const char *base, const an_plot_profile_data *d, char *err, size_t errlen);

typedef struct {
    const char *title;
    const char *y_name, *y_unit;            /* the scanned quantity: "field", "T" */
    size_t nrows, ncols;                    /* rows: points, sorted by y */
    const double *y;                        /* nrows values of the scanned quantity */
    double f_min, f_max;                    /* Hz: the columns span this */
    const double *magnitude;                /* nrows x ncols, row-major; each
                                             * row normalized by the caller */
} an_plot_map_data;
int an_plot_map(const char *base, const an_plot_map_data *d, char *err, size_t errlen);

/* ---- export (export.c) ------------------------------------------------- *
 * Each writes path whole (a temporary name, then renamed). Returns 0, or -1
 * with a message in err. */

typedef struct {
    const char *title;          /* ##TITLE */
    const char *origin;         /* ##ORIGIN: the run id */
    const char *owner;          /* ##OWNER */
    const char *nucleus;        /* "1H": ##.OBSERVE NUCLEUS */
    double observe_frequency;   /* Hz: the line's Larmor frequency (0: unknown) */
    const char *units;          /* of the samples: "T" */
    const char *when;           /* ISO 8601 UTC, ##LONGDATE */
} an_jcamp_meta;

/* JCAMP-DX 5.01, DATA TYPE = NMR FID: n real samples, dt apart, from t0 s. */
int an_export_jcamp_fid(const char *path, const an_jcamp_meta *m, const double *y, size_t n,
                        double t0, double dt, char *err, size_t errlen);
/* JCAMP-DX 5.01, DATA TYPE = NMR SPECTRUM: real and imaginary parts of n
 * bins, df apart from f0 Hz, as two pages of an NTUPLES block. */
int an_export_jcamp_spectrum(const char *path, const an_jcamp_meta *m, const double *re,
                             const double *im, size_t n, double f0, double df, char *err,
                             size_t errlen);
/* CSV of a record: a header line, then "time,value" (s from shot start,
 * units) per sample. */
int an_export_csv_record(const char *path, const an_record *r, char *err, size_t errlen);

/* ---- a run folder reduced (run.c; its files: report.c) ------------------ */

typedef enum { AN_SERIES_NONE, AN_SERIES_RELAXATION, AN_SERIES_BUILDUP,
               AN_SERIES_CALIBRATION } an_series_kind;

/* "relaxation", "buildup", "calibration", "none": the plan's words. */
const char *an_series_name(an_series_kind k);

/* What the plan's analysis: section asks, in plain values (the command line
 * reads the plan). */
typedef struct {
    an_series_kind fit;
    const char *against;        /* a scan variable's name, or NULL */
    const char *against_coil;   /* against: {current: COIL}: the coil, or NULL */
    const char *per;            /* a scan variable's name, or NULL: one fit */
    const char *against_unit, *per_unit;    /* SI unit symbols: "s", "T", "A", "" */
    size_t nvars;                           /* every scan variable's unit, for titles */
    const char *const *var_name, *const *var_unit;
    const char *nucleus;        /* the sample's default nucleus, "1H" */
    double gamma_hz;            /* its |gamma| / 2pi, Hz/T */
    an_settings settings;
} an_plan;

typedef struct {
    int shot, point, average;
    char kind[16];              /* scan, warmup, reference */
    char file[80];              /* relative to the run folder */
    bool reduced;               /* false: error says why */
    char error[320];
    an_shot result;
    double x;                   /* the series' x at this shot; NAN: none */
    double field;               /* the solved field at the sample place, T; NAN */
} an_shot_entry;

typedef struct {
    int point;
    size_t nshots;              /* its scan shots analysed */
    double *parameters;         /* one per name of an_run.parameter */
    double x, per, field;       /* NAN when not known */
    bool reduced;
    char error[320];
    an_shot result;             /* of the point's coherent average */
    int line;                   /* the line the series follows (index into
                                 * result.lines), -1: none */
} an_point_entry;

typedef struct {
    an_series_kind fit;
    double per;                 /* the per value; NAN: one fit for all */
    bool fitted;                /* false: too few points or no convergence */
    an_decay_fit decay;         /* relaxation, buildup */
    an_calibration_fit calibration;
    size_t n;
    an_point *data;             /* the points fitted: x, y, y_err */
} an_series_entry;

typedef struct {
    char dir[4096];
    char id[AN_NAME], title[256], units[16];
    size_t planned;             /* shots in the plan */
    size_t nparameters;
    char (*parameter)[AN_NAME]; /* scan variables, as points.json has them */
    size_t nshots, npoints, nseries;
    an_shot_entry *shots;       /* every ok record in the journal, by shot */
    an_point_entry *points;     /* every point with a scan shot, by point */
    an_series_entry *series;
} an_run;

/* Open a run folder: its journal (complete lines only, so a run still
 * going or cut off is read as far as it got) and points.json. Returns 0
 * and *out (an_run_free), or -1 with a message in err. */
int an_run_open(const char *dir, an_run **out, char *err, size_t errlen);
/* Reduce every shot, every point's average and the series the plan asks
 * for. A record that cannot be read is kept with its error, not fatal.
 * Returns 0, or -1 with a message in err (out of memory). */
int an_run_reduce(an_run *r, const an_plan *p, char *err, size_t errlen);
void an_run_free(an_run *r);
/* The coherent average of point's scan shots (read again from their
 * records) into out (an_record_free). Returns 0, or -1 with a message. */
int an_run_point_average(const an_run *r, int point, an_record *out, char *err, size_t errlen);
/* RUN/analysis/: shots.csv, points.csv, fits.csv and the plots, each file
 * written whole. Returns 0, or -1 with a message in err. */
int an_run_write(const an_run *r, const an_plan *p, char *err, size_t errlen);

#endif
