/* fit tests: exact piecewise series-RLC responses (textbook series RLC equations,
 * DOMAIN.md section 2) as test captures with known R, L, C. */
#include "fit_synth.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

void fit_synth_defaults(fit_synth_cfg *c)
{
    memset(c, 0, sizeof *c);
    c->l_h = 100e-6;
    c->c_f = 10e-6;
    c->r_ohm = 0.316;     /* Q about 10 */
    c->vdc_v = 300;
    c->vt_v = 1.6;
    c->vd_v = 1.0;
    c->fire_hz = 1993; /* half period not a whole number of samples */
    c->dt_s = 2e-7;
    c->duration_s = 5e-3;
    c->seed = 1;
}

/* One conduction interval: level E, start, capacitor voltage at start, tank. */
typedef struct ival {
    double t0, t1, e, vc0, r, l, c;
    int sign;
    size_t burst;
} ival;

static double ival_i(const ival *v, double t)
{
    const double a = v->r / (2 * v->l), w0 = 1 / sqrt(v->l * v->c), wd = sqrt(w0 * w0 - a * a);
    const double tau = t - v->t0;
    return (v->e - v->vc0) / (wd * v->l) * exp(-a * tau) * sin(wd * tau);
}

static double ival_vc_end(const ival *v)
{
    const double a = v->r / (2 * v->l), w0 = 1 / sqrt(v->l * v->c), wd = sqrt(w0 * w0 - a * a);
    return v->e + (v->e - v->vc0) * exp(-a * M_PI / wd);
}

static double sched(double (*f)(double, void *), void *ctx, double t, double dflt)
{
    return f ? f(t, ctx) : dflt;
}

void fit_synth_damped(float *x, size_t n, double dt, double a, double alpha, double wd,
                      double phi, double sigma, unsigned long seed)
{
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, seed);
    for (size_t k = 0; k < n; k++) {
        const double t = (double)k * dt;
        x[k] = (float)(a * exp(-alpha * t) * sin(wd * t + phi) +
                       (sigma > 0 ? gsl_ran_gaussian(r, sigma) : 0));
    }
    gsl_rng_free(r);
}

int fit_synth_make(const fit_synth_cfg *c, tf_capture **capo, tf_segment_result **sego,
                   fit_synth_truth *truth)
{
    size_t cap_iv = 1024, niv = 0;
    ival *iv = malloc(cap_iv * sizeof *iv);
    if (!iv)
        return -1;
    const double half = c->ring_down ? 0 : 0.5 / c->fire_hz;
    /* settle: start 20 periods early so the capacitor voltage is in steady state */
    double t = c->ring_down ? 0 : -20.0 / c->fire_hz, vc = c->ring_down ? -c->vdc_v : 0.5 * c->vdc_v;
    int k = 0;
    size_t nb = 0;
    while (t < c->duration_s) {
        const double r = sched(c->r_of_t, c->ctx, t, c->r_ohm), l = sched(c->l_of_t, c->ctx, t, c->l_h);
        const double a = r / (2 * l), w0 = 1 / sqrt(l * c->c_f), wd = sqrt(w0 * w0 - a * a);
        if (niv + 2 * (c->ring_down ? 1 : 1) + 200 >= cap_iv) {
            cap_iv *= 2;
            ival *n2 = realloc(iv, cap_iv * sizeof *iv);
            if (!n2) {
                free(iv);
                return -1;
            }
            iv = n2;
        }
        if (c->ring_down) {
            /* alternate thyristor (+) and diode (-) lobes until the duration ends */
            int sgn = 1;
            while (t < c->duration_s && niv + 1 < cap_iv) {
                ival v = {t, t + M_PI / wd, sgn > 0 ? -c->vt_v : c->vd_v, vc, r, l, c->c_f, sgn, 0};
                if (sgn * (v.e - v.vc0) <= 0)
                    break; /* the drops stop the oscillation: no device can conduct */
                iv[niv++] = v;
                vc = ival_vc_end(&v);
                t = v.t1;
                sgn = -sgn;
            }
            nb = 1;
            break;
        }
        const int upper = (k % 2) == 0;
        ival th = {t, t + M_PI / wd, upper ? c->vdc_v - c->vt_v : c->vt_v, vc, r, l, c->c_f,
                   upper ? 1 : -1, t >= 0 ? nb : (size_t)-1};
        vc = ival_vc_end(&th);
        ival di = {th.t1, th.t1 + M_PI / wd, upper ? c->vdc_v + c->vd_v : -c->vd_v, vc, r, l,
                   c->c_f, -th.sign, th.burst};
        vc = ival_vc_end(&di);
        iv[niv++] = th;
        iv[niv++] = di;
        if (t >= 0 && di.t1 < c->duration_s)
            nb++;
        else if (t >= 0)
            iv[niv - 1].burst = iv[niv - 2].burst = (size_t)-1;
        t += half;
        k++;
    }
    const size_t n = (size_t)floor(c->duration_s / c->dt_s);
    tf_capture *cap = tf_capture_create();
    tf_error err;
    if (!cap || tf_capture_alloc(cap, 2, n, &err) != TF_OK) {
        free(iv);
        tf_capture_destroy(cap);
        return -1;
    }
    cap->dt_s = c->dt_s;
    cap->t0_s = 0;
    strcpy(cap->ch[0].name, "i");
    strcpy(cap->ch[0].unit, "A");
    strcpy(cap->ch[1].name, "v");
    strcpy(cap->ch[1].unit, "V");
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, c->seed);
    size_t p = 0, pv = 0;
    const double step = c->bits_i > 0 ? 2 * c->range_i_a / ldexp(1.0, c->bits_i) : 0;
    tf_segment_result *seg = calloc(1, sizeof *seg);
    seg->topology = c->ring_down ? TF_TOPO_RING_DOWN : TF_TOPO_HALF_BRIDGE;
    seg->mode = c->ring_down ? TF_MODE_UNKNOWN : TF_MODE_NON_OVERLAPPING;
    seg->bursts = calloc(nb + 1, sizeof *seg->bursts);
    seg->lobes = calloc(niv + 1, sizeof *seg->lobes);
    seg->cycles = calloc(nb + 1, sizeof *seg->cycles);
    truth->nbursts = nb;
    truth->t_s = calloc(nb + 1, sizeof(double));
    truth->r_ohm = calloc(nb + 1, sizeof(double));
    truth->l_h = calloc(nb + 1, sizeof(double));
    truth->peak_a = calloc(nb + 1, sizeof(double));
    for (size_t q = 0; q < n; q++) {
        const double tq = (double)q * c->dt_s;
        while (p + 1 < niv && iv[p].t1 <= tq)
            p++;
        double i = (tq >= iv[p].t0 && tq < iv[p].t1) ? ival_i(&iv[p], tq) : 0.0;
        /* voltage at t - skew: the bridge level while a device conducts, else vc */
        const double tv = tq - c->skew_v_s;
        while (pv + 1 < niv && iv[pv].t1 <= tv)
            pv++;
        double v;
        if (tv >= iv[pv].t0 && tv < iv[pv].t1)
            v = iv[pv].e;
        else
            v = tv < iv[pv].t0 ? iv[pv].vc0 : ival_vc_end(&iv[pv]);
        if (iv[p].burst != (size_t)-1 && tq >= iv[p].t0 && tq < iv[p].t1) {
            size_t b = iv[p].burst;
            truth->peak_a[b] = fmax(truth->peak_a[b], fabs(i));
        }
        if (c->noise_i_a > 0)
            i += gsl_ran_gaussian(rng, c->noise_i_a);
        if (step > 0) {
            i = step * floor(i / step + 0.5);
            if (i > c->range_i_a - step)
                i = c->range_i_a - step;
            if (i < -c->range_i_a)
                i = -c->range_i_a;
        }
        if (c->noise_v_v > 0)
            v += gsl_ran_gaussian(rng, c->noise_v_v);
        cap->ch[0].samples[q] = (float)i;
        cap->ch[1].samples[q] = (float)v;
    }
    gsl_rng_free(rng);
    /* segments from the exact intervals */
    size_t nl = 0;
    for (size_t q = 0; q < niv; q++) {
        if (iv[q].burst == (size_t)-1 || iv[q].t1 > c->duration_s)
            continue;
        tf_lobe *L = &seg->lobes[nl];
        L->start_s = iv[q].t0;
        L->end_s = iv[q].t1;
        L->sign = iv[q].sign;
        L->i0 = (size_t)ceil(iv[q].t0 / c->dt_s);
        L->i1 = (size_t)floor(iv[q].t1 / c->dt_s) + 1;
        if (L->i1 > n)
            L->i1 = n;
        L->burst = iv[q].burst;
        const int thy = c->ring_down ? iv[q].sign > 0 : ((q % 2) == 0);
        const int upper = iv[q].e > 0.25 * c->vdc_v;
        L->device = thy ? (upper ? TF_DEV_T1 : TF_DEV_T2) : (upper ? TF_DEV_D1 : TF_DEV_D2);
        if (c->ring_down)
            L->device = thy ? TF_DEV_T1 : TF_DEV_D1;
        tf_burst *B = &seg->bursts[L->burst];
        if (!B->nlobes) {
            B->first_lobe = nl;
            B->i0 = L->i0;
            B->start_s = L->start_s;
            truth->t_s[L->burst] = L->start_s;
            truth->r_ohm[L->burst] = iv[q].r;
            truth->l_h[L->burst] = iv[q].l;
            if (L->device == TF_DEV_T1 && !c->ring_down) {
                tf_cycle *C = &seg->cycles[seg->ncycles++];
                C->start_s = L->start_s;
                C->thyristor = TF_DEV_T1;
                C->lobe_thyristor = nl;
            }
        }
        B->nlobes++;
        B->i1 = L->i1;
        B->end_s = L->end_s;
        if (c->range_i_a > 0 && truth->peak_a[L->burst] >= c->range_i_a - step)
            B->clipped = L->clipped = 1;
        nl++;
    }
    seg->nlobes = nl;
    seg->nbursts = nb;
    free(iv);
    *capo = cap;
    *sego = seg;
    return 0;
}

void fit_synth_free(tf_capture *cap, tf_segment_result *seg, fit_synth_truth *truth)
{
    tf_capture_destroy(cap);
    if (seg) {
        free(seg->bursts);
        free(seg->lobes);
        free(seg->cycles);
        free(seg);
    }
    if (truth) {
        free(truth->t_s);
        free(truth->r_ohm);
        free(truth->l_h);
        free(truth->peak_a);
    }
}
