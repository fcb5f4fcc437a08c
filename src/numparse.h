/* Fast, exact, locale-independent decimal number parsing (private to the library). */
#ifndef TF_NUMPARSE_H
#define TF_NUMPARSE_H

#include <float.h>
#include <stddef.h>
#include <stdint.h>

/* Parse a decimal floating-point number at s[0..len) with decimal mark `decimal`
 * ('.' or ','): optional sign, digits, optional fraction, optional exponent
 * (e/E), also "inf", "nan". No leading or trailing spaces are skipped. The
 * result equals the correctly rounded double of the text. On success stores
 * the value, sets *end just past the number and returns 0; returns -1 when no
 * number starts at s. */
int tf_parse_double(const char *s, size_t len, char decimal, double *value, const char **end);

/* Powers of ten that are exact doubles (10^0 .. 10^22). */
extern const double tf_pow10_exact[23];

/* The whole field s[0..len) as a number: returns 0 and the correctly rounded
 * value, or -1 when the field is not exactly one number. Inline fast path
 * (Clinger 1990: at most 15 digits, |exponent| <= 22, one IEEE operation) for
 * the common short field; anything else goes to tf_parse_double. */
static inline int tf_parse_field(const char *s, size_t len, char decimal, double *value)
{
#if defined(FLT_EVAL_METHOD) && FLT_EVAL_METHOD == 0
    size_t i = 0;
    int neg = 0;
    if (len && (s[0] == '-' || s[0] == '+'))
        neg = s[i++] == '-';
    uint64_t m = 0;
    size_t d0 = i;
    while (i < len && (unsigned)(s[i] - '0') < 10)
        m = m * 10 + (uint64_t)(s[i++] - '0');
    long e = 0;
    size_t nd = i - d0;
    if (i < len && s[i] == decimal) {
        size_t f0 = ++i;
        while (i < len && (unsigned)(s[i] - '0') < 10)
            m = m * 10 + (uint64_t)(s[i++] - '0');
        e = -(long)(i - f0);
        nd += i - f0;
    }
    if (nd == 0 || nd > 15)
        goto slow;
    if (i < len && (s[i] == 'e' || s[i] == 'E')) {
        int eneg = 0;
        long x = 0;
        ++i;
        if (i < len && (s[i] == '-' || s[i] == '+'))
            eneg = s[i++] == '-';
        if (i == len)
            goto slow;
        for (; i < len && (unsigned)(s[i] - '0') < 10 && x < 1000; i++)
            x = x * 10 + (s[i] - '0');
        e += eneg ? -x : x;
    }
    if (i != len || e < -22 || e > 22)
        goto slow;
    {
        double v = (double)m; /* exact: m < 10^15 < 2^53 */
        v = e < 0 ? v / tf_pow10_exact[-e] : v * tf_pow10_exact[e];
        *value = neg ? -v : v;
        return 0;
    }
slow:
#endif
    {
        const char *end;
        return tf_parse_double(s, len, decimal, value, &end) == 0 && end == s + len ? 0 : -1;
    }
}

#endif
