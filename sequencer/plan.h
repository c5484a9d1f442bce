/* plan: reading plan and rig files into plain data, with diagnostics.
 * YAML (libyaml) becomes a tree of located nodes; the plan and rig readers
 * check every key's form and dimension against the language spec and turn
 * the tree into the structures below, all allocated from the plan's arena.
 * Not for timing, solving coils or limits (compile.h), nor for expanding
 * scans (scan.h). Nothing here prints; problems go into a diag_list. */
#ifndef PRECESS_PLAN_H
#define PRECESS_PLAN_H

#include <stdbool.h>
#include <stddef.h>
#include "arena.h"
#include "expr.h"
#include "units.h"

/* ---- diagnostics (diag.c) -------------------------------------------- */

typedef struct {
    const char *file;   /* owned by whoever made the location (an arena) */
    int line, col;      /* from 1; 0 when the whole file is meant */
} plan_loc;

typedef enum { DIAG_ERROR, DIAG_WARNING, DIAG_NOTE } diag_severity;

typedef struct {
    diag_severity severity;
    char *file;         /* owned copy */
    int line, col;
    char *message;      /* owned */
} diag;

typedef struct {
    diag *items;
    size_t n, cap;
    size_t errors, warnings;
} diag_list;

void diag_init(diag_list *d);
void diag_free(diag_list *d);
void diag_add(diag_list *d, diag_severity s, plan_loc at, const char *fmt, ...)
    __attribute__((format(printf, 4, 5)));
/* Stable sort by file, line, column (reading order for printing). */
void diag_sort(diag_list *d);
/* The nearest of n candidate words to word by edit distance, or NULL when
 * none is close enough to be a plausible typo. */
const char *diag_nearest(const char *word, const char *const *candidates, size_t n);

/* ---- the located YAML tree (yaml_tree.c) ----------------------------- */

typedef enum { PN_SCALAR, PN_SEQ, PN_MAP } plan_node_kind;

typedef struct plan_node {
    plan_node_kind kind;
    plan_loc loc;
    const char *text;     /* scalar text, NUL-terminated */
    size_t len;           /* scalar length in bytes */
    int quoted;           /* scalar was quoted */
    int text_col;         /* column of the scalar's first character */
    size_t n;             /* items of a sequence, pairs of a mapping */
    struct plan_node **items;   /* sequence items, or mapping values */
    struct plan_node **keys;    /* mapping keys (scalars), written order */
} plan_node;

/* Limits for untrusted files (plan-language.md, Files). */
#define PLAN_MAX_FILE_BYTES (1024 * 1024)
#define PLAN_MAX_DEPTH 64
#define PLAN_MAX_ALIAS_NODES 100000

/* Parse bytes into a tree in arena a. file names the source for locations
 * (copied into the arena). Returns the root mapping, or NULL with errors in
 * d (syntax, empty document, limits, duplicate keys, non-mapping root). */
plan_node *plan_yaml_parse(arena *a, const char *file, const char *bytes,
                           size_t len, diag_list *d);
/* The value of key in a mapping node, or NULL. */
const plan_node *plan_node_get(const plan_node *map, const char *key);

/* ---- values ---------------------------------------------------------- */

/* A value from the file: its expression (constant or not), where it was
 * written and what dimension its key expects. set is false when absent. */
typedef struct {
    bool set;
    plan_loc loc;
    expr_node *expr;    /* in the plan's arena */
    const char *text;
    units_dim dim;
    double value;       /* SI value when the expression is constant */
} plan_value;

/* ---- the rig --------------------------------------------------------- */

enum { AXIS_X, AXIS_Y, AXIS_Z };

typedef struct {
    const char *name;
    plan_loc loc;
    int output;                 /* analog output channel */
    double amps_per_volt, max_current, max_slew;
    double resistance, inductance, compliance;
    double max_power, thermal_time;   /* 0: not given */
    double field_per_current;         /* T/A at the sample; 0: not given */
    bool has_field_per_current, from_geometry;
    int turns;                        /* geometry, when from_geometry */
    double radius, length;
    bool helmholtz;
    int axis;
} rig_coil;

typedef struct {
    const char *name;
    plan_loc loc;
    double field;
} rig_magnet;

/* One place: field along each coil's axis per ampere, for the coils named. */
typedef struct {
    const char *name;
    plan_loc loc;
    size_t n;
    int *coil;                  /* index into rig.coils */
    double *per_current;        /* T/A */
    plan_loc *entry_loc;
    double residual[3];         /* x, y, z with every coil off */
    bool is_sensor;             /* named like an input: the detector's place */
} rig_place;

typedef enum { LINE_OUTPUT, LINE_INPUT } rig_line_dir;

typedef struct {
    const char *name;
    plan_loc loc;
    int channel;
    rig_line_dir direction;
    bool active_high;           /* outputs */
    bool require_high;          /* inputs with require */
    bool has_require;
} rig_line;

typedef struct {
    const char *name;
    plan_loc loc;
    int channel;
    double range_lo, range_hi;  /* V */
    double field_per_volt;      /* T/V */
    int bits;
} rig_input;

typedef enum {
    FAULT_READ_ERROR, FAULT_OVERRUN, FAULT_DEVICE_GONE, FAULT_INTERLOCK,
    FAULT_DISK_FULL
} rig_fault_kind;

typedef struct {
    int shot;
    rig_fault_kind kind;
    plan_loc loc;
} rig_fault;

typedef struct {
    const char *file;           /* the rig file, or the plan for inline rigs */
    const char *bytes;          /* the file's bytes (for hashing and copies) */
    size_t nbytes;
    plan_loc loc;
    const char *name;
    const char *driver;         /* "sim" or "comedi" */
    const char *device;         /* comedi only; NULL otherwise */
    double ao_range;            /* ± volts of the analog outputs */
    int ao_bits;
    size_t ncoils, nmagnets, nplaces, nlines, ninputs, nfaults;
    rig_coil *coils;
    rig_magnet *magnets;
    rig_place *places;
    rig_place *true_places;     /* simulated rigs; NULL when not given */
    rig_line *lines;
    rig_input *inputs;
    struct {
        bool present;
        double gyromagnetic;    /* Hz/T */
        double bandwidth;       /* Hz */
        double noise;           /* T/sqrtHz */
        int axis, sense;
        int input;              /* index of its input, -1 when unknown */
    } detector;
    struct {
        bool present;
        double mains, mains_field, drift_per_hour;
        int harmonics;
    } environment;
    rig_fault *faults;
    bool acts_as_hardware;
} plan_rig;

int rig_find_coil(const plan_rig *r, const char *name, size_t len);
int rig_find_magnet(const plan_rig *r, const char *name, size_t len);
int rig_find_place(const plan_rig *r, const char *name, size_t len);
int rig_find_line(const plan_rig *r, const char *name, size_t len);
int rig_find_input(const plan_rig *r, const char *name, size_t len);

/* Field per ampere at the centre: finite solenoid mu0 N / sqrt(L^2 + 4 R^2),
 * Helmholtz pair (4/5)^(3/2) mu0 N / R (N turns per coil). */
double rig_solenoid_field_per_current(int turns, double radius, double length);
double rig_helmholtz_field_per_current(int turns, double radius);

/* Read a rig from its root node (a file's root or a plan's inline `rig:`).
 * Returns 0, or -1 with errors in d. */
int rig_read_node(arena *a, const plan_node *root, plan_rig *out, diag_list *d);

/* ---- reading helpers (plan_keys.c), shared by the plan and rig readers */

typedef struct {
    arena *a;
    diag_list *d;
    expr_lookup_fn lookup;      /* NULL: only constants (rigs) */
    void *lookup_ctx;
    const plan_rig *rig;        /* for names of coils, places, ... */
    /* After a failed lookup: a known name close to the one missing, or NULL. */
    const char *(*suggest)(void *ctx);
} plan_reader;

/* Location of byte pos inside scalar n (for errors inside expressions). */
plan_loc plan_loc_in(const plan_node *n, size_t pos);
/* Check that n is a mapping whose keys are all in known (NULL-terminated)
 * and that every key of required (NULL-terminated, may be NULL) is there.
 * where names the mapping in messages ("coil main", "pulse"). Unknown keys
 * get the nearest known key suggested. Returns 0 or -1 (errors added). */
int plan_keys(plan_reader *r, const plan_node *n, const char *where,
              const char *const *known, const char *const *required);
/* A scalar as text (labels, titles, paths); NULL with an error otherwise. */
const char *plan_read_text(plan_reader *r, const plan_node *n, const char *key);
/* A scalar parsed as an expression (not yet evaluated); NULL after an
 * error (not a scalar, empty, a syntax error at its column). */
expr_node *plan_read_expr(plan_reader *r, const plan_node *n, const char *key);
/* A quantity or expression of dimension dim. Returns 0 or -1. */
int plan_read_value(plan_reader *r, const plan_node *n, const char *key,
                    units_dim dim, plan_value *out);
/* The same, reduced to a constant SI double (rigs). */
int plan_read_const(plan_reader *r, const plan_node *n, const char *key,
                    units_dim dim, double *out);
/* A count: a plain non-negative integer, at least min. */
int plan_read_count(plan_reader *r, const plan_node *n, const char *key,
                    int min, int *out);
/* A seed: a plain whole number below 2^32. */
int plan_read_seed(plan_reader *r, const plan_node *n, const char *key, unsigned long *out);
int plan_read_bool(plan_reader *r, const plan_node *n, const char *key, bool *out);
/* One of choices (NULL-terminated); *out its index. */
int plan_read_choice(plan_reader *r, const plan_node *n, const char *key,
                     const char *const *choices, int *out);
/* A nucleus token known to the nuclei table. */
const nuc_info *plan_read_nucleus(plan_reader *r, const plan_node *n, const char *key);
/* The name of a rig entity of kind "coil", "magnet", "place", "line" or
 * "input"; *out its index. Unknown names get the nearest suggested. */
int plan_read_ref(plan_reader *r, const plan_node *n, const char *kind, int *out);
/* The names of a rig's entities of one kind; *n set to their count. */
const char **rig_names(arena *a, const plan_rig *rig, const char *kind, size_t *n);

/* ---- the plan -------------------------------------------------------- */

typedef enum { SCAN_LIST, SCAN_RANGE } plan_var_kind;
typedef enum { SPACING_LINEAR, SPACING_LOG } plan_spacing;

typedef struct {
    const char *name;
    plan_loc loc;
    plan_var_kind kind;
    size_t n;                   /* number of values */
    plan_value *values;         /* lists: each entry (constant) */
    plan_value from, to;        /* ranges */
    plan_spacing spacing;
    units_dim dim;
    bool used;
} plan_var;

typedef struct {
    const char *name;
    plan_loc loc;
    plan_value value;
    bool used;
} plan_let;

/* One target of a `field` step or of `rest`. */
typedef enum {
    TARGET_FIELD, TARGET_LARMOR, TARGET_TUNE, TARGET_TUNE_FREQ
} plan_target_kind;

typedef struct {
    int place;
    plan_loc loc;
    plan_target_kind kind;
    plan_value value;           /* field (T) or frequency (Hz) */
    const nuc_info *nucleus;    /* larmor: the nucleus; NULL: the default */
} plan_target;

typedef enum {
    STEP_POLARIZE, STEP_FIELD, STEP_PULSE, STEP_ACQUIRE, STEP_LINE, STEP_WAIT,
    STEP_REPEAT
} plan_step_kind;

typedef enum { EXPECT_NONE, EXPECT_ADIABATIC, EXPECT_SUDDEN } plan_expect;
typedef enum { SHAPE_DC, SHAPE_RESONANT } plan_shape;

typedef struct plan_step plan_step;

typedef struct {
    size_t n;
    plan_step *steps;
} plan_steps;

struct plan_step {
    plan_step_kind kind;
    plan_loc loc;               /* the step's key */
    const char *label;          /* "" when none */
    union {
        struct {
            int coil, magnet;   /* one of them is -1 */
            plan_value field, current, hold;
            plan_value off_ramp;    /* not set: fastest */
        } polarize;
        struct {
            size_t n;
            plan_target *targets;
            plan_value settle, ramp;
            plan_expect expect;
        } field;
        struct {
            int coil;
            plan_value angle, duration, amplitude, frequency, phase;
            plan_shape shape;
            const nuc_info *nucleus;    /* NULL: the default */
            bool alternate;
        } pulse;
        struct {
            plan_value length, rate;
            size_t ninputs;
            int *inputs;        /* all the rig's inputs when not given */
        } acquire;
        struct {
            int line;
            bool on;
        } line;
        struct {
            plan_value length;
        } wait;
        struct {
            int times;
            plan_steps body;
        } repeat;
    } u;
};

/* Relaxation-time models of the simulated sample (t1, t2). */
typedef enum { MODEL_NONE, MODEL_CONST, MODEL_BPP, MODEL_LORENTZIANS, MODEL_TABLE }
    plan_model_kind;

typedef struct {
    plan_model_kind kind;
    plan_loc loc;
    double value;               /* const: the time */
    double tau, strength;       /* bpp */
    double base;                /* lorentzians: s^-1 */
    size_t n;                   /* lorentzian terms or table rows */
    double *rate, *corner;      /* lorentzians */
    double *field, *time;       /* table */
} plan_relax_model;

typedef struct {
    const char *label;
    size_t nnuclei;
    const nuc_info **nuclei;    /* the first is the default nucleus */
    double temperature;         /* K, default 295 */
    bool has_model;
    plan_relax_model t1, t2;
    double signal_per_field;    /* 0 when not given */
    double spin_density, volume, distance;
    size_t nspins, ncouplings;
    const char **spin_label;
    const nuc_info **spin_nucleus;
    int *coupling_a, *coupling_b;   /* indices into spins */
    double *coupling;               /* Hz */
} plan_sample;

typedef enum { COMBINE_GRID, COMBINE_TOGETHER } plan_combine;
typedef enum { ORDER_AS_WRITTEN, ORDER_REVERSED, ORDER_SHUFFLED } plan_order;
typedef enum { FIT_NONE, FIT_RELAXATION, FIT_BUILDUP, FIT_CALIBRATION } plan_fit;

typedef struct {
    const char *file;
    const char *bytes;          /* the plan's bytes as read */
    size_t nbytes;
    const char *title;
    plan_rig rig;
    bool rig_inline;
    const char *rig_path;       /* resolved path of the rig file; NULL inline */
    plan_sample sample;
    size_t nlets, nvars;
    plan_let *lets;
    plan_var *vars;
    plan_combine combine;
    plan_order order;
    unsigned long seed;
    int averages, warmup;
    struct {
        bool present;
        int every;
        size_t n;
        int *var;               /* index into vars */
        plan_value *value;
        plan_loc loc;
    } reference;
    int retries;
    bool stop_on_fault;
    double max_duration;        /* 0: no limit */
    plan_loc max_duration_loc;
    size_t nrest;
    plan_target *rest;
    plan_steps setup, teardown, shot;
    struct {
        plan_fit fit;
        plan_loc loc;
        int against_var;        /* index into vars, or -1 */
        int against_current;    /* coil index, or -1 */
        int per_var;            /* -1 when none */
        double line_noise;      /* 0 when none */
        bool has_window;
        double window_from, window_to;
    } analysis;
    arena *arena;               /* owns everything above */
} plan;

/* Read a plan file (and its rig). Returns a plan the caller frees with
 * plan_free, or NULL when reading failed; errors and warnings go to d in
 * both cases. The plan is returned only when d gained no error. */
plan *plan_read_file(const char *path, diag_list *d);
/* The same with the rig read from rig_path instead of the plan's own rig:
 * path (a run folder's copies; a rig written inline stays inline). */
plan *plan_read_with_rig(const char *path, const char *rig_path, diag_list *d);
/* The same from bytes already in memory (file names the source). */
plan *plan_read_bytes(const char *file, const char *bytes, size_t len, diag_list *d);
void plan_free(plan *p);

/* Read a rig file alone (for `check RIG`). Returns 0 or -1; on success *out
 * is filled from arena a. */
int rig_read_file(arena *a, const char *path, plan_rig *out, diag_list *d);

/* What a file is: 1 plan (has shot:), 2 rig (coils:, inputs: or driver:
 * without shot:), 0 neither, -1 unreadable or not YAML (errors in d). */
int plan_file_kind(const char *path, diag_list *d);

/* Read a whole file (at most PLAN_MAX_FILE_BYTES) into a malloc'd buffer.
 * Returns 0, or -1 with an error in d naming the file. */
int plan_slurp(const char *path, char **bytes, size_t *len, diag_list *d);

/* Values of scan variables and lets at one point, in SI, for evaluating
 * expressions. vals has nvars entries; lets are evaluated in order into
 * let_vals (nlets entries). Returns 0, or -1 with an error in d. */
int plan_eval_lets(const plan *p, const double *vals, double *let_vals, diag_list *d);
/* Evaluate v at a point (vals: the scan variables; let_vals: the lets).
 * Returns 0 and *out in SI, or -1 with an error in d. */
int plan_eval(const plan *p, const plan_value *v, const double *vals,
              const double *let_vals, double *out, diag_list *d);

#endif
