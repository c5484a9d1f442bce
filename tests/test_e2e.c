/* test_e2e: runs the end-to-end scripts (tests/e2e/NAME.sh) and the reference
 * checks (tests/ref/NAME.py, under Debian's /usr/bin/python3) as cmocka tests,
 * one test per script, so every group reports in one format.
 * Not a place for checks themselves: each script holds its own. */
#include <dirent.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/wait.h>
#include <cmocka.h>

#define MAX_SCRIPTS 256

static void run_script(void **state) {
    const char *cmd = *state;
    int rc = system(cmd);
    if (rc != 0) fail_msg("'%s' exited %d", cmd, WIFEXITED(rc) ? WEXITSTATUS(rc) : rc);
}

static int by_name(const void *a, const void *b) {
    return strcmp(*(char *const *)a, *(char *const *)b);
}

static size_t list(const char *dir, const char *ext, const char *runner, char **out,
                   size_t n) {
    DIR *d = opendir(dir);
    if (!d) return n;
    struct dirent *e;
    size_t start = n;
    while ((e = readdir(d)) && n < MAX_SCRIPTS) {
        size_t len = strlen(e->d_name), el = strlen(ext);
        if (len <= el || strcmp(e->d_name + len - el, ext) != 0) continue;
        size_t sz = strlen(runner) + strlen(dir) + len + 8;
        out[n] = malloc(sz);
        if (!out[n]) break;
        snprintf(out[n], sz, "%s %s/%s", runner, dir, e->d_name);
        n++;
    }
    closedir(d);
    qsort(out + start, n - start, sizeof *out, by_name);
    return n;
}

int main(void) {
    char *cmds[MAX_SCRIPTS];
    const char *py = getenv("PYTHON") ? getenv("PYTHON") : "/usr/bin/python3";
    size_t n = list("tests/e2e", ".sh", "sh", cmds, 0);
    n = list("tests/ref", ".py", py, cmds, n);
    struct CMUnitTest tests[MAX_SCRIPTS];
    for (size_t i = 0; i < n; i++) {
        tests[i] = (struct CMUnitTest){cmds[i], run_script, NULL, NULL, cmds[i]};
    }
    int rc = _cmocka_run_group_tests("end-to-end and reference checks", tests, n, NULL, NULL);
    for (size_t i = 0; i < n; i++) free(cmds[i]);
    return rc;
}
