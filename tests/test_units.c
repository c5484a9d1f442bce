/* test_units: the units module's contract, as cmocka tests: prefixes against
 * the SI Brochure, unit symbols, dimensions, quantities, messages, formats.
 * Not for expressions (test_expr.c) nor for which key wants which unit. */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "units.h"

#define PI 3.14159265358979323846

static void check_close(double got, double want, double rel, const char *what) {
    double tol = rel * fabs(want);
    if (!(fabs(got - want) <= tol)) fail_msg("%s: got %.17g, want %.17g", what, got, want);
}

typedef struct {
    int rc;
    double scale, offset;
    units_dim dim;
    char err[128];
    size_t pos;
} unit_result;

static unit_result unit(const char *text) {
    unit_result r = {0};
    r.rc = units_parse_unit(text, strlen(text), &r.scale, &r.offset, &r.dim, r.err,
                            sizeof r.err, &r.pos);
    return r;
}

/* Parses text, expects success with the given scale and dimension. */
static void check_unit(const char *text, double scale, units_dim dim) {
    unit_result r = unit(text);
    if (r.rc != 0) fail_msg("'%s' refused: %s", text, r.err);
    check_close(r.scale, scale, 1e-12, text);
    if (!units_dim_eq(r.dim, dim)) fail_msg("'%s': wrong dimension", text);
}

static void check_unit_error(const char *text, const char *message, size_t pos) {
    unit_result r = unit(text);
    assert_int_equal(r.rc, -1);
    assert_string_equal(r.err, message);
    assert_int_equal(r.pos, pos);
}

static units_qty quantity(const char *text) {
    units_qty q = {0};
    char err[128] = "";
    size_t pos = 0;
    if (units_parse_quantity(text, strlen(text), &q, err, sizeof err, &pos) != 0)
        fail_msg("'%s' refused: %s (at %zu)", text, err, pos);
    return q;
}

static void check_quantity_error(const char *text, const char *message, size_t pos) {
    units_qty q;
    char err[128] = "";
    size_t at = 999;
    assert_int_equal(units_parse_quantity(text, strlen(text), &q, err, sizeof err, &at), -1);
    assert_string_equal(err, message);
    assert_int_equal(at, pos);
}

static units_dim dim_pow_ok(units_dim d, int twice) {
    units_dim out;
    assert_true(units_dim_pow(d, twice, &out));
    return out;
}

/* ---- prefixes ------------------------------------------------------------ */

/* A prefixed quantity is the double nearest its decimal value: "5 uT" is
 * 5e-6 exactly as strtod reads "5e-6", not 5 * 1e-6 (one ulp off). */
static void test_prefixed_quantity_is_nearest_double_of_its_decimal(void **state) {
    (void)state;
    static const struct { const char *text, *decimal; } cases[] = {
        {"5 uT", "5e-6"},        {"0.1 ms", "0.1e-3"},   {"2.5 kHz", "2.5e3"},
        {"1.5e-3 mT", "1.5e-6"}, {"-10 mV", "-10e-3"},   {"7 nT", "7e-9"},
        {"3 uT/A", "3e-6"},      {"40 uT", "40e-6"},     {"0.3 pT", "0.3e-12"},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        units_qty q;
        char err[128];
        size_t at;
        assert_int_equal(units_parse_quantity(cases[i].text, strlen(cases[i].text), &q, err,
                                              sizeof err, &at), 0);
        assert_true(q.value == strtod(cases[i].decimal, NULL));
    }
    /* Scales that are not powers of ten multiply: 2 min = 120 s, 90 deg = pi/2. */
    units_qty q;
    char err[128];
    size_t at;
    assert_int_equal(units_parse_quantity("2 min", 5, &q, err, sizeof err, &at), 0);
    assert_true(q.value == 120.0);
}

static void test_every_prefix_has_its_si_value(void **state) {
    (void)state;
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("as", 1e-18, UNITS_TIME);
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("fT", 1e-15, UNITS_FIELD);
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("pT", 1e-12, UNITS_FIELD);
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("nT", 1e-9, UNITS_FIELD);
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("uT", 1e-6, UNITS_FIELD);
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("mT", 1e-3, UNITS_FIELD);
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("cm", 1e-2, UNITS_LENGTH);
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("kHz", 1e3, UNITS_FREQUENCY);
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("MHz", 1e6, UNITS_FREQUENCY);
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("GHz", 1e9, UNITS_FREQUENCY);
}

static void test_micro_sign_variants_mean_micro(void **state) {
    (void)state;
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("uT", 1e-6, UNITS_FIELD);
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("\xc2\xb5T", 1e-6, UNITS_FIELD);   /* U+00B5 MICRO SIGN */
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("\xce\xbcT", 1e-6, UNITS_FIELD);   /* U+03BC GREEK SMALL LETTER MU */
    /* source: BIPM, The International System of Units (SI Brochure), 9th ed. 2019, Table 7 (value from memory) */
    check_unit("\xc2\xb5s", 1e-6, UNITS_TIME);
}

static void test_unit_symbol_is_matched_before_prefix(void **state) {
    (void)state;
    check_unit("m", 1, UNITS_LENGTH);
    check_unit("mm", 1e-3, UNITS_LENGTH);
    check_unit("mT", 1e-3, UNITS_FIELD);
    check_unit("ms", 1e-3, UNITS_TIME);
    check_unit("min", 60, UNITS_TIME);
    check_unit("h", 3600, UNITS_TIME);
    check_unit("mol", 1, (units_dim){{0, 0, 0, 0, 0, 2, 0}});
    check_unit("mmol", 1e-3, (units_dim){{0, 0, 0, 0, 0, 2, 0}});
    check_unit("mH", 1e-3, UNITS_INDUCTANCE);
}

static void test_min_h_deg_degc_take_no_prefix(void **state) {
    (void)state;
    check_unit_error("mh", "'h' takes no prefix", 0);
    check_unit_error("kdeg", "'deg' takes no prefix", 0);
    check_unit_error("mmin", "'min' takes no prefix", 0);
    check_unit_error("kdegC", "'degC' takes no prefix", 0);
    check_unit_error("A/kh", "'h' takes no prefix", 2);
}

static void test_unknown_unit_names_the_word_and_its_place(void **state) {
    (void)state;
    check_unit_error("mX", "unknown unit 'mX'", 0);
    check_unit_error("uT/Q", "unknown unit 'Q'", 3);
    check_unit_error("m3", "unknown unit 'm3'", 0);
    check_unit_error("g", "unknown unit 'g'", 0);
    check_unit_error("", "expected a unit", 0);
    check_unit_error("T//A", "expected a unit here", 2);
    check_unit_error("T/", "expected a unit here", 2);
    check_unit_error("m^", "expected an integer exponent after '^'", 2);
    check_unit_error("m^x", "expected an integer exponent after '^'", 2);
    check_unit_error("m^99", "unit exponent too large", 2);
    check_unit_error("m^2^3", "'^' must follow a unit", 3);
    check_unit_error("m^40*m^40", "unit exponent too large", 5);
    check_unit_error("T/(A*s)",
                     "parentheses are not allowed in units; write each unit after its own '/'", 2);
}

/* ---- units and dimensions ------------------------------------------------ */

static void test_ohm_has_three_spellings(void **state) {
    (void)state;
    check_unit("ohm", 1, UNITS_RESISTANCE);
    check_unit("\xe2\x84\xa6", 1, UNITS_RESISTANCE);   /* U+2126 OHM SIGN */
    check_unit("\xce\xa9", 1, UNITS_RESISTANCE);       /* U+03A9 GREEK CAPITAL OMEGA */
    check_unit("k\xe2\x84\xa6", 1e3, UNITS_RESISTANCE);
    check_unit("m\xce\xa9", 1e-3, UNITS_RESISTANCE);
    check_unit("kohm", 1e3, UNITS_RESISTANCE);
}

static void test_compound_units_multiply_divide_and_power(void **state) {
    (void)state;
    check_unit("m^3", 1, UNITS_VOLUME);
    check_unit("s^-1", 1, UNITS_FREQUENCY);
    check_unit("s^-2", 1, UNITS_RATE_SQUARED);
    check_unit("m^-3", 1, UNITS_NUMBER_DENSITY);
    check_unit("cm^3", 1e-6, UNITS_VOLUME);   /* the prefix is cubed with the unit */
    check_unit("A/V", 1, UNITS_AMPS_PER_VOLT);
    check_unit("mA/V", 1e-3, UNITS_AMPS_PER_VOLT);
    check_unit("uT/A", 1e-6, UNITS_FIELD_PER_CURRENT);
    check_unit("nT/V", 1e-9, UNITS_FIELD_PER_VOLT);
    check_unit("Hz/nT", 1e9, UNITS_FREQ_PER_FIELD);
    check_unit("A/s", 1, UNITS_SLEW);
    check_unit("pT/s", 1e-12, UNITS_FIELD_RATE);
    check_unit("T*A", 1, units_dim_mul(UNITS_FIELD, UNITS_CURRENT));
    check_unit("m/s^2", 1, (units_dim){{-4, 2, 0, 0, 0, 0, 0}});
    check_unit("A/V/s", 1, units_dim_div(UNITS_AMPS_PER_VOLT, UNITS_TIME));
}

static void test_litre_is_a_thousandth_of_a_cubic_metre(void **state) {
    (void)state;
    check_unit("L", 1e-3, UNITS_VOLUME);
    check_unit("mL", 1e-6, UNITS_VOLUME);
    check_unit("uL", 1e-9, UNITS_VOLUME);
}

static void test_hertz_is_a_frequency_and_rad_per_s_is_not(void **state) {
    (void)state;
    unit_result hz = unit("Hz"), rads = unit("rad/s"), per_s = unit("s^-1");
    assert_true(units_dim_eq(hz.dim, UNITS_FREQUENCY));
    assert_true(units_dim_eq(per_s.dim, UNITS_FREQUENCY));
    assert_false(units_dim_eq(rads.dim, UNITS_FREQUENCY));
    char buf[96];
    assert_string_equal(units_dim_describe(rads.dim, buf, sizeof buf),
                        "an angular frequency (rad/s)");
}

static void test_angles_are_their_own_dimension(void **state) {
    (void)state;
    check_unit("rad", 1, UNITS_ANGLE_DIM);
    check_unit("deg", PI / 180, UNITS_ANGLE_DIM);
    check_unit("mrad", 1e-3, UNITS_ANGLE_DIM);
    assert_false(units_dim_is_none(UNITS_ANGLE_DIM));
    units_qty q = quantity("90 deg");
    check_close(q.value, PI / 2, 1e-15, "90 deg");
}

static void test_sqrthz_is_a_half_power_of_frequency(void **state) {
    (void)state;
    unit_result r = unit("fT/sqrtHz");
    assert_int_equal(r.rc, 0);
    check_close(r.scale, 1e-15, 1e-12, "fT/sqrtHz");
    assert_true(units_dim_eq(r.dim, UNITS_NOISE_DENSITY));
    assert_int_equal(r.dim.twice[UNITS_S], -3);   /* T has s^-2, /sqrtHz adds s^+1/2 */
    unit_result s = unit("sqrtHz");
    assert_int_equal(s.dim.twice[UNITS_S], -1);
    assert_true(units_dim_eq(dim_pow_ok(s.dim, 4), UNITS_FREQUENCY));   /* squared */
    assert_true(units_dim_eq(dim_pow_ok(UNITS_FREQUENCY, 1), s.dim));   /* square root */
    units_dim out;
    assert_false(units_dim_pow(s.dim, 1, &out));   /* a quarter power does not exist */
}

static void test_degc_is_an_offset_temperature_that_stands_alone(void **state) {
    (void)state;
    unit_result r = unit("degC");
    assert_int_equal(r.rc, 0);
    assert_true(units_dim_eq(r.dim, UNITS_TEMPERATURE));
    check_close(r.offset, 273.15, 1e-15, "offset");
    /* source: BIPM, SI Brochure, 9th ed. 2019, definition of the degree Celsius, t/degC = T/K - 273.15 (value from memory) */
    check_close(quantity("20 degC").value, 293.15, 1e-14, "20 degC");
    check_close(quantity("-10 degC").value, 263.15, 1e-14, "-10 degC");
    check_close(quantity("20 K").value, 20, 0, "20 K");
    assert_true(unit("K").offset == 0);
    check_unit_error("degC/s", "'degC' cannot be combined with other units", 0);
    check_unit_error("K*degC", "'degC' cannot be combined with other units", 2);
    check_unit_error("degC^2", "'degC' cannot be combined with other units", 0);
    check_quantity_error("3 W/degC", "'degC' cannot be combined with other units", 4);
}

static void test_derived_unit_dimensions_match_their_definitions(void **state) {
    (void)state;
    /* T = kg s^-2 A^-1, V = kg m^2 s^-3 A^-1, ohm = V/A, H = ohm s, W = kg m^2 s^-3 */
    units_dim kg = {{0, 0, 2, 0, 0, 0, 0}}, m = UNITS_LENGTH, s = UNITS_TIME, a = UNITS_CURRENT;
    units_dim s2 = dim_pow_ok(s, 4), s3 = dim_pow_ok(s, 6), m2 = dim_pow_ok(m, 4);
    assert_true(units_dim_eq(UNITS_FIELD, units_dim_div(units_dim_div(kg, s2), a)));
    units_dim watt = units_dim_div(units_dim_mul(kg, m2), s3);
    assert_true(units_dim_eq(UNITS_POWER, watt));
    assert_true(units_dim_eq(UNITS_VOLTAGE, units_dim_div(watt, a)));
    assert_true(units_dim_eq(UNITS_RESISTANCE, units_dim_div(UNITS_VOLTAGE, a)));
    assert_true(units_dim_eq(UNITS_INDUCTANCE, units_dim_mul(UNITS_RESISTANCE, s)));
    check_unit("V/A", 1, UNITS_RESISTANCE);
    check_unit("ohm*s", 1, UNITS_INDUCTANCE);
    check_unit("V*A", 1, UNITS_POWER);
    check_unit("W", 1, UNITS_POWER);
    check_unit("T", 1, UNITS_FIELD);
    check_unit("V", 1, UNITS_VOLTAGE);
    check_unit("H", 1, UNITS_INDUCTANCE);
    check_unit("K", 1, UNITS_TEMPERATURE);
}

/* ---- quantities ---------------------------------------------------------- */

static void test_quantities_parse_numbers_and_units(void **state) {
    (void)state;
    units_qty q = quantity("25 mT");
    check_close(q.value, 25e-3, 1e-15, "25 mT");
    assert_true(units_dim_eq(q.dim, UNITS_FIELD));
    check_close(quantity("1.5e-3 s").value, 1.5e-3, 1e-15, "1.5e-3 s");
    check_close(quantity("1.5E3 Hz").value, 1.5e3, 1e-15, "1.5E3 Hz");
    check_close(quantity("300 ms").value, 0.3, 1e-15, "300 ms");
    check_close(quantity("20uT").value, 20e-6, 1e-15, "20uT");
    check_close(quantity("-10 V").value, -10, 0, "-10 V");
    check_close(quantity("+4 A").value, 4, 0, "+4 A");
    check_close(quantity(".5 s").value, 0.5, 0, ".5 s");
    check_close(quantity("15 fT/sqrtHz").value, 15e-15, 1e-12, "15 fT/sqrtHz");
    check_close(quantity("2 min").value, 120, 0, "2 min");
    check_close(quantity("8 h").value, 28800, 0, "8 h");
    check_close(quantity("1e2ms").value, 0.1, 1e-15, "1e2ms");
    units_qty bare = quantity("3");
    check_close(bare.value, 3, 0, "3");
    assert_true(units_dim_is_none(bare.dim));
    assert_true(units_dim_eq(quantity("2 A/V").dim, UNITS_AMPS_PER_VOLT));
}

static void test_quantity_errors_point_at_the_bad_part(void **state) {
    (void)state;
    check_quantity_error("25 mX", "unknown unit 'mX'", 3);
    check_quantity_error("mT", "expected a number", 0);
    check_quantity_error("", "expected a number", 0);
    check_quantity_error("- 3 V", "expected a number", 0);
    check_quantity_error("2 m T", "a unit is written without spaces", 3);
    check_quantity_error("20 uT/Q", "unknown unit 'Q'", 6);
    check_quantity_error("5 mh", "'h' takes no prefix", 2);
    check_quantity_error("1e999 s", "number out of range", 0);
    check_quantity_error(" 1234567890123456789012345678901234567890123456789012345678901234567890 s",
                         "number too long", 1);
}

/* ---- words, descriptions, formats ---------------------------------------- */

static void test_unit_words_include_prefixed_symbols(void **state) {
    (void)state;
    const char *yes[] = {"ms", "mA", "as", "T", "min", "kHz", "h", "m", "deg", "degC",
                         "sqrtHz", "mol", "L", "\xce\xa9", "\xc2\xb5s"};
    for (size_t i = 0; i < sizeof yes / sizeof yes[0]; i++)
        if (!units_is_unit_word(yes[i], strlen(yes[i]))) fail_msg("'%s' should be a unit", yes[i]);
    const char *no[] = {"x", "b_relax", "mh", "kdeg", "t1", "pi", "", "mX", "ms2", "A/V"};
    for (size_t i = 0; i < sizeof no / sizeof no[0]; i++)
        if (units_is_unit_word(no[i], strlen(no[i]))) fail_msg("'%s' is no unit", no[i]);
}

static void check_describe(units_dim d, const char *want) {
    char buf[96];
    assert_string_equal(units_dim_describe(d, buf, sizeof buf), want);
}

static void test_named_dimensions_are_described_for_users(void **state) {
    (void)state;
    check_describe(UNITS_TIME, "a time (s)");
    check_describe(UNITS_FREQUENCY, "a frequency (Hz)");
    check_describe(UNITS_FIELD, "a magnetic field (T)");
    check_describe(UNITS_CURRENT, "a current (A)");
    check_describe(UNITS_VOLTAGE, "a voltage (V)");
    check_describe(UNITS_RESISTANCE, "a resistance (ohm)");
    check_describe(UNITS_INDUCTANCE, "an inductance (H)");
    check_describe(UNITS_POWER, "a power (W)");
    check_describe(UNITS_TEMPERATURE, "a temperature (K)");
    check_describe(UNITS_LENGTH, "a length (m)");
    check_describe(UNITS_VOLUME, "a volume (m^3)");
    check_describe(UNITS_ANGLE_DIM, "an angle (rad)");
    check_describe(UNITS_SLEW, "a slew rate (A/s)");
    check_describe(UNITS_AMPS_PER_VOLT, "a current per voltage (A/V)");
    check_describe(UNITS_FIELD_PER_CURRENT, "a field per current (T/A)");
    check_describe(UNITS_FIELD_PER_VOLT, "a field per voltage (T/V)");
    check_describe(UNITS_FREQ_PER_FIELD, "a frequency per field (Hz/T)");
    check_describe(UNITS_NOISE_DENSITY, "a noise density (T/sqrtHz)");
    check_describe(UNITS_NUMBER_DENSITY, "a number density (m^-3)");
    check_describe(UNITS_RATE_SQUARED, "a rate squared (s^-2)");
    check_describe(UNITS_FIELD_RATE, "a field drift rate (T/s)");
    check_describe(UNITS_NONE, "a dimensionless number");
    check_describe(units_dim_div(UNITS_ANGLE_DIM, UNITS_TIME), "an angular frequency (rad/s)");
}

static void test_unnamed_dimensions_are_described_in_si_units(void **state) {
    (void)state;
    check_describe(units_dim_mul(UNITS_FIELD, UNITS_CURRENT), "a quantity in kg s^-2");
    check_describe(unit("m/s^2").dim, "a quantity in m s^-2");
    check_describe(unit("V*A*s").dim, "a quantity in kg m^2 s^-2");   /* the joule */
    check_describe(unit("sqrtHz").dim, "a quantity in s^(-1/2)");
    char buf[64];
    assert_string_equal(units_dim_symbol(UNITS_AMPS_PER_VOLT, buf, sizeof buf), "A/V");
    assert_string_equal(units_dim_symbol(UNITS_NOISE_DENSITY, buf, sizeof buf), "T/sqrtHz");
    assert_string_equal(units_dim_symbol(UNITS_FIELD, buf, sizeof buf), "T");
    assert_string_equal(units_dim_symbol(unit("mol/m^3").dim, buf, sizeof buf), "m^-3 mol");
}

static void check_format(double v, units_dim d, const char *want) {
    char buf[64];
    assert_string_equal(units_format(v, d, buf, sizeof buf), want);
}

static void test_format_picks_a_prefix_and_four_digits(void **state) {
    (void)state;
    check_format(0.0125, UNITS_FIELD, "12.5 mT");
    check_format(850, UNITS_FREQUENCY, "850 Hz");
    check_format(0.3, UNITS_TIME, "300 ms");
    check_format(2, UNITS_AMPS_PER_VOLT, "2 A/V");
    check_format(1.5e-5, UNITS_FIELD_PER_CURRENT, "15 uT/A");
    check_format(0, UNITS_FIELD, "0 T");
    check_format(13.2, UNITS_VOLTAGE, "13.2 V");
    check_format(1.23456e-12, UNITS_FIELD, "1.235 pT");
    check_format(-2.5e-9, UNITS_FIELD, "-2.5 nT");
    check_format(42.577478518e6, UNITS_FREQ_PER_FIELD, "42.58 MHz/T");
    check_format(0.99996, UNITS_CURRENT, "1 A");          /* rounds up out of mA */
    check_format(20e-15, UNITS_NOISE_DENSITY, "20 fT/sqrtHz");
    check_format(1e4, UNITS_FREQUENCY, "10 kHz");
}

static void test_format_keeps_long_times_in_seconds_and_angles_in_degrees(void **state) {
    (void)state;
    check_format(120, UNITS_TIME, "120 s");
    check_format(3600, UNITS_TIME, "3600 s");
    check_format(28800, UNITS_TIME, "28800 s");
    check_format(1e-6, UNITS_TIME, "1 us");
    check_format(PI / 2, UNITS_ANGLE_DIM, "90 deg");
    check_format(PI, UNITS_ANGLE_DIM, "180 deg");
    check_format(0.5, UNITS_NONE, "0.5");
    check_format(2e-6, UNITS_VOLUME, "2 mL");
    check_format(1e25, UNITS_NUMBER_DENSITY, "1e+25 m^-3");
}

int main(void) {
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_every_prefix_has_its_si_value),
        cmocka_unit_test(test_prefixed_quantity_is_nearest_double_of_its_decimal),
        cmocka_unit_test(test_micro_sign_variants_mean_micro),
        cmocka_unit_test(test_unit_symbol_is_matched_before_prefix),
        cmocka_unit_test(test_min_h_deg_degc_take_no_prefix),
        cmocka_unit_test(test_unknown_unit_names_the_word_and_its_place),
        cmocka_unit_test(test_ohm_has_three_spellings),
        cmocka_unit_test(test_compound_units_multiply_divide_and_power),
        cmocka_unit_test(test_litre_is_a_thousandth_of_a_cubic_metre),
        cmocka_unit_test(test_hertz_is_a_frequency_and_rad_per_s_is_not),
        cmocka_unit_test(test_angles_are_their_own_dimension),
        cmocka_unit_test(test_sqrthz_is_a_half_power_of_frequency),
        cmocka_unit_test(test_degc_is_an_offset_temperature_that_stands_alone),
        cmocka_unit_test(test_derived_unit_dimensions_match_their_definitions),
        cmocka_unit_test(test_quantities_parse_numbers_and_units),
        cmocka_unit_test(test_quantity_errors_point_at_the_bad_part),
        cmocka_unit_test(test_unit_words_include_prefixed_symbols),
        cmocka_unit_test(test_named_dimensions_are_described_for_users),
        cmocka_unit_test(test_unnamed_dimensions_are_described_in_si_units),
        cmocka_unit_test(test_format_picks_a_prefix_and_four_digits),
        cmocka_unit_test(test_format_keeps_long_times_in_seconds_and_angles_in_degrees),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
