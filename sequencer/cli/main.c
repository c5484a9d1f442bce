/* main: precess's entry point: finds the command and runs it.
 * Not for any command's own work (cmd_<name>.c). */
#include "cli.h"

#include <math.h>
#include <stdarg.h>
#include <malloc.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int cmd_later(int argc, char **argv) {
    (void)argc;
    fprintf(stderr, "precess: '%s' is not available in this version yet; "
                    "see 'precess help'\n", argv[0]);
    return CLI_USAGE;
}

static const cli_command commands[] = {
    {"check", cmd_check, "check plans and rigs without touching hardware",
     "usage: precess check [--json] FILE...\n"
     "\n"
     "Reads each plan or rig and reports every problem as FILE:LINE:COL: error: TEXT.\n"
     "A plan's rig is read too. Prints a one-line summary of each valid file.\n"
     "  --json   print one JSON document for a single FILE on stdout\n"
     "Exit status: 0 when every file is valid, 2 otherwise.\n"},
    {"preview", cmd_preview, "show what a plan will do: currents, fields, pulses, time",
     "usage: precess preview PLAN [--json] [--timeline N] [--diagram FILE.png|svg [--shot N]]\n"
     "\n"
     "Compiles the plan and prints a table of every point: scan values, coil currents,\n"
     "fields at each place, the Larmor frequency, the first pulse and each nucleus'\n"
     "tip angle, the shot length; then the total duration and the expected finish.\n"
     "  --json          one JSON document with every shot instead\n"
     "  --timeline N    shot N's steps and timed events\n"
     "  --diagram FILE  draw a shot's timing diagram (PNG or SVG, by the extension)\n"
     "  --shot N        the shot the diagram shows (default 1)\n"
     "Exit status: 0 when the plan compiles, 2 otherwise.\n"},
    {"run", cmd_run, "run a plan on the rig (or in simulation) and record every shot",
     "usage: precess run PLAN [--out DIR] [--fast] [--yes]\n"
     "\n"
     "Checks and compiles the plan (exit 2 if it is refused), then runs every shot,\n"
     "writing the run folder (plan, rig, points.json, journal.jsonl, records/).\n"
     "  --out DIR   the run folder (must not exist); default runs/TITLE-DATE-TIME\n"
     "  --fast      simulated rigs only: run in simulated time, as fast as the disk\n"
     "  --yes       start a hardware run without asking\n"
     "Ctrl-C once stops after the current shot; twice, or SIGTERM, aborts it.\n"
     "Exit status: 0 every shot ok, 1 shots failed, 2 bad plan or usage,\n"
     "3 interrupted, 4 hardware fault; the outputs end safe on every path.\n"},
    {"resume", cmd_later, "finish an interrupted run", "usage: precess resume RUN\n"},
    {"verify", cmd_later, "check that a run folder is whole", "usage: precess verify RUN\n"},
    {"analyze", cmd_analyze, "reduce a run to spectra, fits and plots",
     "usage: precess analyze RUN [--json]\n\n"
     "Reduces every recorded shot of the run folder RUN (window, line noise, spectrum,\n"
     "damped-sinusoid fit of every line), every point's coherent average, and the\n"
     "series the plan's analysis: section asks for (relaxation, buildup or\n"
     "calibration fits, one per `per` value, and the dispersion profile). Writes\n"
     "RUN/analysis/: shots.csv, points.csv, fits.csv, and PNG and SVG plots. Works on\n"
     "a run still going or interrupted: it analyses the shots the journal has.\n\n"
     "  --json   print the results as one JSON document on stdout\n"},
    {"calibrate", cmd_calibrate, "write a corrected rig from a calibration run",
     "usage: precess calibrate RUN --rig RIG\n\n"
     "Fits the line frequency of RUN against its field setpoint or coil current (the\n"
     "plan's analysis: {fit: calibration}) and writes RIG's corrected copy next to it\n"
     "(NAME-calibrated.yaml): the field per ampere of the coils at the sample place and\n"
     "the residual field there. Prints the old and new values side by side. RIG\n"
     "itself is not changed.\n"},
    {"export", cmd_export, "export records as CSV or JCAMP-DX",
     "usage: precess export RUN --to csv|jcamp [--shot N]\n\n"
     "Writes every recorded shot of RUN (or shot N) into RUN/analysis/export/:\n"
     "  --to csv     shot-NNNNNN.csv, time (s from the shot's start) and value per sample\n"
     "  --to jcamp   shot-NNNNNN-fid.jdx (the record times its receiver sign) and\n"
     "               shot-NNNNNN-spectrum.jdx (after the plan's window and line-noise\n"
     "               removal), JCAMP-DX 5.01 files any NMR program can open\n"},
    {"probe", cmd_later, "list what a rig's DAQ device offers", "usage: precess probe RIG\n"},
    {"help", cmd_help, "show the commands, or one command's usage",
     "usage: precess help [COMMAND]\n"},
};

const cli_command *cli_commands(size_t *n) {
    *n = sizeof commands / sizeof commands[0];
    return commands;
}

const cli_command *cli_find(const char *name) {
    for (size_t i = 0; i < sizeof commands / sizeof commands[0]; i++)
        if (strcmp(commands[i].name, name) == 0) return &commands[i];
    return NULL;
}

int cli_usage_error(const char *command, const char *fmt, ...) {
    va_list ap;
    va_start(ap, fmt);
    fprintf(stderr, "precess %s: ", command);
    vfprintf(stderr, fmt, ap);
    fputc('\n', stderr);
    va_end(ap);
    const cli_command *c = cli_find(command);
    if (c) {
        const char *nl = strchr(c->usage, '\n');
        fprintf(stderr, "%.*s\n", nl ? (int)(nl - c->usage) : (int)strlen(c->usage), c->usage);
    }
    return CLI_USAGE;
}

const char *cli_duration(double seconds, char *buf, size_t n) {
    long s = (long)ceil(seconds);
    if (seconds < 60) snprintf(buf, n, "%.3g s", seconds);
    else if (s < 3600) snprintf(buf, n, "%ld min %ld s", s / 60, s % 60);
    else snprintf(buf, n, "%ld h %02ld min", s / 3600, s / 60 % 60);
    return buf;
}

void cli_drop_foreign_notes(diag_list *d, const char *path) {
    size_t k = 0;
    for (size_t i = 0; i < d->n; i++) {
        diag *g = &d->items[i];
        if (g->severity == DIAG_NOTE && strcmp(g->file, path) != 0) {
            free(g->file);
            free(g->message);
            continue;
        }
        d->items[k++] = *g;
    }
    d->n = k;
}

compiled *cli_compile(const char *path, diag_list *d, plan **p, scan **s) {
    *p = plan_read_file(path, d);
    *s = *p ? scan_expand(*p, d) : NULL;
    compiled *c = *s ? compile_plan(*p, *s, d) : NULL;
    cli_drop_foreign_notes(d, path);
    cli_print_diags(stderr, d);
    return c;
}

void cli_free_compiled(compiled *c, scan *s, plan *p) {
    compile_free(c);
    scan_free(s);
    plan_free(p);
}

void cli_print_diags(FILE *f, diag_list *d) {
    static const char *const sev[] = {"error", "warning", "note"};
    diag_sort(d);
    for (size_t i = 0; i < d->n; i++) {
        const diag *g = &d->items[i];
        if (g->line > 0)
            fprintf(f, "%s:%d:%d: %s: %s\n", g->file, g->line, g->col, sev[g->severity],
                    g->message);
        else
            fprintf(f, "%s: %s: %s\n", g->file, sev[g->severity], g->message);
    }
}

int main(int argc, char **argv) {
    /* Keep freed memory in the heap instead of returning it to the kernel:
     * every shot allocates and frees buffers of the same sizes (samples,
     * record images), and fresh pages from the kernel cost a page fault
     * each, several milliseconds a shot at 10 kS/s. */
    mallopt(M_MMAP_THRESHOLD, 256 << 20);
    mallopt(M_TRIM_THRESHOLD, 512 << 20);
    if (argc < 2) {
        cmd_help(1, argv);
        return CLI_USAGE;
    }
    if (strcmp(argv[1], "--version") == 0 || strcmp(argv[1], "version") == 0) {
        printf("precess %s\n", PRECESS_VERSION);
        return CLI_OK;
    }
    if (strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0)
        return cmd_help(argc - 1, argv + 1);
    const cli_command *c = cli_find(argv[1]);
    if (!c) {
        fprintf(stderr, "precess: unknown command '%s'; see 'precess help'\n", argv[1]);
        return CLI_USAGE;
    }
    return c->run(argc - 1, argv + 1);
}
