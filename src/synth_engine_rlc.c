/* Closed-form responses of the simulator's interval models and the root finder for events. */
#include "synth_engine.h"

#include <gsl/gsl_eigen.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_roots.h>
#include <math.h>
#include <string.h>

void tf__rlc2_init(tf_rlc2 *m, double L, double R, double C, double E)
{
    m->L = L;
    m->R = R;
    m->C = C;
    m->E = E;
    m->alpha = R / (2.0 * L);
    m->w0 = 1.0 / sqrt(L * C);
    /* w0^2 - alpha^2 as a product so the sign and size stay exact near critical damping */
    double disc = (m->w0 - m->alpha) * (m->w0 + m->alpha);
    if (disc > 0) {
        m->regime = TF_RLC_UNDER;
        m->w = sqrt(disc);
    } else if (disc < 0) {
        m->regime = TF_RLC_OVER;
        m->w = sqrt(-disc);
    } else {
        m->regime = TF_RLC_CRITICAL;
        m->w = 0;
    }
}

void tf__rlc2_basis(const tf_rlc2 *m, double tau, double *ec, double *es)
{
    double a = m->alpha, w = m->w;
    switch (m->regime) {
    case TF_RLC_UNDER: {
        double e = exp(-a * tau), x = w * tau;
        *ec = e * cos(x);
        /* sin(x) / w stays accurate for small w: no cancellation */
        *es = (x == 0) ? 0 : e * tau * (sin(x) / x);
        return;
    }
    case TF_RLC_OVER: {
        double x = w * tau;
        if (x < 20) {
            double e = exp(-a * tau);
            *ec = e * cosh(x);
            *es = (x == 0) ? 0 : e * tau * (sinh(x) / x);
        } else {
            /* cosh/sinh would overflow while exp(-a tau) underflows: combine first */
            double ep = exp((w - a) * tau), em = exp(-(a + w) * tau);
            *ec = 0.5 * (ep + em);
            *es = 0.5 * (ep - em) / w;
        }
        return;
    }
    default: {
        double e = exp(-a * tau);
        *ec = e;
        *es = e * tau;
        return;
    }
    }
}

void tf__rlc2_eval(const tf_rlc2 *m, double i0, double vc0, double tau, double *i, double *vc)
{
    double ec, es;
    tf__rlc2_basis(m, tau, &ec, &es);
    double x0 = vc0 - m->E;
    double ki = -x0 / m->L - m->alpha * i0;
    double kx = i0 / m->C + m->alpha * x0;
    *i = ec * i0 + es * ki;
    *vc = m->E + (ec * x0 + es * kx);
}

double tf__rlc2_first_zero(const tf_rlc2 *m, double u0, double k)
{
    switch (m->regime) {
    case TF_RLC_UNDER: {
        if (u0 == 0)
            return k == 0 ? INFINITY : M_PI / m->w;
        /* u0 cos x + (k / w) sin x = M sin(x + phi), phi = atan2(u0, k / w) */
        double phi = atan2(u0, k / m->w);
        double r = -phi - M_PI * floor(-phi / M_PI);
        if (r <= 0)
            r += M_PI;
        return r / m->w;
    }
    case TF_RLC_OVER: {
        if (u0 == 0 || k == 0)
            return INFINITY;
        double r = -u0 * m->w / k; /* tanh(w tau) = r */
        if (!(r > 0 && r < 1))
            return INFINITY;
        return atanh(r) / m->w;
    }
    default:
        if (u0 == 0 || k == 0)
            return INFINITY;
        return (-u0 / k > 0) ? -u0 / k : INFINITY;
    }
}

/* ---- segments ------------------------------------------------------------------------- */

void tf__seg_prop3(const tf_seg *g, double tau, double P[9])
{
    double a[9], e[9];
    for (int k = 0; k < 9; k++)
        a[k] = g->A[k] * tau;
    gsl_matrix_view av = gsl_matrix_view_array(a, 3, 3);
    gsl_matrix_view ev = gsl_matrix_view_array(e, 3, 3);
    gsl_linalg_exponential_ss(&av.matrix, &ev.matrix, GSL_PREC_DOUBLE);
    memcpy(P, e, sizeof e);
}

static void modal_eval(const tf_seg *g, double tau, double x[3])
{
    double complex e[3];
    for (int m = 0; m < g->nmodes; m++)
        e[m] = cexp(g->lam[m] * tau);
    for (int r = 0; r < 3; r++) {
        double complex v = 0;
        for (int m = 0; m < g->nmodes; m++)
            v += g->coef[r][m] * e[m];
        x[r] = g->xp[r] + creal(v);
    }
}

static void prop_eval(const tf_seg *g, double tau, double x[3])
{
    double P[9], y[3];
    tf__seg_prop3(g, tau, P);
    for (int r = 0; r < 3; r++)
        y[r] = g->x0[r] - g->xp[r];
    for (int r = 0; r < 3; r++)
        x[r] = g->xp[r] + P[3 * r] * y[0] + P[3 * r + 1] * y[1] + P[3 * r + 2] * y[2];
}

void tf__seg_modal3(tf_seg *g, void *ws, double check_tau)
{
    g->nmodes = 0;
    if (!ws)
        return;
    double a[9];
    memcpy(a, g->A, sizeof a);
    double complex ev[3], V[9], LU[9], y[3], c[3];
    gsl_matrix_view av = gsl_matrix_view_array(a, 3, 3);
    gsl_vector_complex_view evv = gsl_vector_complex_view_array((double *)ev, 3);
    gsl_matrix_complex_view Vv = gsl_matrix_complex_view_array((double *)V, 3, 3);
    gsl_error_handler_t *old = gsl_set_error_handler_off();
    int st = gsl_eigen_nonsymmv(&av.matrix, &evv.vector, &Vv.matrix, ws);
    if (st == GSL_SUCCESS) {
        memcpy(LU, V, sizeof V);
        size_t pd[3];
        gsl_permutation perm = {3, pd};
        int sig;
        gsl_matrix_complex_view LUv = gsl_matrix_complex_view_array((double *)LU, 3, 3);
        for (int r = 0; r < 3; r++)
            y[r] = g->x0[r] - g->xp[r];
        gsl_vector_complex_view yv = gsl_vector_complex_view_array((double *)y, 3);
        gsl_vector_complex_view cv = gsl_vector_complex_view_array((double *)c, 3);
        st = gsl_linalg_complex_LU_decomp(&LUv.matrix, &perm, &sig);
        if (st == GSL_SUCCESS)
            st = gsl_linalg_complex_LU_solve(&LUv.matrix, &perm, &yv.vector, &cv.vector);
    }
    gsl_set_error_handler(old);
    if (st != GSL_SUCCESS)
        return;
    for (int m = 0; m < 3; m++) {
        if (!isfinite(creal(c[m])) || !isfinite(cimag(c[m])))
            return;
        g->lam[m] = ev[m];
        for (int r = 0; r < 3; r++)
            g->coef[r][m] = V[3 * r + m] * c[m];
    }
    g->nmodes = 3;
    /* keep the modal form only where it agrees with the matrix exponential */
    double scale = 0;
    for (int r = 0; r < 3; r++)
        scale = fmax(scale, fabs(g->x0[r] - g->xp[r]));
    double taus[2] = {check_tau / 7.0, check_tau};
    for (int k = 0; k < 2; k++) {
        double xm[3], xe[3];
        modal_eval(g, taus[k], xm);
        prop_eval(g, taus[k], xe);
        for (int r = 0; r < 3; r++)
            if (!(fabs(xm[r] - xe[r]) <= 1e-12 * scale + 1e-300)) {
                g->nmodes = 0;
                return;
            }
    }
}

void tf__seg_state(const tf_seg *g, double t, double x[3], double *didt)
{
    double tau = t - g->t0;
    if (tau < 0)
        tau = 0;
    switch (g->model) {
    case TF_MODEL_TANK:
        tf__rlc2_eval(&g->m, g->x0[0], g->x0[1], tau, &x[0], &x[1]);
        x[2] = 0;
        *didt = (g->E - g->R * x[0] - x[1]) / g->L;
        return;
    case TF_MODEL_CHOKE: {
        double j, vc;
        tf__rlc2_eval(&g->m, -g->x0[2], g->x0[1], tau, &j, &vc);
        x[0] = 0;
        x[1] = vc;
        x[2] = -j;
        *didt = 0;
        return;
    }
    case TF_MODEL_TANK3:
        if (g->nmodes)
            modal_eval(g, tau, x);
        else
            prop_eval(g, tau, x);
        *didt = (g->E - g->R * x[0] - x[1]) / g->L;
        return;
    default:
        x[0] = 0;
        x[1] = g->x0[1];
        x[2] = 0;
        *didt = 0;
        return;
    }
}

int tf__seg_step_matrix(const tf_seg *g, double h, double P[9])
{
    double ec, es;
    switch (g->model) {
    case TF_MODEL_TANK:
    case TF_MODEL_CHOKE: {
        const tf_rlc2 *m = &g->m;
        tf__rlc2_basis(m, h, &ec, &es);
        /* (current, capacitor deviation) -> same after h: from tf__rlc2_eval */
        P[0] = ec - m->alpha * es;
        P[1] = -es / m->L;
        P[2] = es / m->C;
        P[3] = ec + m->alpha * es;
        return 2;
    }
    case TF_MODEL_TANK3:
        tf__seg_prop3(g, h, P);
        return 3;
    default:
        return 0;
    }
}

/* ---- root finding --------------------------------------------------------------------- */

typedef struct {
    tf__scalar_fn f;
    void *ctx;
} fn_wrap;

static double wrap_eval(double x, void *p)
{
    fn_wrap *w = p;
    return w->f(x, w->ctx);
}

static double brent(tf__scalar_fn f, void *ctx, double lo, double hi)
{
    fn_wrap w = {f, ctx};
    gsl_function F = {wrap_eval, &w};
    gsl_root_fsolver *rs = gsl_root_fsolver_alloc(gsl_root_fsolver_brent);
    if (!rs)
        return 0.5 * (lo + hi);
    gsl_error_handler_t *old = gsl_set_error_handler_off();
    double r = 0.5 * (lo + hi);
    if (gsl_root_fsolver_set(rs, &F, lo, hi) == GSL_SUCCESS) {
        for (int it = 0; it < 200; it++) {
            if (gsl_root_fsolver_iterate(rs) != GSL_SUCCESS)
                break;
            r = gsl_root_fsolver_root(rs);
            double a = gsl_root_fsolver_x_lower(rs), b = gsl_root_fsolver_x_upper(rs);
            if (gsl_root_test_interval(a, b, 1e-13, 1e-15) == GSL_SUCCESS)
                break;
        }
    }
    gsl_set_error_handler(old);
    gsl_root_fsolver_free(rs);
    return r;
}

double tf__first_crossing(tf__scalar_fn f, void *ctx, double win, double h)
{
    if (!(win > 0) || !(h > 0))
        return INFINITY;
    /* the sign just after the start decides the direction of the crossing we look for */
    double t = fmin(h * 1e-6, win);
    double f0 = f(t, ctx);
    if (f0 == 0)
        f0 = f(fmin(h * 1e-3, win), ctx);
    if (f0 == 0)
        return INFINITY;
    double prev_t = t, prev_f = f0;
    long nstep = (long)ceil(win / h);
    if (nstep > 100000)
        nstep = 100000;
    for (long k = 1; k <= nstep; k++) {
        double tk = (k == nstep) ? win : k * h;
        if (tk <= prev_t)
            continue;
        double fk = f(tk, ctx);
        if (fk == 0)
            return tk;
        if ((fk > 0) != (prev_f > 0))
            return brent(f, ctx, prev_t, tk);
        prev_t = tk;
        prev_f = fk;
    }
    return INFINITY;
}
