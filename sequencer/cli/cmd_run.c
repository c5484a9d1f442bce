/* cmd_run: `precess run PLAN [--out DIR] [--fast] [--yes]`: compile the plan,
 * open its rig's driver, ask before driving hardware, create the run folder,
 * run every shot on the scheduler with the records written behind it, show
 * progress, and map the outcome to the exit status. Signals: SIGINT once
 * stops after the shot, twice or SIGTERM aborts it; SIGHUP is ignored.
 * Not for the timing itself (schedule.h) nor the files (store.h). */
#include "cli.h"
#include "run_cli.h"

#include <errno.h>
#include <jansson.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

static volatile sig_atomic_t stop_flag, abort_flag;

static void say(const char *text) {
    ssize_t n = write(STDERR_FILENO, text, strlen(text));   /* async-signal-safe */
    (void)n;
}

static void on_signal(int sig) {
    if (sig == SIGINT && !stop_flag) {
        stop_flag = 1;
        say("\nprecess run: stopping after this shot (Ctrl-C again to abort it now)\n");
    } else {
        abort_flag = 1;
        say("\nprecess run: aborting this shot, putting the outputs in the safe state\n");
    }
}

static void install_signals(void) {
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_signal;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGINT, &sa, NULL);
    sigaction(SIGTERM, &sa, NULL);
    signal(SIGHUP, SIG_IGN);
}

typedef struct {
    const char *plan, *out;
    int fast, yes;
} run_args;

static int parse(int argc, char **argv, run_args *a) {
    memset(a, 0, sizeof *a);
    for (int i = 1; i < argc; i++) {
        if (strcmp(argv[i], "--fast") == 0) a->fast = 1;
        else if (strcmp(argv[i], "--yes") == 0) a->yes = 1;
        else if (strcmp(argv[i], "--out") == 0 && i + 1 < argc) a->out = argv[++i];
        else if (strcmp(argv[i], "--out") == 0)
            return cli_usage_error("run", "--out needs the run folder to create");
        else if (argv[i][0] == '-') return cli_usage_error("run", "unknown option '%s'", argv[i]);
        else if (a->plan) return cli_usage_error("run", "one plan at a time");
        else a->plan = argv[i];
    }
    return a->plan ? 0 : cli_usage_error("run", "name the plan to run");
}

/* Ask on the terminal; without one, --yes is needed. */
static int confirm(const compiled *c, const run_args *a) {
    char took[32];
    fprintf(stderr, "precess run: rig %s drives hardware (driver %s)\n  plan '%s': %zu points, "
            "%zu shots, %s\n", c->plan->rig.name, c->plan->rig.driver, c->plan->title,
            c->scan->npoints, c->scan->nshots, cli_duration(c->duration, took, sizeof took));
    if (a->yes) return 0;
    if (!isatty(STDIN_FILENO)) {
        fprintf(stderr, "precess run: no terminal to ask on; add --yes to start anyway\n");
        return -1;
    }
    fprintf(stderr, "Start energizing the coils? Type yes to start: ");
    char line[16] = "";
    if (!fgets(line, sizeof line, stdin) || strcmp(line, "yes\n") != 0) {
        fprintf(stderr, "precess run: not started\n");
        return -1;
    }
    return 0;
}

int cmd_run(int argc, char **argv) {
    run_args a;
    if (parse(argc, argv, &a)) return CLI_USAGE;
    diag_list d;
    diag_init(&d);
    plan *p;
    scan *s;
    compiled *c = cli_compile(a.plan, &d, &p, &s);
    diag_free(&d);
    int rc = CLI_USAGE;
    if (c) {
        run_session r = {.c = c, .out = a.out, .fast = a.fast, .stop = &stop_flag,
                         .abort = &abort_flag};
        install_signals();
        rc = run_open(&r);
        if (rc == CLI_OK && r.is_hardware && confirm(c, &a)) rc = CLI_USAGE;
        if (rc == CLI_OK) rc = run_execute(&r);
        run_close(&r);
    }
    cli_free_compiled(c, s, p);
    return rc;
}
