/* CSV time base: streaming least-squares fit of t0/dt, checked against the printing resolution. */
#include "csv_internal.h"
#include "numparse.h"

#include <float.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

const double tf_csv_pow10_table[81] = {1e-40, 1e-39, 1e-38, 1e-37, 1e-36, 1e-35, 1e-34, 1e-33, 1e-32, 1e-31, 1e-30, 1e-29, 1e-28, 1e-27, 1e-26, 1e-25, 1e-24, 1e-23, 1e-22, 1e-21, 1e-20, 1e-19, 1e-18, 1e-17, 1e-16, 1e-15, 1e-14, 1e-13, 1e-12, 1e-11, 1e-10, 1e-9, 1e-8, 1e-7, 1e-6, 1e-5, 1e-4, 1e-3, 1e-2, 1e-1, 1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22, 1e23, 1e24, 1e25, 1e26, 1e27, 1e28, 1e29, 1e30, 1e31, 1e32, 1e33, 1e34, 1e35, 1e36, 1e37, 1e38, 1e39, 1e40};

double tf_csv_pow10_far(long k)
{
    return pow(10.0, (double)k);
}

void tf_csv_scan_number(const char *s, size_t len, char decimal, tf_num_text *nt)
{
    size_t i = 0;
    long e = 0, pos = 0, lead = 0;
    int eneg = 0;
    memset(nt, 0, sizeof *nt);
    if (i < len && (s[i] == '+' || s[i] == '-'))
        i++;
    size_t int0 = i;
    while (i < len && s[i] >= '0' && s[i] <= '9')
        i++;
    long nint = (long)(i - int0);
    for (size_t k = int0; k < i; k++) /* exponent of each integer digit: nint-1 ... 0 */
        if (s[k] != '0' && !nt->nonzero) {
            nt->nonzero = 1;
            lead = nint - 1 - (long)(k - int0);
        }
    if (i < len && s[i] == decimal)
        for (i++; i < len && s[i] >= '0' && s[i] <= '9'; i++) {
            pos--;
            if (s[i] != '0' && !nt->nonzero) {
                nt->nonzero = 1;
                lead = pos;
            }
        }
    nt->frac = -pos;
    if (i < len && (s[i] == 'e' || s[i] == 'E')) {
        nt->has_exp = 1;
        i++;
        if (i < len && (s[i] == '+' || s[i] == '-'))
            eneg = s[i++] == '-';
        for (; i < len && s[i] >= '0' && s[i] <= '9'; i++)
            if (e < 100000)
                e = e * 10 + (s[i] - '0');
    }
    nt->exp = eneg ? -e : e;
    nt->lead = lead + nt->exp;
}

double tf_csv_resolution(const tf_num_text *nt, int sig_digits)
{
    if (!nt->nonzero) /* zero: %g and %e print an exact zero, whatever the digits */
        return 0;
    long last = nt->exp - nt->frac; /* exponent of the last printed digit */
    if (sig_digits > 0 && nt->lead - sig_digits + 1 < last)
        last = nt->lead - sig_digits + 1;
    return tf_csv_pow10(last);
}

int tf_csv_time_value_general(const char *s, size_t len, char decimal, int sig_digits,
                              double *value, double *q)
{
    tf_num_text nt;
    if (tf_parse_field(s, len, decimal, value) != 0)
        return -1;
    tf_csv_scan_number(s, len, decimal, &nt);
    *q = tf_csv_resolution(&nt, sig_digits);
    return 0;
}

int tf_csv_sig_digits(const tf_num_text *nt)
{
    return nt->nonzero ? (int)(nt->lead - (nt->exp - nt->frac) + 1) : 0;
}

tf_status tf_time_acc_init(tf_time_acc *a, double t_ref, double d_ref, size_t max_rows,
                           tf_error *err)
{
    memset(a, 0, sizeof *a);
    a->d_ref = d_ref;
    a->t_scale = fabs(t_ref);
    a->cap_blocks = max_rows / TF_TIME_BLOCK + 2;
    a->blocks = malloc(a->cap_blocks * sizeof *a->blocks);
    if (!a->blocks)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory for the time base of %zu rows",
                            max_rows);
    return TF_OK;
}

int tf_time_acc_grow(tf_time_acc *a)
{
    size_t cap = a->cap_blocks * 2;
    tf_time_block *grown = cap > a->cap_blocks ? realloc(a->blocks, cap * sizeof *grown) : NULL;
    if (!grown)
        return -1;
    a->blocks = grown;
    a->cap_blocks = cap;
    return 0;
}

void tf_time_acc_free(tf_time_acc *a)
{
    free(a->blocks);
    a->blocks = NULL;
}

int tf_time_acc_fail(const tf_time_acc *a, int why, double t, double d, double tol, char *msg,
                     size_t msg_size)
{
    if (why == TF_TIME_NOT_LATER)
        snprintf(msg, msg_size, "expected a time later than %.10g s, found %.10g s", a->t_prev, t);
    else if (why == TF_TIME_BAD_STEP)
        snprintf(msg, msg_size,
                 "expected a time step of %.6g s (within the printing resolution, %.3g s), "
                 "found a step of %.6g s (%.10g s after %.10g s)",
                 a->d_ref, tol, d, t, a->t_prev);
    else
        snprintf(msg, msg_size, "out of memory for the time base after %zu rows", a->n);
    return -1;
}

/* Check every block of one part against the fitted line alpha + beta*K (in u
 * space) at the rows of its extreme deviations from the reference line; the
 * fitted line differs from the reference by beta (tiny) per row, so another
 * row of the block can exceed these by at most |beta| * TF_TIME_BLOCK, far
 * below the resolution. Returns the first offending block's line (0 when all
 * pass). */
static size_t check_blocks(const tf_time_acc *a, size_t base, double shift, double alpha,
                           double beta, double half_q, double *bad_t, double *bad_off)
{
    for (size_t b = 0; b < a->nblocks; b++) {
        const tf_time_block *blk = &a->blocks[b];
        double over = blk->hi + shift - (alpha + beta * (double)(base + blk->hi_k));
        double under = blk->lo + shift - (alpha + beta * (double)(base + blk->lo_k));
        /* over > half_q: too late; under < -half_q: too early */
        size_t line = 0;
        if (over > half_q) {
            line = blk->hi_line;
            *bad_t = blk->hi_t;
            *bad_off = over;
        }
        if (under < -half_q && (!line || blk->lo_line < line)) {
            line = blk->lo_line;
            *bad_t = blk->lo_t;
            *bad_off = under;
        }
        if (line)
            return line;
    }
    return 0;
}

tf_status tf_time_finish(const tf_time_acc *acc, size_t parts, const char *path, size_t col,
                         double *t0, double *dt, double *resolution, tf_error *err)
{
    size_t n = 0, first = parts;
    for (size_t p = 0; p < parts; p++) {
        if (acc[p].n && first == parts)
            first = p;
        n += acc[p].n;
    }
    if (n < 2)
        return tf_error_set(err, TF_ERR_DATA,
                            "%s:%zu:%zu: expected at least 2 data rows to find the sample "
                            "period from the time column, found %zu",
                            path, first < parts ? acc[first].line_first : 1, col, n);
    double T0 = acc[first].t_first, D = acc[first].d_ref;
    double su = 0, sku = 0, qmax = 0;
    size_t base = 0;
    const tf_time_acc *prev = NULL;
    for (size_t p = first; p < parts; p++) {
        const tf_time_acc *a = &acc[p];
        if (!a->n)
            continue;
        if (prev) { /* the step across the boundary between two parser threads */
            double d = a->t_first - prev->t_prev;
            double tol = tf_time_step_tolerance(a->q_first, prev->q_prev);
            if (!(d > 0) || fabs(d - D) > tol)
                return tf_error_set(err, TF_ERR_DATA,
                                    "%s:%zu:%zu: expected a time step of %.6g s (within the "
                                    "printing resolution, %.3g s), found a step of %.6g s "
                                    "(%.10g s after %.10g s)",
                                    path, a->line_first, col, D, tol, d, a->t_first,
                                    prev->t_prev);
        }
        double c = a->t_first - T0 - (double)base * D;
        double nn = (double)a->n, bb = (double)base;
        su += a->sum_u + nn * c;
        sku += bb * a->sum_u + a->sum_ku + c * (bb * nn + nn * (nn - 1) / 2);
        if (a->q_max > qmax)
            qmax = a->q_max;
        base += a->n;
        prev = a;
    }
    /* least squares of u against the index K = 0..n-1 (closed-form sums of K) */
    double N = (double)n, kbar = (N - 1) / 2, skk = N * (N * N - 1) / 12;
    double beta = (sku - kbar * su) / skk;
    double alpha = su / N - beta * kbar;
    base = 0;
    for (size_t p = first; p < parts; p++) {
        const tf_time_acc *a = &acc[p];
        if (!a->n)
            continue;
        double c = a->t_first - T0 - (double)base * D, bad_t = 0, bad_off = 0;
        size_t line = check_blocks(a, base, c, alpha, beta, 0.5 * qmax, &bad_t, &bad_off);
        if (line)
            return tf_error_set(err, TF_ERR_DATA,
                                "%s:%zu:%zu: expected times on a uniform grid t0 + k*dt "
                                "(t0 = %.10g s, dt = %.10g s) within the printing resolution "
                                "%.3g s, found %.10g s, %.3g s off the grid",
                                path, line, col, T0 + alpha, D + beta, qmax, bad_t, bad_off);
        base += a->n;
    }
    *t0 = T0 + alpha;
    *dt = D + beta;
    /* a start a billionth of a sample from zero is the fit's rounding, not a time
     * anyone printed: report it as zero */
    if (fabs(*t0) < 1e-9 * fabs(*dt))
        *t0 = 0.0;
    *resolution = qmax;
    return TF_OK;
}
