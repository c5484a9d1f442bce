/* run_folder: what `precess run` decides before the first shot: the run's
 * id, its default folder name, and points.json (every shot's number, point,
 * average, kind and parameter values, with the plan's sha256).
 * Not for writing files (store.c). */
#include "run_cli.h"

#include <ctype.h>
#include <stdbool.h>
#include <fcntl.h>
#include <jansson.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/random.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

/* PRECESS_RUN_ID (32 hex digits), when set, is taken instead of a random
 * id: the simulated rig's noise follows the id, so tests can repeat a run
 * exactly. Not for real runs: a run's id is what tells runs apart. */
static bool id_from_environment(unsigned char b[16]) {
    const char *e = getenv("PRECESS_RUN_ID");
    if (!e || strlen(e) != 32) return false;
    for (int i = 0; i < 16; i++) {
        unsigned v;
        if (!isxdigit((unsigned char)e[2 * i]) || !isxdigit((unsigned char)e[2 * i + 1]) ||
            sscanf(e + 2 * i, "%2x", &v) != 1)
            return false;
        b[i] = (unsigned char)v;
    }
    return true;
}

void run_new_id(char id[33], uint64_t *seed) {
    unsigned char b[16];
    if (!id_from_environment(b) && getrandom(b, sizeof b, 0) != (ssize_t)sizeof b) {
        struct timespec t;
        clock_gettime(CLOCK_REALTIME, &t);
        uint64_t x = (uint64_t)t.tv_nsec ^ ((uint64_t)t.tv_sec << 20) ^ (uint64_t)getpid();
        for (int i = 0; i < 16; i++, x = x * 6364136223846793005ULL + 1442695040888963407ULL)
            b[i] = (unsigned char)(x >> 56);
    }
    *seed = 0;
    for (int i = 0; i < 16; i++) {
        snprintf(id + 2 * i, 3, "%02x", b[i]);
        if (i < 8) *seed = *seed << 8 | b[i];
    }
}

int run_default_dir(const compiled *c, char *out, size_t n) {
    char slug[64];
    size_t k = 0;
    for (const char *t = c->plan->title; *t && k < sizeof slug - 1; t++) {
        unsigned char ch = (unsigned char)*t;
        if (isalnum(ch)) slug[k++] = (char)tolower(ch);
        else if (k && slug[k - 1] != '-') slug[k++] = '-';
    }
    while (k && slug[k - 1] == '-') k--;
    slug[k] = '\0';
    if (!k) snprintf(slug, sizeof slug, "run");
    time_t now = time(NULL);
    struct tm tm;
    localtime_r(&now, &tm);
    char stamp[32];
    strftime(stamp, sizeof stamp, "%Y%m%d-%H%M%S", &tm);
    mkdir("runs", 0777);
    struct stat st;
    for (int i = 1; i < 1000; i++) {
        if (i == 1) snprintf(out, n, "runs/%s-%s", slug, stamp);
        else snprintf(out, n, "runs/%s-%s-%d", slug, stamp, i);
        if (stat(out, &st) != 0) return 0;
    }
    return -1;
}

char *run_points_json(const compiled *c, const char *plan_sha) {
    const plan *p = c->plan;
    const scan *s = c->scan;
    json_t *shots = json_array();
    double *vals = malloc((p->nvars + 1) * sizeof *vals);
    for (size_t k = 0; vals && k < s->nshots; k++) {
        const scan_shot *sh = &s->shots[k];
        scan_shot_values(s, sh, vals);
        json_t *params = json_object();
        for (size_t i = 0; i < p->nvars; i++)
            json_object_set_new(params, p->vars[i].name, json_real(vals[i]));
        json_array_append_new(shots, json_pack("{s:I, s:I, s:I, s:s, s:o}", "shot",
                                               (json_int_t)sh->shot, "point",
                                               (json_int_t)sh->point, "average",
                                               (json_int_t)sh->average, "kind",
                                               scan_kind_name((scan_shot_kind)sh->kind),
                                               "parameters", params));
    }
    free(vals);
    json_t *doc = json_pack("{s:i, s:s, s:s, s:I, s:I, s:o}", "format_version", 1,
                            "plan_sha256", plan_sha, "title", p->title, "points",
                            (json_int_t)s->npoints, "shots", (json_int_t)s->nshots, "shot_list",
                            shots);
    char *text = doc ? json_dumps(doc, JSON_PRESERVE_ORDER | JSON_INDENT(1)) : NULL;
    json_decref(doc);
    return text;
}
