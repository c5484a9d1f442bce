/* units: physical quantities, their dimensions, SI prefixes and unit symbols.
 * Parses unit strings such as "uT/A" or "fT/sqrtHz" into a scale to SI and a
 * dimension vector, names dimensions for messages and formats values.
 * Not for expressions (expr.h) nor for knowing which key wants which
 * dimension (plan reading). */
#ifndef PRECESS_UNITS_H
#define PRECESS_UNITS_H

#include <stdbool.h>
#include <stddef.h>

/* Base dimensions, in this order: s, m, kg, A, K, mol, angle. */
enum { UNITS_S, UNITS_M, UNITS_KG, UNITS_A, UNITS_K, UNITS_MOL, UNITS_ANGLE,
       UNITS_NDIM };

/* A dimension: twice each base exponent, so halves (sqrtHz) are exact. */
typedef struct {
    signed char twice[UNITS_NDIM];
} units_dim;

/* A value in SI base units with its dimension. */
typedef struct {
    double value;
    units_dim dim;
} units_qty;

/* Dimensions the plan language names (for keys and messages). */
extern const units_dim UNITS_NONE;        /* dimensionless */
extern const units_dim UNITS_TIME;        /* s */
extern const units_dim UNITS_FREQUENCY;   /* Hz = s^-1 */
extern const units_dim UNITS_FIELD;       /* T = kg s^-2 A^-1 */
extern const units_dim UNITS_CURRENT;     /* A */
extern const units_dim UNITS_VOLTAGE;     /* V */
extern const units_dim UNITS_RESISTANCE;  /* ohm */
extern const units_dim UNITS_INDUCTANCE;  /* H */
extern const units_dim UNITS_POWER;       /* W */
extern const units_dim UNITS_TEMPERATURE; /* K */
extern const units_dim UNITS_LENGTH;      /* m */
extern const units_dim UNITS_VOLUME;      /* m^3 */
extern const units_dim UNITS_ANGLE_DIM;   /* rad */
extern const units_dim UNITS_SLEW;        /* A/s */
extern const units_dim UNITS_AMPS_PER_VOLT;   /* A/V */
extern const units_dim UNITS_FIELD_PER_CURRENT; /* T/A */
extern const units_dim UNITS_FIELD_PER_VOLT;    /* T/V */
extern const units_dim UNITS_FREQ_PER_FIELD;    /* Hz/T (gyromagnetic ratio / 2 pi) */
extern const units_dim UNITS_NOISE_DENSITY;     /* T/sqrtHz */
extern const units_dim UNITS_NUMBER_DENSITY;    /* m^-3 */
extern const units_dim UNITS_RATE_SQUARED;      /* s^-2 */
extern const units_dim UNITS_FIELD_RATE;        /* T/s (drift) */

bool units_dim_eq(units_dim a, units_dim b);
units_dim units_dim_mul(units_dim a, units_dim b);
units_dim units_dim_div(units_dim a, units_dim b);
/* Raise to a power given as twice the exponent (2 = square, 1 = sqrt).
 * Returns false when a resulting exponent would not be a multiple of 1/2
 * or would not fit (beyond +-63.5). */
bool units_dim_pow(units_dim a, int twice_exponent, units_dim *out);
bool units_dim_is_none(units_dim a);

/* Parse a unit string of exactly len bytes ("mT", "uT/A", "m^3", "s^-1",
 * "fT/sqrtHz", "degC"). On success *scale is the factor to SI, *offset the
 * additive offset (only degC: 273.15) and *dim the dimension; returns 0.
 * On failure returns -1, writes a message to err and sets *errpos to the
 * byte offset within text of the offending part. */
int units_parse_unit(const char *text, size_t len, double *scale, double *offset,
                     units_dim *dim, char *err, size_t errlen, size_t *errpos);

/* Parse a whole quantity "25 mT", "1.5e-3 s", "20uT", "-10 V", "3" (bare
 * number: dimensionless). Returns 0, or -1 with err/errpos as above. */
int units_parse_quantity(const char *text, size_t len, units_qty *out,
                         char *err, size_t errlen, size_t *errpos);

/* The value of number text (len bytes, as "5", "1.5e-3") times scale, with
 * the decimal exponent of scale folded into the text when scale is a power
 * of ten, so that "5 uT" is the double nearest 5e-6, as a user expects. */
double units_scale_text(const char *num, size_t len, double scale);

/* "a time (s)", "a magnetic field (T)", "a frequency (Hz)", ...; an unnamed
 * dimension is described by its SI unit ("a quantity in kg m^2 s^-3").
 * Writes into buf and returns it. */
const char *units_dim_describe(units_dim d, char *buf, size_t n);

/* The SI unit of a dimension as text: "T", "A/V", "s^-1", "T/sqrtHz". */
const char *units_dim_symbol(units_dim d, char *buf, size_t n);

/* Format a value for messages with a fitting prefix: "12.5 mT", "850 Hz",
 * "300 ms", "2 A/V". Writes into buf and returns it. */
const char *units_format(double value, units_dim d, char *buf, size_t n);

/* True when text (len bytes) is a unit symbol, with or without a prefix
 * ("ms", "mA", "T", "as"): such words cannot be variable names. */
bool units_is_unit_word(const char *text, size_t len);

#endif
