/* Simulator engine: lifecycle and sampling (streaming fill, exact evaluation). */
#include "synth_engine.h"

#include <gsl/gsl_eigen.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#define CS(p, k) (2 * (p) + (k))
#define CS_POS(cs) ((cs) / 2)
#define CS_KIND(cs) ((cs) % 2)
#define ANCHOR_EVERY 256
#define HISTORY_S 1e-3

int tf_synth_has_channel(const tf_synth *s, tf_synth_channel c)
{
    if (!s || (unsigned)c >= TF_SYN_NCHAN)
        return 0;
    switch (c) {
    case TF_SYN_G2: return s->npos == 2;
    case TF_SYN_G3:
    case TF_SYN_G4: return s->topo == TF_TOPO_FULL_BRIDGE;
    default: return 1;
    }
}

/* Gate channel value: g1 (g1, g2 in the full bridge) follow position 0. */
static int gate_channel_pos(const tf_synth *s, int c)
{
    if (s->topo == TF_TOPO_FULL_BRIDGE)
        return (c == TF_SYN_G1 || c == TF_SYN_G2) ? 0 : 1;
    if (c == TF_SYN_G1)
        return 0;
    if (c == TF_SYN_G2 && s->npos == 2)
        return 1;
    return -1;
}


/* ---- lifecycle ------------------------------------------------------------------------ */

tf_synth *tf_synth_create(const tf_design *d, tf_error *err)
{
    if (!d) {
        tf_error_set(err, TF_ERR_USAGE, "tf_synth_create: no design");
        return NULL;
    }
    if (tf__check_design(d, err) != TF_OK)
        return NULL;
    tf_synth *s = calloc(1, sizeof *s);
    if (!s) {
        tf_error_set(err, TF_ERR_NOMEM, "simulator: out of memory");
        return NULL;
    }
    s->d = *d;
    s->topo = d->topology;
    s->npos = (s->topo == TF_TOPO_HALF_BRIDGE || s->topo == TF_TOPO_FULL_BRIDGE) ? 2 : 1;
    s->vdc = s->topo == TF_TOPO_RING_DOWN ? tf__or0(d->dc_link_v) : d->dc_link_v;
    s->vt = tf__or0(d->thyristor_drop_v);
    s->vd = tf__or0(d->diode_drop_v);
    s->ls = tf__or0(d->stray_inductance_h);
    s->tq = tf__or0(d->turnoff_time_s);
    s->f = d->firing_frequency_hz;
    s->L = d->inductance_h;
    s->R = d->resistance_ohm;
    s->C = d->capacitance_f;
    s->Lr = d->reset_inductance_h;
    s->Rr = tf__or0(d->reset_resistance_ohm);
    s->gate_w = TF_SYNTH_GATE_WIDTH_S;
    if (!d->n_firing_times && s->f > 0 && 0.25 / s->f < s->gate_w)
        s->gate_w = 0.25 / s->f;
    double vc0 = 0;
    switch (s->topo) {
    case TF_TOPO_HALF_BRIDGE:
        s->vref = d->split_capacitor ? 0.5 * s->vdc : 0.0;
        s->E[0][0] = s->vdc - s->vt - s->vref;
        s->E[0][1] = s->vdc + s->vd - s->vref;
        s->E[1][0] = s->vt - s->vref;
        s->E[1][1] = -s->vd - s->vref;
        vc0 = 0.5 * s->vdc - s->vref;
        break;
    case TF_TOPO_FULL_BRIDGE:
        s->E[0][0] = s->vdc - 2 * s->vt;
        s->E[0][1] = s->vdc + 2 * s->vd;
        s->E[1][0] = -s->E[0][0];
        s->E[1][1] = -s->E[0][1];
        break;
    case TF_TOPO_SINGLE:
        s->E[0][0] = s->vdc - s->vt;
        s->E[0][1] = s->vdc + s->vd;
        break;
    default: /* ring-down: the network sits across the switch */
        s->E[0][0] = -s->vt;
        s->E[0][1] = s->vd;
        vc0 = -d->precharge_v;
        break;
    }
    s->sgn[0][0] = 1;
    s->sgn[0][1] = -1;
    s->sgn[1][0] = -1;
    s->sgn[1][1] = 1;
    for (int p = 0; p < 2; p++) {
        s->t_zero[p] = -INFINITY;
        s->pending[p] = s->active[p] = -1;
        s->last_fire[p] = -INFINITY;
    }
    s->shoot_through_s = INFINITY;
    if (s->topo == TF_TOPO_SINGLE) {
        s->eig_ws = gsl_eigen_nonsymmv_alloc(3);
        if (!s->eig_ws) {
            tf_synth_destroy(s);
            tf_error_set(err, TF_ERR_NOMEM, "simulator: out of memory");
            return NULL;
        }
    }
    double start = isnan(d->start_s) ? 0.0 : d->start_s, tf0;
    int p0;
    s->t_begin = fmin(0.0, start) - 2 * HISTORY_S;
    if (tf__firing(s, 0, &tf0, &p0))
        s->t_begin = fmin(s->t_begin, tf0 - 2 * HISTORY_S);
    s->t_min_request = -INFINITY;
    s->last_fill_t0 = -INFINITY;
    tf_seg *g = tf__seg_push(s);
    if (!g) {
        tf_synth_destroy(s);
        tf_error_set(err, TF_ERR_NOMEM, "simulator: out of memory");
        return NULL;
    }
    double x[3] = {0, vc0, 0};
    tf__build_segment(s, g, s->t_begin, TF_CS_NONE, x);
    return s;
}

void tf_synth_destroy(tf_synth *s)
{
    if (!s)
        return;
    if (s->eig_ws)
        gsl_eigen_nonsymmv_free(s->eig_ws);
    free(s->seg);
    free(s->iv);
    free(s->to);
    free(s->fail);
    free(s);
}

const tf_synth_interval *tf_synth_intervals(const tf_synth *s, size_t *count)
{
    if (count)
        *count = s ? s->niv : 0;
    return s ? s->iv : NULL;
}

/* ---- sampling ------------------------------------------------------------------------- */

/* Index of the segment holding t (the later one at a boundary), searching from hint. */
static size_t seg_find(tf_synth *s, double t, size_t hint)
{
    size_t k = hint < s->seg_count ? hint : 0;
    if (tf__seg_at(s, k)->t0 > t) {
        size_t lo = 0, hi = k;
        while (lo < hi) {
            size_t mid = (lo + hi) / 2;
            if (tf__seg_at(s, mid)->t1 <= t)
                lo = mid + 1;
            else
                hi = mid;
        }
        k = lo;
    }
    while (k + 1 < s->seg_count && tf__seg_at(s, k)->t1 <= t)
        k++;
    return k;
}

tf_status tf_synth_eval(tf_synth *s, double t, tf_synth_point *p, tf_error *err)
{
    if (!s || !p || !isfinite(t))
        return tf_error_set(err, TF_ERR_USAGE, "tf_synth_eval: bad argument");
    if (t < tf__seg_at(s, 0)->t0)
        return tf_error_set(err, TF_ERR_USAGE,
                            "tf_synth_eval: t = %.12g s is before the kept history", t);
    /* evaluation may wander back up to the history span, no further */
    if (t - HISTORY_S - 1e-9 > s->t_min_request)
        s->t_min_request = t - HISTORY_S - 1e-9;
    tf_status st = tf__advance(s, t, err);
    if (st)
        return st;
    const tf_seg *g = tf__seg_at(s, seg_find(s, t, 0));
    double x[3], didt, ch[4];
    tf__seg_state(g, t, x, &didt);
    tf__channels(s, g, x, didt, ch);
    for (int c = 0; c < 4; c++)
        p->ch[c] = ch[c];
    for (int c = TF_SYN_G1; c <= TF_SYN_G4; c++) {
        int gp = gate_channel_pos(s, c);
        p->ch[c] = (gp >= 0 && tf__gate_on(s, gp, t)) ? 1.0 : 0.0;
    }
    p->didt_a_s = didt;
    p->choke_a = x[2];
    p->device = tf__device(s, g->cs);
    return TF_OK;
}

/* Map a state to the propagated deviation y and back. */
static void to_dev(const tf_seg *g, const double x[3], double y[3])
{
    switch (g->model) {
    case TF_MODEL_TANK: y[0] = x[0]; y[1] = x[1] - g->E; y[2] = 0; break;
    case TF_MODEL_CHOKE: y[0] = -x[2]; y[1] = x[1]; y[2] = 0; break;
    case TF_MODEL_TANK3:
        for (int r = 0; r < 3; r++)
            y[r] = x[r] - g->xp[r];
        break;
    default: y[0] = 0; y[1] = x[1]; y[2] = 0; break;
    }
}

static void from_dev(const tf_seg *g, const double y[3], double x[3], double *didt)
{
    switch (g->model) {
    case TF_MODEL_TANK: x[0] = y[0]; x[1] = y[1] + g->E; x[2] = 0; break;
    case TF_MODEL_CHOKE: x[0] = 0; x[1] = y[1]; x[2] = -y[0]; break;
    case TF_MODEL_TANK3:
        for (int r = 0; r < 3; r++)
            x[r] = y[r] + g->xp[r];
        break;
    default: x[0] = 0; x[1] = y[1]; x[2] = 0; break;
    }
    *didt = (g->cs == TF_CS_NONE) ? 0 : (g->E - g->R * x[0] - x[1]) / g->L;
}

/* First sample index k >= 0 with base + k dt >= t (n when none), exact for the same
 * expression the samples use. */
static size_t first_at_or_after(double base, double dt, size_t n, double t)
{
    double c = ceil((t - base) / dt);
    if (!(c > 0))
        return 0;
    if (c >= (double)n)
        c = (double)n;
    size_t k = (size_t)c;
    while (k > 0 && base + (double)(k - 1) * dt >= t)
        k--;
    while (k < n && base + (double)k * dt < t)
        k++;
    return k;
}

/* Samples of one segment run [ka, kb) of a skew group: exact anchors every
 * ANCHOR_EVERY samples, the segment's exact propagator between them. */
static void fill_run(const tf_synth *s, const tf_seg *g, double base, double dt, size_t ka,
                     size_t kb, float *const o[4])
{
    int cs = g->cs, stray = (cs == CS(0, TF_K_DIODE)) && s->ls > 0;
    double E = g->E, R = g->R, L = g->L, ls = s->ls;
    double vak0 = tf__vak_static(s, 0, cs, 0), vak_slope = 0;
    if (cs == TF_CS_NONE) /* node floats with vc: v_ak1 is affine in vc */
        vak_slope = tf__vak_static(s, 0, cs, 1) - vak0;
    /* a group of only constant channels (v_out, v_ak1 while a device conducts) needs
     * no state */
    if (!o[TF_SYN_I_LOAD] && !o[TF_SYN_V_C] && cs != TF_CS_NONE && !(o[TF_SYN_V_AK1] && stray)) {
        for (size_t k = ka; k < kb; k++) {
            if (o[TF_SYN_V_OUT])
                o[TF_SYN_V_OUT][k] = (float)E;
            if (o[TF_SYN_V_AK1])
                o[TF_SYN_V_AK1][k] = (float)vak0;
        }
        return;
    }
    double P[9] = {0};
    int dim = tf__seg_step_matrix(g, dt, P);
    for (size_t k = ka; k < kb;) {
        size_t end = k + ANCHOR_EVERY < kb ? k + ANCHOR_EVERY : kb;
        double x[3], didt, y[3];
        tf__seg_state(g, base + (double)k * dt, x, &didt);
        to_dev(g, x, y);
        for (; k < end; k++) {
            from_dev(g, y, x, &didt);
            if (o[TF_SYN_I_LOAD])
                o[TF_SYN_I_LOAD][k] = (float)x[0];
            if (o[TF_SYN_V_C])
                o[TF_SYN_V_C][k] = (float)x[1];
            if (o[TF_SYN_V_OUT])
                o[TF_SYN_V_OUT][k] = (float)(cs == TF_CS_NONE ? x[1] : E);
            if (o[TF_SYN_V_AK1]) {
                double v = vak0 + vak_slope * x[1];
                if (stray)
                    v += ls * (E - R * x[0] - x[1]) / L;
                o[TF_SYN_V_AK1][k] = (float)v;
            }
            if (dim == 2) {
                double y0 = P[0] * y[0] + P[1] * y[1];
                y[1] = P[2] * y[0] + P[3] * y[1];
                y[0] = y0;
            } else if (dim == 3) {
                double z[3];
                for (int r = 0; r < 3; r++)
                    z[r] = P[3 * r] * y[0] + P[3 * r + 1] * y[1] + P[3 * r + 2] * y[2];
                memcpy(y, z, sizeof z);
            }
        }
    }
}

/* Smallest firing index whose time is > t. */
static size_t firing_after(const tf_synth *s, double t)
{
    size_t lo = 0, hi;
    double ft;
    int fp;
    if (s->topo != TF_TOPO_RING_DOWN && !s->d.n_firing_times) {
        double rate = s->npos == 2 ? 2 * s->f : s->f, c = floor(t * rate);
        lo = c > 2 ? (size_t)c - 2 : 0;
        while (tf__firing(s, lo, &ft, &fp) && ft <= t)
            lo++;
        return lo;
    }
    hi = s->topo == TF_TOPO_RING_DOWN ? 1 : s->d.n_firing_times;
    while (lo < hi) {
        size_t mid = (lo + hi) / 2;
        tf__firing(s, mid, &ft, &fp);
        if (ft <= t)
            lo = mid + 1;
        else
            hi = mid;
    }
    return lo;
}

/* Gate channel c at base + k dt, k in [0, n): 1 inside the pulses of its position. */
static void fill_gate(const tf_synth *s, int c, double base, double dt, size_t n, float *o)
{
    memset(o, 0, n * sizeof *o);
    int pos = gate_channel_pos(s, c);
    if (pos < 0)
        return;
    double tl = base + (double)(n - 1) * dt, w = s->gate_w, ft;
    int fp;
    if (s->topo == TF_TOPO_RING_DOWN) {
        if (tf__firing(s, 0, &ft, &fp))
            for (size_t k = first_at_or_after(base, dt, n, ft); k < n; k++)
                o[k] = 1.0f;
        return;
    }
    for (size_t m = firing_after(s, base - w); tf__firing(s, m, &ft, &fp) && ft <= tl; m++) {
        if (fp != pos)
            continue;
        size_t ka = first_at_or_after(base, dt, n, ft);
        size_t kb = first_at_or_after(base, dt, n, ft + w);
        for (size_t k = ka; k < kb; k++)
            o[k] = 1.0f;
    }
}

static void fill_group(tf_synth *s, double t0, double dt, size_t n, double sk,
                       float *const out[TF_SYN_NCHAN], const int *members)
{
    double base = t0 - sk;
    float *o[4] = {0};
    int analog = 0;
    for (int c = 0; c < 4; c++)
        if (members[c]) {
            o[c] = out[c];
            analog = 1;
        }
    for (int c = TF_SYN_G1; c <= TF_SYN_G4; c++)
        if (members[c])
            fill_gate(s, c, base, dt, n, out[c]);
    if (!analog)
        return;
    size_t gi = seg_find(s, base, 0), k = 0;
    while (k < n) {
        gi = seg_find(s, base + (double)k * dt, gi);
        const tf_seg *g = tf__seg_at(s, gi);
        size_t kb = (gi + 1 < s->seg_count) ? first_at_or_after(base, dt, n, g->t1) : n;
        if (kb <= k)
            kb = k + 1;
        fill_run(s, g, base, dt, k, kb, o);
        k = kb;
    }
}

tf_status tf_synth_fill(tf_synth *s, double t0, double dt, size_t n, const double *skew,
                        float *const out[TF_SYN_NCHAN], tf_error *err)
{
    if (!s || !out || !(dt > 0) || !isfinite(t0) || !isfinite(dt))
        return tf_error_set(err, TF_ERR_USAGE, "tf_synth_fill: bad argument");
    double smin = 0, smax = 0;
    for (int c = 0; c < TF_SYN_NCHAN; c++) {
        double sk = skew ? skew[c] : 0;
        if (!(fabs(sk) <= HISTORY_S))
            return tf_error_set(err, TF_ERR_USAGE,
                                "tf_synth_fill: skew of %s is %g s, beyond +/-1 ms",
                                tf_synth_channel_name((tf_synth_channel)c), sk);
        if (out[c]) {
            smin = fmin(smin, sk);
            smax = fmax(smax, sk);
        }
    }
    if (n == 0)
        return TF_OK;
    if (t0 < s->last_fill_t0 || t0 - smax < tf__seg_at(s, 0)->t0)
        return tf_error_set(err, TF_ERR_USAGE,
                            "tf_synth_fill: t0 = %.12g s is before the previous call's "
                            "%.12g s (t0 must not decrease)", t0, s->last_fill_t0);
    tf_status st = tf__advance(s, t0 + (double)(n - 1) * dt - smin, err);
    if (st)
        return st;
    int done[TF_SYN_NCHAN] = {0};
    for (int c = 0; c < TF_SYN_NCHAN; c++) {
        if (!out[c] || done[c])
            continue;
        double sk = skew ? skew[c] : 0;
        int members[TF_SYN_NCHAN] = {0};
        for (int e = c; e < TF_SYN_NCHAN; e++)
            if (out[e] && !done[e] && (skew ? skew[e] : 0) == sk)
                members[e] = done[e] = 1;
        for (int e = 0; e < TF_SYN_NCHAN; e++)
            if (members[e] && !tf_synth_has_channel(s, (tf_synth_channel)e)) {
                memset(out[e], 0, n * sizeof *out[e]);
                members[e] = 0;
            }
        fill_group(s, t0, dt, n, sk, out, members);
    }
    s->t_min_request = t0 - HISTORY_S - 1e-9;
    s->last_fill_t0 = t0;
    tf__seg_trim(s);
    return TF_OK;
}
