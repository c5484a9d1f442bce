/* cmd_export: `precess export RUN --to csv|jcamp [--shot N]`: every
 * recorded shot (or one) as a CSV of its record, or as two JCAMP-DX files,
 * the FID as recorded (times its receiver sign) and its spectrum after the
 * plan's window and line-noise removal, into RUN/analysis/export/.
 * Not for the file formats themselves (analysis/export.c). */
#include "analysis.h"
#include "cli.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

typedef struct {
    const char *dir, *to;
    long shot;                  /* 0: every shot */
} export_args;

static int parse(int argc, char **argv, export_args *a) {
    memset(a, 0, sizeof *a);
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--to") == 0 && i + 1 < argc) {
            a->to = argv[++i];
        } else if (strcmp(argv[i], "--shot") == 0 && i + 1 < argc) {
            char *end;
            a->shot = strtol(argv[++i], &end, 10);
            if (*end || a->shot < 1)
                return cli_usage_error("export", "--shot needs a shot number from 1, not '%s'",
                                       argv[i]);
        } else if (argv[i][0] == '-') {
            return cli_usage_error("export", "unknown option '%s' (or its value is missing)",
                                   argv[i]);
        } else if (a->dir) {
            return cli_usage_error("export", "one run folder at a time");
        } else {
            a->dir = argv[i];
        }
    }
    if (!a->dir) return cli_usage_error("export", "name the run folder to export from");
    if (!a->to || (strcmp(a->to, "csv") != 0 && strcmp(a->to, "jcamp") != 0))
        return cli_usage_error("export", "--to csv or --to jcamp");
    return 0;
}

typedef struct {
    const export_args *a;
    const an_run *run;
    an_plan plan;
    an_work *w;
    char out[4400];
} exporter;

static int export_jcamp(exporter *x, const an_shot_entry *e, const an_record *rec, char *err,
                        size_t errlen) {
    char title[512], path[4500];
    snprintf(title, sizeof title, "%s, shot %d (point %d)", x->run->title, e->shot, e->point);
    const char *owner = getenv("USER");
    double field = an_named_value(rec->fields, rec->nfields, "sample");
    an_jcamp_meta m = {.title = title, .origin = x->run->id, .owner = owner ? owner : "unknown",
                       .nucleus = x->plan.nucleus ? x->plan.nucleus : "1H",
                       .observe_frequency = isnan(field) ? 0 : x->plan.gamma_hz * fabs(field),
                       .units = rec->units, .when = rec->started_utc};
    double *fid = malloc((rec->n + 1) * sizeof *fid);
    if (!fid) return snprintf(err, errlen, "out of memory"), -1;
    for (size_t i = 0; i < rec->n; i++) fid[i] = rec->receiver_sign * (double)rec->samples[i];
    snprintf(path, sizeof path, "%s/shot-%06d-fid.jdx", x->out, e->shot);
    int rc = an_export_jcamp_fid(path, &m, fid, rec->n, rec->t0, 1 / rec->rate, err, errlen);
    free(fid);
    if (rc == 0) printf("%s\n", path);
    const an_settings *s = &x->plan.settings;
    an_trace tr;
    an_spectrum sp;
    an_mains mains;
    if (rc == 0 && an_trace_of(x->w, rec, s, &tr, &mains, err, errlen) != 0) rc = -1;
    if (rc == 0 && an_spectrum_of(x->w, tr.y, tr.n, tr.rate, 0, 1, &sp) != 0) {
        snprintf(err, errlen, "out of memory");
        rc = -1;
    }
    if (rc == 0) {
        for (size_t k = 0; k < sp.n; k++) sp.re[k] *= sp.scale, sp.im[k] *= sp.scale;
        snprintf(path, sizeof path, "%s/shot-%06d-spectrum.jdx", x->out, e->shot);
        rc = an_export_jcamp_spectrum(path, &m, sp.re, sp.im, sp.n, 0, sp.df, err, errlen);
        if (rc == 0) printf("%s\n", path);
    }
    return rc;
}

static int export_shot(exporter *x, const an_shot_entry *e, char *err, size_t errlen) {
    char path[4500];
    snprintf(path, sizeof path, "%s/%s", x->run->dir, e->file);
    an_record rec;
    if (an_record_read(path, &rec, err, errlen) != 0) return -1;
    int rc;
    if (strcmp(x->a->to, "csv") == 0) {
        snprintf(path, sizeof path, "%s/shot-%06d.csv", x->out, e->shot);
        rc = an_export_csv_record(path, &rec, err, errlen);
        if (rc == 0) printf("%s\n", path);
    } else {
        rc = export_jcamp(x, e, &rec, err, errlen);
    }
    an_record_free(&rec);
    return rc;
}

static int make_dirs(exporter *x, char *err, size_t errlen) {
    char analysis[4300];
    snprintf(analysis, sizeof analysis, "%s/analysis", x->run->dir);
    snprintf(x->out, sizeof x->out, "%s/export", analysis);
    if ((mkdir(analysis, 0777) == 0 || errno == EEXIST) &&
        (mkdir(x->out, 0777) == 0 || errno == EEXIST))
        return 0;
    snprintf(err, errlen, "cannot create %.900s: %s", x->out, strerror(errno));
    return -1;
}

int cmd_export(int argc, char **argv) {
    export_args a;
    if (parse(argc, argv, &a)) return CLI_USAGE;
    char err[1024] = "";
    an_run *r;
    if (an_run_open(a.dir, &r, err, sizeof err) != 0) {
        fprintf(stderr, "precess export: %s\n", err);
        return CLI_FAILED;
    }
    diag_list d;
    diag_init(&d);
    plan *p = cli_run_plan(a.dir, &d);
    diag_free(&d);
    exporter x = {.a = &a, .run = r, .w = an_work_new()};
    int rc = p && x.w ? CLI_OK : CLI_FAILED;
    if (rc == CLI_OK) cli_analysis_plan(p, &x.plan);
    else fprintf(stderr, "precess export: %s\n", p ? "out of memory" : "the run's plan cannot be read");
    if (rc == CLI_OK && make_dirs(&x, err, sizeof err) != 0) rc = CLI_FAILED;
    size_t done = 0;
    for (size_t i = 0; rc == CLI_OK && i < r->nshots; i++) {
        if (a.shot && r->shots[i].shot != a.shot) continue;
        if (export_shot(&x, &r->shots[i], err, sizeof err) != 0) rc = CLI_FAILED;
        else done++;
    }
    if (rc != CLI_OK && err[0]) fprintf(stderr, "precess export: %s\n", err);
    if (rc == CLI_OK && done == 0) {
        if (a.shot) fprintf(stderr, "precess export: shot %ld has no ok record in %s\n", a.shot,
                            a.dir);
        else fprintf(stderr, "precess export: %s has no ok record yet\n", a.dir);
        rc = CLI_FAILED;
    }
    an_work_free(x.w);
    plan_free(p);
    an_run_free(r);
    return rc;
}
