/* Simulator engine events: design checks, firing schedule, devices, segments, steps. */
#include "synth_engine.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#define CS(p, k) (2 * (p) + (k))
#define CS_POS(cs) ((cs) / 2)
#define CS_KIND(cs) ((cs) % 2)

/* ---- design checks -------------------------------------------------------------------- */


static tf_status need_pos(double v, const char *key, tf_error *err)
{
    if (!(v > 0) || !isfinite(v))
        return tf_error_set(err, TF_ERR_DATA, "%s: expected a finite value > 0, found %g",
                            key, v);
    return TF_OK;
}

static tf_status need_nonneg(double v, const char *key, tf_error *err)
{
    if (!(v >= 0) || !isfinite(v))
        return tf_error_set(err, TF_ERR_DATA, "%s: expected a finite value >= 0, found %g",
                            key, v);
    return TF_OK;
}

tf_status tf__check_design(const tf_design *d, tf_error *err)
{
    tf_status st;
    if (d->topology < TF_TOPO_SINGLE || d->topology > TF_TOPO_RING_DOWN)
        return tf_error_set(err, TF_ERR_DATA,
                            "[inverter] topology: expected single, half-bridge, full-bridge "
                            "or ring-down, found none");
    if ((st = need_pos(d->capacitance_f, "[tank] capacitance", err)) ||
        (st = need_pos(d->inductance_h, "[tank] inductance", err)) ||
        (st = need_nonneg(d->resistance_ohm, "[tank] resistance", err)))
        return st;
    if ((st = need_nonneg(tf__or0(d->thyristor_drop_v), "[switch] thyristor_drop", err)) ||
        (st = need_nonneg(tf__or0(d->diode_drop_v), "[switch] diode_drop", err)) ||
        (st = need_nonneg(tf__or0(d->stray_inductance_h), "[switch] stray_inductance", err)) ||
        (st = need_nonneg(tf__or0(d->turnoff_time_s), "[switch] turnoff_time", err)))
        return st;
    if (d->topology == TF_TOPO_RING_DOWN) {
        if (!isfinite(d->precharge_v))
            return tf_error_set(err, TF_ERR_DATA,
                                "[inverter] precharge: expected the capacitor's initial "
                                "voltage for ring-down, found none");
    } else {
        if ((st = need_pos(d->dc_link_v, "[inverter] dc_link", err)))
            return st;
        if (d->n_firing_times == 0 &&
            (st = need_pos(d->firing_frequency_hz, "[inverter] firing_frequency", err)))
            return st;
    }
    if (d->n_firing_times > TF_DESIGN_MAX_FIRINGS)
        return tf_error_set(err, TF_ERR_DATA, "[inverter] firing_times: more than %d",
                            TF_DESIGN_MAX_FIRINGS);
    for (size_t k = 0; k < d->n_firing_times; k++) {
        if (!isfinite(d->firing_times_s[k]) ||
            (k > 0 && !(d->firing_times_s[k] > d->firing_times_s[k - 1])))
            return tf_error_set(err, TF_ERR_DATA,
                                "[inverter] firing_times: expected ascending finite instants, "
                                "found %g at position %zu", d->firing_times_s[k], k + 1);
    }
    if (d->topology == TF_TOPO_SINGLE) {
        if ((st = need_pos(d->reset_inductance_h, "[inverter] reset_inductance", err)) ||
            (st = need_nonneg(tf__or0(d->reset_resistance_ohm), "[inverter] reset_resistance",
                              err)))
            return st;
        if (!(d->resistance_ohm + tf__or0(d->reset_resistance_ohm) > 0))
            return tf_error_set(err, TF_ERR_DATA,
                                "[inverter] reset_resistance: the tank and reset choke "
                                "resistances are both 0, so the DC path has no steady state");
    }
    if (isfinite(d->start_s) == 0 && !isnan(d->start_s))
        return tf_error_set(err, TF_ERR_DATA, "[capture] start: expected a finite time");
    for (size_t k = 0; k < d->nschedule && k < TF_DESIGN_MAX_SCHEDULE; k++) {
        if ((!isnan(d->sched_r_ohm[k]) && !(d->sched_r_ohm[k] >= 0)) ||
            (!isnan(d->sched_l_h[k]) && !(d->sched_l_h[k] > 0)))
            return tf_error_set(err, TF_ERR_DATA,
                                "[schedule] point %zu: expected resistance >= 0 and "
                                "inductance > 0", k + 1);
    }
    return TF_OK;
}

/* ---- firing schedule ------------------------------------------------------------------ */

int tf__firing(const tf_synth *s, size_t n, double *t, int *pos)
{
    const tf_design *d = &s->d;
    if (s->topo == TF_TOPO_RING_DOWN) {
        if (n > 0)
            return 0;
        *t = d->n_firing_times ? d->firing_times_s[0] : 0.0;
        *pos = 0;
        return 1;
    }
    if (d->n_firing_times) {
        if (n >= d->n_firing_times)
            return 0;
        *t = d->firing_times_s[n];
        *pos = s->npos == 2 ? (int)(n % 2) : 0;
        return 1;
    }
    if (n > (size_t)1 << 52)
        return 0;
    if (s->npos == 2) {
        *t = (double)n / (2.0 * s->f);
        *pos = (int)(n % 2);
    } else {
        *t = (double)n / s->f;
        *pos = 0;
    }
    return 1;
}

/* Start of the latest gate pulse of pos at or before t (-INFINITY none). */
double tf__last_pulse(const tf_synth *s, int pos, double t)
{
    const tf_design *d = &s->d;
    if (s->topo == TF_TOPO_RING_DOWN || d->n_firing_times) {
        size_t n = s->topo == TF_TOPO_RING_DOWN ? 1 : d->n_firing_times;
        double ft = 0;
        int fp = -1;
        /* largest index with time <= t (binary search over ascending times) */
        size_t lo = 0, hi = n;
        while (lo < hi) {
            size_t mid = (lo + hi) / 2;
            tf__firing(s, mid, &ft, &fp);
            if (ft <= t)
                lo = mid + 1;
            else
                hi = mid;
        }
        for (size_t k = lo; k-- > 0;) {
            tf__firing(s, k, &ft, &fp);
            if (fp == pos)
                return ft;
            if (lo - k > 2)
                break;
        }
        return -INFINITY;
    }
    double off = (s->npos == 2) ? 0.5 * pos : 0.0;
    double k = floor(t * s->f - off);
    if (k < 0)
        return -INFINITY;
    double tk = (k + off) / s->f;
    if (tk > t) {
        k -= 1;
        if (k < 0)
            return -INFINITY;
        tk = (k + off) / s->f;
    }
    return tk;
}

int tf__gate_on(const tf_synth *s, int pos, double t)
{
    if (pos >= s->npos)
        return 0;
    double tp = tf__last_pulse(s, pos, t);
    if (s->topo == TF_TOPO_RING_DOWN)
        return tp > -INFINITY;
    return tp > -INFINITY && t - tp < s->gate_w;
}

/* ---- node voltages -------------------------------------------------------------------- */

/* Absolute voltage of the switching node A above the negative rail (bridges, single). */
static double node_a(const tf_synth *s, int cs, double vc)
{
    if (cs == TF_CS_NONE) {
        if (s->topo == TF_TOPO_FULL_BRIDGE)
            return 0.5 * (s->vdc + vc); /* both legs floating: assumed to share evenly */
        return s->vref + vc;
    }
    switch (cs) {
    case 0: return s->vdc - s->vt;
    case 1: return s->vdc + s->vd;
    case 2: return s->vt;
    default: return -s->vd;
    }
}

/* Anode-cathode voltage of the thyristor at pos without the stray L di/dt term. */
double tf__vak_static(const tf_synth *s, int pos, int cs, double vc)
{
    if (s->topo == TF_TOPO_RING_DOWN) {
        double vout = (cs == TF_CS_NONE) ? vc : s->E[CS_POS(cs)][CS_KIND(cs)];
        return -vout;
    }
    double va = node_a(s, cs, vc);
    return pos == 0 ? s->vdc - va : va;
}

tf_device tf__device(const tf_synth *s, int cs)
{
    if (cs == TF_CS_NONE)
        return TF_DEV_UNKNOWN;
    static const tf_device half[4] = {TF_DEV_T1, TF_DEV_D1, TF_DEV_T2, TF_DEV_D2};
    static const tf_device full[4] = {TF_DEV_T1T2, TF_DEV_D1D2, TF_DEV_T3T4, TF_DEV_D3D4};
    return s->topo == TF_TOPO_FULL_BRIDGE ? full[cs] : half[cs];
}

void tf__channels(const tf_synth *s, const tf_seg *g, const double x[3], double didt,
                  double out[4])
{
    int cs = g->cs;
    out[TF_SYN_I_LOAD] = x[0];
    out[TF_SYN_V_C] = x[1];
    out[TF_SYN_V_OUT] = (cs == TF_CS_NONE) ? x[1] : g->E;
    double vak = tf__vak_static(s, 0, cs, x[1]);
    if (cs == CS(0, TF_K_DIODE))
        vak += s->ls * didt; /* stray loop inductance of the T1/D1 pair, DOMAIN.md 3 */
    out[TF_SYN_V_AK1] = vak;
}


/* ---- records -------------------------------------------------------------------------- */

static void *grow(void *p, size_t *cap, size_t need, size_t elem, int *nomem)
{
    if (need <= *cap)
        return p;
    size_t nc = *cap ? *cap * 2 : 64;
    while (nc < need)
        nc *= 2;
    void *q = realloc(p, nc * elem);
    if (!q) {
        *nomem = 1;
        return NULL;
    }
    *cap = nc;
    return q;
}

static void add_failure(tf_synth *s, double t, int pos, int kind, double toff)
{
    tf_synth_failure *f = grow(s->fail, &s->cap_fail, s->nfail + 1, sizeof *f, &s->nomem);
    if (!f)
        return;
    s->fail = f;
    f[s->nfail++] = (tf_synth_failure){t, pos, kind, toff};
    if ((kind == TF_FAIL_SHOOT_THROUGH || kind == TF_FAIL_FIRED_ON_CONDUCTING) &&
        t < s->shoot_through_s)
        s->shoot_through_s = t;
}

static double interp_sched(const tf_synth *s, const double *vals, double t, double nominal);

static void open_interval(tf_synth *s, int cs, double t)
{
    tf_synth_interval *v = grow(s->iv, &s->cap_iv, s->niv + 1, sizeof *v, &s->nomem);
    if (!v)
        return;
    s->iv = v;
    v[s->niv++] = (tf_synth_interval){tf__device(s, cs), t, NAN, t, 0.0,
                                      interp_sched(s, s->d.sched_r_ohm, t, s->R),
                                      interp_sched(s, s->d.sched_l_h, t, s->L)};
    s->iv_open = 1;
}

static void start_thyristor(tf_synth *s, int pos, double t)
{
    tf_synth_turnoff *r = grow(s->to, &s->cap_to, s->nto + 1, sizeof *r, &s->nomem);
    if (!r)
        return;
    s->to = r;
    int gated = tf__gate_on(s, pos, t);
    r[s->nto] = (tf_synth_turnoff){pos, gated, gated ? tf__last_pulse(s, pos, t) : NAN, t,
                                    NAN, NAN, NAN, 0};
    s->active[pos] = (long)s->nto++;
}

/* Forward voltage back on a thyristor that awaits it: close its turn-off record. */
static void forward_returned(tf_synth *s, int pos, double t, int cs_now)
{
    long k = s->pending[pos];
    if (k < 0)
        return;
    tf_synth_turnoff *r = &s->to[k];
    r->forward_s = t;
    if (isnan(r->reverse_end_s))
        r->reverse_end_s = t;
    double toff = t - r->zero_s;
    /* conducting again on its own gate pulse (ring-down's held gate) is no failure */
    int refired = cs_now == CS(pos, TF_K_THY) && tf__gate_on(s, pos, t);
    if (s->tq > 0 && toff < s->tq && !refired) {
        r->failed = 1;
        int kind = TF_FAIL_FORWARD;
        if (cs_now == CS(pos, TF_K_THY))
            kind = TF_FAIL_RECONDUCTION;
        else if (cs_now != TF_CS_NONE && CS_POS(cs_now) != pos)
            kind = TF_FAIL_SHOOT_THROUGH;
        add_failure(s, t, pos, kind, toff);
    }
    s->pending[pos] = -1;
}

static void track_forward(tf_synth *s, double t, int cs, double vc)
{
    for (int p = 0; p < s->npos; p++)
        if (s->pending[p] >= 0 && tf__vak_static(s, p, cs, vc) > 0)
            forward_returned(s, p, t, cs);
}

/* ---- segment construction ------------------------------------------------------------- */

static double interp_sched(const tf_synth *s, const double *vals, double t, double nominal)
{
    const tf_design *d = &s->d;
    size_t n = d->nschedule < TF_DESIGN_MAX_SCHEDULE ? d->nschedule : TF_DESIGN_MAX_SCHEDULE;
    double t_prev = NAN, v_prev = NAN;
    for (size_t k = 0; k < n; k++) {
        if (isnan(vals[k]))
            continue;
        double tk = d->sched_t_s[k];
        if (t <= tk) {
            if (isnan(t_prev) || tk == t_prev)
                return vals[k];
            return v_prev + (vals[k] - v_prev) * (t - t_prev) / (tk - t_prev);
        }
        t_prev = tk;
        v_prev = vals[k];
    }
    return isnan(v_prev) ? nominal : v_prev;
}

static int unrecovered(const tf_synth *s, int pos, double t)
{
    return s->tq > 0 && s->t_zero[pos] > -INFINITY && t - s->t_zero[pos] < s->tq;
}

static double drive_tiny(const tf_synth *s)
{
    return 1e-12 * (fabs(s->vdc) + fabs(tf__or0(s->d.precharge_v)) + 1.0);
}

typedef struct {
    const tf_seg *g;
    int what;  /* 0: current, 1: di/dt, 2: vc - level, 3: stray v_ak */
    double level, sign;
    const tf_synth *s;
} seg_fn_ctx;

static double seg_fn(double tau, void *p)
{
    seg_fn_ctx *c = p;
    double x[3], didt;
    tf__seg_state(c->g, c->g->t0 + tau, x, &didt);
    switch (c->what) {
    case 0: return x[0];
    case 1: return didt;
    case 2: return x[1] - c->level;
    default: return -c->s->vd + c->sign * c->s->ls * didt;
    }
}

static double fire_time_next(const tf_synth *s)
{
    double t;
    int p;
    return tf__firing(s, s->next_fire, &t, &p) ? t : INFINITY;
}

/* Thresholds of a single-switch stage while nothing conducts (the capacitor rings with
 * the reset choke): diode turn-on, thyristor conduction while gated or unrecovered,
 * forward voltage back on T1. */
static void choke_thresholds(const tf_synth *s, tf_seg *g, double win)
{
    double w0r = g->m.w0, h = M_PI / fmax(w0r, g->m.alpha) / 32.0;
    seg_fn_ctx c = {g, 2, 0, 0, s};
    double vc = g->x0[1], best = INFINITY;
    int which = -1;
    /* D1 turns on when vc rises above its level */
    c.level = s->E[0][TF_K_DIODE];
    if (vc < c.level) {
        double r = tf__first_crossing(seg_fn, &c, win, h);
        if (r < best) { best = r; which = TF_TH_DIODE; }
    }
    double t0 = g->t0, wend = t0;
    if (tf__gate_on(s, 0, t0))
        wend = fmax(wend, tf__last_pulse(s, 0, t0) + s->gate_w);
    if (unrecovered(s, 0, t0))
        wend = fmax(wend, s->t_zero[0] + s->tq);
    c.level = s->E[0][TF_K_THY];
    if (wend > t0 && vc > c.level) {
        double r = tf__first_crossing(seg_fn, &c, fmin(win, wend - t0), h);
        if (r < best) { best = r; which = TF_TH_THYRISTOR; }
    }
    c.level = s->vdc; /* v_ak1 = vdc - vc */
    if (s->pending[0] >= 0 && vc > c.level) {
        double r = tf__first_crossing(seg_fn, &c, win, h);
        if (r < best) { best = r; which = TF_TH_FORWARD; }
    }
    if (which >= 0 && t0 + best < g->t1) {
        g->t1 = t0 + best;
        g->ev = TF_EV_THRESH;
        g->ev_arg = which;
    }
}

void tf__build_segment(tf_synth *s, tf_seg *g, double t0, int cs, const double x[3])
{
    memset(g, 0, sizeof *g);
    g->t0 = t0;
    g->cs = cs;
    g->x0[0] = x[0];
    g->x0[1] = x[1];
    g->x0[2] = x[2];
    g->R = interp_sched(s, s->d.sched_r_ohm, t0, s->R);
    g->L = interp_sched(s, s->d.sched_l_h, t0, s->L);
    double tf = fire_time_next(s);
    g->t1 = tf;
    g->ev = isfinite(tf) ? TF_EV_FIRE : TF_EV_NONE;
    double win = tf - t0;

    if (cs == TF_CS_NONE) {
        g->x0[0] = 0;
        if (s->topo == TF_TOPO_SINGLE) {
            g->model = TF_MODEL_CHOKE;
            tf__rlc2_init(&g->m, s->Lr, s->Rr, s->C, 0.0);
            double horizon = 8 * M_PI / fmax(g->m.w0, g->m.alpha);
            if (!(win < horizon)) {
                g->t1 = t0 + horizon;
                g->ev = TF_EV_RESCAN;
                win = horizon;
            }
            choke_thresholds(s, g, win);
        } else {
            g->model = TF_MODEL_REST;
            g->x0[2] = 0;
        }
        return;
    }
    g->E = s->E[CS_POS(cs)][CS_KIND(cs)];
    if (s->topo == TF_TOPO_SINGLE) {
        double L = g->L, R = g->R, C = s->C, Lr = s->Lr, Rr = s->Rr, E = g->E;
        double A[9] = {-R / L, -1 / L, 0, 1 / C, 0, -1 / C, 0, 1 / Lr, -Rr / Lr};
        memcpy(g->A, A, sizeof A);
        g->xp[0] = g->xp[2] = E / (R + Rr);
        g->xp[1] = Rr * E / (R + Rr);
        g->model = TF_MODEL_TANK3;
        double w0 = 1 / sqrt(L * C), h = M_PI / fmax(w0, R / (2 * L)) / 32.0;
        tf__seg_modal3(g, s->eig_ws, M_PI / w0);
        double horizon = 64 * M_PI / w0;
        if (!(win < horizon)) {
            g->t1 = t0 + horizon;
            g->ev = TF_EV_RESCAN;
            win = horizon;
        }
        seg_fn_ctx c = {g, 0, 0, 0, s};
        double r = tf__first_crossing(seg_fn, &c, win, h);
        if (t0 + r < g->t1) {
            g->t1 = t0 + r;
            g->ev = TF_EV_ZERO;
        }
        return;
    }
    g->model = TF_MODEL_TANK;
    g->x0[2] = 0;
    tf__rlc2_init(&g->m, g->L, g->R, s->C, g->E);
    double k = (g->E - x[1]) / g->L - g->m.alpha * x[0];
    double r = tf__rlc2_first_zero(&g->m, x[0], k);
    if (t0 + r <= g->t1 && isfinite(r)) {
        g->t1 = t0 + r;
        g->ev = TF_EV_ZERO;
    }
}

/* ---- segment history ------------------------------------------------------------------ */


tf_seg *tf__seg_push(tf_synth *s)
{
    if (s->seg_first > 0 && s->seg_first + s->seg_count >= s->seg_cap) {
        memmove(s->seg, s->seg + s->seg_first, s->seg_count * sizeof *s->seg);
        s->seg_first = 0;
    }
    tf_seg *n = grow(s->seg, &s->seg_cap, s->seg_first + s->seg_count + 1, sizeof *n,
                     &s->nomem);
    if (!n)
        return NULL;
    s->seg = n;
    return tf__seg_at(s, s->seg_count++);
}

void tf__seg_trim(tf_synth *s)
{
    while (s->seg_count > 1 && tf__seg_at(s, 0)->t1 < s->t_min_request) {
        s->seg_first++;
        s->seg_count--;
    }
}

/* ---- completed segments: peaks, reverse bias with stray inductance, truth ------------- */

static void complete_segment(tf_synth *s, const tf_seg *g)
{
    if (g->cs != TF_CS_NONE && s->iv_open && s->niv > 0) {
        tf_synth_interval *v = &s->iv[s->niv - 1];
        double len = g->t1 - g->t0, cand[3] = {0, len, -1};
        if (g->model == TF_MODEL_TANK) {
            double d0 = (g->E - g->R * g->x0[0] - g->x0[1]) / g->L;
            double d2 = (-g->R * d0 - g->x0[0] / s->C) / g->L;
            cand[2] = tf__rlc2_first_zero(&g->m, d0, d2 + g->m.alpha * d0);
        } else {
            seg_fn_ctx c = {g, 1, 0, 0, s};
            double w0 = 1 / sqrt(g->L * s->C);
            cand[2] = tf__first_crossing(seg_fn, &c, len, M_PI / w0 / 32.0);
        }
        for (int k = 0; k < 3; k++) {
            if (!(cand[k] >= 0 && cand[k] <= len))
                continue;
            double x[3], didt;
            tf__seg_state(g, g->t0 + cand[k], x, &didt);
            if (fabs(x[0]) > fabs(v->peak_a)) {
                v->peak_a = x[0];
                v->peak_s = g->t0 + cand[k];
            }
        }
    }
    if (g->cs != TF_CS_NONE && CS_KIND(g->cs) == TF_K_DIODE && s->ls > 0) {
        int p = CS_POS(g->cs);
        long k = s->pending[p];
        if (k >= 0 && isnan(s->to[k].reverse_end_s)) {
            seg_fn_ctx c = {g, 3, 0, s->sgn[p][TF_K_THY], s};
            double len = g->t1 - g->t0, r;
            if (seg_fn(0, &c) >= 0)
                r = 0;
            else
                r = tf__first_crossing(seg_fn, &c, len,
                                       M_PI * sqrt(g->L * s->C) / 32.0);
            if (r <= len)
                s->to[k].reverse_end_s = g->t0 + r;
        }
    }
    if (s->acc)
        tf__accum_segment(s, g);
}

/* ---- events --------------------------------------------------------------------------- */

/* Which device takes the current from zero at t with capacitor voltage vc. */
static int decide_from_zero(const tf_synth *s, double t, double vc)
{
    int best = TF_CS_NONE;
    double bd = drive_tiny(s);
    for (int p = 0; p < s->npos; p++) {
        double dd = s->sgn[p][TF_K_DIODE] * (s->E[p][TF_K_DIODE] - vc);
        if (dd > bd) {
            bd = dd;
            best = CS(p, TF_K_DIODE);
        }
        if (tf__gate_on(s, p, t) || unrecovered(s, p, t)) {
            double dt = s->sgn[p][TF_K_THY] * (s->E[p][TF_K_THY] - vc);
            if (dt > bd) {
                bd = dt;
                best = CS(p, TF_K_THY);
            }
        }
    }
    return best;
}

static int on_fire(tf_synth *s, double t, int p, int cs, double vc)
{
    s->last_fire[p] = t;
    if (cs == TF_CS_NONE) {
        double dt = s->sgn[p][TF_K_THY] * (s->E[p][TF_K_THY] - vc);
        return dt > drive_tiny(s) ? CS(p, TF_K_THY) : TF_CS_NONE;
    }
    if (CS_POS(cs) == p)
        return cs; /* already on, or its own diode conducts: the gate waits */
    if (CS_KIND(cs) == TF_K_DIODE)
        return CS(p, TF_K_THY); /* overlapping: the diode current commutates to it */
    /* the opposite thyristor still conducts: the firing shorts the link */
    add_failure(s, t, CS_POS(cs), TF_FAIL_FIRED_ON_CONDUCTING, NAN);
    return cs;
}

static tf_status step(tf_synth *s)
{
    tf_seg *g = tf__seg_at(s, s->seg_count - 1);
    double t = g->t1, x[3], didt;
    tf__seg_state(g, t, x, &didt);
    complete_segment(s, g);
    int cs = g->cs, ncs = cs, ev = g->ev, arg = g->ev_arg, forced = -1;

    if (ev == TF_EV_ZERO) {
        x[0] = 0;
        if (cs != TF_CS_NONE && CS_KIND(cs) == TF_K_THY) {
            int p = CS_POS(cs);
            s->t_zero[p] = t;
            if (s->active[p] >= 0) {
                s->to[s->active[p]].zero_s = t;
                s->pending[p] = s->active[p];
                s->active[p] = -1;
            }
        }
        ncs = decide_from_zero(s, t, x[1]);
    } else if (ev == TF_EV_THRESH) {
        if (arg == TF_TH_DIODE)
            ncs = CS(0, TF_K_DIODE);
        else if (arg == TF_TH_THYRISTOR)
            ncs = CS(0, TF_K_THY);
        else
            forced = 0;
    }
    double tfn;
    int pos;
    while (tf__firing(s, s->next_fire, &tfn, &pos) && tfn <= t) {
        s->next_fire++;
        ncs = on_fire(s, t, pos, ncs, x[1]);
    }
    if (ncs != cs && ncs != TF_CS_NONE && CS_KIND(ncs) == TF_K_THY)
        start_thyristor(s, CS_POS(ncs), t);
    if (forced >= 0)
        forward_returned(s, forced, t, ncs);
    track_forward(s, t, ncs, x[1]);
    if (ncs != cs) {
        if (s->iv_open && s->niv > 0) {
            s->iv[s->niv - 1].end_s = t;
            s->iv_open = 0;
        }
        if (ncs != TF_CS_NONE)
            open_interval(s, ncs, t);
    }
    tf_seg *n = tf__seg_push(s);
    if (!n || s->nomem)
        return TF_ERR_NOMEM;
    tf__build_segment(s, n, t, ncs, x);
    return TF_OK;
}

tf_status tf__advance(tf_synth *s, double t, tf_error *err)
{
    /* a sample at exactly an event time shows the state after the event */
    while (tf__seg_at(s, s->seg_count - 1)->t1 <= t) {
        if (step(s) != TF_OK)
            return tf_error_set(err, TF_ERR_NOMEM, "simulator: out of memory");
        tf__seg_trim(s);
    }
    return TF_OK;
}

