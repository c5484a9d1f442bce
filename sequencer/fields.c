/* fields: the magnetic field at the rig's places from coil currents, and
 * the targets of a field step or of rest (a field, a Larmor frequency, the
 * detector's tuning) solved into coil currents through coil_solve.
 * Not for timing (compile.c) nor for limits (limits.c). */
#include "compile_internal.h"

#include <math.h>
#include <stdio.h>
#include <string.h>

int compile_find_sample_place(const plan_rig *rig) {
    int first = -1;
    for (size_t i = 0; i < rig->nplaces; i++) {
        if (strcmp(rig->places[i].name, "sample") == 0) return (int)i;
        if (first < 0 && !rig->places[i].is_sensor) first = (int)i;
    }
    return first;
}

static double axis_z(const rig_coil *c) { return c->axis == AXIS_Z ? 1.0 : 0.0; }

double compile_place_field(const plan_rig *rig, int place, const double *currents) {
    const rig_place *pl = &rig->places[place];
    double bz = pl->residual[2];
    for (size_t i = 0; i < pl->n; i++)
        bz += pl->per_current[i] * currents[pl->coil[i]] * axis_z(&rig->coils[pl->coil[i]]);
    return bz;
}

void compile_sample_field(const plan_rig *rig, int sample_place, const double *currents,
                          double out[3]) {
    out[0] = out[1] = out[2] = 0;
    const rig_place *pl = sample_place >= 0 ? &rig->places[sample_place] : NULL;
    if (pl) memcpy(out, pl->residual, 3 * sizeof *out);
    for (size_t c = 0; c < rig->ncoils; c++) {
        const rig_coil *coil = &rig->coils[c];
        double k = 0;
        int in_place = 0;
        for (size_t i = 0; pl && i < pl->n; i++)
            if (pl->coil[i] == (int)c) {
                k = pl->per_current[i];
                in_place = 1;
            }
        if (!in_place && coil->has_field_per_current) k = coil->field_per_current;
        out[coil->axis] += k * currents[c];
    }
}

static double norm3(const double v[3]) { return sqrt(v[0] * v[0] + v[1] * v[1] + v[2] * v[2]); }

/* The z field a target asks for at its place, or NAN with a report. */
static double target_z(compile_builder *b, const plan_target *tg, double sample_bz,
                       const double *currents) {
    const plan_rig *rig = &b->p->rig;
    const rig_place *pl = &rig->places[tg->place];
    double bperp = hypot(pl->residual[0], pl->residual[1]);
    double v = 0;
    if (tg->kind != TARGET_TUNE &&
        plan_eval(b->p, &tg->value, b->vals, b->lets, &v, b->d)) {
        b->failed = 1;
        return NAN;
    }
    if (tg->kind == TARGET_FIELD) return v;
    double magnitude, sign = 1;
    if (tg->kind == TARGET_LARMOR) {
        const nuc_info *nu = tg->nucleus ? tg->nucleus : b->p->sample.nuclei[0];
        magnitude = 2 * M_PI * fabs(v) / fabs(nu->gamma);
    } else {
        double f = v;
        if (tg->kind == TARGET_TUNE) {
            double bs[3];
            compile_sample_field(rig, b->sample, currents, bs);
            if (b->sample >= 0) bs[2] = sample_bz;
            f = fabs(b->p->sample.nuclei[0]->gamma) * norm3(bs) / (2 * M_PI);
        }
        /* Parallel to the sample's field for sense 1, antiparallel for -1. */
        sign = (sample_bz < 0 ? -1 : 1) * rig->detector.sense;
        magnitude = fabs(f) / fabs(rig->detector.gyromagnetic);
    }
    if (magnitude < bperp) {
        char a[64], c[64];
        compile_report_at(b, DIAG_ERROR, tg->loc, -1, REPORT_TARGET,
                          "place %s cannot have a field of %s: its transverse residual alone "
                          "is %s", pl->name, units_format(magnitude, UNITS_FIELD, a, sizeof a),
                          units_format(bperp, UNITS_FIELD, c, sizeof c));
        return NAN;
    }
    return sign * sqrt(magnitude * magnitude - bperp * bperp);
}

/* Solve the rows of the targeted places for the place coils. */
static int solve_rows(compile_builder *b, const plan_target *targets, size_t n,
                      const double *bz, plan_loc at, double *currents) {
    const plan_rig *rig = &b->p->rig;
    size_t m = b->nplace_coils;
    double a[64 * 64], rhs[64] = {0}, x[64] = {0};
    if (n > 64 || m > 64 || n == 0) return -1;
    memset(a, 0, n * m * sizeof *a);
    for (size_t r = 0; r < n; r++) {
        const rig_place *pl = &rig->places[targets[r].place];
        rhs[r] = bz[r] - pl->residual[2];
        for (size_t j = 0; j < m; j++) {
            int c = b->place_coils[j];
            for (size_t i = 0; i < pl->n; i++)
                if (pl->coil[i] == c) a[r * m + j] = pl->per_current[i] * axis_z(&rig->coils[c]);
        }
    }
    double misfit, cond;
    coil_method method;
    if (coil_solve(a, n, m, rhs, x, &misfit, &method, &cond)) {
        char coils[256] = "", places[256] = "";
        size_t u = 0, v = 0;
        for (size_t j = 0; j < m && u < sizeof coils; j++)
            u += (size_t)snprintf(coils + u, sizeof coils - u, "%s%s", j ? ", " : "",
                                  rig->coils[b->place_coils[j]].name);
        for (size_t r = 0; r < n && v < sizeof places; r++)
            v += (size_t)snprintf(places + v, sizeof places - v, "%s%s", r ? ", " : "",
                                  rig->places[targets[r].place].name);
        compile_report_at(b, DIAG_ERROR, at, -1, REPORT_SINGULAR,
                          "the coils %s cannot set the fields at %s independently (their "
                          "matrix is singular or ill-conditioned); check the rig's places",
                          coils, places);
        return -1;
    }
    double scale = 0;
    for (size_t r = 0; r < n; r++) scale = fmax(scale, fabs(rhs[r]));
    if (method == COIL_LEAST_SQUARES && misfit > 1e-6 * scale && misfit > 1e-15) {
        char f[64];
        compile_report_at(b, DIAG_WARNING, at, -1, REPORT_MISFIT,
                          "the coils cannot give every field asked here; the least-squares "
                          "misfit is %s", units_format(misfit, UNITS_FIELD, f, sizeof f));
    }
    for (size_t j = 0; j < m; j++) currents[b->place_coils[j]] = x[j];
    return 0;
}

int compile_solve_targets(compile_builder *b, const plan_target *targets, size_t n,
                          plan_loc at, double *currents) {
    if (n == 0) return 0;
    double bz[64];
    if (n > 64) return -1;
    /* Tuning follows the sample's field: solve, then tune to the result;
     * a few rounds settle it when the sample place is left free. */
    int sample_row = -1, has_tune = 0;
    for (size_t r = 0; r < n; r++) {
        if (targets[r].place == b->sample) sample_row = (int)r;
        if (targets[r].kind == TARGET_TUNE) has_tune = 1;
    }
    int rounds = has_tune && sample_row < 0 ? 4 : 1;
    for (int round = 0; round < rounds; round++) {
        double sample_bz = b->sample >= 0 ? compile_place_field(&b->p->rig, b->sample, currents)
                                          : 0;
        if (sample_row >= 0)
            sample_bz = target_z(b, &targets[sample_row], 0, currents);
        for (size_t r = 0; r < n; r++) {
            bz[r] = (int)r == sample_row ? sample_bz : target_z(b, &targets[r], sample_bz,
                                                                 currents);
            if (isnan(bz[r])) return -1;
        }
        if (solve_rows(b, targets, n, bz, at, currents)) return -1;
    }
    return 0;
}
