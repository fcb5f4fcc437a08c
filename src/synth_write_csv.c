/* Streaming CSV writer for simulated captures, with a fixed-format scientific number printer. */
#include "synth_write.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* exact powers of ten up to 1e22 (the largest exactly representable in a double) */
static const double p10[] = {1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,
                             1e8,  1e9,  1e10, 1e11, 1e12, 1e13, 1e14, 1e15,
                             1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22};
static const uint64_t p10u[] = {1ULL, 10ULL, 100ULL, 1000ULL, 10000ULL, 100000ULL,
                                1000000ULL, 10000000ULL, 100000000ULL, 1000000000ULL,
                                10000000000ULL, 100000000000ULL, 1000000000000ULL,
                                10000000000000ULL, 100000000000000ULL, 1000000000000000ULL};

/* a * 10^s with one rounding where |s| <= 22 */
static inline double scale10(double a, int s)
{
    if (s >= 0) {
        while (s > 22) {
            a *= 1e22;
            s -= 22;
        }
        return a * p10[s];
    }
    s = -s;
    while (s > 22) {
        a /= 1e22;
        s -= 22;
    }
    return a / p10[s];
}

/* round(v * 10^s) for the decimal digits of v, v > 0, x = v * 10^s rounded once
 * (x < 2^53): when the fraction of x is within 1e-6 (+ 2 ulp) of one half, the
 * exact residual of that rounding (an FMA) decides, ties to even as printf does.
 * Returns -1 when |s| > 22 near a tie (two roundings: the caller asks printf). */
static inline double round_scaled(double v, int s, double x)
{
    double f = (double)(int64_t)x, fr = x - f; /* x < 2^53: one instruction each way */
    double side = fr - 0.5;
    if (side > 1e-6 + x * 4.5e-16)
        return f + 1;
    if (side < -1e-6 - x * 4.5e-16)
        return f;
    if (s < -22 || s > 22)
        return -1;
    if (s >= 0)
        side += fma(v, p10[s], -x);            /* v 10^s - x, exact */
    else
        side += fma(-x, p10[-s], v) / p10[-s]; /* (v - x 10^-s) / 10^-s */
    if (side > 0 || (side == 0 && fmod(f, 2.0) != 0))
        return f + 1;
    return f;
}

static const char two_digits[201] = "00010203040506070809101112131415161718192021222324"
                                    "25262728293031323334353637383940414243444546474849"
                                    "50515253545556575859606162636465666768697071727374"
                                    "75767778798081828384858687888990919293949596979899";

/* the digits of m, exactly n of them (with leading zeros), into out */
static inline void put_digits(char *out, uint64_t m, int n)
{
    char *p = out + n;
    if (m < 4294967296u) { /* values: 32-bit arithmetic is cheaper */
        uint32_t w = (uint32_t)m;
        while (w >= 100 && n >= 2) {
            uint32_t q = w / 100;
            p -= 2;
            memcpy(p, two_digits + 2 * (w - q * 100), 2);
            w = q;
            n -= 2;
        }
        while (n-- > 0) {
            *--p = (char)('0' + w % 10);
            w /= 10;
        }
        return;
    }
    while (m >= 100 && n >= 2) {
        uint64_t q = m / 100;
        unsigned r = (unsigned)(m - q * 100);
        p -= 2;
        memcpy(p, two_digits + 2 * r, 2);
        m = q;
        n -= 2;
    }
    while (n-- > 0) {
        *--p = (char)('0' + m % 10);
        m /= 10;
    }
}

size_t tf_sw_format_sci(char *out, double v, int digits)
{
    char *p = out;
    if (digits < 1)
        digits = 1;
    if (digits > 15)
        digits = 15;
    if (v != v) {
        memcpy(out, "nan", 3);
        return 3;
    }
    int neg = v < 0;
    if (neg) {
        *p++ = '-';
        v = -v;
    }
    if (v > 1.7976931348623157e308) {
        memcpy(p, "inf", 3);
        return (size_t)(p - out) + 3;
    }
    uint64_t m = 0;
    int e = 0;
    if (v != 0) {
        uint64_t bits;
        memcpy(&bits, &v, sizeof bits);
        int e2 = (int)((bits >> 52) & 0x7ff) - 1023;
        /* floor(e2 log10 2) within one; 1233 / 4096 ~ log10 2 */
        e = e2 >= 0 ? (e2 * 1233) >> 12 : -((-e2 * 1233 + 4095) >> 12);
        if (e2 == -1023) /* subnormal */
            e = (int)floor(log10(v));
        double x = 0;
        int dir = 0, carry = 0;
        for (int tries = 0; tries < 4; tries++) {
            x = scale10(v, digits - 1 - e);
            if (x >= p10[digits]) {
                e++;
                if (dir < 0) { /* at e - 1 it scaled below 10^(d-1): v is a hair under 10^e */
                    carry = 1;
                    break;
                }
                dir = 1;
            } else if (x < p10[digits - 1]) {
                if (dir > 0) { /* at e - 1 the scaling rounded up to 10^d: carry */
                    carry = 1;
                    break;
                }
                e--;
                dir = -1;
            } else {
                break;
            }
        }
        if (carry) {
            m = p10u[digits - 1]; /* 9.99..9x rounds up to 1.00..0 at the next power */
        } else {
            double r = round_scaled(v, digits - 1 - e, x);
            if (r < 0) {
                char tmp[40];
                int n = snprintf(tmp, sizeof tmp, "%.*e", digits - 1, neg ? -v : v);
                memcpy(out, tmp, (size_t)n);
                return (size_t)n;
            }
            m = (uint64_t)(int64_t)r;
            if (m >= p10u[digits]) { /* 9.99..5 rounds up to 1.00..0 e+1 */
                m = p10u[digits - 1];
                e++;
            }
        }
    }
    char dig[16];
    put_digits(dig, m, digits);
    *p++ = dig[0];
    if (digits > 1) {
        *p++ = '.';
        memcpy(p, dig + 1, (size_t)digits - 1);
        p += digits - 1;
    }
    *p++ = 'e';
    if (e < 0) {
        *p++ = '-';
        e = -e;
    } else {
        *p++ = '+';
    }
    if (e >= 100) {
        *p++ = (char)('0' + e / 100);
        e %= 100;
    }
    memcpy(p, two_digits + 2 * e, 2);
    return (size_t)(p - out) + 2;
}

#define CSV_BUF (1u << 20)

struct tf_sw_csv {
    tf_sw_file *f;
    tf_sw_layout lay;
    char *buf;
    size_t len;
};

static tf_status flush(tf_sw_csv *w, tf_error *err)
{
    tf_status st = tf_sw_file_write(w->f, w->buf, w->len, err);
    w->len = 0;
    return st;
}

static void put(tf_sw_csv *w, const char *s)
{
    size_t n = strlen(s);
    memcpy(w->buf + w->len, s, n);
    w->len += n;
}

tf_sw_csv *tf_sw_csv_create(tf_sw_file *f, const tf_sw_layout *lay, tf_error *err)
{
    if (lay->time_digits < 1 || lay->time_digits > 15 || lay->value_digits < 1 ||
        lay->value_digits > 15) {
        tf_error_set(err, TF_ERR_USAGE,
                     "[capture] time_digits and value_digits: expected 1 to 15 significant "
                     "digits, found %d and %d", lay->time_digits, lay->value_digits);
        return NULL;
    }
    tf_sw_csv *w = calloc(1, sizeof *w);
    char *buf = malloc(CSV_BUF);
    if (!w || !buf) {
        free(w);
        free(buf);
        tf_error_set(err, TF_ERR_NOMEM, "out of memory for the CSV buffer");
        return NULL;
    }
    w->f = f;
    w->lay = *lay;
    w->buf = buf;
    put(w, "time (s)");
    for (size_t c = 0; c < lay->nchan; c++) {
        put(w, ",");
        put(w, lay->name[c]);
        if (lay->unit[c][0]) {
            put(w, " (");
            put(w, lay->unit[c]);
            put(w, ")");
        }
    }
    put(w, "\n");
    return w;
}

tf_status tf_sw_csv_write(tf_sw_csv *w, size_t k0, const float *const ch[], size_t n,
                          tf_error *err)
{
    /* one row is at most 25 bytes per field */
    size_t row_max = 25 * (w->lay.nchan + 1) + 1;
    int td = w->lay.time_digits, vd = w->lay.value_digits;
    for (size_t k = 0; k < n; k++) {
        if (w->len + row_max > CSV_BUF) {
            tf_status st = flush(w, err);
            if (st != TF_OK)
                return st;
        }
        char *p = w->buf + w->len;
        double t = w->lay.t0_s + (double)(k0 + k) * w->lay.dt_s;
        p += tf_sw_format_sci(p, t, td);
        for (size_t c = 0; c < w->lay.nchan; c++) {
            *p++ = ',';
            p += tf_sw_format_sci(p, (double)ch[c][k], vd);
        }
        *p++ = '\n';
        w->len = (size_t)(p - w->buf);
    }
    return TF_OK;
}

tf_status tf_sw_csv_finish(tf_sw_csv *w, tf_error *err)
{
    if (!w)
        return TF_OK;
    tf_status st = w->len ? flush(w, err) : TF_OK;
    free(w->buf);
    free(w);
    return st;
}
