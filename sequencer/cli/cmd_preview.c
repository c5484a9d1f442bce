/* cmd_preview: `precess preview PLAN`: what a plan will do before it
 * touches a coil: a table of every point (currents, fields, Larmor
 * frequency, pulse and angles, shot length), the total duration and the
 * expected finish, or one JSON document, or one shot's events, or its
 * timing diagram. Not for running (cmd_run.c). */
#include "cli.h"
#include "compile.h"

#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

static const char *step_names[] = {"polarize", "field", "pulse", "acquire", "line", "wait",
                                   "repeat"};
static const char *regime_names[] = {"", "adiabatic", "intermediate", "sudden"};

static const char *q(double v, units_dim d, char *buf) { return units_format(v, d, buf, 32); }

/* ---- the table -------------------------------------------------------- */

/* Coils worth a column: those carrying current during an acquisition. */
static bool *shown_coils(const compiled *c) {
    bool *shown = calloc(c->plan->rig.ncoils + 1, sizeof *shown);
    for (size_t k = 0; shown && k < c->ntimelines; k++)
        for (size_t i = 0; i < c->plan->rig.ncoils; i++)
            shown[i] |= c->timelines[k].currents[i] != 0;
    return shown;
}

static void table_header(const compiled *c, const bool *shown) {
    const plan *p = c->plan;
    printf("%5s", "point");
    for (size_t i = 0; i < p->nvars; i++) printf("  %-10.10s", p->vars[i].name);
    printf(" |");
    for (size_t i = 0; i < p->rig.ncoils; i++)
        if (shown[i]) printf("  %-10.10s", p->rig.coils[i].name);
    printf(" |");
    for (size_t i = 0; i < p->rig.nplaces; i++) printf("  %-10.10s", p->rig.places[i].name);
    printf(" |  %-10s |  %-10s", "frequency", "pulse");
    for (size_t i = 0; i < p->sample.nnuclei; i++) printf("  %-7s", p->sample.nuclei[i]->token);
    printf(" |  %s\n", "shot");
}

static const compile_pulse *first_pulse(const compile_timeline *t) {
    return t->npulses ? &t->pulses[0] : NULL;
}

static void table_row(const compiled *c, const bool *shown, size_t k, const char *label) {
    const plan *p = c->plan;
    const compile_timeline *t = &c->timelines[k];
    char b[32];
    printf("%5s", label);
    for (size_t i = 0; i < p->nvars; i++) printf("  %-10s", q(t->values[i], p->vars[i].dim, b));
    printf(" |");
    for (size_t i = 0; i < p->rig.ncoils; i++)
        if (shown[i]) printf("  %-10s", q(t->currents[i], UNITS_CURRENT, b));
    printf(" |");
    for (size_t i = 0; i < p->rig.nplaces; i++) printf("  %-10s", q(t->fields[i], UNITS_FIELD, b));
    printf(" |  %-10s", q(t->frequency, UNITS_FREQUENCY, b));
    const compile_pulse *pu = first_pulse(t);
    printf(" |  %-10s", pu ? q(pu->duration, UNITS_TIME, b) : "-");
    for (size_t i = 0; i < p->sample.nnuclei; i++)
        printf("  %-7s", pu ? q(pu->angles[i], UNITS_ANGLE_DIM, b) : "-");
    printf(" |  %s\n", q(t->duration, UNITS_TIME, b));
}

static void finish_line(double duration) {
    time_t end = time(NULL) + (time_t)ceil(duration);
    struct tm tm;
    char when[64];
    localtime_r(&end, &tm);
    strftime(when, sizeof when, "%Y-%m-%d %H:%M %Z", &tm);
    char took[32];
    printf("total %s (%.1f s); started now it would end %s\n",
           cli_duration(duration, took, sizeof took), duration, when);
}

static void print_table(const compiled *c) {
    const plan *p = c->plan;
    size_t np = c->scan->npoints, ns = c->scan->nshots;
    printf("%s: %zu point%s, %zu shot%s on rig %s (fields along z, currents and fields during "
           "the first acquisition, angles of the first pulse)\n\n",
           p->title, np, np == 1 ? "" : "s", ns, ns == 1 ? "" : "s", p->rig.name);
    bool *shown = shown_coils(c);
    if (!shown) return;
    table_header(c, shown);
    for (size_t k = 0; k < c->ntimelines; k++) {
        char label[32];
        if (k < c->scan->npoints) snprintf(label, sizeof label, "%zu", k + 1);
        else snprintf(label, sizeof label, "ref%zu", k - c->scan->npoints + 1);
        table_row(c, shown, k, label);
    }
    free(shown);
    printf("\n");
    finish_line(c->duration);
}

/* ---- JSON --------------------------------------------------------------- */

static json_t *pulse_json(const compiled *c, const compile_pulse *pu, int polarity) {
    const plan *p = c->plan;
    json_t *angles = json_object();
    for (size_t i = 0; i < p->sample.nnuclei; i++)
        json_object_set_new(angles, p->sample.nuclei[i]->token, json_real(pu->angles[i]));
    return json_pack("{s:s, s:s, s:f, s:f, s:i, s:o}", "coil", p->rig.coils[pu->coil].name,
                     "shape", pu->shape == SHAPE_RESONANT ? "resonant" : "dc", "duration",
                     pu->duration, "amplitude", pu->amplitude, "polarity", polarity, "angles",
                     angles);
}

static json_t *steps_json(const compile_timeline *t) {
    json_t *a = json_array();
    for (size_t i = 0; i < t->nsteps; i++) {
        const compile_step *s = &t->steps[i];
        json_t *o = json_pack("{s:I, s:s, s:s, s:f, s:f}", "step", (json_int_t)i + 1, "kind",
                              step_names[s->kind], "label", s->label, "start", s->start,
                              "duration", s->length);
        if (s->regime != REGIME_NONE) {
            json_object_set_new(o, "regime", json_string(regime_names[s->regime]));
            json_object_set_new(o, "adiabatic_ratio",
                                isinf(s->adiabatic_ratio) ? json_null()
                                                          : json_real(s->adiabatic_ratio));
        }
        json_array_append_new(a, o);
    }
    return a;
}

static json_t *shot_json(const compiled *c, uint32_t shot) {
    const plan *p = c->plan;
    const scan_shot *sh = &c->scan->shots[shot - 1];
    const compile_timeline *t = compile_shot_timeline(c, shot);
    json_t *params = json_object(), *cur = json_object(), *fld = json_object();
    for (size_t i = 0; i < p->nvars; i++)
        json_object_set_new(params, p->vars[i].name, json_real(t->values[i]));
    for (size_t i = 0; i < p->rig.ncoils; i++)
        json_object_set_new(cur, p->rig.coils[i].name, json_real(t->currents[i]));
    for (size_t i = 0; i < p->rig.nplaces; i++)
        json_object_set_new(fld, p->rig.places[i].name, json_real(t->fields[i]));
    const compile_pulse *pu = first_pulse(t);
    return json_pack("{s:I, s:I, s:I, s:s, s:o, s:f, s:f, s:o, s:o, s:f, s:o, s:o}", "shot",
                     (json_int_t)shot, "point", (json_int_t)sh->point, "average",
                     (json_int_t)sh->average, "kind", scan_kind_name((scan_shot_kind)sh->kind),
                     "parameters", params, "start", c->shot_start[shot - 1], "duration",
                     t->duration, "currents", cur, "fields", fld, "frequency", t->frequency,
                     "pulse", pu ? pulse_json(c, pu, compile_pulse_polarity(c, shot, pu))
                                 : json_null(),
                     "steps", steps_json(t));
}

static json_t *diags_json(const diag_list *d, diag_severity sev) {
    json_t *a = json_array();
    for (size_t i = 0; i < d->n; i++)
        if (d->items[i].severity == sev)
            json_array_append_new(a, json_pack("{s:s, s:i, s:i, s:s}", "file",
                                               d->items[i].file, "line", d->items[i].line,
                                               "col", d->items[i].col, "message",
                                               d->items[i].message));
    return a;
}

static void print_json(const compiled *c, const diag_list *d) {
    json_t *shots = json_array();
    for (uint32_t k = 1; k <= c->scan->nshots; k++) json_array_append_new(shots, shot_json(c, k));
    json_t *o = json_pack("{s:s, s:I, s:I, s:f, s:o, s:o}", "title", c->plan->title, "points",
                          (json_int_t)c->scan->npoints, "shots", (json_int_t)c->scan->nshots,
                          "duration", c->duration, "shot_list", shots, "warnings",
                          diags_json(d, DIAG_WARNING));
    json_dumpf(o, stdout, JSON_PRESERVE_ORDER);
    putchar('\n');
    json_decref(o);
}

/* ---- one shot's events ------------------------------------------------- */

static void print_event(const compiled *c, const compile_timeline *t, const compile_event *e,
                        uint32_t shot) {
    const plan_rig *rig = &c->plan->rig;
    char s[32], l[32], a[32], z[32];
    printf("  %-10s %-10s %4u  ", q(e->start, UNITS_TIME, s), q(e->length, UNITS_TIME, l),
           e->step);
    switch ((compile_event_kind)e->kind) {
    case EV_RAMP:
        printf("ramp     %-8s %s -> %s\n", rig->coils[e->channel].name,
               q(e->from, UNITS_CURRENT, a), q(e->to, UNITS_CURRENT, z));
        break;
    case EV_LINE:
        printf("line     %-8s %s\n", rig->lines[e->channel].name, e->to ? "on" : "off");
        break;
    case EV_PULSE: {
        const compile_pulse *pu = &t->pulses[e->index];
        printf("pulse    %-8s %s peak, %s, polarity %+d, %s equivalent\n",
               rig->coils[e->channel].name, q(pu->current, UNITS_CURRENT, a),
               pu->shape == SHAPE_RESONANT ? "resonant" : "dc",
               compile_pulse_polarity(c, shot, pu), q(pu->duration, UNITS_TIME, z));
        break;
    }
    case EV_ACQUIRE: {
        const compile_acquire *aq = &t->acquisitions[e->index];
        printf("acquire  %-8s at %s", "", q(aq->rate, UNITS_FREQUENCY, a));
        for (size_t i = 0; i < aq->ninputs; i++) printf(" %s", rig->inputs[aq->inputs[i]].name);
        printf("\n");
        break;
    }
    }
}

static void print_timeline(const compiled *c, uint32_t shot) {
    const scan_shot *sh = &c->scan->shots[shot - 1];
    const compile_timeline *t = compile_shot_timeline(c, shot);
    char a[32], b[32];
    printf("shot %u (point %u, average %u, %s): starts %s into the run, lasts %s\n\n", shot,
           sh->point, sh->average, scan_kind_name((scan_shot_kind)sh->kind),
           q(c->shot_start[shot - 1], UNITS_TIME, a), q(t->duration, UNITS_TIME, b));
    printf("  %-4s %-9s %-12s %-10s %-10s %s\n", "step", "kind", "label", "start", "length",
           "field change");
    for (size_t i = 0; i < t->nsteps; i++) {
        const compile_step *s = &t->steps[i];
        printf("  %-4zu %-9s %-12.12s %-10s %-10s %s", i + 1, step_names[s->kind], s->label,
               q(s->start, UNITS_TIME, a), q(s->length, UNITS_TIME, b),
               regime_names[s->regime]);
        if (s->regime != REGIME_NONE && !isinf(s->adiabatic_ratio))
            printf(" (ratio %.3g)", s->adiabatic_ratio);
        printf("\n");
    }
    printf("\n  %-10s %-10s %4s  %s\n", "start", "length", "step", "event");
    for (size_t k = 0; k < t->nevents; k++) print_event(c, t, &t->events[k], shot);
}

/* ---- the command ----------------------------------------------------- */

typedef struct {
    const char *plan;
    int json;
    long timeline, shot;
    const char *diagram;
} preview_args;

static int parse_shot(const char *s, long *out) {
    char *end;
    *out = strtol(s, &end, 10);
    return *end || *out < 1 ? -1 : 0;
}

static int parse_args(int argc, char **argv, preview_args *a) {
    memset(a, 0, sizeof *a);
    a->shot = 1;
    for (int i = 1; i < argc; i++) {
        const char *o = argv[i];
        int has = i + 1 < argc;
        if (strcmp(o, "--json") == 0) a->json = 1;
        else if (strcmp(o, "--timeline") == 0 && has) {
            if (parse_shot(argv[++i], &a->timeline))
                return cli_usage_error("preview", "--timeline takes a shot number from 1");
        } else if (strcmp(o, "--shot") == 0 && has) {
            if (parse_shot(argv[++i], &a->shot))
                return cli_usage_error("preview", "--shot takes a shot number from 1");
        } else if (strcmp(o, "--diagram") == 0 && has) a->diagram = argv[++i];
        else if (o[0] == '-') return cli_usage_error("preview", "unknown option '%s'", o);
        else if (a->plan) return cli_usage_error("preview", "one plan at a time");
        else a->plan = o;
    }
    if (!a->plan) return cli_usage_error("preview", "name the plan to preview");
    return 0;
}

static int check_shot(const compiled *c, long shot, const char *what) {
    if ((size_t)shot <= c->scan->nshots) return 0;
    fprintf(stderr, "precess preview: %s %ld: the plan has %zu shots\n", what, shot,
            c->scan->nshots);
    return -1;
}

int cmd_preview(int argc, char **argv) {
    preview_args a;
    if (parse_args(argc, argv, &a)) return CLI_USAGE;
    diag_list d;
    diag_init(&d);
    plan *p;
    scan *s;
    compiled *c = cli_compile(a.plan, &d, &p, &s);
    int rc = c ? CLI_OK : CLI_USAGE;
    if (c && a.diagram) {
        char err[256];
        if (check_shot(c, a.shot, "--shot")) rc = CLI_USAGE;
        else if (cli_draw_diagram(c, (uint32_t)a.shot, a.diagram, err, sizeof err)) {
            fprintf(stderr, "precess preview: %s\n", err);
            rc = CLI_USAGE;
        } else {
            printf("diagram of shot %ld written to %s\n", a.shot, a.diagram);
        }
    } else if (c && a.timeline) {
        if (check_shot(c, a.timeline, "--timeline")) rc = CLI_USAGE;
        else print_timeline(c, (uint32_t)a.timeline);
    } else if (c && a.json) {
        print_json(c, &d);
    } else if (c) {
        print_table(c);
    }
    cli_free_compiled(c, s, p);
    diag_free(&d);
    return rc;
}
