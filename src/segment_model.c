/* Segmenter models: damped-sine pieces for unbiased boundaries and overlapping splits. */
#include "segment_internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_linalg.h>
#include <gsl/gsl_multimin.h>

/* Solve the symmetric positive definite system A y = r (n <= 4) with GSL's Cholesky. */
/* One sample step of e^{-a t} (cos wt, sin wt) by the recurrence: e by de = e^{-a},
 * the angle turned by (dc, ds) = (cos w, sin w). Instead of exp/sin/cos per sample. */
static inline void turn(double *e, double *c, double *s, double de, double dc, double ds)
{
    double nc = *c * dc - *s * ds;
    *s = *s * dc + *c * ds;
    *c = nc;
    *e *= de;
}

static int spd_solve(double *a, double *r, double *y, size_t n)
{
    gsl_matrix_view A = gsl_matrix_view_array(a, n, n);
    gsl_vector_view R = gsl_vector_view_array(r, n), Y = gsl_vector_view_array(y, n);
    gsl_error_handler_t *old = gsl_set_error_handler_off();
    int st = gsl_linalg_cholesky_decomp1(&A.matrix);
    if (st == 0)
        st = gsl_linalg_cholesky_solve(&A.matrix, &R.vector, &Y.vector);
    gsl_set_error_handler(old);
    return st == 0 ? 0 : -1;
}

/* One linear least-squares fit of the four-term model, plus an offset c5 + c6 u when
 * nb = 6; c[0..nb-1] (c3, c4, c6 per unit of u = tau / scale). Returns 0 on success. */
static int fit4(const float *x, size_t k0, size_t k1, const seg_clip *clips, size_t nclips,
                double t_b, double w, double a, double scale, int nb, double c[6])
{
    double ata[36] = {0}, atb[6] = {0};
    double tau = (double)k0 - t_b;
    double e = exp(-a * tau), co = cos(w * tau), si = sin(w * tau);
    const double de = exp(-a), dc = cos(w), ds = sin(w);
    size_t ci = 0, used = 0;
    for (size_t k = k0; k <= k1; k++) {
        while (ci < nclips && clips[ci].i1 < k)
            ci++;
        if (!(ci < nclips && clips[ci].i0 <= k)) {
            double u = tau / scale, v = x[k];
            double b[6] = {e * si, e * co, u * e * si, u * e * co, 1.0, u};
            for (int i = 0; i < nb; i++) {
                atb[i] += b[i] * v;
                for (int j = i; j < nb; j++)
                    ata[i * nb + j] += b[i] * b[j];
            }
            used++;
        }
        /* recurrences instead of exp/sin/cos per sample; drift is far below 1e-12 here */
        turn(&e, &co, &si, de, dc, ds);
        tau += 1.0;
    }
    if (used < 8 + (size_t)nb)
        return -1;
    for (int i = 0; i < nb; i++)
        for (int j = 0; j < i; j++)
            ata[i * nb + j] = ata[j * nb + i];
    return spd_solve(ata, atb, c, (size_t)nb);
}

int seg_model_zero(const float *x, size_t k0, size_t k1, const seg_clip *clips, size_t nclips,
                   double t_b, double w, double a, int offset, double *zero)
{
    if (k1 <= k0 + 8 || !(w > 0) || !isfinite(t_b))
        return -1;
    double scale = (double)(k1 - k0), c[6] = {0};
    int nb = offset ? 5 : 4;
    for (int it = 0; it < 4; it++) {
        if (fit4(x, k0, k1, clips, nclips, t_b, w, a, scale, nb, c) != 0)
            return -1;
        /* c3, c4 are the first-order corrections of w and a: update the priors and refit
         * (Gauss-Newton on the damped sine, parameters linear in c1, c2) */
        double c3 = c[2] / scale, c4 = c[3] / scale, d = c[0] * c[0] + c[1] * c[1];
        if (!(d > 0))
            return -1;
        double dw = (-c[1] * c3 + c[0] * c4) / d, da = (-c[0] * c3 - c[1] * c4) / d;
        if (!isfinite(dw) || !isfinite(da) || fabs(dw) > 0.3 * w)
            return -1;
        if (it == 3 || (fabs(dw) < 1e-6 * w && fabs(da) * scale < 1e-5))
            break; /* keep c of the w, a just used */
        w += dw;
        a += da;
    }
    /* zero of (c1 + c3 u) sin(w tau) + (c2 + c4 u) cos(w tau) nearest tau = 0 */
    double tau = 0;
    for (int it = 0; it < 20; it++) {
        double u = tau / scale, s = sin(w * tau), co = cos(w * tau), e = exp(-a * tau);
        /* the full model, decay and offset included */
        double h = (c[0] + c[2] * u) * s + (c[1] + c[3] * u) * co;
        double hp = c[2] / scale * s + (c[0] + c[2] * u) * w * co + c[3] / scale * co -
                    (c[1] + c[3] * u) * w * s;
        double f = e * h + c[4] + c[5] * u, fp = e * (hp - a * h) + c[5] / scale;
        if (fp == 0)
            return -1;
        double step = f / fp, lim = 0.1 / w;
        if (step > lim)
            step = lim;
        if (step < -lim)
            step = -lim;
        tau -= step;
        if (fabs(step) < 1e-9)
            break;
    }
    if (!isfinite(tau) || fabs(tau) > 0.25 * M_PI / w)
        return -1;
    *zero = t_b + tau;
    return 0;
}

/* Best split of [k0, k1] into a piece through zero at z0 and one through zero at z1,
 * for fixed w, a: returns the residual; *s is the first sample of the second piece and
 * amp[0..1] the pieces' amplitudes. */
static double split_residual(const float *x, size_t k0, size_t k1, double z0, double z1,
                             double w, double a, size_t *s, double amp[2], double *nb)
{
    const double de = exp(-a), dc = cos(w), ds = sin(w);
    double e2 = exp(-a * ((double)k0 - z1)), c2 = cos(w * ((double)k0 - z1)),
           s2 = sin(w * ((double)k0 - z1));
    double txg = 0, tgg = 0, sxx = 0;
    for (size_t k = k0; k <= k1; k++) {
        double g = e2 * s2, v = x[k];
        txg += v * g;
        tgg += g * g;
        sxx += v * v;
        turn(&e2, &c2, &s2, de, dc, ds);
    }
    double e1 = exp(-a * ((double)k0 - z0)), c1 = cos(w * ((double)k0 - z0)),
           s1 = sin(w * ((double)k0 - z0));
    e2 = exp(-a * ((double)k0 - z1));
    c2 = cos(w * ((double)k0 - z1));
    s2 = sin(w * ((double)k0 - z1));
    double axg = 0, agg = 0, bxg = 0, bgg = 0, best = INFINITY, last = NAN;
    int after = 0;
    for (size_t k = k0; k <= k1; k++) {
        /* split before k: piece 1 holds [k0, k-1] */
        if (k >= k0 + 3 && k + 3 <= k1 && agg > 0 && tgg - bgg > 0) {
            double r2 = txg - bxg, q2 = tgg - bgg;
            double res = sxx - axg * axg / agg - r2 * r2 / q2;
            if (after && nb)
                nb[2] = res;
            after = 0;
            if (res < best) {
                best = res;
                *s = k;
                amp[0] = axg / agg;
                amp[1] = r2 / q2;
                if (nb) {
                    nb[0] = last;
                    nb[1] = res;
                    nb[2] = NAN;
                }
                after = 1;
            }
            last = res;
        }
        double v = x[k], g1 = e1 * s1, g2 = e2 * s2;
        axg += v * g1;
        agg += g1 * g1;
        bxg += v * g2;
        bgg += g2 * g2;
        turn(&e1, &c1, &s1, de, dc, ds);
        turn(&e2, &c2, &s2, de, dc, ds);
    }
    return best;
}

static double piece_diff(double t, double z0, double z1, double w, double a,
                         const double amp[2])
{
    return amp[0] * exp(-a * (t - z0)) * sin(w * (t - z0)) -
           amp[1] * exp(-a * (t - z1)) * sin(w * (t - z1));
}

typedef struct split_ctx {
    const float *x;
    size_t k0, k1;
    double z0, z1, scale_a;
} split_ctx;

/* Nelder-Mead objective: v = (w, a / scale_a); the best split for each trial by the sweep. */
static double split_objective(const gsl_vector *v, void *p)
{
    const split_ctx *c = p;
    double w = gsl_vector_get(v, 0), a = gsl_vector_get(v, 1) * c->scale_a, amp[2];
    size_t s;
    if (!(w > 0) || a < -0.5 * w || a > 0.5 * w)
        return INFINITY;
    return split_residual(c->x, c->k0, c->k1, c->z0, c->z1, w, a, &s, amp, NULL);
}

static int split_at(const float *x, size_t k0, size_t k1, size_t s, double z0, double z1,
                    double wf, double a, double amp[2], const double nb[3], double *split);

int seg_split_pieces(const float *x, size_t k0, size_t k1, double z0, double z1, double *w,
                     double *ap, int fixed, double *split)
{
    if (k1 < k0 + 12 || !(z1 > z0))
        return -1;
    double len = z1 - z0, amp[2], nb[3], a = *ap;
    size_t s = 0;
    double w0 = *w;
    if (fixed && w0 > 0) {
        if (!isfinite(split_residual(x, k0, k1, z0, z1, w0, a, &s, amp, nb)))
            return -1;
        return split_at(x, k0, k1, s, z0, z1, w0, a, amp, nb, split);
    }
    if (!(w0 > 0)) {
        /* each piece lasts less than half a damped period: w < 2 pi / len */
        double best = INFINITY, g0 = 0.4 * M_PI / len, g1 = 2.0 * M_PI / len;
        const int ng = 32;
        for (int i = 0; i <= ng; i++) {
            double wi = g0 + (g1 - g0) * i / ng;
            double res = split_residual(x, k0, k1, z0, z1, wi, a, &s, amp, NULL);
            if (res < best) {
                best = res;
                w0 = wi;
            }
        }
        if (!(w0 > 0))
            return -1;
    }
    /* w and the decay together (GSL's Nelder-Mead simplex): the pieces' residual is a
     * smooth function of both once the split is swept for each */
    split_ctx ctx = {x, k0, k1, z0, z1, w0};
    gsl_multimin_function f = {split_objective, 2, &ctx};
    gsl_vector *v = gsl_vector_alloc(2), *step = gsl_vector_alloc(2);
    gsl_multimin_fminimizer *m = gsl_multimin_fminimizer_alloc(gsl_multimin_fminimizer_nmsimplex2, 2);
    if (!v || !step || !m) {
        gsl_vector_free(v);
        gsl_vector_free(step);
        gsl_multimin_fminimizer_free(m);
        return -1;
    }
    gsl_vector_set(v, 0, w0);
    gsl_vector_set(v, 1, a / w0);
    gsl_vector_set(step, 0, 0.02 * w0);
    gsl_vector_set(step, 1, 0.02);
    gsl_multimin_fminimizer_set(m, &f, v, step);
    for (int it = 0; it < 200; it++) {
        if (gsl_multimin_fminimizer_iterate(m) != 0)
            break;
        if (gsl_multimin_test_size(gsl_multimin_fminimizer_size(m), 1e-9 * w0) == 0)
            break;
    }
    double wf = gsl_vector_get(m->x, 0), af = gsl_vector_get(m->x, 1) * w0;
    gsl_vector_free(v);
    gsl_vector_free(step);
    gsl_multimin_fminimizer_free(m);
    if (!isfinite(split_residual(x, k0, k1, z0, z1, wf, af, &s, amp, nb)))
        return -1;
    *w = wf;
    *ap = af;
    return split_at(x, k0, k1, s, z0, z1, wf, af, amp, nb, split);
}

/* seg_split_open: as seg_split_pieces with w and a fixed, for a stretch the record's
 * end cuts: the thyristor piece's zero z1 lies past k1, so it is searched (a grid over
 * half a period, then golden sections on the swept residual). */
int seg_split_open(const float *x, size_t k0, size_t k1, double z0, double w, double a,
                   double *split)
{
    if (k1 < k0 + 12 || !(w > 0))
        return -1;
    double half = M_PI / w, amp[2], nb[3], best = INFINITY, bz = NAN;
    size_t s = 0;
    const int ng = 48;
    for (int i = 1; i <= ng; i++) {
        double z1 = (double)k1 + half * i / ng;
        double res = split_residual(x, k0, k1, z0, z1, w, a, &s, amp, NULL);
        if (res < best) {
            best = res;
            bz = z1;
        }
    }
    if (!isfinite(bz))
        return -1;
    const double gr = 0.5 * (sqrt(5.0) - 1);
    double lo = bz - half / ng, hi = bz + half / ng;
    double c = hi - gr * (hi - lo), d = lo + gr * (hi - lo);
    double fc = split_residual(x, k0, k1, z0, c, w, a, &s, amp, NULL);
    double fd = split_residual(x, k0, k1, z0, d, w, a, &s, amp, NULL);
    for (int it = 0; it < 40; it++) {
        if (fc < fd) {
            hi = d;
            d = c;
            fd = fc;
            c = hi - gr * (hi - lo);
            fc = split_residual(x, k0, k1, z0, c, w, a, &s, amp, NULL);
        } else {
            lo = c;
            c = d;
            fc = fd;
            d = lo + gr * (hi - lo);
            fd = split_residual(x, k0, k1, z0, d, w, a, &s, amp, NULL);
        }
    }
    bz = 0.5 * (lo + hi);
    if (!isfinite(split_residual(x, k0, k1, z0, bz, w, a, &s, amp, nb)))
        return -1;
    return split_at(x, k0, k1, s, z0, bz, w, a, amp, nb, split);
}

/* Sub-sample split near the best sample split s of the fitted pieces. */
/* Amplitudes of the two pieces for the split before sample ks. */
static void split_amps(const float *x, size_t k0, size_t k1, size_t ks, double z0, double z1,
                       double w, double a, double amp[2])
{
    double n[2] = {0, 0}, d[2] = {0, 0};
    for (size_t k = k0; k <= k1; k++) {
        int p = k >= ks;
        double u = (double)k - (p ? z1 : z0), g = exp(-a * u) * sin(w * u);
        n[p] += x[k] * g;
        d[p] += g * g;
    }
    for (int p = 0; p < 2; p++)
        if (d[p] > 0)
            amp[p] = n[p] / d[p];
}

/* Sub-sample split: where the two fitted pieces meet (the current is continuous at a
 * firing). The pieces' amplitudes come from hundreds of samples each, so their meeting
 * point is far steadier than the best sample split; refitted twice around it. */
static int split_at(const float *x, size_t k0, size_t k1, size_t s, double z0, double z1,
                    double wf, double a, double amp[2], const double nb[3], double *split)
{
    double t = (double)s - 0.5;
    double den = nb[0] - 2 * nb[1] + nb[2];
    if (isfinite(den) && den > 0)
        t = (double)s - 0.5 + 0.5 * (nb[0] - nb[2]) / den; /* the residual's parabola */
    for (int pass = 0; pass < 3; pass++) {
        double root = NAN;
        for (double r = 0.5; r <= 12 && !isfinite(root); r += 0.5)
            for (int sgn = -1; sgn <= 1 && !isfinite(root); sgn += 2) {
                double ta = t + sgn * (r - 0.5), tb = t + sgn * r;
                double fa = piece_diff(ta, z0, z1, wf, a, amp), fb = piece_diff(tb, z0, z1, wf, a, amp);
                if (fa * fb > 0)
                    continue;
                for (int it = 0; it < 50; it++) {
                    double m = 0.5 * (ta + tb), fm = piece_diff(m, z0, z1, wf, a, amp);
                    if (fa * fm <= 0) {
                        tb = m;
                    } else {
                        ta = m;
                        fa = fm;
                    }
                }
                root = 0.5 * (ta + tb);
            }
        if (!isfinite(root) || root <= (double)k0 + 2 || root >= (double)k1 - 2)
            break;
        t = root;
        if (pass < 2)
            split_amps(x, k0, k1, (size_t)ceil(t), z0, z1, wf, a, amp);
    }
    *split = t;
    return 0;
}

#define CHAIN_MAX 64
/* samples per piece used by the chain fit (stride chosen to keep about this many) */
#define SEG_CHAIN_SAMPLES 1000000
/* a quick fit on a chain with clipped samples or a stride (chain_quick does the rest)
 * whose full-resolution step moved ts less than this (samples) is done: the next step
 * would be about its square times the curvature */
#define SEG_QUICK_ONE_STEP 0.1
/* the first step of a chain fit on every this many samples, for pieces of at least
 * SEG_CHAIN_COARSE_MIN samples */
#define SEG_CHAIN_COARSE 2
#define SEG_CHAIN_COARSE_MIN 128

/* One pass over the chain's samples: with linear_only the amplitudes alone (for fixed
 * ts, w, a), else the Gauss-Newton step delta = (amplitudes, w, a, ts). Each sample
 * touches one amplitude, so the normal matrix is accumulated per piece in locals. */
static int chain_step(const float *x, size_t k0, size_t k1, size_t stride,
                      const seg_clip *clips, size_t nclips, size_t np, double ts, double w,
                      double a, double *amp, int linear_only, int ts_only, double *delta)
{
    const size_t m = np + 3;
    double jtj[(CHAIN_MAX + 3) * (CHAIN_MAX + 3)], jtr[CHAIN_MAX + 3];
    memset(jtj, 0, m * m * sizeof *jtj);
    memset(jtr, 0, m * sizeof *jtr);
    const double st = (double)stride, half = M_PI / w;
    const double de = exp(-a * st), dc = cos(w * st), ds = sin(w * st);
    double n00 = 0, n01 = 0, n02 = 0, n11 = 0, n12 = 0, n22 = 0, r0 = 0, r1 = 0, r2 = 0;
    size_t ci = 0, used = 0;
    for (size_t p = 0; p < np; p++) {
        double lo = ts + (double)p * half, hi = p + 1 == np ? (double)k1 : lo + half;
        double first = fmax((double)k0, floor(lo) + 1);
        if (stride > 1)
            first = (double)k0 + ceil((first - (double)k0) / st) * st;
        if (first > hi || first > (double)k1)
            continue;
        const double A = amp[p], aw = a, ww = w;
        double gg = 0, gr = 0, g0 = 0, g1 = 0, g2 = 0;
        size_t kf = (size_t)first, kl = (size_t)fmin(floor(hi), (double)k1);
        while (ci < nclips && clips[ci].i1 < kf)
            ci++;
        int clean = !(ci < nclips && clips[ci].i0 <= kl) && !linear_only;
        if (clean) {
            /* four interleaved streams (rotation by 4w): the recurrences no longer wait on
             * each other, and the lane sums can go to vector registers. Every column of
             * the Jacobian is A or 1 times P = e sin, Q = e cos, tau P or tau Q (the ts
             * column is A (a P - w Q)), so the lanes sum products of those four and
             * the piece's entries are composed from the sums after the loop; P and Q
             * turn together, one damped rotation a step */
            enum { LN = 4 };
            double p4[LN], q4[LN], t4[LN];
            double spp[LN] = {0}, spq[LN] = {0}, sqq[LN] = {0}, svp[LN] = {0}, svq[LN] = {0};
            double stpp[LN] = {0}, stpq[LN] = {0}, stqq[LN] = {0}, sttpp[LN] = {0};
            double sttpq[LN] = {0}, sttqq[LN] = {0}, svtp[LN] = {0}, svtq[LN] = {0};
            for (int l = 0; l < LN; l++) {
                t4[l] = (double)(kf + (size_t)l * stride) - ts;
                double el = exp(-a * t4[l]);
                q4[l] = el * cos(w * t4[l]);
                p4[l] = el * sin(w * t4[l]);
            }
            const size_t sl = LN * stride;
            const double de4 = exp(-a * (double)sl), mc = de4 * cos(w * (double)sl),
                         ms = de4 * sin(w * (double)sl), tl4 = (double)sl;
            size_t k = kf;
            /* w and a held: only the amplitude and ts columns are needed */
            for (; ts_only && k + (LN - 1) * stride <= kl; k += sl) {
                for (int l = 0; l < LN; l++) {
                    double pv = p4[l], qv = q4[l], v = x[k + (size_t)l * stride];
                    spp[l] += pv * pv;
                    spq[l] += pv * qv;
                    sqq[l] += qv * qv;
                    svp[l] += v * pv;
                    svq[l] += v * qv;
                    p4[l] = pv * mc + qv * ms;
                    q4[l] = qv * mc - pv * ms;
                }
            }
            for (; !ts_only && k + (LN - 1) * stride <= kl; k += sl) {
                for (int l = 0; l < LN; l++) {
                    double pv = p4[l], qv = q4[l], v = x[k + (size_t)l * stride], tl = t4[l];
                    double tp = tl * pv, tq = tl * qv;
                    spp[l] += pv * pv;
                    spq[l] += pv * qv;
                    sqq[l] += qv * qv;
                    svp[l] += v * pv;
                    svq[l] += v * qv;
                    stpp[l] += tp * pv;
                    stpq[l] += tp * qv;
                    stqq[l] += tq * qv;
                    sttpp[l] += tp * tp;
                    sttpq[l] += tp * tq;
                    sttqq[l] += tq * tq;
                    svtp[l] += v * tp;
                    svtq[l] += v * tq;
                    p4[l] = pv * mc + qv * ms;
                    q4[l] = qv * mc - pv * ms;
                    t4[l] = tl + tl4;
                }
            }
            double pp = 0, pq = 0, qq = 0, vp = 0, vq = 0, tpp = 0, tpq = 0, tqq = 0;
            double ttpp = 0, ttpq = 0, ttqq = 0, vtp = 0, vtq = 0;
            for (int l = 0; l < LN; l++) {
                pp += spp[l]; pq += spq[l]; qq += sqq[l]; vp += svp[l]; vq += svq[l];
                tpp += stpp[l]; tpq += stpq[l]; tqq += stqq[l]; ttpp += sttpp[l];
                ttpq += sttpq[l]; ttqq += sttqq[l]; vtp += svtp[l]; vtq += svtq[l];
            }
            /* g = P, r = v - A P, jw = A tau Q, ja = -A tau P, jt = A (a P - w Q) */
            const double A2 = A * A, rp = vp - A * pp, rq = vq - A * pq;
            gg += pp;
            gr += rp;
            g2 += A * (aw * pp - ww * pq);
            n22 += A2 * (aw * aw * pp - 2 * aw * ww * pq + ww * ww * qq);
            r2 += A * (aw * rp - ww * rq);
            if (!ts_only) {
                g0 += A * tpq;
                g1 -= A * tpp;
                n00 += A2 * ttqq;
                n01 -= A2 * ttpq;
                n02 += A2 * (aw * tpq - ww * tqq);
                n11 += A2 * ttpp;
                n12 -= A2 * (aw * tpp - ww * tpq);
                r0 += A * (vtq - A * tpq);
                r1 -= A * (vtp - A * tpp);
            }
            used += (k - kf) / stride;
            first = (double)k; /* the tail, below, one sample at a time */
        }
        double tau = first - ts, e = exp(-a * tau), co = cos(w * tau), si = sin(w * tau);
        for (double kd = first; kd <= hi && kd <= (double)k1; kd += st) {
            size_t k = (size_t)kd;
            while (ci < nclips && clips[ci].i1 < k)
                ci++;
            if (!(ci < nclips && clips[ci].i0 <= k)) {
                double g = e * si, v = x[k];
                if (linear_only) {
                    gg += g * g;
                    gr += v * g;
                } else {
                    double r = v - A * g;
                    double jw = A * e * tau * co, ja = -A * tau * g,
                           jt = A * e * (aw * si - ww * co);
                    gg += g * g;
                    gr += r * g;
                    g0 += g * jw;
                    g1 += g * ja;
                    g2 += g * jt;
                    n00 += jw * jw;
                    n01 += jw * ja;
                    n02 += jw * jt;
                    n11 += ja * ja;
                    n12 += ja * jt;
                    n22 += jt * jt;
                    r0 += r * jw;
                    r1 += r * ja;
                    r2 += r * jt;
                }
                used++;
            }
            turn(&e, &co, &si, de, dc, ds);
            tau += st;
        }
        jtj[p * m + p] = gg;
        jtr[p] = gr;
        jtj[p * m + np] = jtj[np * m + p] = g0;
        jtj[p * m + np + 1] = jtj[(np + 1) * m + p] = g1;
        jtj[p * m + np + 2] = jtj[(np + 2) * m + p] = g2;
    }
    /* three samples a parameter: a two-lobe chain at 20 samples per period (18 samples
     * for 5 parameters) still fits, and the boundary checks of refine_chain guard it */
    if (used < 3 * m)
        return -1;
    if (linear_only) {
        for (size_t p = 0; p < np; p++) {
            if (!(jtj[p * m + p] > 0))
                return -1;
            amp[p] = jtr[p] / jtj[p * m + p];
        }
        return 0;
    }
    if (ts_only) {
        /* w and a held: the amplitudes and ts alone (column np + 2 of the full system) */
        const size_t mr = np + 1;
        double jr[(CHAIN_MAX + 1) * (CHAIN_MAX + 1)], rr1[CHAIN_MAX + 1];
        memset(jr, 0, mr * mr * sizeof *jr);
        for (size_t p = 0; p < np; p++) {
            jr[p * mr + p] = jtj[p * m + p];
            jr[p * mr + np] = jr[np * mr + p] = jtj[p * m + np + 2];
            rr1[p] = jtr[p];
        }
        jr[np * mr + np] = n22;
        rr1[np] = r2;
        if (spd_solve(jr, rr1, delta, mr) != 0)
            return -1;
        delta[np + 2] = delta[np];
        delta[np] = delta[np + 1] = 0;
        return 0;
    }
    double nn[6] = {n00, n01, n02, n11, n12, n22}, rr[3] = {r0, r1, r2};
    const int idx[3][3] = {{0, 1, 2}, {1, 3, 4}, {2, 4, 5}};
    for (int q = 0; q < 3; q++) {
        jtr[np + q] = rr[q];
        for (int t = 0; t < 3; t++)
            jtj[(np + q) * m + np + t] = nn[idx[q][t]];
    }
    return spd_solve(jtj, jtr, delta, m);
}

/* Sums over samples f..l (clean, stride 1) of P P, P Q, Q Q, v P, v Q with P = e^{-a tau}
 * sin(w tau), Q = e^{-a tau} cos(w tau), tau = k - ts: added to s[0..4]. */
static void pq_sums(const float *x, size_t f, size_t l, double ts, double w, double a,
                    double s[5])
{
    if (l < f)
        return;
    enum { LN = 4 };
    double p4[LN], q4[LN];
    double spp[LN] = {0}, spq[LN] = {0}, sqq[LN] = {0}, svp[LN] = {0}, svq[LN] = {0};
    for (int i = 0; i < LN; i++) {
        double t = (double)(f + (size_t)i) - ts, el = exp(-a * t);
        q4[i] = el * cos(w * t);
        p4[i] = el * sin(w * t);
    }
    const double de4 = exp(-a * LN), mc = de4 * cos(w * LN), ms = de4 * sin(w * LN);
    size_t k = f;
    for (; k + LN - 1 <= l; k += LN) {
        for (int i = 0; i < LN; i++) {
            double pv = p4[i], qv = q4[i], v = x[k + (size_t)i];
            spp[i] += pv * pv;
            spq[i] += pv * qv;
            sqq[i] += qv * qv;
            svp[i] += v * pv;
            svq[i] += v * qv;
            p4[i] = pv * mc + qv * ms;
            q4[i] = qv * mc - pv * ms;
        }
    }
    /* the tail: lane i holds sample k + i */
    for (int i = 0; k + (size_t)i <= l; i++) {
        double pv = p4[i], qv = q4[i], v = x[k + (size_t)i];
        spp[i] += pv * pv;
        spq[i] += pv * qv;
        sqq[i] += qv * qv;
        svp[i] += v * pv;
        svq[i] += v * qv;
    }
    for (int i = 0; i < LN; i++) {
        s[0] += spp[i];
        s[1] += spq[i];
        s[2] += sqq[i];
        s[3] += svp[i];
        s[4] += svq[i];
    }
}

/* Sample range [*f, *l] of piece p (empty when *l < *f), as chain_step takes it. */
static void piece_range(size_t k0, size_t k1, size_t np, size_t p, double ts, double half,
                        size_t *f, size_t *l)
{
    double lo = ts + (double)p * half, hi = p + 1 == np ? (double)k1 : lo + half;
    double first = fmax((double)k0, floor(lo) + 1);
    if (first > hi || first > (double)k1 || !(first >= 0)) {
        *f = 1;
        *l = 0;
        return;
    }
    *f = (size_t)first;
    *l = (size_t)fmin(floor(hi), (double)k1);
    if (*l < *f) {
        *f = 1;
        *l = 0;
    }
}

/* The quick fit (w and a held) of a clean chain at full resolution: one pass over the
 * samples gives each piece's sums of P, Q products at the start ts; a shift of ts by d
 * turns P and Q into e^{a d} (P cos wd - Q sin wd) and e^{a d} (Q cos wd + P sin wd),
 * so the sums follow it exactly, and only the few samples that change piece are
 * visited again. Gauss-Newton then runs to convergence at the cost of one pass. */
static int chain_quick(const float *x, size_t k0, size_t k1, size_t np, double *amp,
                       double w, double a, double *ts)
{
    double sums[CHAIN_MAX][5], t = *ts;
    size_t rf[CHAIN_MAX], rl[CHAIN_MAX];
    const double half = M_PI / w;
    for (size_t p = 0; p < np; p++) {
        memset(sums[p], 0, sizeof sums[p]);
        piece_range(k0, k1, np, p, t, half, &rf[p], &rl[p]);
        pq_sums(x, rf[p], rl[p], t, w, a, sums[p]);
    }
    const size_t mr = np + 1;
    for (int it = 0; it < 20; it++) {
        double jr[(CHAIN_MAX + 1) * (CHAIN_MAX + 1)], rr[CHAIN_MAX + 1], d[CHAIN_MAX + 1];
        memset(jr, 0, mr * mr * sizeof *jr);
        double n22 = 0, r2 = 0;
        size_t used = 0;
        for (size_t p = 0; p < np; p++) {
            const double *s = sums[p], A = amp[p];
            double rp = s[3] - A * s[0], rq = s[4] - A * s[1];
            jr[p * mr + p] = s[0];
            jr[p * mr + np] = jr[np * mr + p] = A * (a * s[0] - w * s[1]);
            rr[p] = rp;
            n22 += A * A * (a * a * s[0] - 2 * a * w * s[1] + w * w * s[2]);
            r2 += A * (a * rp - w * rq);
            used += rl[p] >= rf[p] ? rl[p] - rf[p] + 1 : 0;
        }
        if (used < 3 * (np + 3))
            return -1;
        jr[np * mr + np] = n22;
        rr[np] = r2;
        if (spd_solve(jr, rr, d, mr) != 0)
            return -1;
        double dts = d[np];
        if (!isfinite(dts) || fabs(dts) > 0.1 * half)
            return -1;
        for (size_t p = 0; p < np; p++)
            amp[p] += d[p];
        t += dts;
        if (fabs(dts) < 1e-6)
            break;
        /* the sums at the new ts: the old ones turned, then the samples that left or
         * joined each piece */
        const double g = exp(a * dts), c = cos(w * dts), sn = sin(w * dts), g2 = g * g;
        for (size_t p = 0; p < np; p++) {
            double *s = sums[p], pp = s[0], pq = s[1], qq = s[2], vp = s[3], vq = s[4];
            s[0] = g2 * (c * c * pp - 2 * c * sn * pq + sn * sn * qq);
            s[1] = g2 * ((c * c - sn * sn) * pq + c * sn * (pp - qq));
            s[2] = g2 * (c * c * qq + 2 * c * sn * pq + sn * sn * pp);
            s[3] = g * (c * vp - sn * vq);
            s[4] = g * (c * vq + sn * vp);
            size_t f, l, of = rf[p], ol = rl[p];
            piece_range(k0, k1, np, p, t, half, &f, &l);
            if (ol < of || l < f || l < of || ol < f) {
                /* empty before or after, or no overlap: the piece afresh */
                memset(s, 0, 5 * sizeof *s);
                pq_sums(x, f, l, t, w, a, s);
            } else {
                double sub[5] = {0, 0, 0, 0, 0};
                if (f > of)
                    pq_sums(x, of, f - 1, t, w, a, sub);
                if (ol > l)
                    pq_sums(x, l + 1, ol, t, w, a, sub);
                if (f < of)
                    pq_sums(x, f, of - 1, t, w, a, s);
                if (l > ol)
                    pq_sums(x, ol + 1, l, t, w, a, s);
                for (int i = 0; i < 5; i++)
                    s[i] -= sub[i];
            }
            rf[p] = f;
            rl[p] = l;
        }
    }
    *ts = t;
    return 0;
}

int seg_chain_fit(const float *x, size_t k0, size_t k1, const seg_clip *clips, size_t nclips,
                  size_t np, const double *amp0, int ts_only, double *ts, double *w, double *a)
{
    if (np < 1 || np > CHAIN_MAX || k1 <= k0 + 12 || !(*w > 0))
        return -1;
    double amp[CHAIN_MAX], d[CHAIN_MAX + 3];
    double t = *ts, ww = *w, aa = *a;
    /* a few hundred samples per piece hold nearly all the timing information: keep the
     * cost per burst bounded on heavily oversampled records (docs/segmenter.md) */
    size_t per = (size_t)(M_PI / ww), stride = per / SEG_CHAIN_SAMPLES + 1;
    if (amp0)
        memcpy(amp, amp0, np * sizeof *amp);
    int clipped = 0;
    for (size_t c = 0; c < nclips; c++)
        clipped |= clips[c].i0 <= k1 && clips[c].i1 >= k0;
    if (ts_only && amp0 && stride == 1 && !clipped) {
        if (chain_quick(x, k0, k1, np, amp, ww, aa, &t) != 0 || !isfinite(t))
            return -1;
        *ts = t;
        return 0;
    }
    else if (chain_step(x, k0, k1, stride, clips, nclips, np, t, ww, aa, amp, 1, 0, d) != 0)
        return -1;
    /* the rough start is often a sample or more off (a dead zone's crossing): a first
     * step on every SEG_CHAIN_COARSE-th sample brings it to within a few hundredths of a
     * sample, so that one full-resolution step nearly always suffices (a rejected
     * coarse step is dropped: the full steps start from the rough values) */
    if (per >= SEG_CHAIN_COARSE_MIN) {
        size_t sc = stride * SEG_CHAIN_COARSE;
        if (chain_step(x, k0, k1, sc, clips, nclips, np, t, ww, aa, amp, 0, ts_only, d) == 0 &&
            isfinite(d[np]) && isfinite(d[np + 1]) && isfinite(d[np + 2]) &&
            fabs(d[np]) <= 0.2 * ww && fabs(d[np + 2]) <= 0.1 * M_PI / ww) {
            for (size_t p = 0; p < np; p++)
                amp[p] += d[p];
            ww += d[np];
            aa += d[np + 1];
            t += d[np + 2];
        }
    }
    for (int it = 0; it < 8; it++) {
        if (chain_step(x, k0, k1, stride, clips, nclips, np, t, ww, aa, amp, 0, ts_only, d) != 0)
            return -1;
        double dw = d[np], da = d[np + 1], dts = d[np + 2];
        if (!isfinite(dw) || !isfinite(da) || !isfinite(dts) || fabs(dw) > 0.2 * ww ||
            fabs(dts) > 0.1 * M_PI / ww)
            return -1;
        for (size_t p = 0; p < np; p++)
            amp[p] += d[p];
        ww += dw;
        aa += da;
        t += dts;
        /* quadratic convergence: with w and a held, a step under SEG_QUICK_ONE_STEP
         * leaves ts within about 1e-4 sample of the optimum */
        if ((ts_only && fabs(dts) < SEG_QUICK_ONE_STEP) || (fabs(dts) < 2e-2 && fabs(dw) < 1e-6 * ww))
            break;
    }
    if (!(ww > 0) || !isfinite(t))
        return -1;
    *ts = t;
    *w = ww;
    *a = aa;
    return 0;
}
