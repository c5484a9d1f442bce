/* units: parses unit strings and quantities into SI scale and dimension,
 * names dimensions for messages and formats values with SI prefixes.
 * Not for expressions (expr.c parses those and calls in here for units) nor
 * for deciding which key wants which dimension (plan reading). */
#include "units.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---- dimensions -------------------------------------------------------- */

/* Twice the exponents of s, m, kg, A, K, mol, angle. */
#define D(s, m, kg, a, k, mol, ang) {{ (s), (m), (kg), (a), (k), (mol), (ang) }}

const units_dim UNITS_NONE = D(0, 0, 0, 0, 0, 0, 0);
const units_dim UNITS_TIME = D(2, 0, 0, 0, 0, 0, 0);
const units_dim UNITS_FREQUENCY = D(-2, 0, 0, 0, 0, 0, 0);
const units_dim UNITS_FIELD = D(-4, 0, 2, -2, 0, 0, 0);
const units_dim UNITS_CURRENT = D(0, 0, 0, 2, 0, 0, 0);
const units_dim UNITS_VOLTAGE = D(-6, 4, 2, -2, 0, 0, 0);
const units_dim UNITS_RESISTANCE = D(-6, 4, 2, -4, 0, 0, 0);
const units_dim UNITS_INDUCTANCE = D(-4, 4, 2, -4, 0, 0, 0);
const units_dim UNITS_POWER = D(-6, 4, 2, 0, 0, 0, 0);
const units_dim UNITS_TEMPERATURE = D(0, 0, 0, 0, 2, 0, 0);
const units_dim UNITS_LENGTH = D(0, 2, 0, 0, 0, 0, 0);
const units_dim UNITS_VOLUME = D(0, 6, 0, 0, 0, 0, 0);
const units_dim UNITS_ANGLE_DIM = D(0, 0, 0, 0, 0, 0, 2);
const units_dim UNITS_SLEW = D(-2, 0, 0, 2, 0, 0, 0);
const units_dim UNITS_AMPS_PER_VOLT = D(6, -4, -2, 4, 0, 0, 0);
const units_dim UNITS_FIELD_PER_CURRENT = D(-4, 0, 2, -4, 0, 0, 0);
const units_dim UNITS_FIELD_PER_VOLT = D(2, -4, 0, 0, 0, 0, 0);
const units_dim UNITS_FREQ_PER_FIELD = D(2, 0, -2, 2, 0, 0, 0);
const units_dim UNITS_NOISE_DENSITY = D(-3, 0, 2, -2, 0, 0, 0);
const units_dim UNITS_NUMBER_DENSITY = D(0, -6, 0, 0, 0, 0, 0);
const units_dim UNITS_RATE_SQUARED = D(-4, 0, 0, 0, 0, 0, 0);
const units_dim UNITS_FIELD_RATE = D(-6, 0, 2, -2, 0, 0, 0);

static const units_dim ANGULAR_FREQUENCY = D(-2, 0, 0, 0, 0, 0, 2);

bool units_dim_eq(units_dim a, units_dim b) {
    return memcmp(a.twice, b.twice, sizeof a.twice) == 0;
}

units_dim units_dim_mul(units_dim a, units_dim b) {
    units_dim r;
    for (int i = 0; i < UNITS_NDIM; i++) r.twice[i] = (signed char)(a.twice[i] + b.twice[i]);
    return r;
}

units_dim units_dim_div(units_dim a, units_dim b) {
    units_dim r;
    for (int i = 0; i < UNITS_NDIM; i++) r.twice[i] = (signed char)(a.twice[i] - b.twice[i]);
    return r;
}

bool units_dim_pow(units_dim a, int twice_exponent, units_dim *out) {
    units_dim r;
    for (int i = 0; i < UNITS_NDIM; i++) {
        long p = (long)a.twice[i] * twice_exponent;
        if (p % 2 != 0 || p / 2 > 127 || p / 2 < -127) return false;
        r.twice[i] = (signed char)(p / 2);
    }
    *out = r;
    return true;
}

bool units_dim_is_none(units_dim a) { return units_dim_eq(a, UNITS_NONE); }

/* ---- the unit and prefix tables ---------------------------------------- */

typedef struct {
    const char *symbol;
    double scale;
    units_dim dim;
    bool prefixable;
} unit_def;

#define PI 3.14159265358979323846

static const unit_def UNIT_TABLE[] = {
    {"T", 1, D(-4, 0, 2, -2, 0, 0, 0), true},
    {"A", 1, D(0, 0, 0, 2, 0, 0, 0), true},
    {"V", 1, D(-6, 4, 2, -2, 0, 0, 0), true},
    {"s", 1, D(2, 0, 0, 0, 0, 0, 0), true},
    {"min", 60, D(2, 0, 0, 0, 0, 0, 0), false},
    {"h", 3600, D(2, 0, 0, 0, 0, 0, 0), false},
    {"Hz", 1, D(-2, 0, 0, 0, 0, 0, 0), true},
    {"ohm", 1, D(-6, 4, 2, -4, 0, 0, 0), true},
    {"\xe2\x84\xa6", 1, D(-6, 4, 2, -4, 0, 0, 0), true}, /* U+2126 OHM SIGN */
    {"\xce\xa9", 1, D(-6, 4, 2, -4, 0, 0, 0), true},     /* U+03A9 GREEK OMEGA */
    {"H", 1, D(-4, 4, 2, -4, 0, 0, 0), true},
    {"W", 1, D(-6, 4, 2, 0, 0, 0, 0), true},
    {"K", 1, D(0, 0, 0, 0, 2, 0, 0), true},
    {"degC", 1, D(0, 0, 0, 0, 2, 0, 0), false},
    {"m", 1, D(0, 2, 0, 0, 0, 0, 0), true},
    {"L", 1e-3, D(0, 6, 0, 0, 0, 0, 0), true},
    {"mol", 1, D(0, 0, 0, 0, 0, 2, 0), true},
    {"deg", PI / 180, D(0, 0, 0, 0, 0, 0, 2), false},
    {"rad", 1, D(0, 0, 0, 0, 0, 0, 2), true},
    {"sqrtHz", 1, D(-1, 0, 0, 0, 0, 0, 0), true},
};

#define DEGC_OFFSET 273.15

typedef struct {
    const char *symbol;
    double scale;
} prefix_def;

static const prefix_def PREFIX_TABLE[] = {
    {"a", 1e-18}, {"f", 1e-15}, {"p", 1e-12}, {"n", 1e-9},
    {"u", 1e-6}, {"\xc2\xb5", 1e-6}, {"\xce\xbc", 1e-6}, /* U+00B5, U+03BC */
    {"m", 1e-3}, {"c", 1e-2}, {"k", 1e3}, {"M", 1e6}, {"G", 1e9},
};

#define COUNT(a) (sizeof(a) / sizeof((a)[0]))

static const unit_def *find_unit(const char *s, size_t len) {
    for (size_t i = 0; i < COUNT(UNIT_TABLE); i++)
        if (strlen(UNIT_TABLE[i].symbol) == len && memcmp(UNIT_TABLE[i].symbol, s, len) == 0)
            return &UNIT_TABLE[i];
    return NULL;
}

/* The prefix text starts with, or NULL. */
static const prefix_def *find_prefix(const char *s, size_t len) {
    for (size_t i = 0; i < COUNT(PREFIX_TABLE); i++) {
        size_t pl = strlen(PREFIX_TABLE[i].symbol);
        if (pl < len && memcmp(PREFIX_TABLE[i].symbol, s, pl) == 0) return &PREFIX_TABLE[i];
    }
    return NULL;
}

/* One unit word: a symbol, or a prefix and a prefixable symbol. The symbol
 * is tried first, so "m" is the metre and "min" the minute. */
typedef enum { WORD_OK, WORD_UNKNOWN, WORD_NO_PREFIX } word_status;

static word_status match_word(const char *s, size_t len, double *scale, const unit_def **unit) {
    const unit_def *u = find_unit(s, len);
    if (u) {
        *scale = u->scale;
        *unit = u;
        return WORD_OK;
    }
    const prefix_def *p = find_prefix(s, len);
    if (!p) return WORD_UNKNOWN;
    size_t pl = strlen(p->symbol);
    u = find_unit(s + pl, len - pl);
    if (!u) return WORD_UNKNOWN;
    *unit = u;
    if (!u->prefixable) return WORD_NO_PREFIX;
    *scale = p->scale * u->scale;
    return WORD_OK;
}

bool units_is_unit_word(const char *text, size_t len) {
    double scale;
    const unit_def *u;
    return len > 0 && match_word(text, len, &scale, &u) == WORD_OK;
}

/* ---- parsing ------------------------------------------------------------ */

typedef struct {
    const char *text;
    size_t len, pos;
    char *err;
    size_t errlen, *errpos;
} unit_reader;

#if defined(__GNUC__)
__attribute__((format(printf, 3, 4)))
#endif
static int fail(unit_reader *r, size_t pos, const char *fmt, ...) {
    if (r->err && r->errlen) {
        va_list ap;
        va_start(ap, fmt);
        vsnprintf(r->err, r->errlen, fmt, ap);
        va_end(ap);
    }
    if (r->errpos) *r->errpos = pos;
    return -1;
}

static bool is_operator(char c) { return c == '*' || c == '/' || c == '^'; }

/* "^" and an integer after a unit word; *power stays 1 without one. */
static int read_power(unit_reader *r, int *power) {
    *power = 1;
    if (r->pos >= r->len || r->text[r->pos] != '^') return 0;
    size_t at = ++r->pos;
    int sign = 1;
    if (r->pos < r->len && (r->text[r->pos] == '-' || r->text[r->pos] == '+'))
        sign = r->text[r->pos++] == '-' ? -1 : 1;
    int value = 0;
    size_t digits = 0;
    while (r->pos < r->len && r->text[r->pos] >= '0' && r->text[r->pos] <= '9') {
        if (value < 1000) value = value * 10 + (r->text[r->pos] - '0');
        r->pos++;
        digits++;
    }
    if (digits == 0) return fail(r, at, "expected an integer exponent after '^'");
    if (value > 60) return fail(r, at, "unit exponent too large");
    *power = sign * value;
    return 0;
}

/* One factor: a unit word with an optional power, multiplied into the
 * running scale and dimension (divided when sign is -1). */
static int read_factor(unit_reader *r, int sign, double *scale, units_dim *dim, bool *degc) {
    size_t start = r->pos;
    while (r->pos < r->len && !is_operator(r->text[r->pos])) r->pos++;
    const char *w = r->text + start;
    int wlen = (int)(r->pos - start);
    if (wlen == 0) return fail(r, start, "expected a unit here");
    double s = 1;
    const unit_def *u = NULL;
    word_status st = match_word(w, (size_t)wlen, &s, &u);
    if (st == WORD_UNKNOWN) return fail(r, start, "unknown unit '%.*s'", wlen, w);
    if (st == WORD_NO_PREFIX) {
        size_t ul = strlen(u->symbol);
        return fail(r, start, "'%.*s' takes no prefix", (int)ul, u->symbol);
    }
    int power;
    if (read_power(r, &power) < 0) return -1;
    if (u->symbol[0] == 'd' && strcmp(u->symbol, "degC") == 0) {
        if (power != 1 || sign != 1 || start != 0 || r->pos != r->len)
            return fail(r, start, "'degC' cannot be combined with other units");
        *degc = true;
    }
    units_dim d;
    if (!units_dim_pow(u->dim, 2 * power * sign, &d))
        return fail(r, start, "unit exponent too large");
    for (int i = 0; i < UNITS_NDIM; i++) {
        int sum = dim->twice[i] + d.twice[i];
        if (sum > 127 || sum < -127) return fail(r, start, "unit exponent too large");
    }
    *dim = units_dim_mul(*dim, d);
    *scale *= pow(s, power * sign);
    return 0;
}

int units_parse_unit(const char *text, size_t len, double *scale, double *offset,
                     units_dim *dim, char *err, size_t errlen, size_t *errpos) {
    unit_reader r = {text, len, 0, err, errlen, errpos};
    double sc = 1;
    units_dim d = UNITS_NONE;
    bool degc = false;
    if (len == 0) return fail(&r, 0, "expected a unit");
    int sign = 1;
    for (;;) {
        if (read_factor(&r, sign, &sc, &d, &degc) < 0) return -1;
        if (r.pos >= len) break;
        char op = text[r.pos];
        if (op == '^') return fail(&r, r.pos, "'^' must follow a unit");
        sign = op == '/' ? -1 : 1;
        r.pos++;
        if (r.pos < len && text[r.pos] == '(')
            return fail(&r, r.pos, "parentheses are not allowed in units; "
                        "write each unit after its own '/'");
    }
    *scale = sc;
    *offset = degc ? DEGC_OFFSET : 0;
    *dim = d;
    return 0;
}

static bool is_space(char c) { return c == ' ' || c == '\t'; }
static bool is_digit(char c) { return c >= '0' && c <= '9'; }

/* Length of the decimal number at s (sign, digits, point, exponent), or 0. */
static size_t number_length(const char *s, size_t len) {
    size_t i = 0, digits = 0;
    if (i < len && (s[i] == '-' || s[i] == '+')) i++;
    while (i < len && is_digit(s[i])) i++, digits++;
    if (i < len && s[i] == '.') {
        i++;
        while (i < len && is_digit(s[i])) i++, digits++;
    }
    if (digits == 0) return 0;
    if (i < len && (s[i] == 'e' || s[i] == 'E')) {
        size_t j = i + 1;
        if (j < len && (s[j] == '-' || s[j] == '+')) j++;
        if (j < len && is_digit(s[j])) {
            while (j < len && is_digit(s[j])) j++;
            i = j;
        }
    }
    return i;
}

int units_parse_quantity(const char *text, size_t len, units_qty *out,
                         char *err, size_t errlen, size_t *errpos) {
    unit_reader r = {text, len, 0, err, errlen, errpos};
    size_t start = 0, end = len;
    while (start < end && is_space(text[start])) start++;
    while (end > start && is_space(text[end - 1])) end--;
    size_t nlen = number_length(text + start, end - start);
    if (nlen == 0) return fail(&r, start, "expected a number");
    char buf[64];
    if (nlen >= sizeof buf) return fail(&r, start, "number too long");
    memcpy(buf, text + start, nlen);
    buf[nlen] = '\0';
    double number = strtod(buf, NULL);
    if (!isfinite(number)) return fail(&r, start, "number out of range");
    size_t u = start + nlen;
    while (u < end && is_space(text[u])) u++;
    double scale = 1, offset = 0;
    units_dim dim = UNITS_NONE;
    if (u < end) {
        for (size_t i = u; i < end; i++)
            if (is_space(text[i]))
                return fail(&r, i, "a unit is written without spaces");
        size_t sub = 0;
        if (units_parse_unit(text + u, end - u, &scale, &offset, &dim, err, errlen, &sub) < 0) {
            if (errpos) *errpos = u + sub;
            return -1;
        }
    }
    out->value = units_scale_text(text + start, nlen, scale) + offset;
    out->dim = dim;
    return 0;
}

double units_scale_text(const char *num, size_t len, double scale) {
    char buf[96];
    if (len >= 64) len = 63;
    memcpy(buf, num, len);
    buf[len] = '\0';
    double plain = strtod(buf, NULL);
    if (scale == 1 || !(scale > 0)) return plain * scale;
    int k = (int)lround(log10(scale));
    char pow10[16];
    snprintf(pow10, sizeof pow10, "1e%d", k);
    if (k < -30 || k > 30 || strtod(pow10, NULL) != scale) return plain * scale;
    /* Split off an exponent already written ("1.5e-3") and add k to it. */
    size_t m = 0;
    while (m < len && buf[m] != 'e' && buf[m] != 'E') m++;
    long e = m < len ? strtol(buf + m + 1, NULL, 10) : 0;
    if (e < -400 || e > 400) return plain * scale;
    snprintf(buf + m, sizeof buf - m, "e%ld", e + k);
    return strtod(buf, NULL);
}

/* ---- describing and formatting ----------------------------------------- */

typedef struct {
    const units_dim *dim;
    const char *name;   /* with its article */
    const char *symbol;
} named_dim;

static const named_dim NAMED[] = {
    {&UNITS_NONE, "a dimensionless number", ""},
    {&UNITS_TIME, "a time", "s"},
    {&UNITS_FREQUENCY, "a frequency", "Hz"},
    {&UNITS_FIELD, "a magnetic field", "T"},
    {&UNITS_CURRENT, "a current", "A"},
    {&UNITS_VOLTAGE, "a voltage", "V"},
    {&UNITS_RESISTANCE, "a resistance", "ohm"},
    {&UNITS_INDUCTANCE, "an inductance", "H"},
    {&UNITS_POWER, "a power", "W"},
    {&UNITS_TEMPERATURE, "a temperature", "K"},
    {&UNITS_LENGTH, "a length", "m"},
    {&UNITS_VOLUME, "a volume", "m^3"},
    {&UNITS_ANGLE_DIM, "an angle", "rad"},
    {&ANGULAR_FREQUENCY, "an angular frequency", "rad/s"},
    {&UNITS_SLEW, "a slew rate", "A/s"},
    {&UNITS_AMPS_PER_VOLT, "a current per voltage", "A/V"},
    {&UNITS_FIELD_PER_CURRENT, "a field per current", "T/A"},
    {&UNITS_FIELD_PER_VOLT, "a field per voltage", "T/V"},
    {&UNITS_FREQ_PER_FIELD, "a frequency per field", "Hz/T"},
    {&UNITS_NOISE_DENSITY, "a noise density", "T/sqrtHz"},
    {&UNITS_NUMBER_DENSITY, "a number density", "m^-3"},
    {&UNITS_RATE_SQUARED, "a rate squared", "s^-2"},
    {&UNITS_FIELD_RATE, "a field drift rate", "T/s"},
};

static const named_dim *find_named(units_dim d) {
    for (size_t i = 0; i < COUNT(NAMED); i++)
        if (units_dim_eq(*NAMED[i].dim, d)) return &NAMED[i];
    return NULL;
}

/* Base units in the order they are written: kg m s A K mol rad. */
static const struct {
    int index;
    const char *symbol;
} BASE_ORDER[] = {
    {UNITS_KG, "kg"}, {UNITS_M, "m"}, {UNITS_S, "s"}, {UNITS_A, "A"},
    {UNITS_K, "K"}, {UNITS_MOL, "mol"}, {UNITS_ANGLE, "rad"},
};

const char *units_dim_symbol(units_dim d, char *buf, size_t n) {
    if (n == 0) return buf;
    buf[0] = '\0';
    const named_dim *nd = find_named(d);
    if (nd) {
        snprintf(buf, n, "%s", nd->symbol);
        return buf;
    }
    size_t used = 0;
    for (size_t i = 0; i < COUNT(BASE_ORDER); i++) {
        int t = d.twice[BASE_ORDER[i].index];
        if (t == 0 || used >= n) continue;
        const char *sep = used ? " " : "";
        int w;
        if (t == 2)
            w = snprintf(buf + used, n - used, "%s%s", sep, BASE_ORDER[i].symbol);
        else if (t % 2 == 0)
            w = snprintf(buf + used, n - used, "%s%s^%d", sep, BASE_ORDER[i].symbol, t / 2);
        else
            w = snprintf(buf + used, n - used, "%s%s^(%d/2)", sep, BASE_ORDER[i].symbol, t);
        if (w > 0) used += (size_t)w;
    }
    return buf;
}

const char *units_dim_describe(units_dim d, char *buf, size_t n) {
    const named_dim *nd = find_named(d);
    if (nd && nd->symbol[0])
        snprintf(buf, n, "%s (%s)", nd->name, nd->symbol);
    else if (nd)
        snprintf(buf, n, "%s", nd->name);
    else {
        char sym[96];
        snprintf(buf, n, "a quantity in %s", units_dim_symbol(d, sym, sizeof sym));
    }
    return buf;
}

/* Up to 4 significant digits, trailing zeros trimmed, into buf. */
static void format_number(double v, char *buf, size_t n) {
    double a = fabs(v);
    if (a == 0) {
        snprintf(buf, n, "0");
        return;
    }
    if (!isfinite(a) || a >= 1e6 || a < 1e-4) {
        snprintf(buf, n, "%.4g", v);
        return;
    }
    int lead = (int)floor(log10(a));
    if (lead >= 3) {
        double step = pow(10, lead - 3);
        snprintf(buf, n, "%.0f", round(v / step) * step);
        return;
    }
    snprintf(buf, n, "%.*f", 3 - lead, v);
    char *dot = strchr(buf, '.');
    if (dot) {
        char *e = buf + strlen(buf) - 1;
        while (e > dot && *e == '0') *e-- = '\0';
        if (e == dot) *e = '\0';
    }
    if (strcmp(buf, "-0") == 0) snprintf(buf, n, "0");
}

/* Prefixes used for output, with their powers of ten. */
static const struct {
    const char *symbol;
    int exp10;
} OUT_PREFIX[] = {
    {"a", -18}, {"f", -15}, {"p", -12}, {"n", -9}, {"u", -6}, {"m", -3},
    {"", 0}, {"k", 3}, {"M", 6}, {"G", 9},
};

/* value with an engineering prefix on symbol; max_exp10 caps the prefix
 * (seconds take none above 1: 3600 s stays "3600 s"). */
static void format_prefixed(double value, const char *symbol, int max_exp10, char *buf, size_t n) {
    char num[48];
    double a = fabs(value);
    if (a == 0 || !isfinite(a) || a < 1e-18 || a >= 1e12) {
        format_number(value, num, sizeof num);
        snprintf(buf, n, "%s %s", num, symbol);
        return;
    }
    int e3 = (int)floor(log10(a) / 3) * 3;
    if (e3 < -18) e3 = -18;
    if (e3 > max_exp10) e3 = max_exp10;
    format_number(value / pow(10, e3), num, sizeof num);
    /* 999.96 rounds to "1000": move to the next prefix up. */
    if (e3 < max_exp10 && fabs(strtod(num, NULL)) >= 1000) {
        e3 += 3;
        format_number(value / pow(10, e3), num, sizeof num);
    }
    const char *p = "";
    for (size_t i = 0; i < COUNT(OUT_PREFIX); i++)
        if (OUT_PREFIX[i].exp10 == e3) p = OUT_PREFIX[i].symbol;
    snprintf(buf, n, "%s %s%s", num, p, symbol);
}

const char *units_format(double value, units_dim d, char *buf, size_t n) {
    char num[48], sym[96];
    if (units_dim_is_none(d)) {
        format_number(value, buf, n);
    } else if (units_dim_eq(d, UNITS_ANGLE_DIM)) {
        format_number(value * 180 / PI, num, sizeof num);
        snprintf(buf, n, "%s deg", num);
    } else if (units_dim_eq(d, UNITS_VOLUME)) {
        format_prefixed(value * 1e3, "L", 9, buf, n);
    } else if (units_dim_eq(d, UNITS_TIME)) {
        format_prefixed(value, "s", 0, buf, n);
    } else {
        units_dim_symbol(d, sym, sizeof sym);
        const named_dim *nd = find_named(d);
        /* A prefix only goes on a plain leading unit ("mT/A", not "m^-3"). */
        bool prefixable = nd && strchr(nd->symbol, '^') == NULL &&
                          strncmp(nd->symbol, "rad", 3) != 0;
        if (prefixable) {
            format_prefixed(value, sym, 9, buf, n);
        } else {
            format_number(value, num, sizeof num);
            snprintf(buf, n, "%s %s", num, sym);
        }
    }
    return buf;
}
