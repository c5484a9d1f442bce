/* sample: the simulated sample's physics for one acquisition: the field it
 * sits in (a magnet, or the coils' actual currents with the true calibration),
 * its polarization over the shot, the pulses' tips, its lines at the sensor
 * with their multiplets, T2 and the detector's response.
 * Not for noise, drift, mains or the ADC (noise.c) nor the DAQ (sim.c).
 *
 * The choices this model makes, each a simplification a user should know:
 * - Polarization P is kept in tesla-equivalent (the field the sample would
 *   be in equilibrium with) and starts at 0 at the shot's start (begin_shot;
 *   the earliest commanded segment outside a shot). It follows
 *   dP/dt = (B_pol(t) - P) / T1(B_pol(t)), the longitudinal Bloch equation
 *   (source: Bloch, Phys. Rev. 70, 460 (1946)), with B_pol = |B| at the
 *   sample: a magnet's field during a `polarize: {magnet}` step, else the
 *   field of the coils' actual currents (true_places where given) plus the
 *   residual. The magnetization is taken to follow the field's direction
 *   (every transfer adiabatic); sudden field changes are not modelled.
 * - Magnet stays are found by walking the timeline's steps together with
 *   the plan's shot steps (repeat bodies expanded in order, as the compiler
 *   does). When the two do not line up (setup, teardown) no stay is known
 *   and only the coils count.
 * - The signal comes from the last pulse that starts before the
 *   acquisition; every earlier pulse leaves P cos(theta) of the default
 *   nucleus behind and its transverse part is taken as dephased. Angles are
 *   the compiled ones (compile_pulse.angles), or pulse_tip_angle of the
 *   segment's shape when the pulse is not one of the shot's timeline.
 * - Without t1 the polarization is in equilibrium with the field at every
 *   instant; without t2 the lines do not decay; without signal_per_field or
 *   spin_density (or without a model) there is no signal.
 * - With signal_per_field every nucleus shares the given value; with
 *   spin_density each nucleus gets its own Curie-law value (its gamma^2
 *   I(I+1), so (gamma/gamma_default)^2 between spin-1/2 nuclei), all from
 *   the one P of the default nucleus' T1.
 * - Coupled spins: first-order (weak-coupling) multiplets only. Each spin
 *   of a nucleus is split by +-J/2 for every coupling to a spin of another
 *   nucleus; the nucleus' amplitude is shared equally among its spins and
 *   their lines. Homonuclear couplings do not split; strong coupling (near
 *   zero field, where |delta gamma| B is not >> 2 pi J) is not modelled.
 * - The detector sees the precessing component with its full amplitude
 *   (its axis is taken to lie in the precession plane), weighted by
 *   1 / sqrt(1 + ((f - f_res) / bandwidth)^2), f_res = gyromagnetic x |B at
 *   the sensor place| from the actual currents at the acquisition's start. */
#include "sim.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* source: SI 2019 (hbar = h / 2 pi, h and k_B exact) and CODATA 2018 (mu0),
 * value from memory. */
#define HBAR 1.054571817e-34    /* J s */
#define K_BOLTZMANN 1.380649e-23 /* J/K */
#define MU0 1.25663706212e-6    /* N/A^2 */

#define MAX_COUPLINGS 12        /* per spin: 2^12 lines at most */

static double norm3(const double v[3]) { return sqrt(v[0] * v[0] + v[1] * v[1] + v[2] * v[2]); }

/* ---- relaxation models and signal size -------------------------------- */

/* Interpolated on log-log axes, constant beyond the table's ends. */
static double table_time(const plan_relax_model *m, double b) {
    if (m->n == 0) return NAN;
    if (!(b > m->field[0])) return m->time[0];
    if (b >= m->field[m->n - 1]) return m->time[m->n - 1];
    size_t i = 1;
    while (m->field[i] < b) i++;
    double x = log(b / m->field[i - 1]) / log(m->field[i] / m->field[i - 1]);
    return exp(log(m->time[i - 1]) + x * log(m->time[i] / m->time[i - 1]));
}

double sim_relax_time(const plan_relax_model *m, double gamma, double field) {
    double b = fabs(field), rate;
    switch (m->kind) {
    case MODEL_CONST: return m->value;
    case MODEL_TABLE: return table_time(m, b);
    case MODEL_BPP: {
        /* source: Bloembergen, Purcell, Pound, Phys. Rev. 73, 679 (1948):
         * R = strength [tau/(1 + w^2 tau^2) + 4 tau/(1 + 4 w^2 tau^2)]. */
        double wt = fabs(gamma) * b * m->tau;
        rate = m->strength * (m->tau / (1 + wt * wt) + 4 * m->tau / (1 + 4 * wt * wt));
        break;
    }
    case MODEL_LORENTZIANS:
        rate = m->base;
        for (size_t i = 0; i < m->n; i++)
            if (m->corner[i] > 0) {
                double x = b / m->corner[i];
                rate += m->rate[i] / (1 + x * x);
            }
        break;
    default: return NAN;
    }
    return rate > 0 ? 1 / rate : INFINITY;
}

double sim_curie_signal_per_field(const plan_sample *s, const nuc_info *nu) {
    if (!(s->spin_density > 0 && s->volume > 0 && s->distance > 0 && s->temperature > 0))
        return 0;
    double spin = nu->twice_spin / 2.0;
    /* source: Abragam, The Principles of Nuclear Magnetism (1961), ch. II:
     * Curie law M0 = N gamma^2 hbar^2 I(I+1) B / (3 k T); here per tesla. */
    double m_per_field = s->spin_density * nu->gamma * nu->gamma * HBAR * HBAR * spin *
                         (spin + 1) / (3 * K_BOLTZMANN * s->temperature);
    /* source: field on the axis of a dipole m at distance r, B = mu0 2 m /
     * (4 pi r^3); outside a uniformly magnetized sphere the field is that of
     * its dipole m = M V (Jackson, Classical Electrodynamics, 3rd ed., 5.10). */
    return MU0 * 2 * m_per_field * s->volume / (4 * M_PI * pow(s->distance, 3));
}

/* ---- fields with the true calibration ---------------------------------- */

/* The true place of the same name. true_places carries no count of its
 * own: it holds at most one entry per place, and its reader allocates one
 * zeroed entry past the last, so a NULL name ends it. */
static const rig_place *true_place(const plan_rig *rig, const rig_place *pl) {
    for (size_t i = 0; rig->true_places && i < rig->nplaces && rig->true_places[i].name; i++)
        if (strcmp(rig->true_places[i].name, pl->name) == 0) return &rig->true_places[i];
    return NULL;
}

static bool coefficient(const rig_place *pl, size_t coil, double *k) {
    for (size_t i = 0; pl && i < pl->n; i++)
        if (pl->coil[i] == (int)coil) {
            *k = pl->per_current[i];
            return true;
        }
    return false;
}

void sim_place_field(const plan_rig *rig, int place, const double *currents, bool with_fpc,
                     double out[3]) {
    const rig_place *pl = place >= 0 ? &rig->places[place] : NULL;
    const rig_place *tp = pl ? true_place(rig, pl) : NULL;
    out[0] = out[1] = out[2] = 0;
    if (pl) memcpy(out, pl->residual, 3 * sizeof *out);
    for (size_t c = 0; c < rig->ncoils; c++) {
        const rig_coil *coil = &rig->coils[c];
        double k = 0, kt;
        bool listed = coefficient(pl, c, &k);
        if (coefficient(tp, c, &kt)) {
            k = kt;
            listed = true;
        }
        if (!listed) k = with_fpc && coil->has_field_per_current ? coil->field_per_current : 0;
        if (coil->axis >= 0 && coil->axis < 3) out[coil->axis] += k * currents[c];
    }
}

static void currents_at(const sim_scene *sc, double t, double *cur) {
    for (size_t c = 0; c < sc->rig->ncoils; c++) cur[c] = sim_history_current(&sc->coils[c], t);
}

void sim_sample_field(const sim_scene *sc, double t, double out[3]) {
    currents_at(sc, t, sc->scratch);
    sim_place_field(sc->rig, sc->sample_place, sc->scratch, true, out);
}

void sim_sensor_field(const sim_scene *sc, double t, double out[3]) {
    out[0] = out[1] = out[2] = 0;
    if (sc->sensor_place < 0) return;
    currents_at(sc, t, sc->scratch);
    sim_place_field(sc->rig, sc->sensor_place, sc->scratch, false, out);
}

bool sim_scene_steady(const sim_scene *sc, double a, double b) {
    for (size_t c = 0; c < sc->rig->ncoils; c++)
        if (!sim_history_steady(&sc->coils[c], a, b)) return false;
    return true;
}

/* ---- where the sample is: magnet stays ----------------------------------- */

typedef struct {
    double start, end, field;
} stay;

static void flatten(const plan_steps *s, const plan_step **out, size_t *n, size_t max) {
    for (size_t i = 0; i < s->n && *n <= max; i++) {
        const plan_step *st = &s->steps[i];
        if (st->kind == STEP_REPEAT) {
            for (int k = 0; k < st->u.repeat.times && *n <= max; k++)
                flatten(&st->u.repeat.body, out, n, max);
            continue;
        }
        if (*n < max) out[*n] = st;
        (*n)++;
    }
}

/* The shot's magnet stays in absolute time. Returns 0, or -1 out of memory. */
static int magnet_stays(const sim_scene *sc, stay **out, size_t *count) {
    const compile_timeline *tl = sc->tl;
    *out = NULL;
    *count = 0;
    if (!tl || !sc->plan || !tl->nsteps || isnan(sc->shot_start)) return 0;
    const plan_step **flat = malloc(tl->nsteps * sizeof *flat);
    stay *st = malloc(tl->nsteps * sizeof *st);
    if (!flat || !st) {
        free(flat);
        free(st);
        return -1;
    }
    size_t n = 0;
    flatten(&sc->plan->shot, flat, &n, tl->nsteps);
    bool lined_up = n == tl->nsteps;
    for (size_t i = 0; lined_up && i < n; i++) lined_up = flat[i]->kind == tl->steps[i].kind;
    for (size_t i = 0; lined_up && i < n; i++) {
        const plan_step *p = flat[i];
        if (p->kind != STEP_POLARIZE || p->u.polarize.magnet < 0) continue;
        double t = sc->shot_start + tl->steps[i].start;
        st[(*count)++] = (stay){t, t + tl->steps[i].length,
                                fabs(sc->rig->magnets[p->u.polarize.magnet].field)};
    }
    free(flat);
    *out = st;
    return 0;
}

/* ---- polarization --------------------------------------------------------- */

typedef struct {
    const sim_scene *sc;
    const stay *stays;
    size_t nstays;
    const plan_relax_model *t1;
    double gamma;               /* the default nucleus' */
} relax_ctx;

static double polarizing_field(const relax_ctx *r, double t) {
    for (size_t i = 0; i < r->nstays; i++)
        if (t >= r->stays[i].start && t < r->stays[i].end) return r->stays[i].field;
    double b[3];
    sim_sample_field(r->sc, t, b);
    return norm3(b);
}

static double t1_at(const relax_ctx *r, double field) {
    double t1 = sim_relax_time(r->t1, r->gamma, field);
    return isnan(t1) ? 0 : t1;
}

/* P after dt of dP/dt = (B(t) - P) / T1 with B linear from ba to bb: the
 * exact solution P = P0 e + ba (1 - e) + k (dt - T1 (1 - e)), e = exp(-dt/T1),
 * k = (bb - ba) / dt. */
static double relax(double p, double ba, double bb, double t1, double dt) {
    if (!(dt > 0)) return p;
    if (!(t1 > 0)) return bb;
    if (isinf(t1)) return p;
    double om = -expm1(-dt / t1), k = (bb - ba) / dt;
    return p * (1 - om) + ba * om + k * (dt - t1 * om);
}

static bool in_stay(const relax_ctx *r, double t) {
    for (size_t i = 0; i < r->nstays; i++)
        if (t >= r->stays[i].start && t < r->stays[i].end) return true;
    return false;
}

/* P over [a, b], an interval with no segment edge inside: one exact step
 * when the field is constant, else steps of at most a 32nd of the
 * interval and a 20th of T1, the field linear within each. */
static double relax_interval(const relax_ctx *r, double p, double a, double b) {
    double mid = 0.5 * (a + b);
    if (in_stay(r, mid) || sim_scene_steady(r->sc, a, b)) {
        double f = polarizing_field(r, mid);
        return relax(p, f, f, t1_at(r, f), b - a);
    }
    double t = a, fa = polarizing_field(r, a), floor_h = (b - a) * 1e-6;
    while (t < b) {
        double t1 = t1_at(r, fa), h = (b - a) / 32;
        if (t1 > 0 && t1 / 20 < h) h = fmax(t1 / 20, floor_h);
        double tn = t + h;
        if (!(tn > t) || tn > b - 1e-3 * h) tn = b;     /* always forward, never past b */
        double fb = polarizing_field(r, tn), fm = polarizing_field(r, 0.5 * (t + tn));
        p = relax(p, fa, fb, t1_at(r, fm), tn - t);
        t = tn;
        fa = fb;
    }
    return p;
}

static int cmp_double(const void *a, const void *b) {
    double x = *(const double *)a, y = *(const double *)b;
    return x < y ? -1 : x > y ? 1 : 0;
}

static void add_edge(double *e, size_t *n, double t, double t0, double t1) {
    if (t > t0 && t < t1) e[(*n)++] = t;
}

/* Every segment edge and stay edge within (t0, t1), sorted, then t1. */
static int edges(const relax_ctx *r, double t0, double t1, double **out, size_t *count) {
    size_t cap = 2 * r->nstays + 1;
    for (size_t c = 0; c < r->sc->rig->ncoils; c++) cap += 3 * r->sc->coils[c].n;
    double *e = malloc(cap * sizeof *e);
    if (!e) return -1;
    size_t n = 0;
    for (size_t c = 0; c < r->sc->rig->ncoils; c++)
        for (size_t k = 0; k < r->sc->coils[c].n; k++) {
            const sim_segment *s = &r->sc->coils[c].seg[k];
            add_edge(e, &n, s->start, t0, t1);
            add_edge(e, &n, s->start + s->length, t0, t1);
            if (s->kind == SIM_PULSE) add_edge(e, &n, s->until, t0, t1);
        }
    for (size_t i = 0; i < r->nstays; i++) {
        add_edge(e, &n, r->stays[i].start, t0, t1);
        add_edge(e, &n, r->stays[i].end, t0, t1);
    }
    qsort(e, n, sizeof *e, cmp_double);
    e[n++] = t1;
    *out = e;
    *count = n;
    return 0;
}

/* ---- pulses ----------------------------------------------------------------- */

typedef struct {
    double end;
    const sim_segment *seg;
} pulse_ref;

static int cmp_pulse(const void *a, const void *b) {
    return cmp_double(&((const pulse_ref *)a)->end, &((const pulse_ref *)b)->end);
}

/* The pulses from t0 that start before at, by their end. */
static int pulses_before(const sim_scene *sc, double t0, double at, pulse_ref **out, size_t *n) {
    size_t cap = 1;
    for (size_t c = 0; c < sc->rig->ncoils; c++) cap += sc->coils[c].n;
    pulse_ref *p = malloc(cap * sizeof *p);
    if (!p) return -1;
    *n = 0;
    for (size_t c = 0; c < sc->rig->ncoils; c++)
        for (size_t k = 0; k < sc->coils[c].n; k++) {
            const sim_segment *s = &sc->coils[c].seg[k];
            if (s->kind == SIM_PULSE && s->start >= t0 && s->start < at)
                p[(*n)++] = (pulse_ref){fmin(s->start + s->length, s->until), s};
        }
    qsort(p, *n, sizeof *p, cmp_pulse);
    *out = p;
    return 0;
}

static double pulse_angle(const sim_scene *sc, const sim_segment *s, size_t nucleus) {
    const compile_timeline *tl = sc->tl;
    for (size_t j = 0; tl && j < tl->npulses; j++)
        if (s->given == &tl->pulses[j].shape_at_sample && tl->pulses[j].angles)
            return tl->pulses[j].angles[nucleus];
    return pulse_tip_angle(&s->shape, sc->plan->sample.nuclei[nucleus]->gamma);
}

/* P at the end of the last pulse, earlier pulses tipping it on the way. */
static int polarization_at(const relax_ctx *r, double t0, const pulse_ref *pulses, size_t np,
                           double *out) {
    double t1 = pulses[np - 1].end, *e, p = 0, t = t0;
    size_t ne, next = 0;
    if (edges(r, t0, t1, &e, &ne)) return -1;
    for (size_t i = 0; i < ne; i++) {
        p = relax_interval(r, p, t, e[i]);
        t = e[i];
        for (; next + 1 < np && pulses[next].end <= t; next++)
            p *= cos(pulse_angle(r->sc, pulses[next].seg, 0));
    }
    free(e);
    *out = p;
    return 0;
}

/* ---- lines ------------------------------------------------------------------- */

typedef struct {
    sim_signal *sig;
    size_t cap;
} line_list;

static int add_line(line_list *l, double gamma, double offset, double amplitude) {
    sim_signal *s = l->sig;
    for (size_t i = 0; i < s->nlines; i++)
        if (s->lines[i].gamma == gamma && fabs(s->lines[i].offset - offset) < 1e-9) {
            s->lines[i].amplitude += amplitude;
            return 0;
        }
    if (s->nlines == l->cap) {
        size_t nc = l->cap ? 2 * l->cap : 8;
        sim_line *g = realloc(s->lines, nc * sizeof *g);
        if (!g) return -1;
        s->lines = g;
        l->cap = nc;
    }
    s->lines[s->nlines++] = (sim_line){amplitude, offset, gamma};
    return 0;
}

/* The couplings of spin i to spins of another nucleus. */
static size_t hetero_couplings(const plan_sample *s, size_t i, double *j) {
    size_t n = 0;
    for (size_t c = 0; c < s->ncouplings && n < MAX_COUPLINGS; c++) {
        int other = s->coupling_a[c] == (int)i ? s->coupling_b[c]
                    : s->coupling_b[c] == (int)i ? s->coupling_a[c] : -1;
        if (other >= 0 && s->spin_nucleus[other] != s->spin_nucleus[i]) j[n++] = s->coupling[c];
    }
    return n;
}

/* Nucleus nu's first-order multiplet of total amplitude a. */
static int nucleus_lines(line_list *l, const plan_sample *s, const nuc_info *nu, double a) {
    size_t nspins = 0;
    for (size_t i = 0; i < s->nspins; i++) nspins += s->spin_nucleus[i] == nu;
    if (nspins == 0) return add_line(l, nu->gamma, 0, a);
    for (size_t i = 0; i < s->nspins; i++) {
        if (s->spin_nucleus[i] != nu) continue;
        double j[MAX_COUPLINGS];
        size_t nj = hetero_couplings(s, i, j);
        for (unsigned long mask = 0; mask < (1UL << nj); mask++) {
            double offset = 0;
            for (size_t k = 0; k < nj; k++) offset += (mask >> k & 1 ? 0.5 : -0.5) * j[k];
            if (add_line(l, nu->gamma, offset, a / (double)nspins / (double)(1UL << nj)))
                return -1;
        }
    }
    return 0;
}

static double signal_per_field(const plan_sample *s, const nuc_info *nu) {
    return s->signal_per_field > 0 ? s->signal_per_field : sim_curie_signal_per_field(s, nu);
}

/* Each line weighted by the detector's response at its frequency. */
static void detector_response(const sim_scene *sc, const double bs[3], sim_signal *sig) {
    double bw = sc->rig->detector.bandwidth;
    if (!sc->rig->detector.present || !(bw > 0)) return;
    for (size_t i = 0; i < sig->nlines; i++) {
        sim_line *l = &sig->lines[i];
        double f = fabs(fabs(l->gamma) * norm3(bs) / (2 * M_PI) + l->offset);
        double x = (f - sig->f_res) / bw;
        l->amplitude /= sqrt(1 + x * x);
    }
}

/* The tip and lines of every nucleus from P at the last pulse. */
static int lines_from(const sim_scene *sc, const sim_segment *last, double p, sim_signal *out) {
    const plan_sample *s = &sc->plan->sample;
    line_list l = {out, 0};
    double sign = last->peak < 0 ? -1 : 1;
    for (size_t k = 0; k < s->nnuclei; k++) {
        double a = sign * signal_per_field(s, s->nuclei[k]) * p * sin(pulse_angle(sc, last, k));
        if (a != 0 && nucleus_lines(&l, s, s->nuclei[k], a)) return -1;
    }
    return 0;
}

int sim_sample_signal(const sim_scene *sc, double at, double drift, sim_signal *out) {
    memset(out, 0, sizeof *out);
    out->t_end = NAN;
    out->t2 = INFINITY;
    double bs[3], bsensor[3];
    sim_sample_field(sc, at, bs);
    bs[2] += drift;
    sim_sensor_field(sc, at, bsensor);
    if (sc->sensor_place >= 0) bsensor[2] += drift;
    if (sc->rig->detector.present)
        out->f_res = fabs(sc->rig->detector.gyromagnetic) * norm3(bsensor);
    if (!sc->plan || !sc->plan->sample.has_model || !sc->plan->sample.nnuclei) return 0;
    const plan_sample *s = &sc->plan->sample;
    double t2 = sim_relax_time(&s->t2, s->nuclei[0]->gamma, norm3(bs));
    out->t2 = isnan(t2) ? INFINITY : t2;
    double t0 = sc->shot_start;
    for (size_t c = 0; isnan(sc->shot_start) && c < sc->rig->ncoils; c++)
        if (sc->coils[c].n && !(sc->coils[c].seg[0].start >= t0)) t0 = sc->coils[c].seg[0].start;
    if (isnan(t0)) return 0;
    pulse_ref *pulses = NULL;
    stay *stays = NULL;
    size_t np = 0, ns = 0;
    int rc = pulses_before(sc, t0, at, &pulses, &np) || magnet_stays(sc, &stays, &ns) ? -1 : 0;
    if (rc == 0 && np) {
        relax_ctx r = {sc, stays, ns, &s->t1, s->nuclei[0]->gamma};
        rc = polarization_at(&r, t0, pulses, np, &out->polarization);
        out->t_end = pulses[np - 1].end;
        if (rc == 0) rc = lines_from(sc, pulses[np - 1].seg, out->polarization, out);
        detector_response(sc, bs, out);
    }
    free(pulses);
    free(stays);
    if (rc) sim_signal_free(out);
    return rc;
}

void sim_signal_free(sim_signal *s) {
    free(s->lines);
    s->lines = NULL;
    s->nlines = 0;
}
