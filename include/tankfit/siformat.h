/* Numbers with SI prefixes for reports and tables: "6.012 kHz", "-1.23 mA". */
#ifndef TANKFIT_SIFORMAT_H
#define TANKFIT_SIFORMAT_H

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Write value (in the base unit `unit`, e.g. 6012.0 and "Hz") into buf with
 * `digits` significant digits and the SI prefix that puts the mantissa in
 * [1, 1000): 6012.0, "Hz", 4 gives "6.012 kHz"; -0.00123, "A", 3 gives
 * "-1.23 mA". Trailing zeros are kept so columns line up ("6.000 kHz").
 *
 * buf, size: output buffer and its size in bytes; the text is always
 *   NUL-terminated and cut when it does not fit (32 bytes always suffice
 *   for units up to 8 characters).
 * value: any double; 0 prints as "0 Hz" (with the digits: "0.000 Hz"),
 *   NaN as "n/a", infinities as "inf Hz" / "-inf Hz".
 * unit: base unit, may be NULL or "" (then no prefix is used and the number
 *   is printed plainly, e.g. "9.94"). No prefix is used either for units
 *   that do not take one: "%", "FS", "dB", "deg". Micro is written "u"
 *   (ASCII, so that columns align in any terminal).
 * digits: significant digits, 1..17 (clamped).
 * Values beyond the prefixes (|value| >= 1e27 or < 1e-24 in base units) are
 * written with an exponent, "1.00e+30 V".
 * Returns buf. Never fails. */
char *tf_si_format(char *buf, size_t size, double value, const char *unit, int digits);

#ifdef __cplusplus
}
#endif
#endif
