/* Quantities with SI prefixes and units: the detailed parser behind tf_parse_quantity
 * (private to the library; design files use it for precise error messages). */
#ifndef TF_QUANTITY_H
#define TF_QUANTITY_H

#include <stddef.h>

/* Outcome of tf_quantity_parse. */
typedef enum {
    TF_QTY_OK = 0,
    TF_QTY_EMPTY,      /* nothing but white space */
    TF_QTY_NUMBER,     /* no decimal number at the start (hex, "inf", "nan" included) */
    TF_QTY_UNIT,       /* the text after the number is not [prefix]unit */
    TF_QTY_RANGE       /* the number overflows a double (e.g. "1e999") */
} tf_qty_status;

/* A parsed quantity. */
typedef struct tf_quantity {
    double value;       /* in base units; percent becomes a fraction (5 % -> 0.05) */
    char unit[8];       /* canonical unit: "F", "H", "ohm", "s", "Hz", "V", "A", "S/s",
                         * "A/V", "V/V", "V/A", "%", ... or "" (none) */
    char suffix[32];    /* the text after the number, as written ("uF", "µF", "m", "") */
    int prefix_only;    /* a prefix with no unit, as in "3 m" (value is 3e-3) */
} tf_quantity;

/* Parse text (NUL-terminated): optional white space, a decimal number (sign,
 * digits, optional fraction, optional e/E exponent; no hex, inf or nan), optional
 * white space, an optional SI prefix (y z a f p n u µ μ m k M G T P E Z Y: the
 * powers of 1000 of SI Brochure, 9th ed., table 7) and an optional unit, optional
 * white space. Ohm may be written ohm,
 * Ohm, Ω (U+03A9) or Ω (U+2126); "Sa/s" is "S/s". Percent and full scale ("FS")
 * take no prefix. On TF_QTY_OK fills q; on failure q->suffix still holds the
 * text after the number when there was one. */
tf_qty_status tf_quantity_parse(const char *text, tf_quantity *q);

/* Long name of a canonical unit for messages: "farads (F)", "henries (H)",
 * "ohms (ohm)", "percent (%)", ... ; "a plain number" for "". Never NULL. */
const char *tf_unit_long_name(const char *unit);

#endif
