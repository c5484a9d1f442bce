/* cmd_check: `precess check [--json] FILE...`: read plans and rigs, report
 * every problem, print a summary of each valid file (or one JSON document).
 * Not for compiling timelines (preview) or touching hardware (run). */
#include "cli.h"
#include "scan.h"

#include <jansson.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static json_t *diag_array(const diag_list *d, diag_severity sev) {
    json_t *a = json_array();
    for (size_t i = 0; i < d->n; i++) {
        const diag *g = &d->items[i];
        if (g->severity != sev) continue;
        json_array_append_new(a, json_pack("{s:s, s:i, s:i, s:s}", "file", g->file, "line",
                                           g->line, "col", g->col, "message", g->message));
    }
    return a;
}

static json_t *point_list(const plan *p, const scan *s) {
    json_t *a = json_array();
    for (size_t k = 0; k < s->npoints; k++) {
        json_t *params = json_object();
        for (size_t i = 0; i < s->nvars; i++)
            json_object_set_new(params, p->vars[i].name, json_real(s->values[k * s->nvars + i]));
        json_array_append_new(a, json_pack("{s:I, s:o}", "point", (json_int_t)(k + 1),
                                           "parameters", params));
    }
    return a;
}

static json_t *shot_order(const scan *s) {
    json_t *a = json_array();
    for (size_t k = 0; k < s->nshots; k++) {
        const scan_shot *sh = &s->shots[k];
        json_array_append_new(a, json_pack("[I, s, I, I]", (json_int_t)sh->shot,
                                           scan_kind_name((scan_shot_kind)sh->kind),
                                           (json_int_t)sh->point, (json_int_t)sh->average));
    }
    return a;
}

/* Reads one file; fills *doc when json is wanted. Returns 0 when valid. */
static int check_one(const char *path, int json, json_t **doc, diag_list *d) {
    int kind = plan_file_kind(path, d);
    const char *kind_word = kind == 1 ? "plan" : kind == 2 ? "rig" : "unknown";
    if (kind == 0)
        diag_add(d, DIAG_ERROR, (plan_loc){path, 1, 1}, "neither a plan (it has no 'shot:') "
                 "nor a rig (it has no 'coils:', 'inputs:' or 'driver:')");
    int valid = 0;
    json_t *o = json ? json_object() : NULL;
    if (o) {
        json_object_set_new(o, "file", json_string(path));
        json_object_set_new(o, "kind", json_string(kind_word));
        json_object_set_new(o, "valid", json_false());
    }
    if (kind == 1) {
        plan *p = plan_read_file(path, d);
        scan *s = p ? scan_expand(p, d) : NULL;
        compiled *c = s ? compile_plan(p, s, d) : NULL;
        valid = c != NULL;
        char took[32];
        if (c) units_format(c->duration, UNITS_TIME, took, sizeof took);
        if (valid && o) {
            json_object_set_new(o, "points", json_integer((json_int_t)s->npoints));
            json_object_set_new(o, "shots", json_integer((json_int_t)s->nshots));
            json_object_set_new(o, "duration", json_real(c->duration));
            json_object_set_new(o, "point_list", point_list(p, s));
            json_object_set_new(o, "shot_order", shot_order(s));
        } else if (valid) {
            printf("%s: ok: plan '%s' on rig %s: %zu point%s, %zu shot%s, %s\n", path,
                   p->title, p->rig.name, s->npoints, s->npoints == 1 ? "" : "s", s->nshots,
                   s->nshots == 1 ? "" : "s", cli_duration(c->duration, took, sizeof took));
        }
        compile_free(c);
        scan_free(s);
        plan_free(p);
    } else if (kind == 2) {
        arena *a = arena_new();
        plan_rig rig;
        valid = a && rig_read_file(a, path, &rig, d) == 0;
        if (valid && !o)
            printf("%s: ok: rig %s (driver %s): %zu coil%s, %zu magnet%s, %zu place%s, "
                   "%zu line%s, %zu input%s\n", path, rig.name, rig.driver, rig.ncoils,
                   rig.ncoils == 1 ? "" : "s", rig.nmagnets, rig.nmagnets == 1 ? "" : "s",
                   rig.nplaces, rig.nplaces == 1 ? "" : "s", rig.nlines,
                   rig.nlines == 1 ? "" : "s", rig.ninputs, rig.ninputs == 1 ? "" : "s");
        arena_free(a);
    }
    if (o) {
        cli_drop_foreign_notes(d, path);
        diag_sort(d);
        json_object_set_new(o, "valid", json_boolean(valid));
        json_object_set_new(o, "errors", diag_array(d, DIAG_ERROR));
        json_object_set_new(o, "warnings", diag_array(d, DIAG_WARNING));
        json_object_set_new(o, "notes", diag_array(d, DIAG_NOTE));
        *doc = o;
    }
    return valid ? 0 : -1;
}

int cmd_check(int argc, char **argv) {
    int json = 0, nfiles = 0;
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--json") == 0) json = 1;
        else if (argv[i][0] == '-' && argv[i][1]) return cli_usage_error("check",
                                                                        "unknown option '%s'",
                                                                        argv[i]);
        else nfiles++;
    }
    if (nfiles == 0) return cli_usage_error("check", "name at least one plan or rig file");
    if (json && nfiles != 1) return cli_usage_error("check", "--json takes exactly one file");
    int bad = 0;
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--json") == 0) continue;
        diag_list d;
        diag_init(&d);
        json_t *doc = NULL;
        if (check_one(argv[i], json, &doc, &d)) bad = 1;
        cli_drop_foreign_notes(&d, argv[i]);
        cli_print_diags(stderr, &d);
        if (doc) {
            char *text = json_dumps(doc, JSON_PRESERVE_ORDER);
            if (text) {
                puts(text);
                free(text);
            }
            json_decref(doc);
        }
        diag_free(&d);
    }
    return bad ? CLI_USAGE : CLI_OK;
}
