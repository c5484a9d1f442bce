/* cmd_analyze: `precess analyze RUN [--json]`: read the run folder's own
 * plan and rig copies for the analysis: section, reduce every recorded
 * shot, point and series (analysis.h), write RUN/analysis/ and print where
 * it is, or the results as one JSON document. Works on a run still going
 * or cut off: it analyses what the journal says is done.
 * Not for the reduction itself (analysis/). */
#include "analysis.h"
#include "cli.h"
#include "units.h"

#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* The SI symbol of a scan variable's dimension, for axis labels. */
static const char *dim_unit(units_dim d) {
    if (units_dim_eq(d, UNITS_TIME)) return "s";
    if (units_dim_eq(d, UNITS_FIELD)) return "T";
    if (units_dim_eq(d, UNITS_CURRENT)) return "A";
    if (units_dim_eq(d, UNITS_FREQUENCY)) return "Hz";
    if (units_dim_eq(d, UNITS_VOLTAGE)) return "V";
    return "";
}

int cli_analysis_plan(const plan *p, an_plan *out) {
    memset(out, 0, sizeof *out);
    an_settings_default(&out->settings);
    out->fit = p->analysis.fit == FIT_RELAXATION    ? AN_SERIES_RELAXATION
               : p->analysis.fit == FIT_BUILDUP     ? AN_SERIES_BUILDUP
               : p->analysis.fit == FIT_CALIBRATION ? AN_SERIES_CALIBRATION
                                                    : AN_SERIES_NONE;
    int a = p->analysis.against_var, per = p->analysis.per_var, coil = p->analysis.against_current;
    if (a >= 0) {
        out->against = p->vars[a].name;
        out->against_unit = dim_unit(p->vars[a].dim);
    }
    if (coil >= 0) out->against_coil = p->rig.coils[coil].name;
    if (per >= 0) {
        out->per = p->vars[per].name;
        out->per_unit = dim_unit(p->vars[per].dim);
    }
    const char **names = arena_alloc(p->arena, (p->nvars + 1) * sizeof *names);
    const char **units = arena_alloc(p->arena, (p->nvars + 1) * sizeof *units);
    for (size_t i = 0; names && units && i < p->nvars; i++) {
        names[i] = p->vars[i].name;
        units[i] = dim_unit(p->vars[i].dim);
    }
    if (names && units) {
        out->nvars = p->nvars;
        out->var_name = names;
        out->var_unit = units;
    }
    if (p->sample.nnuclei) {
        out->nucleus = p->sample.nuclei[0]->token;
        out->gamma_hz = fabs(p->sample.nuclei[0]->gamma) / (2 * M_PI);
    }
    out->settings.line_noise = p->analysis.line_noise;
    if (p->analysis.has_window) {
        out->settings.window_from = p->analysis.window_from;
        out->settings.window_to = p->analysis.window_to;
    }
    return 0;
}

/* The run folder's plan, read with its own rig copy. */
plan *cli_run_plan(const char *dir, diag_list *d) {
    char plan_path[4200], rig_path[4200];
    snprintf(plan_path, sizeof plan_path, "%s/plan.yaml", dir);
    snprintf(rig_path, sizeof rig_path, "%s/rig.yaml", dir);
    plan *p = plan_read_with_rig(plan_path, rig_path, d);
    /* Only what stops the reading: the notes and warnings were the run's. */
    if (!p) cli_print_diags(stderr, d);
    return p;
}

/* A number, or null when it is not finite (an error a fit could not give). */
static void set_num(json_t *o, const char *key, double v) {
    json_object_set_new(o, key, isfinite(v) ? json_real(v) : json_null());
}

static json_t *line_json(const an_line_fit *l) {
    json_t *o = json_object();
    set_num(o, "frequency", l->frequency);
    set_num(o, "frequency_err", l->frequency_err);
    set_num(o, "amplitude", l->amplitude);
    set_num(o, "amplitude_err", l->amplitude_err);
    set_num(o, "linewidth", l->linewidth);
    set_num(o, "linewidth_err", l->linewidth_err);
    set_num(o, "snr", l->snr);
    set_num(o, "phase", l->phase);
    set_num(o, "phase_err", l->phase_err);
    return o;
}

/* A shot's or point's result: its strongest line's values, and every line. */
static json_t *result_json(json_t *o, const an_shot *s, bool reduced) {
    json_t *lines = json_array();
    for (size_t k = 0; reduced && k < s->nlines; k++)
        json_array_append_new(lines, line_json(&s->lines[k]));
    if (reduced && s->nlines) json_object_update(o, json_array_get(lines, 0));
    json_object_set_new(o, "lines", lines);
    if (reduced) set_num(o, "noise", s->noise);
    return o;
}

static json_t *fit_json(const an_plan *p, const an_series_entry *s) {
    json_t *o = json_pack("{s:s, s:I, s:b}", "fit", an_series_name(s->fit), "points", (json_int_t)s->n,
                          "fitted", s->fitted);
    if (!isnan(s->per)) {
        json_t *per = json_object();
        set_num(per, p->per, s->per);
        json_object_set_new(o, "per", per);
    }
    if (s->fitted && s->fit == AN_SERIES_CALIBRATION) {
        const an_calibration_fit *c = &s->calibration;
        set_num(o, "k", c->k);
        set_num(o, "k_err", c->k_err);
        set_num(o, "b_z", c->b_z);
        set_num(o, "b_z_err", c->b_z_err);
        set_num(o, "b_perp", c->b_perp);
        set_num(o, "b_perp_err", c->b_perp_err);
        set_num(o, "chi2_dof", c->chi2_dof);
    } else if (s->fitted) {
        const an_decay_fit *d = &s->decay;
        set_num(o, "t1", d->t1);
        set_num(o, "t1_err", d->t1_err);
        set_num(o, "r1", 1 / d->t1);
        set_num(o, "r1_err", d->t1_err / (d->t1 * d->t1));
        set_num(o, "amplitude", d->amplitude);
        set_num(o, "amplitude_err", d->amplitude_err);
        set_num(o, "offset", d->offset);
        set_num(o, "offset_err", d->offset_err);
        set_num(o, "chi2_dof", d->chi2_dof);
    }
    return o;
}

static void print_json(const an_run *r, const an_plan *p) {
    json_t *shots = json_array(), *points = json_array(), *fits = json_array();
    for (size_t i = 0; i < r->nshots; i++) {
        const an_shot_entry *e = &r->shots[i];
        json_t *o = json_pack("{s:I, s:I, s:I, s:s}", "shot", (json_int_t)e->shot, "point",
                              (json_int_t)e->point, "average", (json_int_t)e->average, "kind",
                              e->kind);
        if (!e->reduced) json_object_set_new(o, "error", json_string(e->error));
        json_array_append_new(shots, result_json(o, &e->result, e->reduced));
    }
    for (size_t i = 0; i < r->npoints; i++) {
        const an_point_entry *pe = &r->points[i];
        if (!pe->nshots) continue;
        json_t *params = json_object();
        for (size_t j = 0; j < r->nparameters; j++)
            set_num(params, r->parameter[j], pe->parameters[j]);
        json_t *o = json_pack("{s:I, s:I, s:o}", "point", (json_int_t)pe->point, "shots",
                              (json_int_t)pe->nshots, "parameters", params);
        json_array_append_new(points, result_json(o, &pe->result, pe->reduced));
    }
    for (size_t i = 0; i < r->nseries; i++) json_array_append_new(fits, fit_json(p, &r->series[i]));
    json_t *doc = json_pack("{s:s, s:I, s:I, s:o, s:o, s:o}", "run", r->id, "shots",
                            (json_int_t)r->nshots, "planned", (json_int_t)r->planned,
                            "per_shot", shots, "points", points, "fits", fits);
    char *text = json_dumps(doc, JSON_PRESERVE_ORDER | JSON_INDENT(1));
    if (text) puts(text);
    free(text);
    json_decref(doc);
}

static void print_summary(const an_run *r, const an_plan *p, const plan *pl) {
    size_t failed = 0, lines = 0;
    for (size_t i = 0; i < r->nshots; i++) {
        failed += !r->shots[i].reduced;
        lines += r->shots[i].reduced && r->shots[i].result.nlines > 0;
    }
    fprintf(stderr, "precess analyze: %zu of %zu planned shots recorded; %zu with a line",
            r->nshots, r->planned, lines);
    if (failed) fprintf(stderr, ", %zu unreadable (see shots.csv)", failed);
    fputc('\n', stderr);
    for (size_t i = 0; i < r->nseries; i++) {
        const an_series_entry *s = &r->series[i];
        char per[128] = "", q[48];
        if (!isnan(s->per) && pl->analysis.per_var >= 0)
            snprintf(per, sizeof per, " at %s = %s", p->per,
                     units_format(s->per, pl->vars[pl->analysis.per_var].dim, q, sizeof q));
        if (!s->fitted)
            fprintf(stderr, "  fit%s: not fitted (%zu points)\n", per, s->n);
        else if (s->fit == AN_SERIES_CALIBRATION)
            fprintf(stderr, "  calibration: k = %.6g +- %.2g, b_z = %.4g +- %.2g T, "
                    "b_perp = %.4g +- %.2g T (%zu points)\n", s->calibration.k,
                    s->calibration.k_err, s->calibration.b_z, s->calibration.b_z_err,
                    s->calibration.b_perp, s->calibration.b_perp_err, s->n);
        else
            fprintf(stderr, "  T1%s: %.4g +- %.2g s (%zu points)\n", per, s->decay.t1,
                    s->decay.t1_err, s->n);
    }
    printf("%s/analysis\n", r->dir);
}

int cmd_analyze(int argc, char **argv) {
    const char *dir = NULL;
    bool json = false;
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--json") == 0) json = true;
        else if (argv[i][0] == '-') return cli_usage_error("analyze", "unknown option '%s'", argv[i]);
        else if (dir) return cli_usage_error("analyze", "one run folder at a time");
        else dir = argv[i];
    }
    if (!dir) return cli_usage_error("analyze", "name the run folder to analyse");
    char err[1024];
    an_run *r;
    if (an_run_open(dir, &r, err, sizeof err) != 0) {
        fprintf(stderr, "precess analyze: %s\n", err);
        return CLI_FAILED;
    }
    diag_list d;
    diag_init(&d);
    plan *p = cli_run_plan(dir, &d);
    diag_free(&d);
    if (!p) {
        fprintf(stderr, "precess analyze: %s/plan.yaml cannot be read (above)\n", dir);
        an_run_free(r);
        return CLI_FAILED;
    }
    an_plan ap;
    cli_analysis_plan(p, &ap);
    int rc = an_run_reduce(r, &ap, err, sizeof err) == 0 && an_run_write(r, &ap, err, sizeof err) == 0
                 ? CLI_OK
                 : CLI_FAILED;
    if (rc != CLI_OK) fprintf(stderr, "precess analyze: %s\n", err);
    else if (json) print_json(r, &ap);
    else print_summary(r, &ap, p);
    plan_free(p);
    an_run_free(r);
    return rc;
}
