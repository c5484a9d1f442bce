/* compile_internal: what compile.c, limits.c and fields.c share while a
 * timeline is built: the builder and its growing arrays. Not a public
 * interface. */
#ifndef PRECESS_COMPILE_INTERNAL_H
#define PRECESS_COMPILE_INTERNAL_H

#include "compile.h"

/* One refusal kind reported once, with the number of further points. */
typedef struct {
    plan_loc loc;
    int coil;
    int kind;
    uint32_t first_point, last_point;
    size_t more;            /* further points with the same refusal */
    char message[512];
    diag_severity severity;
} compile_report;

typedef struct {
    const plan *p;
    const scan *s;
    compiled *c;
    diag_list *d;
    int sample;                 /* sample place, -1 when none */
    size_t ncoils;
    /* the timeline being built */
    double *vals, *lets;
    double *cur;                /* current per coil now */
    bool *line_on;
    double t;
    uint32_t point;             /* for messages; COMPILE_RUN_WIDE for the run */
    uint16_t step;
    bool got_acquisition;
    compile_timeline *tl;
    compile_event *ev;
    size_t nev, cap_ev;
    compile_pulse *pu;
    size_t npu, cap_pu;
    compile_acquire *aq;
    size_t naq, cap_aq;
    compile_step *st;
    size_t nst, cap_st;
    int failed;                 /* this timeline */
    int any_failed;             /* any timeline so far */
    /* refusals, deduplicated across points */
    compile_report *reports;
    size_t nreports, cap_reports;
    /* solver scratch */
    int *place_coils;           /* coils that appear in any place */
    size_t nplace_coils;
} compile_builder;

enum {
    REPORT_MAX_CURRENT, REPORT_MAX_SLEW, REPORT_COMPLIANCE, REPORT_VOLTAGE, REPORT_POWER,
    REPORT_RAMP_TOO_SHORT, REPORT_NO_FIELD_PER_CURRENT, REPORT_SINGULAR, REPORT_MISFIT,
    REPORT_TIP_UNREACHABLE, REPORT_PULSE_TOO_SHORT, REPORT_NYQUIST, REPORT_REGIME,
    REPORT_TARGET, REPORT_EVAL
};

#define COMPILE_RUN_WIDE UINT32_MAX

/* Report a refusal (or a warning) at loc for this point; repeats of the
 * same loc, coil and kind at later points only count. */
void compile_report_at(compile_builder *b, diag_severity sev, plan_loc loc, int coil,
                       int kind, const char *fmt, ...) __attribute__((format(printf, 6, 7)));
/* Turn the collected reports into diagnostics. */
void compile_flush_reports(compile_builder *b);

/* fields.c: the fields a step asks for, solved into currents (cur is
 * updated for the coils of the places). Returns 0 or -1 (reported). */
int compile_solve_targets(compile_builder *b, const plan_target *targets, size_t n,
                          plan_loc at, double *currents);

/* limits.c: the limits of one finished timeline (current, slew,
 * compliance, output voltage); of the whole run (power, duration). */
void limit_check_timeline(compile_builder *b, const compile_timeline *t);
void limit_check_run(compile_builder *b);
/* Adiabaticity of a linear change of the sample's field from ba to bb over
 * length: the smallest ratio, and the regime it gives. */
compile_regime limit_regime(const double ba[3], const double bb[3], double length,
                            double gamma, double *ratio);

#endif
