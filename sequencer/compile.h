/* compile: a read plan and its expanded scan turned into timed shots.
 * For every point (and every reference variant) one timeline of timed
 * events: coil ramps, line edges, pulses, acquisition windows, with the
 * coil solver, the pulse calculator, every limit and the adiabaticity of
 * each field change checked on the way. The result is plain data from one
 * arena: per point, not per sample; waveforms are made only on request.
 * Not for running anything (schedule.h) nor for reading files (plan.h). */
#ifndef PRECESS_COMPILE_H
#define PRECESS_COMPILE_H

#include <stddef.h>
#include <stdint.h>
#include "plan.h"
#include "scan.h"

/* ---- the coil solver (coils.c) --------------------------------------- */

typedef enum { COIL_EXACT, COIL_LEAST_SQUARES, COIL_MIN_NORM } coil_method;

/* Condition number past which a coil matrix counts as singular. */
#define COIL_MAX_CONDITION 1e10

/* Solve A x = b for the currents x: A is nrows x ncols, row-major (field
 * along z per ampere: places x coils), b has nrows entries. Exact (LU) when
 * square, least squares (QR) when nrows > ncols, minimum norm (SVD) when
 * fewer. *misfit is |A x - b| (2-norm), *method the case taken, *condition
 * the ratio of largest to smallest singular value. Returns 0, or -1 when A
 * is singular or its condition exceeds COIL_MAX_CONDITION. */
int coil_solve(const double *a, size_t nrows, size_t ncols, const double *b, double *x,
               double *misfit, coil_method *method, double *condition);

/* ---- the pulse calculator (pulses.c) ---------------------------------- */

typedef struct {
    double b0[3];       /* static field at the sample during the pulse, T */
    double axis[3];     /* unit vector of the pulse coil's field */
    double amplitude;   /* T: the flat top (dc) or the linear amplitude B1 (resonant) */
    double rise;        /* s: each edge of a dc pulse (amplitude / slew); 0: none */
    double flat;        /* s: flat top of a dc pulse, or the length of a resonant one */
    int resonant;
    double frequency;   /* Hz, resonant only: B_p(t) = amplitude cos(2 pi f t + phase) */
    double phase;       /* rad */
    double sign;        /* +1 or -1: polarity */
} pulse_shape;

/* The tip angle of a nucleus of gyromagnetic ratio gamma (rad/s/T) whose
 * magnetization starts along b0 (along z when b0 is zero): the rotation
 * about the total field b0 + B_p(t), integrated over the real shape with
 * its edges. */
double pulse_tip_angle(const pulse_shape *s, double gamma);
/* Equivalent rectangular length: the pulse's area over its amplitude. */
double pulse_duration(const pulse_shape *s);
/* Set s->flat so that the tip angle is angle (the first time the angle is
 * reached as the pulse lengthens). Returns 0, or -1 when the pulse cannot
 * reach it at this amplitude; *reach is then the largest angle it can give
 * within one precession period (or the angle of its edges alone, when the
 * edges already tip further than asked). */
int pulse_set_angle(pulse_shape *s, double gamma, double angle, double *reach);
/* Set s->flat so that pulse_duration(s) == duration. Returns 0, or -1 when
 * the duration is shorter than the edges allow (one rise time). */
int pulse_set_duration(pulse_shape *s, double duration);
/* Pulse current (A, before polarity) at time t from the pulse's start. */
double pulse_current_at(const pulse_shape *s, double peak_current, double t);

/* ---- compiled shots --------------------------------------------------- */

typedef enum { EV_RAMP, EV_LINE, EV_PULSE, EV_ACQUIRE } compile_event_kind;

typedef struct {
    double start;       /* s from the timeline's start */
    double length;      /* s (0 for a line edge or a current step) */
    double from, to;    /* ramp: currents in A; line: 0/1 (inactive/active) */
    uint32_t index;     /* pulse: into pulses; acquire: into acquisitions */
    uint16_t step;      /* step number from 1 in execution order; 0: back to rest */
    uint8_t kind;       /* compile_event_kind */
    int16_t channel;    /* ramp and pulse: coil; line: line */
} compile_event;

typedef struct {
    int coil;
    plan_shape shape;
    double amplitude;   /* T */
    double current;     /* A at the amplitude */
    double duration;    /* s, equivalent rectangular length */
    double rise;        /* s, each edge (dc) */
    double length;      /* s, total from first to last edge */
    double frequency, phase;
    bool alternate;     /* polarity flips on every other average */
    double *angles;     /* rad, one per nucleus of the sample */
    pulse_shape shape_at_sample;
} compile_pulse;

typedef struct {
    double rate, length;
    size_t ninputs;
    const int *inputs;
} compile_acquire;

typedef enum { REGIME_NONE, REGIME_ADIABATIC, REGIME_INTERMEDIATE, REGIME_SUDDEN }
    compile_regime;

typedef struct {
    plan_step_kind kind;
    const char *label;
    plan_loc loc;
    double start, length;
    compile_regime regime;      /* field changes (field, polarize): how they go */
    double adiabatic_ratio;     /* smallest |gamma||B| / (|B x dB/dt| / |B|^2) */
} compile_step;

typedef struct {
    size_t nevents, npulses, nacquisitions, nsteps;
    compile_event *events;      /* in start order */
    compile_pulse *pulses;
    compile_acquire *acquisitions;
    compile_step *steps;
    double duration;            /* s, back to rest included */
    double *currents;           /* per coil, during the first acquisition */
    double *fields;             /* per place, z, during the first acquisition */
    double field_at_sample[3];  /* the sample place's field vector then */
    double frequency;           /* Hz: default nucleus at the sample then */
    double *values;             /* the scan variables (nvars), then lets (nlets) */
} compile_timeline;

typedef struct {
    const plan *plan;
    const scan *scan;
    size_t ntimelines;          /* npoints, then one per reference variant */
    compile_timeline *timelines;
    uint32_t *shot_timeline;    /* per shot */
    double *shot_start;         /* per shot, s from the start of the run */
    compile_timeline setup, teardown;
    double *rest_currents;      /* per coil */
    double duration;            /* s: setup, every shot, teardown */
    int sample_place;           /* -1 when the rig has no places */
    arena *arena;
} compiled;

/* Compile every point. Returns the compiled plan (the caller frees it with
 * compile_free; p and s must outlive it), or NULL with errors in d; limit
 * refusals name the point, the step's location, the coil, the limit and
 * the value. Warnings (misfit, regime against expect) go to d as well. */
compiled *compile_plan(const plan *p, const scan *s, diag_list *d);
void compile_free(compiled *c);

/* The timeline shot number k (from 1) runs, and the polarity of pulse j in
 * it (+1, or -1 on every other average when the pulse alternates). */
const compile_timeline *compile_shot_timeline(const compiled *c, uint32_t shot);
int compile_pulse_polarity(const compiled *c, uint32_t shot, const compile_pulse *pulse);

/* Current of coil at time t within a timeline (ramps and pulses). */
double compile_current_at(const compiled *c, const compile_timeline *t, int coil, double time);

/* The field at a place from coil currents (per coil), z component, with
 * the place's residual. */
double compile_place_field(const plan_rig *rig, int place, const double *currents);
/* The field vector at the sample place: residual, place coils along their
 * axes, and coils with a field_per_current (polarizing, pulse) along theirs. */
void compile_sample_field(const plan_rig *rig, int sample_place, const double *currents,
                          double out[3]);

/* ---- limits (limits.c) ------------------------------------------------ */

/* The rig's sample place: the place named "sample", else the first place
 * that is not a sensor place; -1 when none. */
int compile_find_sample_place(const plan_rig *rig);

#endif
