/* cli: the command line: one function per command, and the printing of
 * diagnostics that only the CLI does. Not for plan logic (sequencer/). */
#ifndef PRECESS_CLI_H
#define PRECESS_CLI_H

#include <stdio.h>
#include "analysis.h"
#include "compile.h"
#include "plan.h"
#include "scan.h"

/* Exit statuses (design: 0 ok, 1 runtime failure, 2 bad plan or usage,
 * 3 interrupted, 4 hardware fault). */
enum { CLI_OK = 0, CLI_FAILED = 1, CLI_USAGE = 2, CLI_INTERRUPTED = 3, CLI_FAULT = 4 };

typedef struct {
    const char *name;
    int (*run)(int argc, char **argv);
    const char *summary;        /* one line for `precess help` */
    const char *usage;          /* the full text for `precess help NAME` */
} cli_command;

const cli_command *cli_commands(size_t *n);
const cli_command *cli_find(const char *name);

/* Notes belong to the file checked: drop those of other files (a plan's
 * rig reports its own when it is checked). */
void cli_drop_foreign_notes(diag_list *d, const char *path);
/* Read, expand and compile the plan at path, printing its diagnostics
 * (they stay in d); *p and *s are set even when compiling fails (free all
 * three with cli_free_compiled). Returns the compiled plan or NULL. */
compiled *cli_compile(const char *path, diag_list *d, plan **p, scan **s);
void cli_free_compiled(compiled *c, scan *s, plan *p);
/* FILE:LINE:COL: error: TEXT, sorted, to f. */
void cli_print_diags(FILE *f, diag_list *d);
/* A usage error: prints the message and the command's usage line. */
int cli_usage_error(const char *command, const char *fmt, ...)
    __attribute__((format(printf, 2, 3)));

/* Draw shot number shot of c into path (.png or .svg) with PLplot (diagram.c).
 * Returns 0, or -1 with a message in err. */
int cli_draw_diagram(const compiled *c, uint32_t shot, const char *path, char *err,
                     size_t errlen);

/* A run's length for people: "45 s", "12 min 5 s", "3 h 02 min". */
const char *cli_duration(double seconds, char *buf, size_t n);

/* The plan of a run folder, read with the folder's own rig copy (its
 * diagnostics printed); NULL when it cannot be read. */
plan *cli_run_plan(const char *dir, diag_list *d);
/* What the plan's analysis: section asks, as the analysis takes it. */
int cli_analysis_plan(const plan *p, an_plan *out);

/* Values to replace in a rig file (rig_rewrite.c), as the text to write. */
typedef struct {
    const char *place;                  /* places.PLACE and residual.PLACE */
    size_t ncoils;
    const char *const *coil;            /* places.PLACE.COIL ... */
    const char *const *coefficient_text;    /* ... becomes this ("151.2 uT/A") */
    const char *residual_text[3];       /* residual.PLACE becomes [x, y, z] */
} rig_changes;
/* The rig file's bytes with ch applied, as YAML to out (comments are not
 * kept). Returns 0, or -1 with a message in err. */
int rig_rewrite(const char *bytes, size_t len, FILE *out, const rig_changes *ch, char *err,
                size_t errlen);

int cmd_check(int argc, char **argv);
int cmd_analyze(int argc, char **argv);
int cmd_calibrate(int argc, char **argv);
int cmd_export(int argc, char **argv);
int cmd_preview(int argc, char **argv);
int cmd_run(int argc, char **argv);
int cmd_help(int argc, char **argv);

#endif
