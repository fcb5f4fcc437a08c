/* Fast, exact, locale-independent decimal number parsing (private to the library). */
#ifndef TF_NUMPARSE_H
#define TF_NUMPARSE_H

#include <stddef.h>

/* Parse a decimal floating-point number at s[0..len) with decimal mark `decimal`
 * ('.' or ','): optional sign, digits, optional fraction, optional exponent
 * (e/E), also "inf", "nan". No leading or trailing spaces are skipped. The
 * result equals the correctly rounded double of the text. On success stores
 * the value, sets *end just past the number and returns 0; returns -1 when no
 * number starts at s. */
int tf_parse_double(const char *s, size_t len, char decimal, double *value, const char **end);

#endif
