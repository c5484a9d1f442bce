/* driver: the table of functions every DAQ driver fills (the simulated rig,
 * comedi): open a rig, describe what it can do, set analog outputs and
 * digital lines, read lines, take hardware-timed output segments (ramps and
 * pulses) ahead of time, run hardware-timed acquisitions whose samples come
 * through a file descriptor, and go to the safe state. The scheduler knows
 * no driver by name: it finds the table through drv_find(rig->driver).
 * Not for timing decisions (schedule.h) nor for limits (compile.h). */
#ifndef PRECESS_DRIVER_H
#define PRECESS_DRIVER_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include "compile.h"

typedef struct drv drv;   /* a driver's open rig, opaque */

typedef struct {
    double time_resolution;     /* s: the finest step of hardware timing */
    bool timed_outputs;         /* output segments run on the card's clock */
    bool timed_inputs;          /* acquisitions run on the card's clock */
    bool is_hardware;           /* real outputs (or a rig that acts as hardware) */
    double max_rate;            /* Hz: the fastest acquisition */
    size_t outputs, inputs, lines;
} drv_caps;

/* What a driver is opened with: the rig and, for drivers that need the
 * intent behind the outputs (the simulated sample), the compiled plan. */
typedef struct {
    const plan_rig *rig;
    const compiled *plan;       /* may be NULL (probe) */
    uint64_t run_seed;          /* from the run id: seeds simulated noise */
    bool virtual_time;          /* run --fast: samples need not wait for the clock */
    const char *log_path;       /* simulated rig: where to log every command (or NULL) */
} drv_context;

/* Times given to a driver are absolute seconds of the scheduler's clock:
 * CLOCK_MONOTONIC for real runs, virtual seconds from 0 for run --fast. */

/* A hardware-timed output segment on one coil, in absolute seconds of the
 * scheduler's clock: a linear ramp of current (from -> to) or a pulse
 * (shape, peak current, polarity) added to the coil's current. The driver
 * turns current into volts (amps_per_volt) and makes its own samples at its
 * resolution (compile's pulse_current_at gives a pulse's shape). */
typedef struct {
    int coil;
    double start, length;
    double from, to;            /* ramp: A */
    const pulse_shape *pulse;   /* NULL for a ramp */
    double peak;                /* pulse: A, polarity applied */
} drv_segment;

/* A hardware-timed acquisition of some inputs at rate, starting at start
 * (absolute seconds), nsamples per input. Samples arrive as float32 in the
 * input's physical unit (tesla), interleaved input by input. */
typedef struct {
    size_t ninputs;
    const int *inputs;          /* indices into rig->inputs */
    double rate, start;
    size_t nsamples;
    uint32_t shot, attempt;
} drv_acquisition;

/* Every function returns 0; -1 with a message in err (errlen bytes) when
 * this attempt failed (it may be retried); -2 with a message for a hardware
 * fault (the device is gone): the run then ends in the safe state, exit 4;
 * DRV_LIMIT with a message when a command would go past a limit of the rig
 * (current, output voltage, slew: the driver's own check, behind the
 * compiler's): nothing of it was sent, and the run stops in the safe state
 * with the stop reason `limit`, exit 1, as no retry would do otherwise. */
#define DRV_LIMIT (-3)
typedef struct {
    const char *name;
    int (*open)(const drv_context *ctx, drv **out, char *err, size_t errlen);
    void (*close)(drv *d);
    void (*caps)(drv *d, drv_caps *out);
    /* The shot about to run (for logs and the simulated sample's history). */
    int (*begin_shot)(drv *d, uint32_t shot, uint32_t attempt, const compile_timeline *t,
                      double start, char *err, size_t errlen);
    int (*set_current)(drv *d, int coil, double amps, double at, char *err, size_t errlen);
    int (*load_segment)(drv *d, const drv_segment *s, char *err, size_t errlen);
    int (*set_line)(drv *d, int line, bool active, double at, char *err, size_t errlen);
    int (*read_line)(drv *d, int line, bool *high, char *err, size_t errlen);
    /* Starts an acquisition; *fd becomes readable as samples arrive. */
    int (*start_acquisition)(drv *d, const drv_acquisition *a, int *fd, char *err,
                             size_t errlen);
    /* Reads what has arrived (at most max floats); *got 0 and *done true at the end. */
    int (*read_samples)(drv *d, float *out, size_t max, size_t *got, bool *done, char *err,
                        size_t errlen);
    void (*stop_acquisition)(drv *d);
    /* Every coil ramped to zero at its max_slew, every line inactive; waits
     * until it is so (on the clock given: virtual or real). */
    int (*safe_state)(drv *d, double at, char *err, size_t errlen);
    /* Volts per ADC count and bits of an input, for the records. */
    void (*input_scale)(drv *d, int input, double *volts_per_count, int *bits);
} drv_ops;

/* The driver named by a rig's `driver:` key, or NULL. */
const drv_ops *drv_find(const char *name);

#endif
