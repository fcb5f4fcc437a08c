/* Fundamental of a channel without firing structure: Hann peak, then a multi-harmonic
 * sine fit (IEEE Std 1057 four-parameter fit, extended with harmonics of the same
 * frequency) by Gauss-Newton, on a block-averaged copy of the record. */
#include "spectrum_internal.h"

#include <gsl/gsl_linalg.h>
#include <stdlib.h>
#include <string.h>
#include <tankfit/spectrum.h>

#define FIT_POINTS_MAX (1u << 18) /* block-average longer records down to this */
#define FIT_HARMONICS 12          /* harmonics modelled in the fit (fewer near Nyquist) */
#define SUBHARMONIC_LEVEL 0.05    /* a sub-multiple this strong is the fundamental */

/* Coarse frequency (in cycles per sample of y) from the largest Hann peak; a
 * lower fundamental whose harmonic that peak is wins when its own peak holds
 * at least SUBHARMONIC_LEVEL of the largest one. */
static tf_status coarse(const double *y, size_t m, double *cps, tf_error *err)
{
    const size_t L = tf_spectrum_smooth_down(m);
    double *buf = fftw_malloc(sizeof(double) * L);
    fftw_complex *X = fftw_malloc(sizeof(fftw_complex) * (L / 2 + 1));
    fftw_plan p = tf_sp_plan_r2c(L);
    if (!buf || !X || !p) {
        fftw_free(buf);
        fftw_free(X);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory for a %zu-point FFT", L);
    }
    double mean = 0.0;
    for (size_t k = 0; k < L; k++)
        mean += y[k];
    mean /= (double)L;
    for (size_t k = 0; k < L; k++)
        buf[k] = y[k] - mean;
    tf_sp_hann_apply(buf, L);
    fftw_execute_dft_r2c(p, buf, X);
    size_t kmax = 0;
    double best = 0.0;
    for (size_t k = 3; k + 1 < L / 2; k++)
        if (cabs(X[k]) > best) {
            best = cabs(X[k]);
            kmax = k;
        }
    tf_status st = TF_OK;
    double nu = 0, amp = 0, ph = 0;
    if (kmax == 0 || !(best > 0.0) ||
        tf_sp_hann_peak(X, L, (double)kmax, 0, &nu, &amp, &ph) != 0) {
        st = tf_error_set(err, TF_ERR_DATA,
                          "no periodic content: the record holds fewer than two periods "
                          "or is constant");
    } else {
        for (int q = 16; q >= 2; q--) {
            double nq, aq, pq;
            if (nu / q < 4.0)
                continue;
            if (tf_sp_hann_peak(X, L, nu / q, 1, &nq, &aq, &pq) == 0 &&
                aq >= SUBHARMONIC_LEVEL * amp && fabs(nq - nu / q) < 0.6) {
                nu = nq;
                break;
            }
        }
        *cps = nu / (double)L;
    }
    fftw_free(buf);
    fftw_free(X);
    return st;
}

/* One Gauss-Newton step of the model c0 + sum_h a_h cos(h w t) + b_h sin(h w t)
 * over samples y[k] at t = k - t_mid (in samples): solves the normal equations
 * for all linear coefficients and the frequency increment. */
static int gauss_newton(const double *y, size_t m, int H, double *w, double *coef)
{
    const int np = 2 * H + 2;
    gsl_matrix *A = gsl_matrix_calloc((size_t)np, (size_t)np);
    gsl_vector *b = gsl_vector_calloc((size_t)np), *x = gsl_vector_alloc((size_t)np);
    double *col = malloc(sizeof(double) * (size_t)np);
    int ok = A && b && x && col;
    const double tmid = 0.5 * (double)(m - 1);
    for (size_t k = 0; ok && k < m; k++) {
        const double t = (double)k - tmid;
        const double c1 = cos(*w * t), s1 = sin(*w * t);
        double c = 1.0, s = 0.0, dw = 0.0;
        col[0] = 1.0;
        for (int h = 1; h <= H; h++) {
            const double cn = c * c1 - s * s1, sn = s * c1 + c * s1;
            c = cn;
            s = sn;
            col[2 * h - 1] = c;
            col[2 * h] = s;
            dw += h * t * (-coef[2 * h - 1] * s + coef[2 * h] * c);
        }
        col[np - 1] = dw;
        for (int i = 0; i < np; i++) {
            b->data[i] += col[i] * y[k];
            double *row = A->data + (size_t)i * A->tda;
            for (int j = 0; j <= i; j++)
                row[j] += col[i] * col[j];
        }
    }
    for (int i = 0; ok && i < np; i++)
        for (int j = 0; j < i; j++)
            gsl_matrix_set(A, (size_t)j, (size_t)i, gsl_matrix_get(A, (size_t)i, (size_t)j));
    /* The frequency column is t times an amplitude, some 1e8 times larger than
     * the others: equilibrate, or the normal equations lose every digit. */
    double *d = malloc(sizeof(double) * (size_t)np);
    ok = ok && d;
    for (int i = 0; ok && i < np; i++) {
        const double aii = gsl_matrix_get(A, (size_t)i, (size_t)i);
        d[i] = aii > 0.0 ? sqrt(aii) : 1.0;
    }
    for (int i = 0; ok && i < np; i++) {
        b->data[i] /= d[i];
        for (int j = 0; j < np; j++)
            gsl_matrix_set(A, (size_t)i, (size_t)j,
                           gsl_matrix_get(A, (size_t)i, (size_t)j) / (d[i] * d[j]));
    }
    /* The frequency column is zero on the first step (no amplitudes yet): an SVD
     * solve gives the minimum-norm answer then instead of failing. */
    gsl_matrix *V = ok ? gsl_matrix_alloc((size_t)np, (size_t)np) : NULL;
    gsl_vector *S = ok ? gsl_vector_alloc((size_t)np) : NULL, *wk = ok ? gsl_vector_alloc((size_t)np) : NULL;
    ok = ok && V && S && wk && gsl_linalg_SV_decomp(A, V, S, wk) == 0;
    if (ok) {
        const double smax = gsl_vector_get(S, 0);
        for (int i = 0; i < np; i++)
            if (gsl_vector_get(S, (size_t)i) < 1e-13 * smax)
                gsl_vector_set(S, (size_t)i, 0.0);
        ok = gsl_linalg_SV_solve(A, V, S, b, x) == 0;
    }
    if (ok) {
        /* The last unknown multiplies the Jacobian column, i.e. it is the
         * increment of w; the others are the new linear coefficients. */
        for (int i = 0; i < np - 1; i++)
            coef[i] = gsl_vector_get(x, (size_t)i) / d[i];
        *w += gsl_vector_get(x, (size_t)(np - 1)) / d[np - 1];
    }
    gsl_matrix_free(A);
    gsl_matrix_free(V);
    gsl_vector_free(b);
    gsl_vector_free(x);
    gsl_vector_free(S);
    gsl_vector_free(wk);
    free(col);
    free(d);
    return ok ? 0 : -1;
}

tf_status tf_spectrum_estimate_fundamental(const float *x, size_t n, double dt_s,
                                           double *freq_hz, tf_error *err)
{
    if (!x || !(dt_s > 0.0) || !freq_hz)
        return tf_error_set(err, TF_ERR_USAGE, "fundamental estimate: no samples given");
    if (n < 16)
        return tf_error_set(err, TF_ERR_DATA,
                            "fundamental estimate: %zu samples, at least 16 are needed", n);
    size_t D = (n + FIT_POINTS_MAX - 1) / FIT_POINTS_MAX;
    size_t m = n / D;
    double *y = malloc(sizeof(double) * m);
    if (!y)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    /* A block mean is still periodic with the same period, so the fit on it
     * finds the same frequency; block centres are D apart. */
    for (size_t j = 0; j < m; j++) {
        double s = 0.0;
        for (size_t k = 0; k < D; k++)
            s += x[j * D + k];
        y[j] = s / (double)D;
    }
    double cps = 0.0;
    tf_status st = coarse(y, m, &cps, err);
    if (st != TF_OK) {
        free(y);
        return st;
    }
    int H = (int)floor(0.45 / cps);
    if (H > FIT_HARMONICS)
        H = FIT_HARMONICS;
    if (H < 1)
        H = 1;
    double coef[2 * FIT_HARMONICS + 2] = {0};
    double w = 2.0 * M_PI * cps;
    int converged = 0;
    double last = HUGE_VAL;
    for (int it = 0; it < 40 && !converged; it++) {
        const double w_old = w;
        if (gauss_newton(y, m, H, &w, coef) != 0 || !(w > 0.0) || !(w < M_PI))
            break;
        last = fabs(w - w_old);
        if (it > 0 && last <= 1e-12 * w)
            converged = 1;
    }
    /* at the rounding floor the step jitters around 1e-12 w: accept that */
    if (!converged && last <= 1e-10 * w)
        converged = 1;
    free(y);
    if (!converged)
        return tf_error_set(err, TF_ERR_NUMERIC,
                            "the sine fit for the fundamental did not converge (start %g Hz)",
                            cps / ((double)D * dt_s));
    *freq_hz = w / (2.0 * M_PI * (double)D * dt_s);
    return TF_OK;
}
