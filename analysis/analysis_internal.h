/* analysis_internal: what the analysis sources share and no other module
 * uses: the fit's reusable GSL workspace and a scratch buffer, both kept in
 * an an_work so that reducing record after record allocates nothing; and
 * the writer of whole files (outfile.c).
 * Not a public interface: callers outside analysis/ use analysis.h. */
#ifndef PRECESS_ANALYSIS_INTERNAL_H
#define PRECESS_ANALYSIS_INTERNAL_H

#include "analysis.h"

/* fit.c: GSL nonlinear least-squares workspaces, cached by size. */
typedef struct an_fit_space an_fit_space;
void an_fit_space_free(an_fit_space *s);
/* an_fit_lines with its workspaces taken from (and left in) *space. */
int an_fit_lines_in(an_fit_space **space, const double *y, size_t n, double rate,
                    double t_start, const an_line_fit *start, size_t nlines, an_line_fit *out,
                    double *rms);

/* fit.c: out = y - sum of the lines' damped sinusoids at t_start + i / rate
 * (out may be y). */
void an_lines_subtract(const an_line_fit *lines, size_t nlines, double rate, double t_start,
                       const double *y, size_t n, double *out);

/* spectrum.c: the work space's slot for the fit's workspaces, and a scratch
 * array of at least n doubles (valid until the next call; NULL when out of
 * memory). */
an_fit_space **an_work_fit_space(an_work *w);
double *an_work_scratch(an_work *w, size_t n);

/* spectrum.c: held around every fftw_plan_* and fftw_destroy_plan of the
 * analysis (FFTW's planner is not thread-safe; fftw_execute is). */
void an_planner_lock(void);
void an_planner_unlock(void);

/* outfile.c: a file written whole: an_out_open makes a temporary file beside
 * path (path must outlive it), writes are buffered (a failed one is kept and
 * reported by an_out_finish), an_out_finish fsyncs and renames it into place,
 * an_out_abort drops it. Open and finish return NULL / -1 with a message in
 * err naming path and what failed; either way o is freed by finish and abort. */
typedef struct an_out an_out;
an_out *an_out_open(const char *path, char *err, size_t errlen);
void an_out_write(an_out *o, const char *s, size_t len);
void an_out_printf(an_out *o, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
int an_out_finish(an_out *o, char *err, size_t errlen);
void an_out_abort(an_out *o);

#endif
