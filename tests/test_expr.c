/* test_expr: the plan language's expressions and the nuclei table, as
 * cmocka tests: precedence, units in expressions, functions, dimension
 * errors with their text and position, nuclei against CODATA and IUPAC.
 * Not for unit strings alone (test_units.c) nor for plan files. */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <math.h>
#include <stdio.h>
#include <string.h>

#include "expr.h"

#define PI 3.14159265358979323846

static void check_close(double got, double want, double rel, const char *what) {
    if (!(fabs(got - want) <= rel * fabs(want)))
        fail_msg("%s: got %.17g, want %.17g", what, got, want);
}

/* Variables the tests evaluate against. */
typedef struct {
    const char *name;
    units_qty value;
} binding;

static const binding VARS[] = {
    {"x", {6, {{0}}}},
    {"b", {2e-6, {{-4, 0, 2, -2, 0, 0, 0}}}},       /* 2 uT */
    {"b_relax", {5e-6, {{-4, 0, 2, -2, 0, 0, 0}}}}, /* 5 uT */
    {"t_relax", {0.01, {{2, 0, 0, 0, 0, 0, 0}}}},   /* 10 ms */
    {"w", {100, {{-2, 0, 0, 0, 0, 0, 2}}}},         /* 100 rad/s */
};

static int lookup(void *ctx, const char *name, size_t len, units_qty *out) {
    (void)ctx;
    for (size_t i = 0; i < sizeof VARS / sizeof VARS[0]; i++)
        if (strlen(VARS[i].name) == len && memcmp(VARS[i].name, name, len) == 0) {
            *out = VARS[i].value;
            return 0;
        }
    return -1;
}

static int setup(void **state) {
    *state = arena_new();
    return *state ? 0 : -1;
}

static int teardown(void **state) {
    arena_free(*state);
    return 0;
}

/* Parses and evaluates text; fails the test on any error. */
static units_qty eval_ok(void **state, const char *text) {
    expr_error err = {{0}, 0};
    expr_node *e = expr_parse(*state, text, strlen(text), &err);
    if (!e) fail_msg("'%s' did not parse: %s (at %zu)", text, err.message, err.pos);
    units_qty q = {0};
    if (expr_eval(e, lookup, NULL, &q, &err) != 0)
        fail_msg("'%s' did not evaluate: %s (at %zu)", text, err.message, err.pos);
    return q;
}

static void check_value_rel(void **state, const char *text, double want, units_dim dim,
                            double rel) {
    units_qty q = eval_ok(state, text);
    check_close(q.value, want, rel, text);
    if (!units_dim_eq(q.dim, dim)) {
        char buf[96];
        fail_msg("'%s': got %s", text, units_dim_describe(q.dim, buf, sizeof buf));
    }
}

static void check_value(void **state, const char *text, double want, units_dim dim) {
    check_value_rel(state, text, want, dim, 1e-12);
}

/* Expects an error from parsing, or else from evaluating. */
static void check_error(void **state, const char *text, const char *message, size_t pos) {
    expr_error err = {{0}, 999};
    expr_node *e = expr_parse(*state, text, strlen(text), &err);
    units_qty q;
    if (e && expr_eval(e, lookup, NULL, &q, &err) == 0) fail_msg("'%s' was accepted", text);
    assert_string_equal(err.message, message);
    if (err.pos != pos) fail_msg("'%s': error at %zu, want %zu", text, err.pos, pos);
}

static const units_dim NONE = {{0}};

/* ---- precedence and units in expressions --------------------------------- */

static void test_number_and_unit_bind_tighter_than_operators(void **state) {
    check_value(state, "x / 2 ms * 3", (6 / 2e-3) * 3, UNITS_FREQUENCY);
    check_value(state, "2 ms / 3", 2e-3 / 3, UNITS_TIME);
    check_value(state, "2 ms/3", 2e-3 / 3, UNITS_TIME);
    check_value(state, "2 ms*3", 6e-3, UNITS_TIME);
    check_value(state, "2 m/s", 2, units_dim_div(UNITS_LENGTH, UNITS_TIME));
    check_value(state, "2 uT/A", 2e-6, UNITS_FIELD_PER_CURRENT);
    check_value(state, "2 s^2", 2, (units_dim){{4, 0, 0, 0, 0, 0, 0}});
    check_value(state, "2 s ^ 2", 4, (units_dim){{4, 0, 0, 0, 0, 0, 0}});
    check_value(state, "3 m/s^2", 3, (units_dim){{-4, 2, 0, 0, 0, 0, 0}});
    check_value(state, "20uT + 5 uT", 25e-6, UNITS_FIELD);
}

static void test_power_is_right_associative_and_tighter_than_minus(void **state) {
    check_value(state, "-2^2", -4, NONE);
    check_value(state, "(-2)^2", 4, NONE);
    check_value(state, "2^3^2", 512, NONE);
    check_value(state, "2^-1", 0.5, NONE);
    check_value(state, "1 + 2 * 3", 7, NONE);
    check_value(state, "(1 + 2) * 3", 9, NONE);
    check_value(state, "8 / 2 / 2", 2, NONE);
    check_value(state, "5 - 2 - 1", 2, NONE);
    check_value(state, "- - 3", 3, NONE);
    check_value(state, "+3", 3, NONE);
    check_value(state, "t_relax^2", 1e-4, (units_dim){{4, 0, 0, 0, 0, 0, 0}});
    check_value(state, "b^-1", 5e5, (units_dim){{4, 0, -2, 2, 0, 0, 0}});
}

static void test_min_is_a_function_before_a_paren_and_the_minute_otherwise(void **state) {
    check_value(state, "2 min", 120, UNITS_TIME);
    check_value(state, "min(2 s, 3 s)", 2, UNITS_TIME);
    check_value(state, "min(3 s, 1 min, 2 s)", 2, UNITS_TIME);
    check_value(state, "max(1 s, 3 s, 2 s)", 3, UNITS_TIME);
    check_value(state, "max(2 min, 100 s)", 120, UNITS_TIME);
    check_error(state, "min (2 s, 3 s)",
                "to call the function write 'min(' with no space; alone, 'min' is the minute", 0);
    check_error(state, "min", "'min' is a unit: write a number before it, as in '1 min'", 0);
    check_error(state, "3 * ms", "'ms' is a unit: write a number before it, as in '1 ms'", 4);
}

static void test_pi_and_plain_numbers_are_constants(void **state) {
    check_value(state, "pi", PI, NONE);
    check_value(state, "2 * pi", 2 * PI, NONE);
    check_value(state, "1.5e3", 1500, NONE);
    check_value(state, ".25", 0.25, NONE);
    check_value(state, "90 deg", PI / 2, UNITS_ANGLE_DIM);
}

static void test_unicode_signs_work_in_expressions(void **state) {
    check_value(state, "3 \xc2\xb5T", 3e-6, UNITS_FIELD);    /* U+00B5 */
    check_value(state, "3 \xce\xbcT", 3e-6, UNITS_FIELD);    /* U+03BC */
    check_value(state, "2 k\xe2\x84\xa6 + 1 \xce\xa9", 2001, UNITS_RESISTANCE);
}

static void test_degc_in_expressions_keeps_its_sign(void **state) {
    check_value(state, "20 degC", 293.15, UNITS_TEMPERATURE);
    check_value(state, "-10 degC", 263.15, UNITS_TEMPERATURE);
    check_value(state, "20 degC + 5 K", 298.15, UNITS_TEMPERATURE);
}

/* ---- functions ----------------------------------------------------------- */

static void test_sqrt_halves_exponents(void **state) {
    check_value(state, "sqrt(4 Hz)", 2, (units_dim){{-1, 0, 0, 0, 0, 0, 0}});
    check_value(state, "sqrt(9 m^2)", 3, UNITS_LENGTH);
    check_value(state, "20 fT/sqrtHz * sqrt(100 Hz)", 2e-13, UNITS_FIELD);
    check_error(state, "sqrt(2 fT/sqrtHz)", "cannot take sqrt of a noise density (T/sqrtHz): "
                "its unit has no square root in half powers", 5);
    check_error(state, "sqrt(-4 s^2)", "sqrt needs a non-negative argument, got -4 s^2", 5);
    check_error(state, "sqrt(-4 uT^2)", "sqrt needs a non-negative argument, got -4e-12 kg^2 s^-4 A^-2", 5);
}

static void test_exp_and_log_need_dimensionless_arguments(void **state) {
    check_value(state, "exp(0)", 1, NONE);
    check_value(state, "log(exp(2))", 2, NONE);
    check_value(state, "log(t_relax / 1 ms)", log(10), NONE);
    check_value(state, "abs(-3 V)", 3, UNITS_VOLTAGE);
    check_error(state, "log(2 s)", "log needs a dimensionless argument, got a time (s)", 4);
    check_error(state, "1 + exp(b)", "exp needs a dimensionless argument, got a magnetic field (T)", 8);
    check_error(state, "log(0)", "log needs a positive argument, got 0", 4);
    check_error(state, "log(-2)", "log needs a positive argument, got -2", 4);
}

static void test_function_arity_is_checked(void **state) {
    check_error(state, "sqrt(1, 2)", "sqrt takes one argument, got 2", 0);
    check_error(state, "sqrt()", "sqrt takes one argument, got 0", 0);
    check_error(state, "max(1)", "max takes two or more arguments, got 1", 0);
    check_error(state, "min()", "min takes two or more arguments, got 0", 0);
    check_error(state, "min(1 s, 2 T)",
                "min needs arguments of one dimension: a time (s), then a magnetic field (T)", 9);
    check_error(state, "larmor(1H, 1 T, 2 T)",
                "larmor takes a nucleus and a field, as in larmor(1H, 2 mT)", 0);
    check_error(state, "field_for(1H)", "expected ',' after the nucleus in field_for(...)", 12);
    check_error(state, "field_for(1H, 1 Hz, 2 Hz)",
                "field_for takes a nucleus and a frequency, as in field_for(1H, 850 Hz)", 0);
    check_error(state, "sin(x)", "unknown function 'sin'", 0);
    check_error(state, "2 * foo(x)", "unknown function 'foo'", 4);
    check_error(state, "sqrt", "'sqrt' is a function: write sqrt(...)", 0);
    check_value(state, "sqrt (4)", 2, NONE);
}

/* ---- nuclei -------------------------------------------------------------- */

static void test_larmor_of_protons_uses_codata_gamma_p(void **state) {
    /* source: CODATA 2018, proton gyromagnetic ratio over 2 pi, 42.577 478 518 MHz/T (value from memory) */
    check_value_rel(state, "larmor(1H, 1 T)", 42.577478518e6, UNITS_FREQUENCY, 1e-10);
    /* Earth's field of ~50 uT gives ~2.1 kHz: common practice, no source */
    units_qty earth = eval_ok(state, "larmor(1H, 50 uT)");
    assert_true(earth.value > 2.0e3 && earth.value < 2.2e3);
    /* source: CODATA 2018, proton gyromagnetic ratio over 2 pi, 42.577 478 518 MHz/T (value from memory) */
    check_value_rel(state, "field_for(1H, 42.577478518 MHz)", 1, UNITS_FIELD, 1e-10);
    check_value(state, "field_for(1H, larmor(1H, b_relax))", 5e-6, UNITS_FIELD);
}

static void test_larmor_uses_the_magnitude_of_negative_gammas(void **state) {
    /* source: IUPAC recommendations 2001, Harris et al., Pure Appl. Chem. 73, 1795 (value from memory) */
    check_value(state, "larmor(15N, 1 T)", 2.71261804e7 / (2 * PI), UNITS_FREQUENCY);
    /* source: IUPAC recommendations 2001, Harris et al., Pure Appl. Chem. 73, 1795 (value from memory) */
    check_value(state, "larmor(13C, 2 mT)", 6.728284e7 * 2e-3 / (2 * PI), UNITS_FREQUENCY);
    check_value_rel(state, "larmor(1H, -1 uT)", -42.577478518, UNITS_FREQUENCY, 1e-10);
}

static void test_larmor_and_field_for_check_their_dimensions(void **state) {
    check_error(state, "larmor(1H, 2 s)",
                "larmor needs a magnetic field (T) as its second argument, got a time (s)", 11);
    check_error(state, "field_for(1H, w)",
                "field_for needs a frequency (Hz) as its second argument, got an angular "
                "frequency (rad/s); frequencies are written in Hz (cycles per second)", 14);
    check_error(state, "field_for(1H, 1 rad/s)",
                "field_for needs a frequency (Hz) as its second argument, got an angular "
                "frequency (rad/s); frequencies are written in Hz (cycles per second)", 14);
}

static void test_nucleus_tokens_are_never_quantities_inside_larmor(void **state) {
    check_value(state, "1H", 1, UNITS_INDUCTANCE);   /* outside: one henry */
    check_value(state, "larmor(2H, 1 T)", 4.10662791e7 / (2 * PI), UNITS_FREQUENCY);
    check_error(state, "larmor(14Q, 1 T)", "unknown nucleus '14Q'", 7);
    check_error(state, "larmor( 14N, 1 T)", "unknown nucleus '14N'", 8);
    check_error(state, "larmor(x, 1 T)",
                "larmor needs a nucleus such as 1H or 13C as its first argument", 7);
    check_error(state, "larmor(1 H, 1 T)",
                "larmor needs a nucleus such as 1H or 13C as its first argument", 7);
}

static void check_nucleus(const char *token, double gamma, int twice_spin) {
    const nuc_info *n = nuc_find(token, strlen(token));
    if (!n) fail_msg("nucleus %s missing", token);
    assert_string_equal(n->token, token);
    check_close(n->gamma, gamma, 1e-12, token);
    assert_int_equal(n->twice_spin, twice_spin);
    assert_non_null(n->source);
    assert_true(strlen(n->source) > 5);
}

static void test_nuclei_match_codata_and_iupac(void **state) {
    (void)state;
    /* source: CODATA 2018, proton gyromagnetic ratio gamma_p = 2.675 221 8744e8 rad s^-1 T^-1 (value from memory) */
    check_nucleus("1H", 2.6752218744e8, 1);
    /* source: IUPAC recommendations 2001, Harris et al., Pure Appl. Chem. 73, 1795 (value from memory) */
    check_nucleus("2H", 4.10662791e7, 2);
    /* source: IUPAC recommendations 2001, Harris et al., Pure Appl. Chem. 73, 1795 (value from memory) */
    check_nucleus("13C", 6.728284e7, 1);
    /* source: IUPAC recommendations 2001, Harris et al., Pure Appl. Chem. 73, 1795 (value from memory) */
    check_nucleus("19F", 25.18148e7, 1);
    /* source: IUPAC recommendations 2001, Harris et al., Pure Appl. Chem. 73, 1795 (value from memory) */
    check_nucleus("31P", 10.8394e7, 1);
    /* source: IUPAC recommendations 2001, Harris et al., Pure Appl. Chem. 73, 1795 (value from memory) */
    check_nucleus("7Li", 10.3977013e7, 3);
    /* source: IUPAC recommendations 2001, Harris et al., Pure Appl. Chem. 73, 1795 (value from memory) */
    check_nucleus("129Xe", -7.452103e7, 1);
    /* source: IUPAC recommendations 2001, Harris et al., Pure Appl. Chem. 73, 1795 (value from memory) */
    check_nucleus("15N", -2.71261804e7, 1);
    /* source: IUPAC recommendations 2001, Harris et al., Pure Appl. Chem. 73, 1795 (value from memory) */
    check_nucleus("23Na", 7.0808493e7, 3);
    /* source: IUPAC recommendations 2001, Harris et al., Pure Appl. Chem. 73, 1795 (value from memory) */
    check_nucleus("3He", -20.3801587e7, 1);
    size_t n = 0;
    const nuc_info *table = nuc_table(&n);
    assert_non_null(table);
    assert_true(n >= 10);
    for (size_t i = 0; i < n; i++) assert_ptr_equal(nuc_find(table[i].token, strlen(table[i].token)), &table[i]);
}

static void test_nucleus_tokens_are_recognised_even_when_unknown(void **state) {
    (void)state;
    const char *yes[] = {"1H", "13C", "129Xe", "14Q", "3He"};
    for (size_t i = 0; i < sizeof yes / sizeof yes[0]; i++)
        if (!nuc_is_token(yes[i], strlen(yes[i]))) fail_msg("%s should look like a nucleus", yes[i]);
    const char *no[] = {"H", "1", "1h", "13CC", "1H2", "", "1234H", "x1H", "01H"};
    for (size_t i = 0; i < sizeof no / sizeof no[0]; i++)
        if (nuc_is_token(no[i], strlen(no[i]))) fail_msg("%s is no nucleus", no[i]);
    assert_null(nuc_find("14Q", 3));
    assert_null(nuc_find("1", 1));
    assert_non_null(nuc_find("13Cx", 3));   /* only len bytes count */
}

/* ---- dimension and name errors ------------------------------------------ */

static void test_dimension_errors_name_both_sides(void **state) {
    check_error(state, "b + 2 s", "cannot add a magnetic field (T) and a time (s)", 2);
    check_error(state, "t_relax - b", "cannot subtract a magnetic field (T) from a time (s)", 8);
    check_error(state, "w + 3 Hz", "cannot add an angular frequency (rad/s) and a frequency (Hz)", 2);
    check_error(state, "1 + 1 s", "cannot add a dimensionless number and a time (s)", 2);
}

static void test_exponent_must_be_an_integer(void **state) {
    check_error(state, "2^0.5", "exponent must be an integer", 2);
    check_error(state, "b^(1/2)", "exponent must be an integer", 2);
    check_error(state, "2^(1 s)", "exponent must be an integer, got a time (s)", 2);
    check_error(state, "2^61", "exponent too large (at most 60)", 2);
    check_value(state, "2^(6/2)", 8, NONE);
    check_error(state, "(1 m^3)^50", "exponent too large for a volume (m^3)", 8);
    check_error(state, "(2 m^3)^20 * (1 m^3)^20", "unit exponents grow too large", 11);
    check_error(state, "(2 m^3)^20 / (1 m^-3)^20", "unit exponents grow too large", 11);
}

static void test_undefined_names_and_bad_names_are_reported(void **state) {
    check_error(state, "b_relx * 2", "undefined name 'b_relx'", 0);
    check_error(state, "1 + zz", "undefined name 'zz'", 4);
    check_error(state, "Bz + 1", "'Bz' is not a valid name: names use lower-case letters, "
                "digits and '_'", 0);
    check_error(state, "2 x", "unknown unit 'x' (to multiply by a name, write '*' between them)", 2);
    check_error(state, "2 mX", "unknown unit 'mX'", 2);
    check_error(state, "5 mh", "'h' takes no prefix", 2);
    check_error(state, "1 kdeg", "'deg' takes no prefix", 2);
    check_error(state, "3 K*degC", "'degC' cannot be combined with other units", 4);
}

static void test_syntax_errors_point_at_the_token(void **state) {
    check_error(state, "", "empty expression", 0);
    check_error(state, "   ", "empty expression", 0);
    check_error(state, "2 +", "expected a value at the end of the expression", 3);
    check_error(state, "(2 + 3", "unclosed '('", 0);
    check_error(state, "max(1, 2", "unclosed '(' of max", 3);
    check_error(state, "2 + 3)", "unmatched ')'", 5);
    check_error(state, "2 3", "expected an operator before '3'", 2);
    check_error(state, "(2 3)", "expected an operator or ')' before '3'", 3);
    check_error(state, "max(1 2)", "expected ',' or ')' before '2'", 6);
    check_error(state, "2 * * 3", "expected a value before '*'", 4);
    check_error(state, "2 # 3", "expected an operator before '#'", 2);
    check_error(state, "#", "unexpected '#'", 0);
    check_error(state, "max(1, )", "unexpected ')'", 7);
    check_error(state, "1 / 0", "division by zero", 2);
    check_error(state, "1 / (x - 6)", "division by zero", 2);
    check_error(state, "exp(1000)", "the result here is not a finite number", 0);
    check_error(state, "2 * 1e999", "number out of range", 4);
    check_error(state, "1234567890123456789012345678901234567890123456789012345678901234567890",
                "number too long", 0);
}

static void test_deep_or_long_expressions_are_refused_not_crashed(void **state) {
    char text[4200];
    size_t n = 0;
    for (int i = 0; i < 300; i++) text[n++] = '(';
    text[n++] = '1';
    for (int i = 0; i < 300; i++) text[n++] = ')';
    text[n] = '\0';
    check_error(state, text, "expression nested too deeply", 200);
    n = 0;
    for (int i = 0; i < 1500; i++) text[n++] = '1', text[n++] = '+';
    text[n++] = '1';
    text[n] = '\0';
    expr_error err;
    assert_null(expr_parse(*state, text, n, &err));
    assert_string_equal(err.message, "expression too long; split it into let names");
}

/* ---- inspection ---------------------------------------------------------- */

typedef struct {
    char names[8][16];
    size_t pos[8];
    int n;
} name_list;

static void collect(void *ctx, const char *name, size_t len, size_t pos) {
    name_list *l = ctx;
    if (l->n < 8) {
        snprintf(l->names[l->n], sizeof l->names[0], "%.*s", (int)len, name);
        l->pos[l->n++] = pos;
    }
}

static void test_names_are_listed_in_order_of_appearance(void **state) {
    const char *text = "max(b_relax, b) * t_relax + larmor(1H, b) * 1 s + pi";
    expr_error err;
    expr_node *e = expr_parse(*state, text, strlen(text), &err);
    assert_non_null(e);
    name_list l = {0};
    expr_names(e, collect, &l);
    assert_int_equal(l.n, 4);
    assert_string_equal(l.names[0], "b_relax");
    assert_string_equal(l.names[1], "b");
    assert_string_equal(l.names[2], "t_relax");
    assert_string_equal(l.names[3], "b");
    assert_int_equal(l.pos[0], 4);
    assert_int_equal(l.pos[3], 39);
    assert_false(expr_is_constant(e));
    expr_node *c = expr_parse(*state, "larmor(1H, 2 mT) * 2 min + pi", 29, &err);
    assert_non_null(c);
    assert_true(expr_is_constant(c));
}

static void test_name_allowed_rejects_units_functions_and_pi(void **state) {
    (void)state;
    const char *yes[] = {"x", "b_relax", "t1", "_tmp", "t_transfer", "field", "b2"};
    for (size_t i = 0; i < sizeof yes / sizeof yes[0]; i++)
        if (!expr_name_allowed(yes[i], strlen(yes[i]))) fail_msg("'%s' should be allowed", yes[i]);
    const char *no[] = {"ms", "mA", "as", "min", "h", "m", "deg", "sqrt", "max", "larmor",
                        "field_for", "pi", "T", "B", "Bz", "1x", "", "a-b", "mol", "rad"};
    for (size_t i = 0; i < sizeof no / sizeof no[0]; i++)
        if (expr_name_allowed(no[i], strlen(no[i]))) fail_msg("'%s' should be refused", no[i]);
}

int main(void) {
    const struct CMUnitTest tests[] = {
#define T(name) cmocka_unit_test_setup_teardown(name, setup, teardown)
        T(test_number_and_unit_bind_tighter_than_operators),
        T(test_power_is_right_associative_and_tighter_than_minus),
        T(test_min_is_a_function_before_a_paren_and_the_minute_otherwise),
        T(test_pi_and_plain_numbers_are_constants),
        T(test_unicode_signs_work_in_expressions),
        T(test_degc_in_expressions_keeps_its_sign),
        T(test_sqrt_halves_exponents),
        T(test_exp_and_log_need_dimensionless_arguments),
        T(test_function_arity_is_checked),
        T(test_larmor_of_protons_uses_codata_gamma_p),
        T(test_larmor_uses_the_magnitude_of_negative_gammas),
        T(test_larmor_and_field_for_check_their_dimensions),
        T(test_nucleus_tokens_are_never_quantities_inside_larmor),
        T(test_nuclei_match_codata_and_iupac),
        T(test_nucleus_tokens_are_recognised_even_when_unknown),
        T(test_dimension_errors_name_both_sides),
        T(test_exponent_must_be_an_integer),
        T(test_undefined_names_and_bad_names_are_reported),
        T(test_syntax_errors_point_at_the_token),
        T(test_deep_or_long_expressions_are_refused_not_crashed),
        T(test_names_are_listed_in_order_of_appearance),
        T(test_name_allowed_rejects_units_functions_and_pi),
#undef T
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
