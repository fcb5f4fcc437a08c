/* v-i identification (integrated series RLC equation, linear least squares per burst)
 * with the probe skew that minimises the residual, and the power method R = P / I_rms^2. */
#include "fit_internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_linalg.h>

#define NPAR 6          /* R, L, vc0, 1/C and two integration constants */
#define SKEW_WINDOWS 64  /* windows used for the skew search */
#define SKEW_GROUPS 8    /* groups for the skew's uncertainty */

double tf_fit_interp(const float *x, size_t n, double pos)
{
    if (!(pos > 0))
        return x[0];
    if (pos >= (double)(n - 1))
        return x[n - 1];
    size_t k = (size_t)pos;
    double f = pos - (double)k;
    return x[k] + f * ((double)x[k + 1] - (double)x[k]);
}

/* Two doubles in one SIMD register (GCC/Clang vector extension). */
typedef double v2d __attribute__((vector_size(16)));

/* A channel read at k + sh for a fixed shift sh (samples): linear interpolation with
 * the integer and fractional parts split once, clamped at the ends as tf_fit_interp. */
typedef struct shifted {
    const float *x;
    size_t n;
    double sh, f;
    long k0;
} shifted;

static shifted shifted_make(const float *x, size_t n, double sh)
{
    shifted s = {x, n, sh, 0.0, 0};
    const double fl = floor(sh);
    s.k0 = (long)fl;
    s.f = sh - fl;
    return s;
}

static inline double shifted_at(const shifted *s, size_t k)
{
    const long q = (long)k + s->k0;
    if (q >= 0 && (size_t)q + 1 < s->n) {
        const double a = s->x[q];
        return a + s->f * ((double)s->x[q + 1] - a);
    }
    return tf_fit_interp(s->x, s->n, (double)k + s->sh);
}

/* sum_{j<m} j^p for p = 1..4 (Faulhaber's formulas) */
static void power_sums(size_t m, double *s)
{
    const double M = (double)m, a = M * (M - 1.0);
    s[0] = M;
    s[1] = 0.5 * a;
    s[2] = a * (2.0 * M - 1.0) / 6.0;
    s[3] = 0.25 * a * a;
    s[4] = a * (2.0 * M - 1.0) * (3.0 * M * M - 3.0 * M - 1.0) / 30.0;
}

/* One window: theta (R, L, vc0, 1/C, k1, k0) of the circuit equation integrated twice,
 *   II v = R II i + L I i + vc0 t^2 / 2 + (1/C) III i + k1 t + k0
 * (I: running integral from the window start, trapezoidal; v delayed back by tau
 * seconds), the residual sum of squares and, when cov is not NULL, the
 * parameters' covariance (s^2 G^-1). Integrating twice leaves no raw current
 * sample among the regressors: the current noise is averaged before it enters,
 * which avoids the errors-in-variables shrinkage a raw i regressor suffers
 * (its part not explained by III i is small near resonance). Returns 0, or -1
 * if singular. */
/* Running trapezoidal integrals: y1 = I v, y2 = II v, q1 = I i, q2 = II i, q3 = III i. */
typedef struct integ {
    double vp, ip, y1, y2, q1, q2, q3;
} integ;

static void integ_step(integ *s, double v, double i, double dt, int first)
{
    if (!first) {
        const double y1 = s->y1 + 0.5 * dt * (s->vp + v);
        s->y2 += 0.5 * dt * (s->y1 + y1);
        s->y1 = y1;
        const double q1 = s->q1 + 0.5 * dt * (s->ip + i);
        const double q2 = s->q2 + 0.5 * dt * (s->q1 + q1);
        s->q3 += 0.5 * dt * (s->q2 + q2);
        s->q2 = q2;
        s->q1 = q1;
    }
    s->vp = v;
    s->ip = i;
}

static int window_ls(const float *v, const float *i, size_t n, double dt, const tf_window *w,
                     double tau, double *theta, double *rss, double *cov)
{
    double G[NPAR * NPAR] = {0}, b[NPAR] = {0}, sc[NPAR];
    const shifted vs = shifted_make(v, n, tau / dt);
    /* regressors (q2, q1, t^2/2, q3, t, 1): the sums of the last three among
     * themselves are power sums of the sample index; the others are summed in pairs,
     * (q2, q1) and (q3, Y) times each regressor (vector extension: both SIMD lanes) */
    const v2d zero = {0.0, 0.0};
    v2d a_q2 = zero, a_tt = zero, a_q3 = zero, a_t = zero, a_1 = zero, a_y = zero;
    v2d c_q3 = zero, c_tt = zero, c_t = zero, c_1 = zero;
    double g11 = 0;
    integ s0 = {0};
    for (size_t k = w->i0; k < w->i1; k++) {
        integ_step(&s0, shifted_at(&vs, k), i[k], dt, k == w->i0);
        const double t = (double)(k - w->i0) * dt, tt = 0.5 * t * t;
        const v2d A = {s0.q2, s0.q1}, C = {s0.q3, s0.y2};
        a_q2 += A * s0.q2;     /* g00, g01 */
        a_tt += A * tt;        /* g02, g12 */
        a_q3 += A * s0.q3;     /* g03, g13 */
        a_t += A * t;          /* g04, g14 */
        a_1 += A;              /* g05, g15 */
        a_y += A * s0.y2;      /* b0, b1 */
        c_q3 += C * s0.q3;     /* g33, b3 */
        c_tt += C * tt;        /* g23, b2 */
        c_t += C * t;          /* g34, b4 */
        c_1 += C;              /* g35, b5 */
        g11 += s0.q1 * s0.q1;
    }
    double l[20];
    const v2d all[10] = {a_q2, a_tt, a_q3, a_t, a_1, a_y, c_q3, c_tt, c_t, c_1};
    memcpy(l, all, sizeof l);
    const double g00 = l[0], g01 = l[1], g02 = l[2], g12 = l[3], g03 = l[4], g13 = l[5];
    const double g04 = l[6], g14 = l[7], g05 = l[8], g15 = l[9], b0 = l[10], b1 = l[11];
    const double g33 = l[12], b3 = l[13], g23 = l[14], b2 = l[15], g34 = l[16], b4 = l[17];
    const double g35 = l[18], b5 = l[19];
    double ps[5];
    power_sums(w->i1 - w->i0, ps);
    const double d2 = dt * dt;
    const double up[NPAR * NPAR] = {
        g00, g01, g02, g03, g04, g05,
        0, g11, g12, g13, g14, g15,
        0, 0, 0.25 * ps[4] * d2 * d2, g23, 0.5 * ps[3] * d2 * dt, 0.5 * ps[2] * d2,
        0, 0, 0, g33, g34, g35,
        0, 0, 0, 0, ps[2] * d2, ps[1] * dt,
        0, 0, 0, 0, 0, ps[0]};
    memcpy(G, up, sizeof G);
    b[0] = b0; b[1] = b1; b[2] = b2; b[3] = b3; b[4] = b4; b[5] = b5;
    for (int r = 0; r < NPAR; r++) {
        for (int c = 0; c < r; c++)
            G[r * NPAR + c] = G[c * NPAR + r];
        if (!(G[r * NPAR + r] > 0))
            return -1;
        sc[r] = 1.0 / sqrt(G[r * NPAR + r]);
    }
    for (int r = 0; r < NPAR; r++) {
        b[r] *= sc[r];
        for (int c = 0; c < NPAR; c++)
            G[r * NPAR + c] *= sc[r] * sc[c];
    }
    gsl_matrix_view Gm = gsl_matrix_view_array(G, NPAR, NPAR);
    gsl_vector_view bv = gsl_vector_view_array(b, NPAR);
    if (gsl_linalg_cholesky_decomp1(&Gm.matrix) != GSL_SUCCESS ||
        gsl_linalg_cholesky_svx(&Gm.matrix, &bv.vector) != GSL_SUCCESS)
        return -1;
    for (int r = 0; r < NPAR; r++)
        theta[r] = b[r] * sc[r];
    if (!rss && !cov)
        return 0;
    /* second pass for the residual: no cancellation */
    double s = 0;
    integ s1 = {0};
    for (size_t k = w->i0; k < w->i1; k++) {
        integ_step(&s1, shifted_at(&vs, k), i[k], dt, k == w->i0);
        const double t = (double)(k - w->i0) * dt;
        const double e = s1.y2 - (theta[0] * s1.q2 + theta[1] * s1.q1 + theta[2] * 0.5 * t * t +
                                  theta[3] * s1.q3 + theta[4] * t + theta[5]);
        s += e * e;
    }
    if (rss)
        *rss = s;
    if (cov) {
        const size_t m = w->i1 - w->i0;
        const double s2 = m > NPAR ? s / (double)(m - NPAR) : NAN;
        if (gsl_linalg_cholesky_invert(&Gm.matrix) != GSL_SUCCESS)
            return -1;
        for (int r = 0; r < NPAR; r++)
            for (int c = 0; c < NPAR; c++)
                cov[r * NPAR + c] = s2 * gsl_matrix_get(&Gm.matrix, r, c) * sc[r] * sc[c];
    }
    return 0;
}

/* Minimum of a sampled curve: index of the smallest value and the parabolic
 * vertex through it and its neighbours (in units of the grid step). */
static double parabolic_min(const double *y, size_t ny, size_t *imin)
{
    size_t m = 0;
    for (size_t k = 1; k < ny; k++)
        if (y[k] < y[m])
            m = k;
    *imin = m;
    if (m == 0 || m + 1 >= ny)
        return (double)m;
    const double den = y[m - 1] - 2 * y[m] + y[m + 1];
    if (!(den > 0))
        return (double)m;
    return (double)m + 0.5 * (y[m - 1] - y[m + 1]) / den;
}

/* Residual curves (total and per group) over the grid tau0 + k step, k < ng; the grid
 * points are independent and run on the fitter's threads. */
typedef struct curve_job {
    const float *v, *i;
    size_t n;
    double dt;
    const tf_window *win;
    const size_t *sub;
    size_t nsub, ng, ngrp;
    double tau0, step;
    double *tot, *grp;
} curve_job;

static void curve_one(void *ctx, size_t g)
{
    const curve_job *j = ctx;
    j->tot[g] = 0;
    for (size_t q = 0; q < j->ngrp; q++)
        j->grp[q * j->ng + g] = 0;
    for (size_t s = 0; s < j->nsub; s++) {
        double th[NPAR], rss;
        if (window_ls(j->v, j->i, j->n, j->dt, &j->win[j->sub[s]], j->tau0 + (double)g * j->step,
                      th, &rss, NULL) != 0) {
            j->tot[g] = NAN;
            return;
        }
        j->tot[g] += rss;
        j->grp[(s % j->ngrp) * j->ng + g] += rss;
    }
}

static int rss_curves(const float *v, const float *i, size_t n, double dt, const tf_window *win,
                      const size_t *sub, size_t nsub, double tau0, double step, size_t ng,
                      double *tot, double *grp, size_t ngrp, int threads)
{
    curve_job j = {v, i, n, dt, win, sub, nsub, ng, ngrp, tau0, step, tot, grp};
    tf_fit_parallel_for(ng, threads, curve_one, &j);
    for (size_t g = 0; g < ng; g++)
        if (!isfinite(tot[g]))
            return -1;
    return 0;
}

static int estimate_skew(const float *v, const float *i, size_t n, double dt,
                         const tf_window *win, size_t nwin, double search_s, int threads,
                         double *skew, double *u_skew)
{
    size_t sub[SKEW_WINDOWS], nsub = nwin < SKEW_WINDOWS ? nwin : SKEW_WINDOWS;
    for (size_t s = 0; s < nsub; s++)
        sub[s] = s * nwin / nsub;
    const size_t ngrp = nsub >= 2 * SKEW_GROUPS ? SKEW_GROUPS : (nsub >= 4 ? nsub / 2 : 1);
    int half = search_s > 0 ? (int)ceil(search_s / dt) : 20;
    if (half < 2)
        half = 2;
    if (half > 200)
        half = 200;
    /* coarse grid of 2 samples over +-half, then 0.25 sample over +-2 samples */
    const size_t ng = (size_t)half + 1, nf = 17;
    double *tot = malloc((ng + nf) * (ngrp + 1) * sizeof *tot);
    if (!tot)
        return -1;
    double *grp = tot + ng, *ftot = grp + ng * ngrp, *fgrp = ftot + nf;
    if (rss_curves(v, i, n, dt, win, sub, nsub, -(double)(half - half % 2) * dt, 2 * dt, ng, tot,
                   grp, ngrp, threads) != 0) {
        free(tot);
        return -1;
    }
    size_t im;
    parabolic_min(tot, ng, &im);
    const double f0 = (-(double)(half - half % 2) + 2.0 * (double)im) * dt - 2 * dt, fs = dt / 4.0;
    if (rss_curves(v, i, n, dt, win, sub, nsub, f0, fs, nf, ftot, fgrp, ngrp, threads) != 0) {
        free(tot);
        return -1;
    }
    *skew = f0 + parabolic_min(ftot, nf, &im) * fs;
    if (ngrp >= 2) {
        double m = 0, s2 = 0, est[SKEW_GROUPS];
        for (size_t q = 0; q < ngrp; q++) {
            est[q] = f0 + parabolic_min(fgrp + q * nf, nf, &im) * fs;
            m += est[q];
        }
        m /= (double)ngrp;
        for (size_t q = 0; q < ngrp; q++)
            s2 += (est[q] - m) * (est[q] - m);
        *u_skew = sqrt(s2 / (double)(ngrp - 1) / (double)ngrp);
    } else {
        /* one window: curvature of the residual, var = 2 s^2 / RSS'' (least squares) */
        size_t c = im == 0 ? 1 : (im + 1 >= nf ? nf - 2 : im);
        const double d2 = (ftot[c - 1] - 2 * ftot[c] + ftot[c + 1]) / (fs * fs);
        const size_t m = win[sub[0]].i1 - win[sub[0]].i0;
        const double s2 = ftot[c] / (double)(m > NPAR + 1 ? m - NPAR - 1 : 1);
        *u_skew = d2 > 0 ? sqrt(2 * s2 / d2) : NAN;
    }
    free(tot);
    return 0;
}

/* Per-window R, L, C at skew tau; medians into r/l/c, spread-based u. */
typedef struct id_job {
    const float *v, *i;
    size_t n;
    double dt, tau;
    const tf_window *win;
    double *pr, *pl, *pc;
} id_job;

static void id_one(void *ctx, size_t w)
{
    const id_job *j = ctx;
    double th[NPAR];
    if (window_ls(j->v, j->i, j->n, j->dt, &j->win[w], j->tau, th, NULL, NULL) != 0 ||
        !(th[3] > 0)) {
        j->pr[w] = j->pl[w] = j->pc[w] = NAN;
        return;
    }
    j->pr[w] = th[0];
    j->pl[w] = th[1];
    j->pc[w] = 1.0 / th[3];
}

static int identify_at(const float *v, const float *i, size_t n, double dt, const tf_window *win,
                       size_t nwin, double tau, int threads, double *pr, double *pl, double *pc,
                       double *med, double *u, double *scratch)
{
    size_t ok = 0;
    double cov[NPAR * NPAR];
    if (nwin == 1) {
        double th[NPAR];
        if (window_ls(v, i, n, dt, &win[0], tau, th, NULL, cov) != 0 || !(th[3] > 0))
            return -1;
        pr[0] = th[0];
        pl[0] = th[1];
        pc[0] = 1.0 / th[3];
        u[0] = sqrt(cov[0]);
        u[1] = sqrt(cov[NPAR + 1]);
        u[2] = pc[0] * sqrt(cov[3 * NPAR + 3]) / th[3];
    } else {
        id_job j = {v, i, n, dt, tau, win, pr, pl, pc};
        tf_fit_parallel_for(nwin, threads, id_one, &j);
    }
    for (size_t w = 0; w < nwin; w++)
        ok += isfinite(pr[w]);
    if (!ok)
        return -1;
    const double *src[3] = {pr, pl, pc};
    for (int q = 0; q < 3; q++) {
        tf_fit_spread sp;
        tf_fit_spread_of(src[q], nwin, 1, scratch, &sp);
        med[q] = sp.median;
        if (nwin > 1)
            u[q] = sp.count > 1 ? 1.2533 * sp.spread / sqrt((double)sp.count) : NAN;
    }
    return 0;
}

tf_status tf_vi_identify(const float *v, const float *i, size_t n, double dt_s,
                         const tf_window *win, size_t nwin, int skew_set, double skew_s,
                         double search_s, int threads, tf_vi_result *out, double *per_r,
                         double *per_l, double *per_c, tf_error *err)
{
    memset(out, 0, sizeof *out);
    if (!nwin || n < 8)
        return tf_error_set(err, TF_ERR_USAGE, "v-i identification: no windows");
    double *buf = malloc((3 * nwin + nwin) * sizeof *buf);
    if (!buf)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    double *pr = per_r ? per_r : buf, *pl = per_l ? per_l : buf + nwin,
           *pc = per_c ? per_c : buf + 2 * nwin, *scratch = buf + 3 * nwin;
    double tau = skew_set ? skew_s : 0.0, utau = 0.0;
    if (!skew_set) {
        if (estimate_skew(v, i, n, dt_s, win, nwin, search_s, threads, &tau, &utau) != 0) {
            free(buf);
            return tf_error_set(err, TF_ERR_NUMERIC, "v-i identification: singular system while searching the skew");
        }
        out->skew_estimated = 1;
    }
    double med[3], u[3], medp[3], up[3], medm[3];
    if (identify_at(v, i, n, dt_s, win, nwin, tau, threads, pr, pl, pc, med, u, scratch) != 0) {
        free(buf);
        return tf_error_set(err, TF_ERR_NUMERIC, "v-i identification: no burst gave a positive capacitance");
    }
    if (utau > 0 && isfinite(utau)) {
        /* the skew's share of the uncertainty, by evaluating at tau +- u on up to 256
         * windows spread over the record (a sensitivity: no need for all) */
        const size_t ns = nwin < 256 ? nwin : 256;
        double *tr = malloc(3 * ns * sizeof *tr);
        tf_window *sw = malloc(ns * sizeof *sw);
        if (tr && sw) {
            for (size_t q = 0; q < ns; q++)
                sw[q] = win[q * nwin / ns];
            double med0[3], u0[3];
            if (identify_at(v, i, n, dt_s, sw, ns, tau, threads, tr, tr + ns, tr + 2 * ns, med0,
                            u0, scratch) == 0 &&
                identify_at(v, i, n, dt_s, sw, ns, tau + utau, threads, tr, tr + ns, tr + 2 * ns,
                            medp, up, scratch) == 0 &&
                identify_at(v, i, n, dt_s, sw, ns, tau - utau, threads, tr, tr + ns, tr + 2 * ns,
                            medm, up, scratch) == 0)
                for (int q = 0; q < 3; q++)
                    u[q] = hypot(isfinite(u[q]) ? u[q] : 0, 0.5 * fabs(medp[q] - medm[q]));
        }
        free(tr);
        free(sw);
    }
    out->valid = 1;
    out->r_ohm = med[0];
    out->u_r_ohm = u[0];
    out->l_h = med[1];
    out->u_l_h = u[1];
    out->c_f = med[2];
    out->u_c_f = u[2];
    out->skew_s = tau;
    out->u_skew_s = utau;
    out->bursts_used = nwin;
    free(buf);
    return TF_OK;
}

/* Per-period sums of the power method: pp[q] = sum v(k + sh_q) i[k] for each skew and
 * ii = sum i^2, one period per job (the periods are independent). */
typedef struct power_job {
    const float *v, *i;
    size_t n;
    const shifted *vs;
    size_t nsk;
    const size_t *bounds;
    double *sums;   /* (nsk + 1) per period */
} power_job;

static void power_one(void *ctx, size_t q)
{
    const power_job *j = ctx;
    const size_t b0 = j->bounds[q], b1 = j->bounds[q + 1];
    /* named sums for up to three skews (an array of sums was kept in memory) */
    double p0 = 0, p1 = 0, p2 = 0, ii = 0;
    const shifted *v0 = &j->vs[0], *v1 = &j->vs[j->nsk > 1 ? 1 : 0], *v2 = &j->vs[j->nsk - 1];
    long lo = v0->k0, hi = v0->k0;
    for (size_t s = 1; s < j->nsk; s++) {
        lo = j->vs[s].k0 < lo ? j->vs[s].k0 : lo;
        hi = j->vs[s].k0 > hi ? j->vs[s].k0 : hi;
    }
    const int inside = b1 > b0 && (long)b0 + lo >= 0 && (long)(b1 - 1) + hi + 1 < (long)j->n;
    const float *x = j->v;
    if (inside && j->nsk == 1) {
        const size_t q0 = (size_t)((long)b0 + v0->k0);
        const double f = v0->f;
        for (size_t m = 0; m < b1 - b0; m++) {
            const double ik = j->i[b0 + m], a = x[q0 + m];
            p0 += (a + f * ((double)x[q0 + m + 1] - a)) * ik;
            ii += ik * ik;
        }
    } else if (inside) {
        const size_t q0 = (size_t)((long)b0 + v0->k0), q1 = (size_t)((long)b0 + v1->k0),
                     q2 = (size_t)((long)b0 + v2->k0);
        const double f0 = v0->f, f1 = v1->f, f2 = v2->f;
        for (size_t m = 0; m < b1 - b0; m++) {
            const double ik = j->i[b0 + m], a0 = x[q0 + m], a1 = x[q1 + m], a2 = x[q2 + m];
            p0 += (a0 + f0 * ((double)x[q0 + m + 1] - a0)) * ik;
            p1 += (a1 + f1 * ((double)x[q1 + m + 1] - a1)) * ik;
            p2 += (a2 + f2 * ((double)x[q2 + m + 1] - a2)) * ik;
            ii += ik * ik;
        }
    } else {
        for (size_t k = b0; k < b1; k++) {
            const double ik = j->i[k];
            p0 += shifted_at(v0, k) * ik;
            p1 += shifted_at(v1, k) * ik;
            p2 += shifted_at(v2, k) * ik;
            ii += ik * ik;
        }
    }
    double *o = j->sums + q * (j->nsk + 1);
    const double pp[3] = {p0, p1, p2};
    for (size_t s = 0; s < j->nsk; s++)
        o[s] = pp[s];
    o[j->nsk] = ii;
}

tf_status tf_power_resistance(const float *v, const float *i, size_t n, double dt_s,
                              const double *skew_s, size_t nsk, const size_t *bounds, size_t nb,
                              int threads, double *r_ohm, double *u_ohm, tf_error *err)
{
    if (nb < 2 || bounds[nb - 1] > n || bounds[0] >= bounds[nb - 1])
        return tf_error_set(err, TF_ERR_USAGE, "power method: expected whole periods");
    if (nsk < 1 || nsk > TF_POWER_MAX_SKEWS)
        return tf_error_set(err, TF_ERR_USAGE, "power method: expected 1 to %d skews",
                            TF_POWER_MAX_SKEWS);
    shifted vs[TF_POWER_MAX_SKEWS];
    for (size_t s = 0; s < nsk; s++)
        vs[s] = shifted_make(v, n, skew_s[s] / dt_s);
    double *sums = malloc((nb - 1) * (nsk + 1) * sizeof *sums);
    if (!sums)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    power_job j = {v, i, n, vs, nsk, bounds, sums};
    tf_fit_parallel_for(nb - 1, threads, power_one, &j);
    /* totals in period order: the same figures for every thread count */
    double i2 = 0;
    for (size_t q = 0; q + 1 < nb; q++)
        i2 += sums[q * (nsk + 1) + nsk];
    if (!(i2 > 0)) {
        free(sums);
        return tf_error_set(err, TF_ERR_DATA, "power method: no current");
    }
    for (size_t s = 0; s < nsk; s++) {
        double p = 0, sr = 0, sr2 = 0;
        size_t np = 0;
        for (size_t q = 0; q + 1 < nb; q++) {
            const double pp = sums[q * (nsk + 1) + s], ii = sums[q * (nsk + 1) + nsk];
            p += pp;
            if (ii > 0) {
                sr += pp / ii;
                sr2 += (pp / ii) * (pp / ii);
                np++;
            }
        }
        r_ohm[s] = p / i2;
        u_ohm[s] = NAN;
        if (np >= 2) {
            const double m = sr / (double)np, var = (sr2 - np * m * m) / (double)(np - 1);
            u_ohm[s] = sqrt(var > 0 ? var : 0) / sqrt((double)np);
        }
    }
    free(sums);
    return TF_OK;
}
