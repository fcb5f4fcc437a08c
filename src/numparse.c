/* Fast, exact, locale-independent decimal number parsing (see numparse.h, docs/import-csv.md). */
#define _GNU_SOURCE /* strtod_l, newlocale */
#include "numparse.h"

#include <float.h>
#include <locale.h>
#include <math.h>
#include <pthread.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

/* Clinger's fast path (W. D. Clinger, "How to read floating point numbers
 * accurately", PLDI 1990): when the decimal mantissa m is an integer below 2^53
 * and |e| <= 22, both m and 10^|e| are exact doubles, so the one IEEE 754
 * multiplication or division m * 10^e (m / 10^-e) is correctly rounded. That
 * needs every operation to round to double exactly once (FLT_EVAL_METHOD 0,
 * e.g. x86-64 SSE2); elsewhere every number takes the exact fallback. */
#if defined(FLT_EVAL_METHOD) && FLT_EVAL_METHOD == 0
#define TF_FAST_PATH 1
#else
#define TF_FAST_PATH 0
#endif

#define TF_MAX_SIG 19                 /* decimal digits that always fit in uint64 */
#define TF_TWO53 9007199254740992ull  /* 2^53 */

const double tf_pow10_exact[23] = {
    1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,  1e8,  1e9,  1e10, 1e11,
    1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22};

const double tf_pow10_inv[23] = {
    1e0,   1e-1,  1e-2,  1e-3,  1e-4,  1e-5,  1e-6,  1e-7,  1e-8,  1e-9,  1e-10, 1e-11,
    1e-12, 1e-13, 1e-14, 1e-15, 1e-16, 1e-17, 1e-18, 1e-19, 1e-20, 1e-21, 1e-22};

static pthread_once_t c_locale_once = PTHREAD_ONCE_INIT;
static locale_t c_locale;

static void make_c_locale(void)
{
    c_locale = newlocale(LC_ALL_MASK, "C", (locale_t)0);
}

static int lower(char c)
{
    return (c >= 'A' && c <= 'Z') ? c - 'A' + 'a' : c;
}

/* Case-insensitive match of word at s[i..len); returns its length or 0. */
static size_t match_word(const char *s, size_t i, size_t len, const char *word)
{
    size_t k = 0;
    for (; word[k]; k++)
        if (i + k >= len || lower(s[i + k]) != word[k])
            return 0;
    return k;
}

/* "inf", "infinity", "nan" (and "nan(chars)") after an optional sign, as strtod. */
static int parse_special(const char *s, size_t i, size_t len, int neg, double *value,
                         const char **end)
{
    size_t k;
    if ((k = match_word(s, i, len, "inf")) != 0) {
        size_t k2 = match_word(s, i, len, "infinity");
        i += k2 ? k2 : k;
        *value = neg ? -HUGE_VAL : HUGE_VAL;
        *end = s + i;
        return 0;
    }
    if ((k = match_word(s, i, len, "nan")) != 0) {
        i += k;
        if (i < len && s[i] == '(') {
            size_t j = i + 1;
            while (j < len && (s[j] == '_' || (s[j] >= '0' && s[j] <= '9') ||
                               (lower(s[j]) >= 'a' && lower(s[j]) <= 'z')))
                j++;
            if (j < len && s[j] == ')')
                i = j + 1;
        }
        *value = neg ? -NAN : NAN;
        *end = s + i;
        return 0;
    }
    return -1;
}

/* Exact fallback: glibc strtod_l in the C locale is correctly rounded. */
static int parse_slow(const char *s, size_t n, char decimal, double *value)
{
    char stack[128];
    char *buf = n < sizeof stack ? stack : malloc(n + 1);
    if (!buf)
        return -1;
    memcpy(buf, s, n);
    buf[n] = '\0';
    if (decimal != '.') {
        char *d = memchr(buf, decimal, n);
        if (d)
            *d = '.';
    }
    pthread_once(&c_locale_once, make_c_locale);
    int ok = c_locale != (locale_t)0;
    if (ok)
        *value = strtod_l(buf, NULL, c_locale);
    if (buf != stack)
        free(buf);
    return ok ? 0 : -1;
}

int tf_parse_double(const char *s, size_t len, char decimal, double *value, const char **end)
{
    size_t i = 0;
    int neg = 0;
    if (i < len && (s[i] == '+' || s[i] == '-'))
        neg = s[i++] == '-';
    if (i < len && (lower(s[i]) == 'i' || lower(s[i]) == 'n'))
        return parse_special(s, i, len, neg, value, end);

    /* every digit goes into mant; more than TF_MAX_SIG digits (leading zeros
     * included) could overflow it, and such rare text takes the exact fallback */
    uint64_t mant = 0;
    size_t nd = 0;        /* digits read */
    long exp10 = 0;       /* value = mant * 10^exp10 */
    size_t d0 = i;
    while (i < len && (unsigned)(s[i] - '0') < 10)
        mant = mant * 10 + (uint64_t)(s[i++] - '0');
    nd = i - d0;
    if (i < len && s[i] == decimal) {
        size_t f0 = ++i;
        while (i < len && (unsigned)(s[i] - '0') < 10)
            mant = mant * 10 + (uint64_t)(s[i++] - '0');
        exp10 = -(long)(i - f0);
        nd += i - f0;
        if (nd == 0)
            return -1; /* a lone decimal mark */
    }
    if (nd == 0)
        return -1;
    if (i < len && (s[i] == 'e' || s[i] == 'E')) {
        size_t j = i + 1;
        int eneg = 0;
        if (j < len && (s[j] == '+' || s[j] == '-'))
            eneg = s[j++] == '-';
        if (j < len && (unsigned)(s[j] - '0') < 10) {
            long e = 0;
            for (; j < len && (unsigned)(s[j] - '0') < 10; j++)
                if (e < 100000)
                    e = e * 10 + (s[j] - '0');
            exp10 += eneg ? -e : e;
            i = j;
        }
    }
    *end = s + i;
    if (nd > TF_MAX_SIG)
        return parse_slow(s, i, decimal, value);
    if (mant == 0) {
        *value = neg ? -0.0 : 0.0;
        return 0;
    }
    if (TF_FAST_PATH && mant <= TF_TWO53) {
        double m = (double)mant;
        if (exp10 >= -22 && exp10 <= 22) {
            m = exp10 < 0 ? m / tf_pow10_exact[-exp10] : m * tf_pow10_exact[exp10];
            *value = neg ? -m : m;
            return 0;
        }
        /* 1234e25 = 12340000000e18... : move surplus powers into the mantissa
         * while it stays an exact integer below 2^53 */
        if (exp10 > 22 && exp10 <= 22 + 15) {
            uint64_t big = mant;
            long e = exp10;
            while (e > 22 && big <= TF_TWO53 / 10) {
                big *= 10;
                e--;
            }
            if (e == 22) {
                m = (double)big * 1e22;
                *value = neg ? -m : m;
                return 0;
            }
        }
    }
    return parse_slow(s, i, decimal, value);
}

/* tf_scan_short for the texts its inline part does not take (see numparse.h). */
int tf_scan_short_rest(const char *p, const char *end, char decimal, tf_short_dec *d)
{
    const char *d0 = p;
    uint64_t m = 0; /* modulo 2^64: more than 15 digits are refused below */
    while (p < end && (unsigned)(*p - '0') < 10)
        m = m * 10 + (uint64_t)(*p++ - '0');
    size_t nd = (size_t)(p - d0);
    long e = 0;
    if (p < end && *p == decimal) {
        const char *f0 = ++p;
#if TF_SWAR_DIGITS
        static const uint64_t p10[9] = {1, 10, 100, 1000, 10000, 100000, 1000000, 10000000,
                                        100000000};
        uint64_t v;
        unsigned k = 8;
        while (k == 8 && end - p >= 8) {
            k = tf_swar_digits(p, &v);
            m = m * p10[k] + v;
            p += k;
        }
        if (k == 8)
#endif
            while (p < end && (unsigned)(*p - '0') < 10)
                m = m * 10 + (uint64_t)(*p++ - '0');
        e = -(long)(p - f0);
        nd += (size_t)(p - f0);
    }
    if (nd - 1 >= 15) /* 0 or more than 15 digits */
        return -1;
    if (p < end) {
        if ((*p != 'e' && *p != 'E') || ++p == end)
            return -1;
        int eneg = *p == '-';
        long x;
        if (end - p == 3 && (eneg || *p == '+')) { /* e-03, e+02 */
            unsigned a = (unsigned)(p[1] - '0'), b = (unsigned)(p[2] - '0');
            if (a >= 10 || b >= 10)
                return -1;
            x = (long)(a * 10 + b);
        } else {
            p += eneg || *p == '+';
            const char *x0 = p;
            for (x = 0; p < end && (unsigned)(*p - '0') < 10 && x < 1000; p++)
                x = x * 10 + (*p - '0');
            if (p != end || p == x0)
                return -1;
        }
        e += eneg ? -x : x;
    }
    if (e < -22 || e > 22)
        return -1;
    d->m = m;
    d->e = e;
    return 0;
}
