/* diag: the list of errors, warnings and notes that reading and compiling
 * produce, each with its file, line and column; and the nearest-word helper
 * behind "did you mean" suggestions. Not for printing (the CLI does). */
#include "plan.h"

#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void diag_init(diag_list *d) { memset(d, 0, sizeof *d); }

void diag_free(diag_list *d) {
    for (size_t i = 0; i < d->n; i++) {
        free(d->items[i].file);
        free(d->items[i].message);
    }
    free(d->items);
    diag_init(d);
}

void diag_add(diag_list *d, diag_severity s, plan_loc at, const char *fmt, ...) {
    if (d->n == d->cap) {
        size_t cap = d->cap ? d->cap * 2 : 16;
        diag *items = realloc(d->items, cap * sizeof *items);
        if (!items) return;
        d->items = items;
        d->cap = cap;
    }
    char buf[1024];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    diag *g = &d->items[d->n];
    g->severity = s;
    g->file = strdup(at.file ? at.file : "");
    g->line = at.line;
    g->col = at.col;
    g->message = strdup(buf);
    if (!g->file || !g->message) {
        free(g->file);
        free(g->message);
        return;
    }
    d->n++;
    if (s == DIAG_ERROR) d->errors++;
    if (s == DIAG_WARNING) d->warnings++;
}

static int by_place(const diag *a, const diag *b) {
    int c = strcmp(a->file, b->file);
    if (c) return c;
    if (a->line != b->line) return a->line < b->line ? -1 : 1;
    if (a->col != b->col) return a->col < b->col ? -1 : 1;
    return 0;
}

void diag_sort(diag_list *d) {
    /* Insertion sort: stable, and lists are short. */
    for (size_t i = 1; i < d->n; i++) {
        diag x = d->items[i];
        size_t j = i;
        while (j > 0 && by_place(&d->items[j - 1], &x) > 0) {
            d->items[j] = d->items[j - 1];
            j--;
        }
        d->items[j] = x;
    }
}

static size_t edit_distance(const char *a, const char *b) {
    size_t la = strlen(a), lb = strlen(b);
    if (la > 64 || lb > 64) return (size_t)-1;
    size_t row[65];
    for (size_t j = 0; j <= lb; j++) row[j] = j;
    for (size_t i = 1; i <= la; i++) {
        size_t diagonal = row[0];
        row[0] = i;
        for (size_t j = 1; j <= lb; j++) {
            size_t up = row[j];
            size_t best = diagonal + (a[i - 1] != b[j - 1]);
            if (row[j] + 1 < best) best = row[j] + 1;
            if (row[j - 1] + 1 < best) best = row[j - 1] + 1;
            row[j] = best;
            diagonal = up;
        }
    }
    return row[lb];
}

const char *diag_nearest(const char *word, const char *const *candidates, size_t n) {
    const char *best = NULL;
    size_t best_d = (size_t)-1;
    for (size_t i = 0; i < n; i++) {
        size_t dist = edit_distance(word, candidates[i]);
        if (dist < best_d) {
            best_d = dist;
            best = candidates[i];
        }
    }
    size_t len = strlen(word);
    size_t allowed = len <= 3 ? 1 : len <= 6 ? 2 : 3;
    return best_d <= allowed ? best : NULL;
}
