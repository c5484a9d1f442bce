/* export: CSV and JCAMP-DX files of shot records and spectra, each written
 * whole (a temporary name beside the target, fsync, rename) or not at all.
 * JCAMP-DX in the two NMR forms this project needs: a real FID as XYDATA and
 * a complex spectrum as an NTUPLES pair of pages, both in AFFN. Not a
 * JCAMP-DX reader, and no compressed (ASDF), peak-table or 2D forms. */
#include "analysis_internal.h"

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

/* Where the JCAMP-DX rules below come from. Each rule is marked where it is
 * used: "[4.24]" or "[NMR]" alone means read during this work; "(from
 * memory)" means recalled, not read.
 *   [4.24] R. S. McDonald, P. A. Wilks, "JCAMP-DX: A Standard Form for
 *          Exchange of Infrared Spectra in Computer Readable Form", Appl.
 *          Spectrosc. 42, 151 (1988). Read: its opening (all data as labelled
 *          fields of printable ASCII, a text file a person can read and edit).
 *   [NMR]  A. N. Davies, P. Lampen, "JCAMP-DX for NMR", Appl. Spectrosc. 47,
 *          1093 (1993), JCAMP-DX 5.01. Not read itself; what was read is the
 *          IUPAC working party's nD-NMR test-file notes, which list the
 *          NTUPLES attribute labels (VAR_NAME, SYMBOL, VAR_TYPE INDEPENDENT /
 *          DEPENDENT, VAR_FORM AFFN / ASDF, VAR_DIM, UNITS HZ / SECONDS /
 *          ARBITRARY UNITS, FIRST, LAST, MIN, MAX, FACTOR), the variable names
 *          FID/REAL, FID/IMAG with symbols R and I, and its test-data index
 *          ((X++(Y..Y)) for equally spaced X; the AFFN, PAC, SQZ, DIF, DUP
 *          forms). Everything else marked [NMR] is (from memory). */

#ifndef PRECESS_VERSION
#define PRECESS_VERSION "unknown"
#endif

/* [4.24] lines of at most 80 characters (from memory). */
#define LINE_CHARS 80
/* The largest |Y| integer: the full range uses nine significant digits, well
 * inside a 32-bit integer, which some readers use (common practice, no source). */
#define Y_FULL_SCALE 999999999.0

/* ---- numbers and text ------------------------------------------------- */

/* v in the fewest of 15, 16 or 17 significant digits that read back as v,
 * with the exponent as E: [4.24] AFFN numbers are digits, sign, decimal point
 * and E followed by a signed power of ten (read as quoted from the standard
 * in a third party's notes; the paper's own text not read). */
static void fmt_num(char out[32], double v) {
    for (int digits = 15; digits <= 17; digits++) {
        snprintf(out, 32, "%.*g", digits, v);
        if (strtod(out, NULL) == v) break;
    }
    char *e = strchr(out, 'e');
    if (e) *e = 'E';
}

static void put_num(an_out *o, const char *label, double v, const char *comment) {
    char s[32];
    fmt_num(s, v);
    an_out_printf(o, "##%s= %s%s%s\n", label, s, comment ? " $$ " : "", comment ? comment : "");
}

/* A copy of s as a JCAMP-DX value can carry it: printable ASCII on one
 * logical line ([4.24] printable ASCII), with "$$" (a comment from there to
 * the end of the line) and "##" (a new label when at the start of a line)
 * broken by a space ([4.24] (from memory)). Bytes outside printable ASCII
 * become '?', line breaks and tabs spaces. NULL when out of memory. */
static char *clean_text(const char *s) {
    if (!s) s = "";
    char *out = malloc(2 * strlen(s) + 1), *p = out;
    if (!out) return NULL;
    for (; *s; s++) {
        unsigned char c = (unsigned char)*s;
        char ch = c >= 0x20 && c < 0x7f ? (char)c : c == '\n' || c == '\r' || c == '\t' ? ' ' : '?';
        if ((ch == '$' || ch == '#') && p > out && p[-1] == ch) *p++ = ' ';
        *p++ = ch;
    }
    *p = '\0';
    return out;
}

/* ##LABEL= value, wrapped at spaces onto continuation lines so that no line
 * passes 80 characters ([4.24] a value runs on until the next "##" (from
 * memory)). Returns -1 when out of memory. */
static int put_text(an_out *o, const char *label, const char *value) {
    char *text = clean_text(value);
    if (!text) return -1;
    char first[LINE_CHARS + 1];
    snprintf(first, sizeof first, "##%s=%s", label, *text ? " " : "");
    const char *prefix = first, *s = text;
    do {
        size_t room = LINE_CHARS - strlen(prefix), len = strlen(s);
        size_t cut = len <= room ? len : room, next = cut;
        if (len > room) {
            size_t space = cut;
            while (space > 0 && s[space] != ' ') space--;
            if (space > 0) cut = space, next = space + 1;
        }
        an_out_printf(o, "%s%.*s\n", prefix, (int)cut, s);
        prefix = "";
        s += next;
    } while (*s);
    free(text);
    return 0;
}

/* ##LABEL= a, b, c: a list of AFFN or STRING items, continued on the next
 * line after a comma when the next item would pass 80 characters. */
static void put_list(an_out *o, const char *label, const char *const *items, size_t n) {
    char line[LINE_CHARS + 2];
    int len = snprintf(line, sizeof line, "##%s=", label);
    for (size_t i = 0; i < n; i++) {
        const char *sep = i + 1 < n ? "," : "";
        size_t need = 1 + strlen(items[i]) + strlen(sep);
        if ((size_t)len + need > LINE_CHARS) {
            an_out_printf(o, "%s\n", line);
            len = 0;
        }
        const char *gap = len && *items[i] ? " " : "";
        len += snprintf(line + len, sizeof line - (size_t)len, "%s%s%s", gap, items[i], sep);
    }
    an_out_printf(o, "%s\n", line);
}

static int is_digit(char c) { return c >= '0' && c <= '9'; }

/* n digits at s as a number, or -1. */
static int digits_at(const char *s, int n) {
    int v = 0;
    for (int i = 0; i < n; i++) {
        if (!is_digit(s[i])) return -1;
        v = 10 * v + (s[i] - '0');
    }
    return v;
}

/* ISO 8601 "2026-12-02T00:30:51.288294Z" (or a +hh:mm offset, or none: UTC)
 * as "2026/12/02 00:30:51.288294 +0000": [NMR] ##LONGDATE= YYYY/MM/DD
 * HH:MM:SS with an optional fraction and zone (from memory). 0, or -1. */
static int longdate_of(const char *when, char *out, size_t len) {
    int y = digits_at(when, 4), mo = -1, d = -1, h = -1, mi = -1, s = -1;
    if (y >= 0 && when[4] == '-') mo = digits_at(when + 5, 2);
    if (mo >= 1 && mo <= 12 && when[7] == '-') d = digits_at(when + 8, 2);
    if (d >= 1 && d <= 31 && (when[10] == 'T' || when[10] == ' ')) h = digits_at(when + 11, 2);
    if (h >= 0 && h <= 23 && when[13] == ':') mi = digits_at(when + 14, 2);
    if (mi >= 0 && mi <= 59 && when[16] == ':') s = digits_at(when + 17, 2);
    if (s < 0 || s > 60) return -1;
    const char *p = when + 19;
    int frac = 0;
    if (*p == '.') {
        while (is_digit(p[1 + frac])) frac++;
        if (frac == 0 || frac > 9) return -1;
    }
    const char *zone = p + (frac ? frac + 1 : 0);
    char z[8] = "+0000";
    if (*zone == 'Z') zone++;
    else if ((*zone == '+' || *zone == '-') && digits_at(zone + 1, 2) >= 0) {
        /* +hh, +hhmm or +hh:mm */
        const char *mm = zone + 3 + (zone[3] == ':');
        int minutes = digits_at(mm, 2) >= 0;
        snprintf(z, sizeof z, "%c%.2s%.2s", *zone, zone + 1, minutes ? mm : "00");
        zone = minutes ? mm + 2 : zone + 3;
    }
    if (*zone) return -1;
    snprintf(out, len, "%04d/%02d/%02d %02d:%02d:%02d%.*s %s", y, mo, d, h, mi, s,
             frac ? frac + 1 : 0, p, z);
    return 0;
}

/* ---- checks of the arguments ------------------------------------------ */

static int check_values(const char *path, const char *what, const double *v, size_t n,
                        char *err, size_t errlen) {
    if (!v) {
        snprintf(err, errlen, "%s: not written: no %s given", path, what);
        return -1;
    }
    for (size_t i = 0; i < n; i++) {
        if (!isfinite(v[i])) {
            snprintf(err, errlen, "%s: not written: %s[%zu] is %g; JCAMP-DX has no place for it",
                     path, what, i, v[i]);
            return -1;
        }
    }
    return 0;
}

static int check_meta(const char *path, const an_jcamp_meta *m, char *err, size_t errlen) {
    char date[64];
    if (!m) snprintf(err, errlen, "%s: not written: no title, origin and nucleus given", path);
    else if (!m->nucleus || !*m->nucleus)
        snprintf(err, errlen, "%s: not written: the nucleus (##.OBSERVE NUCLEUS) is missing", path);
    else if (!isfinite(m->observe_frequency))
        snprintf(err, errlen, "%s: not written: the observe frequency is %g", path,
                 m->observe_frequency);
    else if (m->when && *m->when && longdate_of(m->when, date, sizeof date) != 0)
        snprintf(err, errlen, "%s: not written: the date '%s' is not ISO 8601 UTC "
                 "(2026-12-02T00:30:51.288294Z)", path, m->when);
    else return 0;
    return -1;
}

static int check_axis(const char *path, size_t n, double first, double step, char *err,
                      size_t errlen) {
    if (!path) snprintf(err, errlen, "JCAMP-DX file not written: no path given");
    else if (n < 2)
        snprintf(err, errlen, "%s: not written: %zu points; at least 2 are needed", path, n);
    else if (!isfinite(first) || !isfinite(step) || step <= 0 ||
             !isfinite(first + (double)(n - 1) * step))
        snprintf(err, errlen, "%s: not written: the axis starts at %g and steps by %g; the step "
                 "must be > 0", path, first, step);
    else return 0;
    return -1;
}

/* ---- JCAMP-DX ---------------------------------------------------------- */

/* The scaled integers of v: [4.24] Y = YFACTOR * integer (from memory), with
 * the factor chosen so that the largest |v| becomes Y_FULL_SCALE. */
typedef struct {
    double factor, first, last, min, max;   /* in v's units, as a reader gets them */
} scaled;

static scaled scale_of(const double *v, size_t n) {
    double top = 0;
    for (size_t i = 0; i < n; i++) top = fmax(top, fabs(v[i]));
    scaled s = {.factor = top > 0 ? top / Y_FULL_SCALE : 1.0};
    long long lo = 0, hi = 0;
    for (size_t i = 0; i < n; i++) {
        long long q = llround(v[i] / s.factor);
        if (i == 0 || q < lo) lo = q;
        if (i == 0 || q > hi) hi = q;
    }
    s.first = (double)llround(v[0] / s.factor) * s.factor;
    s.last = (double)llround(v[n - 1] / s.factor) * s.factor;
    s.min = (double)lo * s.factor;
    s.max = (double)hi * s.factor;
    return s;
}

/* (X++(Y..Y)) lines: [4.24] each line starts with the abscissa of its first
 * ordinate, divided by XFACTOR, then ordinates (integers, times YFACTOR the
 * values), AFFN separated by a blank (from memory). Here XFACTOR is the step,
 * so the abscissas are x0_over + index. */
static void put_table(an_out *o, const double *v, size_t n, double x0_over, double factor) {
    char line[LINE_CHARS + 1], tok[32];
    int len = 0;
    for (size_t i = 0; i < n; i++) {
        int k = snprintf(tok, sizeof tok, "%lld", llround(v[i] / factor));
        if (len > 0 && len + 1 + k > LINE_CHARS) {
            an_out_printf(o, "%s\n", line);
            len = 0;
        }
        if (len == 0) {
            len = snprintf(line, sizeof line, "%.15g", x0_over + (double)i);
            char *e = strchr(line, 'e');
            if (e) *e = 'E';
        }
        len += snprintf(line + len, sizeof line - (size_t)len, " %s", tok);
    }
    if (len > 0) an_out_printf(o, "%s\n", line);
}

/* [NMR] ##.OBSERVE NUCLEUS= ^1H: the mass number after a caret (from memory). */
static void nucleus_label(const char *nucleus, char *out, size_t len) {
    snprintf(out, len, "%s%s", is_digit(nucleus[0]) ? "^" : "", nucleus);
}

/* The labels both forms open with: [4.24] ##TITLE= first, ##JCAMP-DX= second
 * (from memory); ##DATA TYPE=, ##ORIGIN=, ##OWNER= required (from memory);
 * [NMR] ##DATA CLASS= (5.00 and later), ##LONGDATE=, ##.OBSERVE FREQUENCY= in
 * MHz, ##.OBSERVE NUCLEUS=, ##.ACQUISITION MODE= SINGLE for one detection
 * channel (from memory); [4.24] labels starting with '$' hold data private to
 * a program (from memory). Returns -1 when out of memory. */
static int put_header(an_out *o, const an_jcamp_meta *m, const char *type, const char *class) {
    char s[32], nucleus[AN_NAME + 2], date[64];
    int rc = put_text(o, "TITLE", m->title);
    an_out_printf(o, "##JCAMP-DX= 5.01 $$ precess %s\n", PRECESS_VERSION);
    an_out_printf(o, "##DATA TYPE= %s\n##DATA CLASS= %s\n", type, class);
    rc |= put_text(o, "ORIGIN", m->origin);
    rc |= put_text(o, "OWNER", m->owner);
    if (m->when && *m->when && longdate_of(m->when, date, sizeof date) == 0)
        an_out_printf(o, "##LONGDATE= %s\n", date);
    fmt_num(s, fabs(m->observe_frequency) / 1e6);
    an_out_printf(o, "##.OBSERVE FREQUENCY= %s%s\n", s,
               m->observe_frequency == 0 ? " $$ not known" : "");
    nucleus_label(m->nucleus, nucleus, sizeof nucleus);
    rc |= put_text(o, ".OBSERVE NUCLEUS", nucleus);
    an_out_printf(o, "##.ACQUISITION MODE= SINGLE\n");
    rc |= put_text(o, "$PRECESS RUN", m->origin);
    an_out_printf(o, "##$PRECESS VERSION= %s\n", PRECESS_VERSION);
    put_num(o, "$PRECESS LARMOR FREQUENCY", m->observe_frequency, "Hz, signed; 0: not known");
    if (m->units && *m->units) rc |= put_text(o, "$PRECESS UNITS", m->units);
    return rc;
}

static int fail_memory(an_out *o, const char *path, char *err, size_t errlen) {
    an_out_abort(o);
    snprintf(err, errlen, "%s: not written: out of memory", path);
    return -1;
}

int an_export_jcamp_fid(const char *path, const an_jcamp_meta *m, const double *y, size_t n,
                        double t0, double dt, char *err, size_t errlen) {
    if (check_axis(path, n, t0, dt, err, errlen) || check_meta(path, m, err, errlen) ||
        check_values(path, "y", y, n, err, errlen))
        return -1;
    an_out *o = an_out_open(path, err, errlen);
    if (!o) return -1;
    if (put_header(o, m, "NMR FID", "XYDATA") != 0) return fail_memory(o, path, err, errlen);
    scaled s = scale_of(y, n);
    /* [4.24] the core labels of an equally spaced table (from memory):
     * FIRSTX and LASTX in XUNITS, FIRSTY the first ordinate in YUNITS. */
    an_out_printf(o, "##XUNITS= SECONDS\n##YUNITS= ARBITRARY UNITS\n");
    put_num(o, "XFACTOR", dt, NULL);
    put_num(o, "YFACTOR", s.factor, NULL);
    put_num(o, "FIRSTX", t0, "s from the shot's start");
    put_num(o, "LASTX", t0 + (double)(n - 1) * dt, NULL);
    put_num(o, "DELTAX", dt, NULL);
    put_num(o, "MAXY", s.max, NULL);
    put_num(o, "MINY", s.min, NULL);
    an_out_printf(o, "##NPOINTS= %zu\n", n);
    put_num(o, "FIRSTY", s.first, NULL);
    an_out_printf(o, "##XYDATA= (X++(Y..Y))\n");
    put_table(o, y, n, t0 / dt, s.factor);
    an_out_printf(o, "##END=\n");
    return an_out_finish(o, err, errlen);
}

/* [NMR] one page of an NTUPLES block: ##PAGE= N=k, its ##NPOINTS= and
 * ##DATA TABLE= (X++(R..R)), XYDATA (from memory). */
static void put_page(an_out *o, int page, char symbol, const double *v, size_t n,
                     double f0_over, double factor) {
    an_out_printf(o, "##PAGE= N=%d\n##NPOINTS= %zu\n", page, n);
    an_out_printf(o, "##DATA TABLE= (X++(%c..%c)), XYDATA\n", symbol, symbol);
    put_table(o, v, n, f0_over, factor);
}

/* [NMR] the attribute lists of a 1D NTUPLES block: one column per variable
 * (frequency, real, imaginary, page number); VAR_DIM and the page variable
 * (from memory; the label names read in the nD-NMR notes). */
static void put_attributes(an_out *o, size_t n, double f0, double df, const scaled *re,
                           const scaled *im) {
    char dim[24], v[5][4][32];
    snprintf(dim, sizeof dim, "%zu", n);
    const char *names[] = {"FREQUENCY", "SPECTRUM/REAL", "SPECTRUM/IMAG", "PAGE NUMBER"};
    const char *symbols[] = {"X", "R", "I", "N"};
    const char *types[] = {"INDEPENDENT", "DEPENDENT", "DEPENDENT", "PAGE"};
    const char *forms[] = {"AFFN", "AFFN", "AFFN", "AFFN"};
    const char *dims[] = {dim, dim, dim, "2"};
    const char *units[] = {"HZ", "ARBITRARY UNITS", "ARBITRARY UNITS", ""};
    double fl = f0 + (double)(n - 1) * df;
    double table[5][4] = {{f0, re->first, im->first, 1}, {fl, re->last, im->last, 2},
                          {f0, re->min, im->min, 1},     {fl, re->max, im->max, 2},
                          {df, re->factor, im->factor, 1}};
    const char *labels[] = {"FIRST", "LAST", "MIN", "MAX", "FACTOR"};
    an_out_printf(o, "##NTUPLES= NMR SPECTRUM\n");
    put_list(o, "VAR_NAME", names, 4);
    put_list(o, "SYMBOL", symbols, 4);
    put_list(o, "VAR_TYPE", types, 4);
    put_list(o, "VAR_FORM", forms, 4);
    put_list(o, "VAR_DIM", dims, 4);
    put_list(o, "UNITS", units, 4);
    for (int r = 0; r < 5; r++) {
        const char *items[4];
        for (int c = 0; c < 4; c++) fmt_num(v[r][c], table[r][c]), items[c] = v[r][c];
        put_list(o, labels[r], items, 4);
    }
}

int an_export_jcamp_spectrum(const char *path, const an_jcamp_meta *m, const double *re,
                             const double *im, size_t n, double f0, double df, char *err,
                             size_t errlen) {
    if (check_axis(path, n, f0, df, err, errlen) || check_meta(path, m, err, errlen) ||
        check_values(path, "re", re, n, err, errlen) ||
        check_values(path, "im", im, n, err, errlen))
        return -1;
    an_out *o = an_out_open(path, err, errlen);
    if (!o) return -1;
    if (put_header(o, m, "NMR SPECTRUM", "NTUPLES") != 0) return fail_memory(o, path, err, errlen);
    scaled sr = scale_of(re, n), si = scale_of(im, n);
    put_attributes(o, n, f0, df, &sr, &si);
    put_page(o, 1, 'R', re, n, f0 / df, sr.factor);
    put_page(o, 2, 'I', im, n, f0 / df, si.factor);
    an_out_printf(o, "##END NTUPLES= NMR SPECTRUM\n##END=\n");
    return an_out_finish(o, err, errlen);
}

/* ---- CSV --------------------------------------------------------------- */

/* A name as one word of the header line: printable ASCII, blanks and '='
 * as '_', so that "key=value" pairs split on blanks. */
static void put_word(an_out *o, const char *key, const char *value) {
    char word[AN_NAME + 16];
    size_t k = 0;
    for (const char *s = value; *s && k + 1 < sizeof word; s++) {
        unsigned char c = (unsigned char)*s;
        word[k++] = c > 0x20 && c < 0x7f && c != '=' ? (char)c : '_';
    }
    word[k] = '\0';
    an_out_printf(o, " %s=%s", key, k ? word : "-");
}

int an_export_csv_record(const char *path, const an_record *r, char *err, size_t errlen) {
    if (!path) {
        snprintf(err, errlen, "CSV file not written: no path given");
        return -1;
    }
    if (!r || !isfinite(r->rate) || r->rate <= 0 || !isfinite(r->t0) || (r->n && !r->samples)) {
        snprintf(err, errlen, "%s: not written: the record has no samples, or a sample rate "
                 "that is not > 0", path);
        return -1;
    }
    an_out *o = an_out_open(path, err, errlen);
    if (!o) return -1;
    char rate[32], t0[32], t[32];
    fmt_num(rate, r->rate);
    fmt_num(t0, r->t0);
    an_out_printf(o, "# precess record:");
    put_word(o, "run", r->run);
    an_out_printf(o, " shot=%d attempt=%d point=%d average=%d", r->shot, r->attempt, r->point,
               r->average);
    put_word(o, "input", r->input);
    put_word(o, "units", r->units);
    an_out_printf(o, " sample_rate=%s t0=%s receiver_sign=%d", rate, t0, r->receiver_sign);
    put_word(o, "started_utc", r->started_utc);
    an_out_printf(o, "\ntime,value\n");
    for (size_t i = 0; i < r->n; i++) {
        /* %.9g: nine significant digits read back as the same float32. */
        fmt_num(t, r->t0 + (double)i / r->rate);
        an_out_printf(o, "%s,%.9g\n", t, (double)r->samples[i]);
    }
    return an_out_finish(o, err, errlen);
}
