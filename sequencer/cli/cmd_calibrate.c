/* cmd_calibrate: `precess calibrate RUN --rig RIG`: the calibration fit of
 * a run (line frequency against a field setpoint or a coil current) turned
 * into a corrected copy of RIG next to it: the field per ampere of the
 * coils at the sample place and the residual field there, old and new
 * printed side by side. RIG itself is never changed.
 * Not for the fit (analysis/series.c) nor the YAML (rig_rewrite.c). */
#include "analysis.h"
#include "cli.h"
#include "units.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#define SAMPLE_PLACE "sample"

typedef struct {
    size_t n;
    const char *coil[16];
    double old_k[16], new_k[16];
    char text[16][64];
    const char *text_ptr[16];
    double old_r[3], new_r[3];
    bool perp_kept;             /* b_perp within 2 sigma of 0: the old one kept */
    char r_text[3][64];
} correction;

static const rig_place *find_place(const plan_rig *rig, const char *name) {
    for (size_t i = 0; i < rig->nplaces; i++)
        if (strcmp(rig->places[i].name, name) == 0) return &rig->places[i];
    return NULL;
}

/* New coefficients and residual from f = g sqrt((k x + b_z)^2 + b_perp^2):
 * against a field setpoint every coefficient at the place scales by k and
 * the residual along the field becomes b_z + k r_z (the setpoint x was
 * reached as sum c_i I_i + r_z = x); against a coil's current that coil's
 * coefficient becomes k and the residual b_z. The residual across the
 * field keeps its old direction (along x when it had none). */
static int correct(const rig_place *pl, const plan_rig *rig, const an_plan *ap,
                   const an_calibration_fit *c, const an_record *top, correction *out,
                   char *err, size_t errlen) {
    memset(out, 0, sizeof *out);
    bool by_current = ap->against_coil != NULL;
    double total = 0;
    for (size_t i = 0; i < pl->n; i++) {
        double cur = an_named_value(top->currents, top->ncurrents, rig->coils[pl->coil[i]].name);
        if (!isnan(cur)) total += fabs(pl->per_current[i] * cur);
    }
    for (size_t i = 0; i < pl->n && out->n < 16; i++) {
        const char *name = rig->coils[pl->coil[i]].name;
        double k = pl->per_current[i];
        if (by_current && strcmp(name, ap->against_coil) != 0) continue;
        /* Against a setpoint: the coils that made the field at the
         * highest setpoint (a tenth of it or more); the others keep theirs. */
        double cur = an_named_value(top->currents, top->ncurrents, name);
        if (!by_current && !(fabs(k * cur) >= 0.1 * total)) continue;
        out->coil[out->n] = name;
        out->old_k[out->n] = k;
        out->new_k[out->n] = by_current ? c->k : c->k * k;
        snprintf(out->text[out->n], sizeof out->text[0], "%.9g uT/A", out->new_k[out->n] * 1e6);
        out->text_ptr[out->n] = out->text[out->n];
        out->n++;
    }
    if (by_current && out->n == 0) {
        snprintf(err, errlen, "coil %s has no coefficient at place %s of the rig; add one "
                 "(places: {%s: {%s: ...}}) first", ap->against_coil, pl->name, pl->name,
                 ap->against_coil);
        return -1;
    }
    memcpy(out->old_r, pl->residual, sizeof out->old_r);
    double across = hypot(pl->residual[0], pl->residual[1]);
    out->new_r[0] = across > 0 ? c->b_perp * pl->residual[0] / across : c->b_perp;
    out->new_r[1] = across > 0 ? c->b_perp * pl->residual[1] / across : 0;
    out->perp_kept = !(c->b_perp > 2 * c->b_perp_err);
    if (out->perp_kept) {       /* not told apart from none: the rig's stays */
        out->new_r[0] = pl->residual[0];
        out->new_r[1] = pl->residual[1];
    }
    out->new_r[2] = by_current ? c->b_z : c->b_z + c->k * pl->residual[2];
    for (int i = 0; i < 3; i++) snprintf(out->r_text[i], sizeof out->r_text[0], "%.6g nT",
                                         out->new_r[i] * 1e9);
    return 0;
}

/* RIG's folder / NAME-calibrated.yaml, or -2, -3, ... when taken. */
static int new_rig_path(const char *rig, char *out, size_t n) {
    char stem[4096];
    snprintf(stem, sizeof stem, "%s", rig);
    char *dot = strrchr(stem, '.'), *slash = strrchr(stem, '/');
    if (dot && (!slash || dot > slash)) *dot = '\0';
    struct stat st;
    for (int i = 1; i < 100; i++) {
        if (i == 1) snprintf(out, n, "%s-calibrated.yaml", stem);
        else snprintf(out, n, "%s-calibrated-%d.yaml", stem, i);
        if (stat(out, &st) != 0) return 0;
    }
    return -1;
}

static int write_rig(const char *rig_path, const plan_rig *rig, const correction *c,
                     const char *run, const char *out, char *err, size_t errlen) {
    char tmp[4300];
    snprintf(tmp, sizeof tmp, "%s.tmp", out);
    FILE *f = fopen(tmp, "w");
    if (!f) {
        snprintf(err, errlen, "cannot write %.900s: %s", tmp, strerror(errno));
        return -1;
    }
    fprintf(f, "# %s corrected by precess calibrate from the run %s\n"
               "# (the field per ampere at place %s and its residual field; comments of the\n"
               "# original are not carried over)\n", rig_path, run, SAMPLE_PLACE);
    rig_changes ch = {.place = SAMPLE_PLACE, .ncoils = c->n, .coil = c->coil,
                      .coefficient_text = c->text_ptr,
                      .residual_text = {c->r_text[0], c->r_text[1], c->r_text[2]}};
    int rc = rig_rewrite(rig->bytes, rig->nbytes, f, &ch, err, errlen);
    rc |= fflush(f) | fsync(fileno(f));
    rc |= fclose(f);
    if (rc == 0 && rename(tmp, out) == 0) return 0;
    if (!err[0]) snprintf(err, errlen, "cannot write %.900s: %s", out, strerror(errno));
    unlink(tmp);
    return -1;
}

static void show(const correction *c, const an_calibration_fit *fit, const char *out) {
    printf("%-28s %16s %16s\n", "", "old", "new");
    for (size_t i = 0; i < c->n; i++) {
        char name[64];
        snprintf(name, sizeof name, "%s at %s (uT/A)", c->coil[i], SAMPLE_PLACE);
        printf("%-28s %16.7g %16.7g\n", name, c->old_k[i] * 1e6, c->new_k[i] * 1e6);
    }
    static const char *axis[3] = {"x", "y", "z"};
    for (int i = 0; i < 3; i++) {
        char name[64];
        snprintf(name, sizeof name, "residual %s at %s (nT)", axis[i], SAMPLE_PLACE);
        printf("%-28s %16.5g %16.5g\n", name, c->old_r[i] * 1e9, c->new_r[i] * 1e9);
    }
    printf("fit: k = %.7g +- %.2g, b_z = %.4g +- %.2g nT, b_perp = %.4g +- %.2g nT, "
           "%zu points\n", fit->k, fit->k_err, fit->b_z * 1e9, fit->b_z_err * 1e9,
           fit->b_perp * 1e9, fit->b_perp_err * 1e9, fit->n);
    if (c->perp_kept)
        printf("b_perp is within 2 sigma of zero: the residual across the field is kept\n");
    printf("%s\n", out);
}

/* The record of the scan shot at the largest |x|: its coil currents say
 * which coils made the field. */
static int top_record(const an_run *r, an_record *out, char *err, size_t errlen) {
    const an_shot_entry *best = NULL;
    for (size_t i = 0; i < r->nshots; i++) {
        const an_shot_entry *e = &r->shots[i];
        if (e->reduced && !isnan(e->x) && (!best || fabs(e->x) > fabs(best->x))) best = e;
    }
    if (!best) return snprintf(err, errlen, "no shot of the run could be read"), -1;
    char path[4500];
    snprintf(path, sizeof path, "%s/%s", r->dir, best->file);
    return an_record_read(path, out, err, errlen);
}

typedef struct {
    const char *dir, *rig;
} calibrate_args;

static int parse(int argc, char **argv, calibrate_args *a) {
    memset(a, 0, sizeof *a);
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--rig") == 0 && i + 1 < argc) a->rig = argv[++i];
        else if (argv[i][0] == '-')
            return cli_usage_error("calibrate", "unknown option '%s' (or its value is missing)",
                                   argv[i]);
        else if (a->dir) return cli_usage_error("calibrate", "one run folder at a time");
        else a->dir = argv[i];
    }
    if (!a->dir) return cli_usage_error("calibrate", "name the calibration run's folder");
    if (!a->rig) return cli_usage_error("calibrate", "--rig names the rig file to correct");
    return 0;
}

/* The run's calibration fit, or NULL with the reason in err. */
static const an_series_entry *calibration_of(an_run *r, const an_plan *ap, char *err,
                                             size_t errlen) {
    if (ap->fit != AN_SERIES_CALIBRATION) {
        snprintf(err, errlen, "the run's plan asks for no calibration fit; its analysis: "
                 "section needs {fit: calibration, against: VARIABLE or {current: COIL}}");
        return NULL;
    }
    if (an_run_reduce(r, ap, err, errlen) != 0) return NULL;
    for (size_t i = 0; i < r->nseries; i++)
        if (r->series[i].fitted && r->series[i].fit == AN_SERIES_CALIBRATION)
            return &r->series[i];
    snprintf(err, errlen, "the calibration could not be fitted (%zu points with a line; it "
             "needs 3 or more spread over the range)", r->nseries ? r->series[0].n : 0);
    return NULL;
}

int cmd_calibrate(int argc, char **argv) {
    calibrate_args a;
    if (parse(argc, argv, &a)) return CLI_USAGE;
    char err[1024] = "", out[4200];
    an_run *r = NULL;
    plan *p = NULL;
    arena *ar = arena_new();
    diag_list d;
    diag_init(&d);
    plan_rig rig;
    int rc = CLI_FAILED;
    if (!ar || rig_read_file(ar, a.rig, &rig, &d) != 0) {
        cli_print_diags(stderr, &d);
        rc = CLI_USAGE;
    } else if (an_run_open(a.dir, &r, err, sizeof err) == 0 && (p = cli_run_plan(a.dir, &d))) {
        an_plan ap;
        cli_analysis_plan(p, &ap);
        const an_series_entry *s = calibration_of(r, &ap, err, sizeof err);
        const rig_place *pl = find_place(&rig, SAMPLE_PLACE);
        correction c;
        an_record top;
        memset(&top, 0, sizeof top);
        if (s && !pl)
            snprintf(err, sizeof err, "%s has no place '%s'", a.rig, SAMPLE_PLACE);
        else if (s && top_record(r, &top, err, sizeof err) == 0 &&
                 correct(pl, &rig, &ap, &s->calibration, &top, &c, err, sizeof err) == 0 &&
                 new_rig_path(a.rig, out, sizeof out) == 0 &&
                 write_rig(a.rig, &rig, &c, r->id, out, err, sizeof err) == 0) {
            show(&c, &s->calibration, out);
            rc = CLI_OK;
        }
        an_record_free(&top);
        if (!s && ap.fit != AN_SERIES_CALIBRATION) rc = CLI_USAGE;
    }
    if (rc != CLI_OK && err[0]) fprintf(stderr, "precess calibrate: %s\n", err);
    diag_free(&d);
    plan_free(p);
    an_run_free(r);
    arena_free(ar);
    return rc;
}
