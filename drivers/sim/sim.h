/* sim: what the simulated rig's files share: each coil's commanded history
 * (sim.c), the sample's physics (sample.c: polarization, pulses, relaxation,
 * lines at the sensor), the environment and ADC (noise.c).
 * Not a public interface: the program sees only the drv_ops table
 * `sim_driver` of driver.h (tests also call the functions here). */
#ifndef PRECESS_SIM_H
#define PRECESS_SIM_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <gsl/gsl_rng.h>
#include "driver.h"

/* Return code of every driver call once the device is gone (a `device_gone`
 * fault): below -1, so the scheduler tells a hardware fault from a failed
 * attempt. */
#define SIM_GONE (-2)

/* ---- the coils' commanded history (sim.c) ------------------------------ */

typedef enum { SIM_RAMP, SIM_PULSE } sim_segment_kind;

/* One commanded change of a coil's current, absolute seconds. A step
 * (set_current) is a ramp of length 0. A pulse adds peak times its shape
 * (pulse_current_at with the shape's own sign removed, so the polarity is
 * the sign of peak alone) on top of the current, until `until`. */
typedef struct {
    sim_segment_kind kind;
    double start, length;
    double from, to;            /* ramp: A */
    double peak;                /* pulse: A, polarity applied */
    double until;               /* pulse: cut off here (safe state); INFINITY */
    pulse_shape shape;          /* pulse: a copy */
    const pulse_shape *given;   /* pulse: the caller's pointer (to find its compile_pulse) */
} sim_segment;

typedef struct {
    double base;                /* A before the first segment */
    size_t n, cap;
    sim_segment *seg;           /* in start order (stable) */
} sim_history;

/* The coil's current at time t. */
double sim_history_current(const sim_history *h, double t);
/* True when no segment changes the current within the open interval (a, b);
 * a ramp ending within SIM_STEADY_SLACK after a counts as ended at a (one
 * that ends where an acquisition starts, its end rounded a few ulps past
 * it): the steady current is then the one at a + SIM_STEADY_SLACK. A pulse
 * has no such slack (its current is far from its end's a nanosecond before),
 * only its rounding: one ending within SIM_ROUNDING ulps of a's magnitude
 * after a has ended at a (an acquisition that starts as the last pulse
 * ends, the two ends summed in different orders). */
#define SIM_STEADY_SLACK 1e-9
#define SIM_ROUNDING 16
bool sim_history_steady(const sim_history *h, double a, double b);

/* ---- the sample (sample.c) -------------------------------------------- */

/* What the sample model sees of the rig for one acquisition. */
typedef struct {
    const plan_rig *rig;
    const plan *plan;               /* NULL (probe): no sample, no signal */
    const compile_timeline *tl;     /* the shot's timeline; NULL outside a shot */
    double shot_start;              /* absolute s; NAN: the earliest segment */
    const sim_history *coils;       /* rig->ncoils */
    int sample_place, sensor_place; /* -1 when the rig has none */
    double *scratch;                /* rig->ncoils currents, the caller's */
} sim_scene;

/* One line of the spectrum at the sensor. */
typedef struct {
    double amplitude;   /* T at the sensor at t_end: signed, detector response in */
    double offset;      /* Hz added to the nucleus' Larmor frequency (J multiplet) */
    double gamma;       /* rad/s/T of its nucleus */
} sim_line;

typedef struct {
    size_t nlines;
    sim_line *lines;        /* malloc'd; sim_signal_free */
    double t_end;           /* absolute s: the end of the last pulse (phase 0) */
    double t2;              /* s, at the detection field; INFINITY: no decay */
    double polarization;    /* T-equivalent at t_end, before the pulse's tip */
    double f_res;           /* Hz: the detector's resonance */
} sim_signal;

/* Relaxation time of model m (t1 or t2) at |field| for a nucleus of
 * gyromagnetic ratio gamma; NAN when the model is not given. */
double sim_relax_time(const plan_relax_model *m, double gamma, double field);
/* The field at the sensor per tesla of polarization from the Curie law and
 * the sample's dipole field, for nucleus nu; 0 without spin_density. */
double sim_curie_signal_per_field(const plan_sample *s, const nuc_info *nu);
/* Field vector at a place from currents with the true calibration (the
 * rig's true_places where given), the place's residual, and with_fpc: the
 * coils with a field_per_current that are not in the place, along their
 * axes (the sample place only). */
void sim_place_field(const plan_rig *rig, int place, const double *currents, bool with_fpc,
                     double out[3]);
/* The actual field at the sample and at the sensor at absolute time t. */
void sim_sample_field(const sim_scene *sc, double t, double out[3]);
void sim_sensor_field(const sim_scene *sc, double t, double out[3]);
/* True when no coil changes its current within (a, b). */
bool sim_scene_steady(const sim_scene *sc, double a, double b);
/* The lines an acquisition starting at `at` records: the polarization
 * integrated over the shot up to the last pulse that starts before at, the
 * tip of every nucleus, multiplets, T2 and the detector's response (drift:
 * the residual's drift along z then). Returns 0, or -1 out of memory. */
int sim_sample_signal(const sim_scene *sc, double at, double drift, sim_signal *out);
void sim_signal_free(sim_signal *s);

/* ---- environment, noise, ADC (noise.c) ---------------------------------- */

#define SIM_MAX_HARMONICS 64

/* An oscillator in a record (a line, a mains harmonic): its phase summed
 * sample by sample, cos and sin of it carried by rotations (noise.c). */
typedef struct {
    double phase, c, s;         /* rad, cos and sin of it */
    double d0, cd0, sd0;        /* a reference step, rad, its cos and sin */
    double per_field, step0;    /* a line's step: per_field |B| + step0, rad */
} sim_osc;

typedef struct {
    gsl_rng *drift_rng;         /* seeded from the run */
    double drift;               /* T along z, the residual's random walk */
    double drift_time;          /* absolute s of that value; NAN: not started */
    int harmonics;
    double mains_phase[SIM_MAX_HARMONICS];
    /* kept from one record to the next (sim_record): */
    gsl_rng *noise_rng;         /* seeded again for each record */
    double *field;              /* field_cap samples */
    size_t field_cap;
    sim_osc *osc;               /* osc_cap lines */
    size_t osc_cap;
} sim_env;

/* A 64-bit mix of three words (splitmix64 finalizer, chained). */
uint64_t sim_mix(uint64_t a, uint64_t b, uint64_t c);
int sim_env_init(sim_env *e, const plan_rig *rig, uint64_t run_seed);
void sim_env_free(sim_env *e);
/* Advance the drift to absolute time t (no change when t is not later). */
void sim_env_drift_to(sim_env *e, const plan_rig *rig, double t);
/* An input's ADC: field -> volts -> clipped -> quantized -> field. */
double sim_adc(const rig_input *in, double field);
double sim_volts_per_count(const rig_input *in);
/* The whole record of acquisition a (interleaved, a->nsamples per input)
 * into out: the sample's lines, drift, mains and white noise at the
 * detector's input, every input through its ADC. Noise is seeded from
 * noise_seed. Returns 0, or -1 out of memory. */
int sim_record(sim_env *e, const sim_scene *sc, const sim_signal *sig,
               const drv_acquisition *a, uint64_t noise_seed, float *out);

/* ---- for tests (sim.c) ------------------------------------------------- */

/* The current the driver has commanded on coil at absolute time t. */
double sim_current_at(drv *d, int coil, double t);

#endif
