/* Fast, exact, locale-independent decimal number parsing (private to the library). */
#ifndef TF_NUMPARSE_H
#define TF_NUMPARSE_H

#include <float.h>
#include <stddef.h>
#include <stdint.h>
#include <string.h>

/* Parse a decimal floating-point number at s[0..len) with decimal mark `decimal`
 * ('.' or ','): optional sign, digits, optional fraction, optional exponent
 * (e/E), also "inf", "nan". No leading or trailing spaces are skipped. The
 * result equals the correctly rounded double of the text. On success stores
 * the value, sets *end just past the number and returns 0; returns -1 when no
 * number starts at s. */
int tf_parse_double(const char *s, size_t len, char decimal, double *value, const char **end);

/* Powers of ten that are exact doubles (10^0 .. 10^22). */
extern const double tf_pow10_exact[23];

/* A short plain decimal as the fast path reads it: value = (neg ? -1 : 1) * m * 10^e. */
typedef struct tf_short_dec {
    uint64_t m;                    /* every digit, as one integer (< 10^15) */
    long e;                        /* -37 .. 22 */
    int neg;
} tf_short_dec;

#if defined(__BYTE_ORDER__) && __BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__ && defined(__GNUC__)
#define TF_SWAR_DIGITS 1
#else
#define TF_SWAR_DIGITS 0
#endif

#if TF_SWAR_DIGITS
/* The leading decimal digits among the 8 bytes at p (all readable): returns how
 * many (0 .. 8) and stores their value. Eight bytes at once (SWAR) in place of a
 * loop with a branch and a multiply per digit. */
static inline unsigned tf_swar_digits(const char *p, uint64_t *value)
{
    uint64_t x;
    memcpy(&x, p, 8);
    x ^= 0x3030303030303030u; /* a digit byte becomes 0 .. 9 */
    /* bit 7 of each byte set where the byte is not 0 .. 9 (no carry between bytes) */
    uint64_t bad = (((x & 0x7f7f7f7f7f7f7f7fu) + 0x7676767676767676u) | x) & 0x8080808080808080u;
    unsigned k = bad ? (unsigned)__builtin_ctzll(bad) >> 3 : 8;
    /* the k digits (first in the lowest byte) to the top, leading zero digits below */
    x = k ? x << (64 - 8 * k) : 0;
    /* pairs, then quads, then all eight: the byte order of an ASCII number read
     * little-endian (as in D. Lemire's fast_float, parse_eight_digits_unrolled) */
    x = x * 10 + (x >> 8);
    x = (((x & 0x000000ff000000ffu) * (100 + (1000000ull << 32))) +
         (((x >> 16) & 0x000000ff000000ffu) * (1 + (10000ull << 32)))) >> 32;
    *value = (uint32_t)x;
    return k;
}
#endif

/* The rest of tf_scan_short for any other text, from p (after the sign) to end. */
int tf_scan_short_rest(const char *p, const char *end, char decimal, tf_short_dec *d);

#if TF_SWAR_DIGITS
/* printf's %e with 4 to 8 fraction digits and a two-digit exponent
 * ("1.23456e-03"), from p (after the sign) to end: both ends known from the
 * length, one eight-byte step for the fraction. Returns 1 and sets d->m and
 * d->e (the same as tf_scan_short_rest would) when the text has that shape and
 * its exponent after the fraction is taken out lies within -22 .. 22; else 0. */
static inline int tf_scan_eform(const char *p, const char *end, char decimal, tf_short_dec *d)
{
    if (end - p >= 10 && (end[-4] == 'e' || end[-4] == 'E') &&
        (end[-3] == '-' || end[-3] == '+') && (unsigned)(*p - '0') < 10 && p[1] == decimal) {
        static const uint64_t p10e[9] = {1, 10, 100, 1000, 10000, 100000, 1000000, 10000000,
                                         100000000};
        unsigned nf = (unsigned)(end - p) - 6, a = (unsigned)(end[-2] - '0'),
                 b = (unsigned)(end[-1] - '0');
        uint64_t v;
        /* nf digits, then the 'e' (no 'e' among the eight bytes when nf is 8) */
        if (nf <= 8 && a < 10 && b < 10 && tf_swar_digits(p + 2, &v) == nf) {
            long x = (long)(a * 10 + b);
            long e = (end[-3] == '-' ? -x : x) - (long)nf;
            if (e < -22 || e > 22)
                return 0;
            d->m = (uint64_t)(*p - '0') * p10e[nf] + v;
            d->e = e;
            return 1;
        }
    }
    return 0;
}
#endif

/* Read the whole field s[0..len) when it is [sign] digits [mark digits]
 * [e|E [sign] digits] with 1 to 15 digits and a decimal exponent within
 * -22 .. 22 after the fraction is taken out: returns 0 and fills d. Returns -1
 * for anything else (which may still be a number: take tf_parse_double). The
 * shape a scope prints (`-1.23456e-03`) is read inline (tf_scan_eform); other
 * texts take tf_scan_short_rest: a short integer part digit by digit, the
 * fraction eight bytes at once, a two-digit exponent without a loop. */
static inline int tf_scan_short(const char *s, size_t len, char decimal, tf_short_dec *d)
{
    if (len == 0)
        return -1;
    const char *p = s, *end = s + len;
    d->neg = *p == '-';
    p += d->neg | (*p == '+');
#if TF_SWAR_DIGITS
    if (tf_scan_eform(p, end, decimal, d))
        return 0;
#endif
    return tf_scan_short_rest(p, end, decimal, d);
}

/* The fast path's value of d: m * 10^e in one IEEE operation (exact operands). */
static inline double tf_short_value(const tf_short_dec *d)
{
    double v = (double)d->m; /* exact: m < 10^15 < 2^53 */
    v = d->e < 0 ? v / tf_pow10_exact[-d->e] : v * tf_pow10_exact[d->e];
    return d->neg ? -v : v;
}

/* Nearest doubles of 10^-k, k = 0 .. 22 (10^-k itself is not a double for k >= 1). */
extern const double tf_pow10_inv[23];

/* The single-precision sample (float)(tf_short_value(d) * factor) without the
 * division, when that can be decided: returns 1 and stores it, or 0 (then
 * take the exact route). For e < 0 the quotient m / 10^k (k = -e) is replaced
 * by the product r = m * tf_pow10_inv[k]. With u = 2^-53, r = x(1 + t),
 * |t| <= 2u + u^2, for the exact x = m / 10^k, while the correctly rounded
 * quotient q = x(1 + t'), |t'| <= u: so |r - q| <= 3u|x|, at most 3 ulp of r
 * and, after the one more rounding of the product by factor, at most 7 ulp
 * of the result p (one ulp of p >= u|p|). Both then round to the same float
 * unless a float rounding boundary (a point halfway between two adjacent
 * floats: the low 29 of the 52 mantissa bits equal to 2^28) lies within 7
 * ulp of p; results within 32 ulp of one, and results outside the normal
 * float range, take the exact route. The chance of that is about 1e-7 per
 * value. Needs IEEE double arithmetic rounding once per operation (as the
 * fast path of tf_parse_field). */
static inline int tf_short_float(const tf_short_dec *d, double factor, float *out)
{
    if (d->e >= 0) /* one exact multiplication: as tf_short_value */
        return 0;
    double p = (double)d->m * tf_pow10_inv[-d->e];
    p = (d->neg ? -p : p) * factor;
    uint64_t b;
    memcpy(&b, &p, sizeof b);
    uint64_t a = b & 0x7fffffffffffffffu;
    /* 2^-125 <= |p| <= 2^127: both results normal floats, far from overflow */
    if (a < 0x3820000000000000u || a > 0x47e0000000000000u ||
        (b & 0x1fffffffu) - (0x10000000u - 32u) < 64u)
        return 0;
    *out = (float)p;
    return 1;
}

/* The whole field s[0..len) as a number: returns 0 and the correctly rounded
 * value, or -1 when the field is not exactly one number. Inline fast path
 * (Clinger 1990: at most 15 digits, |exponent| <= 22, one IEEE operation) for
 * the common short field; anything else goes to tf_parse_double. */
static inline int tf_parse_field(const char *s, size_t len, char decimal, double *value)
{
#if defined(FLT_EVAL_METHOD) && FLT_EVAL_METHOD == 0
    tf_short_dec d;
    if (tf_scan_short(s, len, decimal, &d) == 0) {
        *value = tf_short_value(&d);
        return 0;
    }
#endif
    const char *end;
    return tf_parse_double(s, len, decimal, value, &end) == 0 && end == s + len ? 0 : -1;
}

#endif
