/* Simulator truth: intervals, turn-off times, failures, and exact RMS, power and harmonics. */
#include "synth_engine.h"

#include <gsl/gsl_integration.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define NHARM 40
#define GL_ORDER 16

struct tf_synth_accum {
    double ws, we;             /* capture window */
    double ps, pe, period;     /* whole firing periods window */
    long nper;
    double w_rms, w_harm;      /* highest angular frequency in each integrand */
    double sq[4];              /* integral of each analogue channel squared */
    double vmax_c;             /* largest |v_c| at segment boundaries in the window */
    double pw;                 /* integral of v_out i over the periods */
    double complex hi[NHARM + 1], hv[NHARM + 1];
    gsl_integration_glfixed_table *gl;
    int force_quadrature;      /* tests: Gauss-Legendre everywhere */
};

/* Integrate over [a, b] inside segment g with 16-point Gauss-Legendre panels over which
 * the fastest component (w rad/s) turns by at most two cycles: the rule's error for
 * exp(j w t) over 4 pi is below 1e-20 relative (Gauss-Legendre remainder term,
 * (4 pi)^32 (16!)^4 / ((32!)^3 33)); the waveform is analytic within a segment. */
static void integrate(tf_synth *s, const tf_seg *g, double a, double b, double w, int harm)
{
    tf_synth_accum *A = s->acc;
    long npan = (long)ceil((b - a) * w / (4 * M_PI));
    if (npan < 1)
        npan = 1;
    double h = (b - a) / (double)npan;
    double wf = 2 * M_PI / A->period;
    for (long k = 0; k < npan; k++) {
        double pa = a + (double)k * h, pb = (k + 1 == npan) ? b : pa + h;
        for (size_t j = 0; j < GL_ORDER; j++) {
            double t, wt, x[3], didt, ch[4];
            gsl_integration_glfixed_point(pa, pb, j, &t, &wt, A->gl);
            tf__seg_state(g, t, x, &didt);
            tf__channels(s, g, x, didt, ch);
            if (!harm) {
                for (int c = 0; c < 4; c++)
                    A->sq[c] += wt * ch[c] * ch[c];
                continue;
            }
            double i = ch[TF_SYN_I_LOAD], v = ch[TF_SYN_V_OUT];
            A->pw += wt * v * i;
            double ph = wf * (t - A->ps);
            double complex e1 = cos(ph) - I * sin(ph), e = 1.0;
            for (int n = 0; n <= NHARM; n++) {
                A->hi[n] += wt * i * e;
                A->hv[n] += wt * v * e;
                e *= e1;
            }
        }
    }
}

/* ---- closed-form integrals ------------------------------------------------------------ */

/* exp(z) - 1 without cancellation for small |z|. */
static double complex cexpm1_(double complex z)
{
    double x = creal(z), y = cimag(z), sh = sin(0.5 * y);
    return (expm1(x) * cos(y) - 2 * sh * sh) + I * (exp(x) * sin(y));
}

/* Integral of exp(m tau) over [a, b]. */
static double complex cint(double complex m, double a, double b)
{
    double D = b - a;
    if (m == 0)
        return D;
    double complex ea = (a == 0) ? 1.0 : cexp(m * a);
    return ea * cexpm1_(m * D) / m;
}

#define NMODE 3

/* Integral of exp(m tau) over [a, a + D] given ema = exp(m a) and emd = exp(m D). */
static double complex int_exp(double complex m, double D, double complex ema, double complex emd)
{
    double complex z = m * D;
    if (cabs(z) < 0.5)
        return (z == 0) ? ema * D : ema * cexpm1_(z) / m;
    return ema * (emd - 1) / m;
}

/* Channel values of a segment as K + sum_m Re(C_m exp(lam_m tau)), tau = t - t0, when the
 * segment has that form: rest, an underdamped 2-state model away from critical damping,
 * or a 3-state interval with a verified modal form. Returns the number of modes, -1 when
 * there is no such form. The channels are affine in (i, vc): coefficients by probing. */
static int modal_form(const tf_synth *s, const tf_seg *g, double K[4],
                      double complex C[4][NMODE], double complex lam[NMODE])
{
    double x[3] = {0, 0, 0}, c0[4], ci[4], cv[4];
    if (g->model == TF_MODEL_REST) {
        x[1] = g->x0[1];
        tf__channels(s, g, x, 0, c0);
        for (int c = 0; c < 4; c++)
            K[c] = c0[c];
        return 0;
    }
    double complex cu[NMODE] = {0}, cx[NMODE] = {0};
    double ku0 = 0, kx0 = 0; /* constant parts of i and vc */
    int nm;
    if (g->model == TF_MODEL_TANK || g->model == TF_MODEL_CHOKE) {
        const tf_rlc2 *m = &g->m;
        if (m->regime != TF_RLC_UNDER || m->w < 1e-3 * m->alpha)
            return -1;
        int tank = g->model == TF_MODEL_TANK;
        /* the model's own current: the tank current, or minus the choke current */
        double u0 = tank ? g->x0[0] : -g->x0[2], xd = g->x0[1] - m->E;
        double ku = -xd / m->L - m->alpha * u0, kx = u0 / m->C + m->alpha * xd;
        cu[0] = tank ? u0 - I * ku / m->w : 0;
        cx[0] = xd - I * kx / m->w;
        kx0 = m->E;
        lam[0] = -m->alpha + I * m->w;
        nm = 1;
    } else if (g->model == TF_MODEL_TANK3 && g->nmodes == NMODE) {
        for (int k = 0; k < NMODE; k++) {
            cu[k] = g->coef[0][k];
            cx[k] = g->coef[1][k];
            lam[k] = g->lam[k];
        }
        ku0 = g->xp[0];
        kx0 = g->xp[1];
        nm = NMODE;
    } else {
        return -1;
    }
#define PROBE(out, ii, vv)                                                                  \
    do {                                                                                    \
        double xx[3] = {(ii), (vv), 0};                                                     \
        double dd = (g->cs == TF_CS_NONE) ? 0 : (g->E - g->R * (ii) - (vv)) / g->L;        \
        tf__channels(s, g, xx, dd, out);                                                    \
    } while (0)
    PROBE(c0, 0.0, 0.0);
    PROBE(ci, 1.0, 0.0);
    PROBE(cv, 0.0, 1.0);
#undef PROBE
    for (int c = 0; c < 4; c++) {
        double ai = ci[c] - c0[c], av = cv[c] - c0[c];
        K[c] = c0[c] + ai * ku0 + av * kx0;
        for (int k = 0; k < nm; k++)
            C[c][k] = ai * cu[k] + av * cx[k];
    }
    return nm;
}

/* Integral over [ta, tb] of (sum_m Re(A_m e^(l_m t))) (sum_n Re(B_n e^(l_n t))). */
static double cross(int nm, const double complex *A, const double complex *B,
                    const double complex *l, double ta, double tb)
{
    double v = 0;
    for (int m = 0; m < nm; m++)
        for (int n = 0; n < nm; n++)
            v += 0.5 * creal(A[m] * B[n] * cint(l[m] + l[n], ta, tb) +
                             A[m] * conj(B[n]) * cint(l[m] + conj(l[n]), ta, tb));
    return v;
}

/* Exact integrals of one segment over [a, b] (absolute times). */
static void accum_modal(tf_synth *s, const tf_seg *g, double a, double b, int harm, int nm,
                        const double K[4], double complex C[4][NMODE],
                        const double complex lam[NMODE])
{
    tf_synth_accum *A = s->acc;
    double ta = a - g->t0, tb = b - g->t0, D = b - a;
    double complex I1[NMODE];
    for (int m = 0; m < nm; m++)
        I1[m] = cint(lam[m], ta, tb);
    if (!harm) {
        for (int c = 0; c < 4; c++) {
            double lin = 0;
            for (int m = 0; m < nm; m++)
                lin += creal(C[c][m] * I1[m]);
            A->sq[c] += K[c] * K[c] * D + 2 * K[c] * lin + cross(nm, C[c], C[c], lam, ta, tb);
        }
        return;
    }
    const int iv = TF_SYN_V_OUT, ii = TF_SYN_I_LOAD;
    double li = 0, lv = 0;
    for (int m = 0; m < nm; m++) {
        li += creal(C[ii][m] * I1[m]);
        lv += creal(C[iv][m] * I1[m]);
    }
    A->pw += K[iv] * K[ii] * D + K[iv] * li + K[ii] * lv + cross(nm, C[iv], C[ii], lam, ta, tb);
    /* orders n = 0..NHARM: the exponentials of -j n w t by rotation, expm1 directly only
     * where its argument is small (short spans), so each order costs a few products */
    double wf = 2 * M_PI / A->period;
    double complex r_ph = cexp(-I * wf * (g->t0 - A->ps)), r_a = cexp(-I * wf * ta);
    double complex r_d = cexp(-I * wf * D), ph = 1, qa = 1, qd = 1;
    double complex la[NMODE], ld[NMODE];
    for (int m = 0; m < nm; m++) {
        la[m] = cexp(lam[m] * ta);
        ld[m] = cexp(lam[m] * D);
    }
    for (int n = 0; n <= NHARM; n++) {
        double complex jw = I * (n * wf);
        double complex Ik = int_exp(-jw, D, qa, qd);
        double complex si = K[ii] * Ik, sv = K[iv] * Ik;
        for (int m = 0; m < nm; m++) {
            double complex Ip = int_exp(lam[m] - jw, D, la[m] * qa, ld[m] * qd);
            double complex Im = int_exp(conj(lam[m]) - jw, D, conj(la[m]) * qa, conj(ld[m]) * qd);
            si += 0.5 * (C[ii][m] * Ip + conj(C[ii][m]) * Im);
            sv += 0.5 * (C[iv][m] * Ip + conj(C[iv][m]) * Im);
        }
        A->hi[n] += ph * si;
        A->hv[n] += ph * sv;
        ph *= r_ph;
        qa *= r_a;
        qd *= r_d;
    }
}

/* Integrals of segment g over [a, b]: closed form where the segment allows, else
 * Gauss-Legendre panels. */
static void accum_span(tf_synth *s, const tf_seg *g, double a, double b, int harm)
{
    tf_synth_accum *A = s->acc;
    double K[4];
    double complex C[4][NMODE], lam[NMODE];
    int nm = A->force_quadrature ? -1 : modal_form(s, g, K, C, lam);
    if (nm >= 0)
        accum_modal(s, g, a, b, harm, nm, K, C, lam);
    else
        integrate(s, g, a, b, harm ? A->w_harm : A->w_rms, harm);
}

void tf__accum_segment(tf_synth *s, const tf_seg *g)
{
    tf_synth_accum *A = s->acc;
    double a = fmax(g->t0, A->ws), b = fmin(g->t1, A->we);
    if (a < b)
        accum_span(s, g, a, b, 0);
    if (g->t1 >= A->ws && g->t1 <= A->we) {
        double x[3], didt;
        tf__seg_state(g, g->t1, x, &didt);
        A->vmax_c = fmax(A->vmax_c, fabs(x[1]));
    }
    if (A->nper > 0) {
        a = fmax(g->t0, A->ps);
        b = fmin(g->t1, A->pe);
        if (a < b)
            accum_span(s, g, a, b, 1);
    }
}

/* ---- JSON ----------------------------------------------------------------------------- */

static json_t *num(double v) { return isfinite(v) ? json_real(v) : json_null(); }

static const char *thy_name(const tf_synth *s, int pos)
{
    if (s->topo == TF_TOPO_FULL_BRIDGE)
        return pos ? "T3+T4" : "T1+T2";
    return pos ? "T2" : "T1";
}

static const char *fail_kind(int k)
{
    static const char *const n[] = {"re-conduction", "forward-voltage", "shoot-through",
                                    "fired-while-conducting"};
    return (k >= 0 && k < 4) ? n[k] : "?";
}

static json_t *tank_json(const tf_synth *s)
{
    tf_rlc2 m;
    tf__rlc2_init(&m, s->L, s->R, s->C, 0);
    json_t *t = json_object();
    json_object_set_new(t, "capacitance_f", json_real(s->C));
    json_object_set_new(t, "inductance_h", json_real(s->L));
    json_object_set_new(t, "resistance_ohm", json_real(s->R));
    json_object_set_new(t, "alpha_1_s", json_real(m.alpha));
    json_object_set_new(t, "w0_rad_s", json_real(m.w0));
    json_object_set_new(t, "f0_hz", json_real(m.w0 / (2 * M_PI)));
    json_object_set_new(t, "q", s->R > 0 ? json_real(m.w0 * s->L / s->R) : json_null());
    const char *reg = m.regime == TF_RLC_UNDER ? "underdamped"
                      : m.regime == TF_RLC_OVER ? "overdamped" : "critically damped";
    json_object_set_new(t, "damping", json_string(reg));
    int under = m.regime == TF_RLC_UNDER;
    json_object_set_new(t, "wd_rad_s", under ? json_real(m.w) : json_null());
    json_object_set_new(t, "fd_hz", under ? json_real(m.w / (2 * M_PI)) : json_null());
    json_object_set_new(t, "td_s", under ? json_real(2 * M_PI / m.w) : json_null());
    json_object_set_new(t, "diode_interval_s", under ? json_real(M_PI / m.w) : json_null());
    return t;
}

static json_t *harm_json(const tf_synth_accum *A, const double complex *X)
{
    json_t *o = json_object(), *amp = json_array(), *ph = json_array();
    double T = A->pe - A->ps, a1 = 0, sum = 0;
    for (int n = 1; n <= NHARM; n++) {
        double complex c = 2.0 * X[n] / T;
        double a = cabs(c);
        json_array_append_new(amp, json_real(a));
        json_array_append_new(ph, json_real(carg(c)));
        if (n == 1)
            a1 = a;
        else
            sum += a * a;
    }
    json_object_set_new(o, "dc", json_real(creal(X[0]) / T));
    json_object_set_new(o, "amplitude", amp);
    json_object_set_new(o, "phase_rad", ph);
    json_object_set_new(o, "thd", a1 > 0 ? json_real(sqrt(sum) / a1) : json_null());
    return o;
}

static double gate_on_time(const tf_synth *s, int pos, double a, double b)
{
    double on = 0, t;
    int p;
    for (size_t n = 0; tf__firing(s, n, &t, &p) && t < b; n++) {
        if (p != pos)
            continue;
        double e = (s->topo == TF_TOPO_RING_DOWN) ? INFINITY : t + s->gate_w;
        double lo = fmax(a, t), hi = fmin(b, e);
        if (hi > lo)
            on += hi - lo;
    }
    return on;
}

/* Peak current and shortest turn-off time of conductions starting in [a, b). */
static void period_figures(const tf_synth *r, double a, double b, double *ipk, double *toff)
{
    *ipk = 0;
    *toff = INFINITY;
    for (size_t k = 0; k < r->niv; k++)
        if (r->iv[k].start_s >= a && r->iv[k].start_s < b)
            *ipk = fmax(*ipk, fabs(r->iv[k].peak_a));
    for (size_t k = 0; k < r->nto; k++) {
        const tf_synth_turnoff *t = &r->to[k];
        if (t->start_s >= a && t->start_s < b && isfinite(t->forward_s - t->zero_s))
            *toff = fmin(*toff, t->forward_s - t->zero_s);
    }
}

/* The last whole firing period of the window, and whether it repeats the one before
 * (peak current and turn-off time within 0.1 %): the design-expected steady values. */
static json_t *last_period_json(const tf_synth *r, const tf_synth_accum *A)
{
    double b = A->pe, a = b - A->period, ipk, toff, ipk0, toff0;
    period_figures(r, a, b, &ipk, &toff);
    json_t *o = json_object();
    json_object_set_new(o, "start_s", json_real(a));
    json_object_set_new(o, "end_s", json_real(b));
    json_object_set_new(o, "peak_current_a", json_real(ipk));
    json_object_set_new(o, "t_off_min_s", num(toff));
    int steady = 0;
    if (A->nper >= 2) {
        period_figures(r, a - A->period, a, &ipk0, &toff0);
        steady = fabs(ipk - ipk0) <= 1e-3 * ipk &&
                 (!isfinite(toff) || fabs(toff - toff0) <= 1e-3 * toff);
    }
    json_object_set_new(o, "steady", json_boolean(steady));
    return o;
}

static json_t *build_json(tf_synth *r, const tf_synth_accum *A)
{
    json_t *o = json_object();
    const tf_design *d = &r->d;
    json_object_set_new(o, "topology", json_string(tf_topology_name(r->topo)));
    if (r->topo == TF_TOPO_HALF_BRIDGE)
        json_object_set_new(o, "capacitor", json_string(d->split_capacitor ? "split" : "series"));
    json_object_set_new(o, "tank", tank_json(r));
    json_object_set_new(o, "dc_link_v", num(r->vdc));
    json_object_set_new(o, "firing_frequency_hz", num(d->n_firing_times ? NAN : r->f));
    json_object_set_new(o, "gate_width_s", json_real(r->gate_w));
    json_object_set_new(o, "turnoff_time_s", r->tq > 0 ? json_real(r->tq) : json_null());
    json_object_set_new(o, "rule_f_max_hz", r->tq > 0 ? json_real(0.5 / r->tq) : json_null());
    json_t *win = json_object();
    json_object_set_new(win, "start_s", json_real(A->ws));
    json_object_set_new(win, "end_s", json_real(A->we));
    json_object_set_new(o, "window", win);

    json_t *ivs = json_array();
    double ipk = 0;
    long n_dead = 0, n_overlap = 0;
    for (size_t k = 0; k < r->niv; k++) {
        const tf_synth_interval *v = &r->iv[k];
        if (v->start_s >= A->we)
            break;
        json_t *e = json_object();
        json_object_set_new(e, "device", json_string(tf_device_name(v->device)));
        json_object_set_new(e, "start_s", json_real(v->start_s));
        json_object_set_new(e, "end_s", num(v->end_s));
        json_object_set_new(e, "peak_s", json_real(v->peak_s));
        json_object_set_new(e, "peak_a", json_real(v->peak_a));
        if (d->nschedule) {
            json_object_set_new(e, "resistance_ohm", json_real(v->r_ohm));
            json_object_set_new(e, "inductance_h", json_real(v->l_h));
        }
        json_array_append_new(ivs, e);
        if (v->start_s >= A->ws && fabs(v->peak_a) > ipk)
            ipk = fabs(v->peak_a);
        if (k > 0 && tf_device_is_thyristor(v->device) && v->start_s >= A->ws) {
            const tf_synth_interval *pv = &r->iv[k - 1];
            if (pv->end_s < v->start_s)
                n_dead++;
            else if (!tf_device_is_thyristor(pv->device) &&
                     (pv->device == TF_DEV_D1 || pv->device == TF_DEV_D1D2) !=
                         (v->device == TF_DEV_T1 || v->device == TF_DEV_T1T2))
                n_overlap++;
        }
    }
    json_object_set_new(o, "intervals", ivs);
    json_object_set_new(o, "peak_current_a", json_real(ipk));
    json_object_set_new(o, "capacitor_voltage_peak_v", json_real(A->vmax_c));
    const char *mode = "unknown";
    if (n_overlap > 0 && n_dead == 0)
        mode = tf_mode_name(TF_MODE_OVERLAPPING);
    else if (n_dead > 0 && n_overlap == 0)
        mode = tf_mode_name(TF_MODE_NON_OVERLAPPING);
    else if (n_dead > 0)
        mode = n_overlap > n_dead ? "mostly overlapping" : "mostly non-overlapping";
    json_object_set_new(o, "mode", json_string(mode));
    json_object_set_new(o, "firings_after_dead_zone", json_integer(n_dead));
    json_object_set_new(o, "firings_during_diode", json_integer(n_overlap));

    json_t *tos = json_array();
    double min_toff = INFINITY;
    for (size_t k = 0; k < r->nto; k++) {
        const tf_synth_turnoff *t = &r->to[k];
        if (t->start_s >= A->we)
            break;
        json_t *e = json_object();
        double toff = t->forward_s - t->zero_s;
        json_object_set_new(e, "thyristor", json_string(thy_name(r, t->pos)));
        json_object_set_new(e, "gated", json_boolean(t->gated));
        json_object_set_new(e, "fire_s", num(t->fire_s));
        json_object_set_new(e, "start_s", json_real(t->start_s));
        json_object_set_new(e, "zero_s", num(t->zero_s));
        json_object_set_new(e, "forward_s", num(t->forward_s));
        json_object_set_new(e, "t_off_s", num(toff));
        json_object_set_new(e, "t_reverse_s", num(t->reverse_end_s - t->zero_s));
        json_object_set_new(e, "ratio", r->tq > 0 ? num(toff / r->tq) : json_null());
        json_object_set_new(e, "failed", json_boolean(t->failed));
        json_array_append_new(tos, e);
        if (isfinite(toff) && t->start_s >= A->ws && toff < min_toff)
            min_toff = toff;
    }
    json_object_set_new(o, "turnoff", tos);
    json_object_set_new(o, "t_off_min_s", num(min_toff));
    json_t *fl = json_array();
    for (size_t k = 0; k < r->nfail; k++) {
        const tf_synth_failure *f = &r->fail[k];
        if (f->t_s >= A->we)
            break;
        json_t *e = json_object();
        json_object_set_new(e, "thyristor", json_string(thy_name(r, f->pos)));
        json_object_set_new(e, "t_s", json_real(f->t_s));
        json_object_set_new(e, "kind", json_string(fail_kind(f->kind)));
        json_object_set_new(e, "t_off_s", num(f->t_off_s));
        json_array_append_new(fl, e);
    }
    json_object_set_new(o, "commutation_failures", fl);
    json_object_set_new(o, "tank_model_valid_until_s", num(r->shoot_through_s));

    if (A->nper > 0)
        json_object_set_new(o, "last_period", last_period_json(r, A));
    else
        json_object_set_new(o, "last_period", json_null());

    double W = A->we - A->ws;
    json_t *rms = json_object();
    for (int c = 0; c < TF_SYN_NCHAN; c++) {
        if (!tf_synth_has_channel(r, (tf_synth_channel)c))
            continue;
        double v;
        if (c < 4)
            v = sqrt(A->sq[c] / W);
        else {
            int pos = (r->topo == TF_TOPO_FULL_BRIDGE) ? (c >= TF_SYN_G3) : (c == TF_SYN_G2);
            v = sqrt(gate_on_time(r, pos, A->ws, A->we) / W);
        }
        json_object_set_new(rms, tf_synth_channel_name((tf_synth_channel)c), json_real(v));
    }
    json_object_set_new(o, "rms", rms);
    if (A->nper > 0) {
        json_t *pw = json_object();
        json_object_set_new(pw, "start_s", json_real(A->ps));
        json_object_set_new(pw, "periods", json_integer(A->nper));
        json_object_set_new(pw, "period_s", json_real(A->period));
        json_object_set_new(pw, "mean_w", json_real(A->pw / (A->pe - A->ps)));
        json_object_set_new(o, "power", pw);
        json_t *h = json_object();
        json_object_set_new(h, "fundamental_hz", json_real(1.0 / A->period));
        json_object_set_new(h, "orders", json_integer(NHARM));
        json_object_set_new(h, "method",
                            json_string("Fourier integrals of the exact waveform over whole "
                                        "firing periods: closed form per interval, "
                                        "16-point Gauss-Legendre panels where there is "
                                        "none (near-critical or overdamped intervals)"));
        json_object_set_new(h, "i_load", harm_json(A, A->hi));
        json_object_set_new(h, "v_out", harm_json(A, A->hv));
        json_object_set_new(o, "harmonics", h);
    } else {
        json_object_set_new(o, "power", json_null());
        json_object_set_new(o, "harmonics", json_null());
    }
    return o;
}

/* Listed firing instants that are evenly spaced (to 1e-9 of the spacing) define a firing
 * period too: whole periods from the first T1 firing in the window. */
static void listed_periods(const tf_synth *r, tf_synth_accum *A)
{
    const tf_design *d = &r->d;
    size_t n = d->n_firing_times;
    if (n < 2)
        return;
    double sp = (d->firing_times_s[n - 1] - d->firing_times_s[0]) / (double)(n - 1);
    for (size_t k = 1; k < n; k++)
        if (fabs(d->firing_times_s[k] - d->firing_times_s[k - 1] - sp) > 1e-9 * sp)
            return;
    A->period = sp * (double)r->npos;
    size_t k = 0;
    while (k < n && d->firing_times_s[k] < A->ws - 1e-9 * sp)
        k += (size_t)r->npos;
    if (k >= n)
        return;
    A->ps = d->firing_times_s[k];
    /* only periods whose firings were all listed */
    double last = d->firing_times_s[n - 1] + sp;
    double end = fmin(A->we, last);
    A->nper = (long)floor((end - A->ps) / A->period + 1e-9);
    if (A->nper < 0)
        A->nper = 0;
    A->pe = A->ps + (double)A->nper * A->period;
}

json_t *tf_synth_truth(tf_synth *s, tf_error *err) { return tf__truth(s, 0, err); }

json_t *tf__truth(tf_synth *s, int force_quadrature, tf_error *err)
{
    if (!s) {
        tf_error_set(err, TF_ERR_USAGE, "tf_synth_truth: no engine");
        return NULL;
    }
    const tf_design *d = &s->d;
    if (!(d->duration_s > 0) || !isfinite(d->duration_s)) {
        tf_error_set(err, TF_ERR_DATA, "[capture] duration: expected a time > 0 for the truth");
        return NULL;
    }
    tf_synth *r = tf_synth_create(d, err);
    if (!r)
        return NULL;
    tf_synth_accum *A = calloc(1, sizeof *A);
    if (!A || !(A->gl = gsl_integration_glfixed_table_alloc(GL_ORDER))) {
        free(A);
        tf_synth_destroy(r);
        tf_error_set(err, TF_ERR_NOMEM, "simulator: out of memory");
        return NULL;
    }
    A->ws = isnan(d->start_s) ? 0.0 : d->start_s;
    A->we = A->ws + d->duration_s;
    double w0 = 1 / sqrt(r->L * r->C) + r->R / (2 * r->L);
    if (r->topo == TF_TOPO_SINGLE)
        w0 = fmax(w0, 1 / sqrt(r->Lr * r->C));
    for (size_t k = 0; k < d->nschedule && k < TF_DESIGN_MAX_SCHEDULE; k++) {
        double L = isnan(d->sched_l_h[k]) ? r->L : d->sched_l_h[k];
        double R = isnan(d->sched_r_ohm[k]) ? r->R : d->sched_r_ohm[k];
        w0 = fmax(w0, 1 / sqrt(L * r->C) + R / (2 * L));
    }
    A->w_rms = 2 * w0;
    A->period = 1;
    if (r->topo != TF_TOPO_RING_DOWN && !d->n_firing_times) {
        A->period = 1.0 / r->f;
        double first = ceil(A->ws * r->f - 1e-9) / r->f;
        if (!(first > 0))
            first = 0; /* also turns -0 into 0 */
        A->nper = (long)floor((A->we - first) * r->f + 1e-9);
        A->ps = first;
        A->pe = first + (double)A->nper * A->period;
        A->w_harm = w0 + NHARM * 2 * M_PI * r->f;
    } else if (r->topo != TF_TOPO_RING_DOWN) {
        listed_periods(r, A);
        A->w_harm = w0 + NHARM * 2 * M_PI / A->period;
    }
    A->force_quadrature = force_quadrature;
    r->acc = A;
    r->t_min_request = INFINITY; /* keep only the segment being simulated */
    tf_status st = tf__advance(r, A->we + 1e-9, err);
    json_t *o = NULL;
    if (st == TF_OK) {
        /* the last segment runs past the window: close its part of the integrals */
        tf_seg *g = &r->seg[r->seg_first + r->seg_count - 1];
        tf_seg cut = *g;
        cut.t1 = A->we;
        if (cut.t0 < A->we) {
            double a = fmax(cut.t0, A->ws), b = A->we;
            if (a < b)
                accum_span(r, &cut, a, b, 0);
            if (A->nper > 0 && fmax(cut.t0, A->ps) < A->pe)
                accum_span(r, &cut, fmax(cut.t0, A->ps), A->pe, 1);
        }
        o = build_json(r, A);
        if (!o)
            tf_error_set(err, TF_ERR_NOMEM, "simulator: out of memory");
    }
    gsl_integration_glfixed_table_free(A->gl);
    free(A);
    r->acc = NULL;
    tf_synth_destroy(r);
    return o;
}
