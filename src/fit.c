/* Fitter: every burst and lobe fitted (threads), combined across bursts, derived L, C, R,
 * the v-i and power methods, and their agreement. */
#include "fit_internal.h"

#include <math.h>
#include <pthread.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <gsl/gsl_statistics_double.h>

/* What tf_fit_result.detail points at. */
typedef struct fit_detail {
    tf_fit_burst *bursts;
    size_t nbursts;
} fit_detail;

/* A lobe fitted on its own. */
typedef struct lobe_fit {
    int ok, thyristor;
    double fd_hz, alpha_per_s;
} lobe_fit;

typedef struct job_ctx {
    const float *x;
    size_t n;
    double dt;
    const tf_segment_result *seg;
    const tf_fit_options *opt;
    double drop_v;        /* V_T + V_D per commutation; NAN when unknown */
    double c_f, l_h;      /* known C or L (NAN when not) */
    tf_fit_burst *out;
    int multi_lobe;       /* some burst has two or more lobes */
    int probe_offset;     /* the segmenter found the current resting away from zero */
    size_t longest;       /* samples of the longest burst (ring-down: fragments are short) */
    lobe_fit *lobes;
    double *start;        /* per burst: the plain fit's alpha (1/s) and wd (rad/s) */
    size_t nblocks;       /* bursts are fitted in blocks of BLOCK (jobs below nblocks) */
    size_t njobs;
    atomic_size_t next;
    atomic_int nomem;
} job_ctx;

static const double NANV = NAN;

/* Bursts per job. Inside a block each burst's fit starts from the previous burst's
 * result (neighbours share the tank), the first one from the matrix pencil: a fixed
 * partition, so the results do not depend on the thread count. */
#define BLOCK 32

void tf_fit_options_init(tf_fit_options *o)
{
    memset(o, 0, sizeof *o);
    o->capacitance_f = o->inductance_h = o->thyristor_drop_v = o->diode_drop_v = NAN;
    o->skew_s = 0.0;
}

const char *tf_fitb_status_name(tf_fitb_status s)
{
    switch (s) {
    case TF_FITB_OK: return "ok";
    case TF_FITB_CLIPPED: return "clipped";
    case TF_FITB_ANOMALOUS: return "anomalous";
    case TF_FITB_SHORT: return "short";
    case TF_FITB_FAILED: return "failed";
    }
    return "unknown";
}

static void burst_blank(tf_fit_burst *b)
{
    b->peak_a = b->fd_hz = b->u_fd_hz = b->alpha_per_s = b->u_alpha_per_s = NANV;
    b->alpha_raw_per_s = b->u_alpha_raw_per_s = b->w0_rad_s = b->q = b->u_q = NANV;
    b->log_decrement = NANV;
    b->residual_rms_a = b->resistance_ohm = b->u_resistance_ohm = b->resistance_raw_ohm = NANV;
    b->inductance_h = b->capacitance_f = NANV;
    b->vi_resistance_ohm = b->vi_inductance_h = b->vi_capacitance_f = NANV;
}

/* L of the tank from w0 and the known C, or the known L itself. */
static double tank_l(const job_ctx *c, double w0)
{
    if (isfinite(c->l_h))
        return c->l_h;
    if (isfinite(c->c_f))
        return 1.0 / (w0 * w0 * c->c_f);
    return NANV;
}

/* Fit burst k, started from start (alpha, wd of a neighbour) when not NULL. */
static void fit_one_burst(const job_ctx *c, tf_dsfit_workspace *ws, size_t k, const double *start)
{
    const tf_burst *sb = &c->seg->bursts[k];
    tf_fit_burst *b = &c->out[k];
    memset(b, 0, sizeof *b);
    burst_blank(b);
    b->index = k;
    b->start_s = sb->start_s;
    b->end_s = sb->end_s;
    size_t i0 = sb->i0, i1 = sb->i1 > c->n ? c->n : sb->i1;
    double peak = 0;
    for (size_t q = i0; q < i1; q++) {
        const double a = fabs(c->x[q]);
        if (a > peak)   /* fmax is a library call here; NAN samples are skipped alike */
            peak = a;
    }
    b->peak_a = peak;
    if (sb->clipped) {
        b->status = TF_FITB_CLIPPED;
        return;
    }
    if (sb->anomalous) {
        b->status = TF_FITB_ANOMALOUS;
        return;
    }
    /* a burst is a thyristor lobe and its diode lobe (or a ring-down): a lone lobe is
     * a fragment (the record's edge, the end of a ring-down) */
    if (i1 <= i0 || i1 - i0 < 16 || (sb->nlobes == 1 && c->multi_lobe) ||
        (c->seg->topology == TF_TOPO_RING_DOWN && 4 * (i1 - i0) < c->longest)) {
        b->status = TF_FITB_SHORT;
        return;
    }
    tf_dsfit_options o = {c->opt->offset_term || c->seg->topology == TF_TOPO_SINGLE, 0.0, 0,
                          0.0, 0.0, 0.0};
    if (isfinite(c->drop_v) && (isfinite(c->c_f) || isfinite(c->l_h))) {
        o.drop_step_v = c->drop_v;
        o.drop_c_f = isfinite(c->c_f) ? c->c_f : 0.0;
        o.drop_l_h = isfinite(c->l_h) ? c->l_h : 0.0;
    }
    tf_dsfit fit;
    tf_error e;
    if ((start ? tf_dsfit_run_from(ws, c->x + i0, i1 - i0, c->dt, &o, start[0], start[1], &fit, &e)
               : tf_dsfit_run(ws, c->x + i0, i1 - i0, c->dt, &o, &fit, &e)) != TF_OK) {
        b->status = TF_FITB_FAILED;
        return;
    }
    const double w0raw = hypot(fit.raw_wd_rad_s, fit.raw_alpha_per_s);
    const double lraw = tank_l(c, w0raw);
    const double a = fit.alpha_per_s, wd = fit.wd_rad_s, w0 = hypot(wd, a);
    if (!(a > 0) || !(fit.raw_alpha_per_s > 0) || !(wd > a / 10)) {
        /* growing or overdamped: not a lossy resonant tank, the fit found no burst */
        b->status = TF_FITB_FAILED;
        return;
    }
    b->fd_hz = wd / (2 * M_PI);
    b->u_fd_hz = fit.u_wd_rad_s / (2 * M_PI);
    b->alpha_per_s = a;
    b->u_alpha_per_s = fit.u_alpha_per_s;
    b->alpha_raw_per_s = fit.raw_alpha_per_s;
    b->u_alpha_raw_per_s = fit.raw_u_alpha_per_s;
    b->w0_rad_s = w0;
    b->q = w0 / (2 * a);
    /* dQ/dalpha and dQ/dwd of Q = sqrt(wd^2 + alpha^2) / (2 alpha) */
    const double dqa = 1.0 / (2 * w0) - w0 / (2 * a * a), dqw = wd / (2 * a * w0);
    b->u_q = sqrt(dqa * dqa * fit.u_alpha_per_s * fit.u_alpha_per_s +
                  dqw * dqw * fit.u_wd_rad_s * fit.u_wd_rad_s + 2 * dqa * dqw * fit.cov_alpha_wd);
    b->log_decrement = a * 2 * M_PI / wd;
    b->residual_rms_a = fit.residual_rms;
    const double L = tank_l(c, w0);
    if (isfinite(L)) {
        b->resistance_ohm = 2 * a * L;
        if (isfinite(c->l_h)) {
            b->u_resistance_ohm = 2 * L * fit.u_alpha_per_s;
            b->capacitance_f = 1.0 / (w0 * w0 * L);
        } else {
            /* R = 2 alpha / (w0^2 C): propagate alpha and wd */
            const double dra = 2 * L - 4 * a * a * L / (w0 * w0);
            const double drw = -4 * a * wd * L / (w0 * w0);
            b->u_resistance_ohm = sqrt(dra * dra * fit.u_alpha_per_s * fit.u_alpha_per_s +
                                       drw * drw * fit.u_wd_rad_s * fit.u_wd_rad_s +
                                       2 * dra * drw * fit.cov_alpha_wd);
            b->inductance_h = L;
        }
        b->resistance_raw_ohm = 2 * fit.raw_alpha_per_s * lraw;
    }
    c->start[2 * k] = fit.raw_alpha_per_s;
    c->start[2 * k + 1] = fit.raw_wd_rad_s;
    b->status = TF_FITB_OK;
}

static void fit_block(const job_ctx *c, tf_dsfit_workspace *ws, size_t blk)
{
    const size_t k0 = blk * BLOCK, k1 = k0 + BLOCK < c->seg->nbursts ? k0 + BLOCK : c->seg->nbursts;
    const double *start = NULL;
    for (size_t k = k0; k < k1; k++) {
        fit_one_burst(c, ws, k, start);
        if (c->out[k].status == TF_FITB_OK)
            start = &c->start[2 * k];
    }
}

static void fit_one_lobe(const job_ctx *c, tf_dsfit_workspace *ws, size_t k)
{
    const tf_lobe *l = &c->seg->lobes[k];
    lobe_fit *r = &c->lobes[k];
    r->ok = 0;
    r->thyristor = tf_device_is_thyristor(l->device);
    size_t i1 = l->i1 > c->n ? c->n : l->i1;
    if (l->clipped || i1 <= l->i0 || i1 - l->i0 < 16)
        return;
    const int own = l->burst < c->seg->nbursts;
    if (own && c->out[l->burst].status != TF_FITB_OK)
        return;
    tf_dsfit f;
    tf_error e;
    /* started from its burst's plain fit (a lobe is half of it) */
    if ((own ? tf_dsfit_run_from(ws, c->x + l->i0, i1 - l->i0, c->dt, NULL, c->start[2 * l->burst],
                                 c->start[2 * l->burst + 1], &f, &e)
             : tf_dsfit_run(ws, c->x + l->i0, i1 - l->i0, c->dt, NULL, &f, &e)) != TF_OK)
        return;
    r->ok = 1;
    r->fd_hz = f.wd_rad_s / (2 * M_PI);
    r->alpha_per_s = f.alpha_per_s;
}

static void *worker(void *arg)
{
    job_ctx *c = arg;
    tf_dsfit_workspace *ws = tf_dsfit_workspace_create();
    if (!ws) {
        atomic_store(&c->nomem, 1);
        return NULL;
    }
    for (;;) {
        size_t k = atomic_fetch_add(&c->next, 1);
        if (k >= c->njobs)
            break;
        if (k < c->nblocks)
            fit_block(c, ws, k);
        else
            fit_one_lobe(c, ws, k - c->nblocks);
    }
    tf_dsfit_workspace_destroy(ws);
    return NULL;
}

/* Lobes need their burst's status: bursts first (all), then lobes. Jobs [next, njobs)
 * standing for `items` fits. */
static int run_jobs(job_ctx *c, size_t njobs, size_t items, int threads)
{
    c->njobs = njobs;
    pthread_t th[16];
    int nt = threads;
    if (nt > 16)
        nt = 16;
    if ((size_t)nt > items / 32 + 1)
        nt = (int)(items / 32 + 1);
    if ((size_t)nt > njobs - atomic_load(&c->next))
        nt = (int)(njobs - atomic_load(&c->next));
    int started = 0;
    for (int t = 1; t < nt; t++)
        if (pthread_create(&th[started], NULL, worker, c) == 0)
            started++;
    worker(c);
    for (int t = 0; t < started; t++)
        pthread_join(th[t], NULL);
    return atomic_load(&c->nomem) ? -1 : 0;
}

/* ---- statistics across bursts ------------------------------------------------------ */

double tf_fit_median(double *x, size_t n)
{
    /* GSL's selection (no full sort); the mean of the middle two for even n */
    return n ? gsl_stats_median(x, 1, n) : NANV;
}

void tf_fit_spread_of(const double *x, size_t n, size_t stride, double *scratch,
                      tf_fit_spread *out)
{
    size_t m = 0;
    out->min = INFINITY;
    out->max = -INFINITY;
    for (size_t k = 0; k < n; k++) {
        double v = x[k * stride];
        if (!isfinite(v))
            continue;
        scratch[m++] = v;
        if (v < out->min) /* finite v: as fmin, fmax */
            out->min = v;
        if (v > out->max)
            out->max = v;
    }
    out->count = m;
    if (!m) {
        out->median = out->spread = out->min = out->max = NANV;
        return;
    }
    out->median = tf_fit_median(scratch, m);
    for (size_t k = 0; k < m; k++)
        scratch[k] = fabs(scratch[k] - out->median);
    out->spread = 1.4826 * tf_fit_median(scratch, m);
}

static void est_set(tf_estimate *e, double v, double u, const char *method)
{
    e->value = v;
    e->u = u;
    snprintf(e->method, sizeof e->method, "%s", method);
}

static void est_none(tf_estimate *e) { est_set(e, NANV, NANV, "none"); }

/* Combine one per-burst quantity (field at byte offset off, uncertainty at uoff or
 * (size_t)-1) over the ok bursts: median, and u of the median from the spread
 * (1.2533 s / sqrt(N)), never below the typical single-burst u / sqrt(N). */
static void combine(const tf_fit_burst *b, size_t nb, size_t off, size_t uoff, double *scratch,
                    tf_fit_spread *sp, double *u_out)
{
    size_t m = 0;
    for (size_t k = 0; k < nb; k++)
        if (b[k].status == TF_FITB_OK)
            scratch[m++] = *(const double *)((const char *)&b[k] + off);
    double *tmp = scratch + nb;
    tf_fit_spread_of(scratch, m, 1, tmp, sp);
    double u = NANV;
    if (sp->count) {
        double ut = NANV;
        if (uoff != (size_t)-1) {
            size_t q = 0;
            for (size_t k = 0; k < nb; k++)
                if (b[k].status == TF_FITB_OK) {
                    double v = *(const double *)((const char *)&b[k] + uoff);
                    if (isfinite(v))
                        tmp[q++] = v;
                }
            ut = q ? tf_fit_median(tmp, q) : NANV;
        }
        const double sn = sqrt((double)sp->count);
        if (sp->count == 1)
            u = ut;
        else {
            u = 1.2533 * sp->spread / sn;
            if (isfinite(ut) && ut / sn > u)
                u = ut / sn;
        }
    }
    *u_out = u;
}

#define OFF(f) offsetof(tf_fit_burst, f)

static void add_note(tf_fit_result *r, const char *fmt, const char *arg)
{
    if (r->nnotes < TF_FIT_MAX_NOTES)
        snprintf(r->notes[r->nnotes++], sizeof r->notes[0], fmt, arg ? arg : "");
}

static void add_warning(tf_fit_result *r, const char *text)
{
    if (r->nwarnings < TF_FIT_MAX_NOTES)
        snprintf(r->warnings[r->nwarnings++], sizeof r->warnings[0], "%s", text);
}

/* Do a and b differ by more than twice their combined standard uncertainty? */
static int disagree(const tf_estimate *a, const tf_estimate *b)
{
    if (!isfinite(a->value) || !isfinite(b->value))
        return 0;
    double u = hypot(isfinite(a->u) ? a->u : 0, isfinite(b->u) ? b->u : 0);
    /* below 1 % the methods' own discretisation and model limits dominate */
    const double floor_rel = 0.01 * 0.5 * fabs(a->value + b->value);
    return fabs(a->value - b->value) > 2.0 * u && fabs(a->value - b->value) > floor_rel;
}

static void ringdown_pair(tf_fit_result *r, const tf_estimate *o, int c_given, int l_given,
                          const char *clip)
{
    char t[256];
    if (!disagree(&r->ringdown_r, o))
        return;
    const char *cause;
    if (!r->drops_modelled && r->ringdown_r.value > o->value)
        cause = "device drops not modelled (give thyristor_drop and diode_drop)";
    else if (c_given)
        cause = "the given capacitance may be wrong (ring-down R scales with 1/C)";
    else if (l_given)
        cause = "the given inductance may be wrong (ring-down R scales with L)";
    else
        cause = "a model assumption";
    snprintf(t, sizeof t, "ring-down R %.4g ohm and %s R %.4g ohm differ beyond their uncertainty; likely cause: %s%s",
             r->ringdown_r.value, o->method, o->value, cause, clip);
    add_warning(r, t);
}

static void agreement(tf_fit_result *r, int c_given, int l_given)
{
    char t[256];
    const char *clip = r->bursts_clipped ? " (some bursts were clipped: check the probe range)" : "";
    /* the power method averages over the whole capture, weighted by i^2: when R moves
     * between bursts (a heating run) it is not comparable with the burst median */
    const tf_fit_spread *sp = &r->s_resistance_ohm;
    const int varies = sp->count > 2 && sp->max - sp->min > 0.04 * fabs(sp->median) &&
                       sp->spread > 0.01 * fabs(sp->median) &&
                       !(sp->spread <= 2.0 * r->r_burst_u_ohm); /* beyond the fits' own noise */
    ringdown_pair(r, &r->vi_r, c_given, l_given, clip);
    if (isfinite(r->power_r.value) && varies) {
        add_note(r, "%s", "R varies between bursts: the power method's whole-capture average is "
                          "not compared (see tankfit track)");
    } else {
        ringdown_pair(r, &r->power_r, c_given, l_given, clip);
        if (disagree(&r->vi_r, &r->power_r)) {
            snprintf(t, sizeof t, "v-i R %.4g ohm and power R %.4g ohm differ beyond their uncertainty; likely cause: probe skew (check --skew)%s",
                     r->vi_r.value, r->power_r.value, clip);
            add_warning(r, t);
        }
    }
    if (disagree(&r->ringdown_l, &r->vi_l)) {
        snprintf(t, sizeof t, "ring-down L %.4g H and v-i L %.4g H differ beyond their uncertainty; likely cause: the given capacitance is wrong",
                 r->ringdown_l.value, r->vi_l.value);
        add_warning(r, t);
    }
    if (disagree(&r->ringdown_c, &r->vi_c)) {
        snprintf(t, sizeof t, "ring-down C %.4g F and v-i C %.4g F differ beyond their uncertainty; likely cause: %s",
                 r->ringdown_c.value, r->vi_c.value,
                 l_given ? "the given inductance is wrong" : "the given capacitance is wrong");
        add_warning(r, t);
    }
}

static void lobe_stats(const lobe_fit *lf, size_t nl, double *scratch, tf_fit_lobes *out)
{
    for (int kind = 0; kind < 2; kind++) {
        for (int q = 0; q < 2; q++) {
            size_t m = 0;
            for (size_t k = 0; k < nl; k++)
                if (lf[k].ok && lf[k].thyristor == !kind)
                    scratch[m++] = q ? lf[k].alpha_per_s : lf[k].fd_hz;
            tf_fit_spread *sp = kind ? (q ? &out->diode_alpha_per_s : &out->diode_fd_hz)
                                     : (q ? &out->thyristor_alpha_per_s : &out->thyristor_fd_hz);
            tf_fit_spread_of(scratch, m, 1, scratch + nl, sp);
        }
    }
}

static int default_threads(void)
{
    long n = sysconf(_SC_NPROCESSORS_ONLN);
    return n < 1 ? 1 : (n > 16 ? 16 : (int)n);
}

int tf_fit_threads(int threads) { return threads > 0 ? (threads > 16 ? 16 : threads) : default_threads(); }

typedef struct pfor {
    size_t n;
    atomic_size_t next;
    void (*fn)(void *ctx, size_t k);
    void *ctx;
} pfor;

static void *pfor_worker(void *arg)
{
    pfor *p = arg;
    for (size_t k; (k = atomic_fetch_add(&p->next, 1)) < p->n;)
        p->fn(p->ctx, k);
    return NULL;
}

void tf_fit_parallel_for(size_t n, int threads, void (*fn)(void *ctx, size_t k), void *ctx)
{
    pfor p;
    p.n = n;
    atomic_init(&p.next, 0);
    p.fn = fn;
    p.ctx = ctx;
    pthread_t th[16];
    int nt = threads > 16 ? 16 : threads, started = 0;
    if ((size_t)nt > n / 16 + 1)
        nt = (int)(n / 16 + 1);
    for (int t = 1; t < nt; t++)
        if (pthread_create(&th[started], NULL, pfor_worker, &p) == 0)
            started++;
    pfor_worker(&p);
    for (int t = 0; t < started; t++)
        pthread_join(th[t], NULL);
}

static tf_status run_vi_power(const tf_capture *cap, const tf_roles *roles,
                              const tf_segment_result *seg, const tf_fit_options *opt,
                              tf_fit_result *r, tf_fit_burst *fb, double *scratch, tf_error *err);

static void summarise_ringdown(tf_fit_result *r, const job_ctx *c, tf_fit_burst *fb, size_t nb,
                               double *scratch)
{
    double u;
    const char *m = r->drops_modelled ? "ring-down+drops" : "ring-down";
    combine(fb, nb, OFF(fd_hz), OFF(u_fd_hz), scratch, &r->s_fd_hz, &u);
    est_set(&r->damped_frequency_hz, r->s_fd_hz.median, u, "ring-down");
    combine(fb, nb, OFF(alpha_per_s), OFF(u_alpha_per_s), scratch, &r->s_alpha_per_s, &u);
    est_set(&r->decay_per_s, r->s_alpha_per_s.median, u, m);
    tf_fit_spread sp;
    combine(fb, nb, OFF(alpha_raw_per_s), OFF(u_alpha_raw_per_s), scratch, &sp, &u);
    est_set(&r->decay_raw_per_s, sp.median, u, "ring-down");
    combine(fb, nb, OFF(w0_rad_s), OFF(u_fd_hz), scratch, &sp, &u);
    est_set(&r->undamped_frequency_hz, sp.median / (2 * M_PI), u, m);
    combine(fb, nb, OFF(q), OFF(u_q), scratch, &r->s_q, &u);
    est_set(&r->q, r->s_q.median, u, m);
    combine(fb, nb, OFF(log_decrement), (size_t)-1, scratch, &sp, &u);
    if (!isfinite(u)) /* one burst: delta = 2 pi alpha / wd, relative u of alpha */
        u = fabs(sp.median) * r->decay_per_s.u / r->decay_per_s.value;
    est_set(&r->log_decrement, sp.median, u, m);
    est_none(&r->ringdown_r);
    est_none(&r->ringdown_l);
    est_none(&r->ringdown_c);
    est_none(&r->resistance_raw_ohm);
    if (isfinite(c->c_f) || isfinite(c->l_h)) {
        combine(fb, nb, OFF(resistance_ohm), OFF(u_resistance_ohm), scratch, &r->s_resistance_ohm, &u);
        est_set(&r->ringdown_r, r->s_resistance_ohm.median, u, m);
        tf_fit_spread su;
        combine(fb, nb, OFF(u_resistance_ohm), (size_t)-1, scratch, &su, &u);
        r->r_burst_u_ohm = su.median;
        combine(fb, nb, OFF(resistance_raw_ohm), OFF(u_resistance_ohm), scratch, &sp, &u);
        est_set(&r->resistance_raw_ohm, sp.median, u, "ring-down");
        if (isfinite(c->l_h)) {
            combine(fb, nb, OFF(capacitance_f), (size_t)-1, scratch, &sp, &u);
            /* C = 1 / (w0^2 L): relative u is twice that of w0 */
            est_set(&r->ringdown_c, sp.median,
                    2 * sp.median * r->undamped_frequency_hz.u / r->undamped_frequency_hz.value, m);
            est_set(&r->ringdown_l, c->l_h, NANV, "given");
        } else {
            combine(fb, nb, OFF(inductance_h), (size_t)-1, scratch, &sp, &u);
            est_set(&r->ringdown_l, sp.median,
                    2 * sp.median * r->undamped_frequency_hz.u / r->undamped_frequency_hz.value, m);
            est_set(&r->ringdown_c, c->c_f, NANV, "given");
        }
    } else {
        add_note(r, "%s", "neither C nor L is known: fd, alpha and Q only from the ring-down fit "
                          "(give --capacitance or the design's capacitance)");
    }
    if (!r->drops_modelled) {
        if (!isfinite(c->drop_v))
            add_note(r, "%s", "device drops unknown (thyristor_drop, diode_drop): alpha and R are "
                              "from the plain damped-sine fit and may be overstated");
        else if (!isfinite(c->c_f) && !isfinite(c->l_h))
            add_note(r, "%s", "device drops known but neither C nor L: the drop model needs L, "
                              "alpha is from the plain fit");
    }
}

tf_status tf_fit_run(const tf_capture *cap, const tf_roles *roles, const tf_segment_result *seg,
                     const tf_fit_options *opt, tf_fit_result **out, tf_error *err)
{
    *out = NULL;
    if (!cap || !roles || !seg || !opt)
        return tf_error_set(err, TF_ERR_USAGE, "tf_fit_run: expected capture, roles, segments and options");
    if (roles->current < 0 || (size_t)roles->current >= cap->nchan)
        return tf_error_set(err, TF_ERR_USAGE, "tf_fit_run: no current channel");
    if (!seg->nbursts)
        return tf_error_set(err, TF_ERR_DATA, "no current bursts to fit (the segmenter found none)");
    tf_fit_gsl_quiet();
    tf_fit_result *r = calloc(1, sizeof *r);
    fit_detail *d = calloc(1, sizeof *d);
    const size_t nb = seg->nbursts, nl = opt->skip_lobes ? 0 : seg->nlobes;
    tf_fit_burst *fb = calloc(nb, sizeof *fb);
    lobe_fit *lf = calloc(nl + 1, sizeof *lf);
    double *scratch = malloc((2 * (nb > nl ? nb : nl) + 16) * sizeof *scratch);
    double *start = malloc(2 * nb * sizeof *start);
    if (!r || !d || !fb || !lf || !scratch || !start) {
        free(r); free(d); free(fb); free(lf); free(scratch); free(start);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    d->bursts = fb;
    d->nbursts = nb;
    r->detail = d;
    r->skew_s = r->skew_u_s = r->r_burst_u_ohm = NANV;
    snprintf(r->skew_method, sizeof r->skew_method, "none");

    job_ctx c;
    memset(&c, 0, sizeof c);
    c.x = cap->ch[roles->current].samples;
    c.n = cap->n;
    c.dt = cap->dt_s;
    c.seg = seg;
    c.opt = opt;
    c.c_f = opt->capacitance_f > 0 ? opt->capacitance_f : NANV;
    c.l_h = opt->inductance_h > 0 ? opt->inductance_h : NANV;
    if (isfinite(c.c_f) && isfinite(c.l_h))
        c.l_h = NANV;   /* C known wins: L is then identified, not assumed */
    c.drop_v = NANV;
    if (isfinite(opt->thyristor_drop_v) && isfinite(opt->diode_drop_v))
        c.drop_v = (opt->thyristor_drop_v + opt->diode_drop_v) *
                   (seg->topology == TF_TOPO_FULL_BRIDGE ? 2.0 : 1.0);
    c.out = fb;
    c.lobes = lf;
    c.start = start;
    c.nblocks = (nb + BLOCK - 1) / BLOCK;
    for (size_t k = 0; k < seg->nanomalies; k++)
        c.probe_offset |= strcmp(seg->anomalies[k].kind, "offset") == 0;
    for (size_t k = 0; k < nb; k++) {
        c.multi_lobe |= seg->bursts[k].nlobes >= 2;
        const size_t len = seg->bursts[k].i1 > seg->bursts[k].i0 ? seg->bursts[k].i1 - seg->bursts[k].i0 : 0;
        if (len > c.longest)
            c.longest = len;
    }
    atomic_init(&c.next, 0);
    atomic_init(&c.nomem, 0);
    const int threads = opt->threads > 0 ? opt->threads : default_threads();
    const int failed = run_jobs(&c, c.nblocks, nb, threads) != 0 ||
                       (nl && (atomic_store(&c.next, c.nblocks),
                               run_jobs(&c, c.nblocks + nl, nl, threads) != 0));
    free(start);
    if (failed) {
        tf_fit_free(r);
        free(lf);
        free(scratch);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    r->drops_modelled = isfinite(c.drop_v) && (isfinite(c.c_f) || isfinite(c.l_h));
    r->drop_step_v = c.drop_v;
    for (size_t k = 0; k < nb; k++) {
        switch (fb[k].status) {
        case TF_FITB_OK: r->bursts_fitted++; break;
        case TF_FITB_CLIPPED: r->bursts_clipped++; break;
        case TF_FITB_ANOMALOUS: r->bursts_anomalous++; break;
        case TF_FITB_SHORT: r->bursts_short++; r->bursts_failed++; break;
        default: r->bursts_failed++; break;
        }
    }
    r->bursts_excluded = nb - r->bursts_fitted;
    if (!r->bursts_fitted) {
        tf_error_set(err, TF_ERR_DATA,
                     "no burst could be fitted: %zu bursts, %zu clipped, %zu with anomalies, %zu too short or not converging",
                     nb, r->bursts_clipped, r->bursts_anomalous, r->bursts_failed);
        tf_fit_free(r);
        free(lf);
        free(scratch);
        return TF_ERR_DATA;
    }
    summarise_ringdown(r, &c, fb, nb, scratch);
    if (c.probe_offset)
        /* an offset term in the burst fits does not help: the lobe boundaries the
         * fits start from are shifted too (a 3 % offset moved fd by 5 %) */
        add_note(r, "%s", "the current rests away from zero (offset anomaly): fd, alpha and Q "
                          "are biased; correct the probe with --offset NAME=VALUE and rerun");
    memset(&r->lobes, 0, sizeof r->lobes);
    lobe_stats(lf, nl, scratch, &r->lobes);
    free(lf);
    tf_status st = run_vi_power(cap, roles, seg, opt, r, fb, scratch, err);
    free(scratch);
    if (st != TF_OK) {
        tf_fit_free(r);
        return st;
    }
    /* headline values: the ring-down when C or L is known, else v-i, else power */
    r->resistance_ohm = isfinite(r->ringdown_r.value) ? r->ringdown_r
                        : isfinite(r->vi_r.value)     ? r->vi_r
                                                      : r->power_r;
    if (isfinite(c.c_f)) {
        r->capacitance_f = r->ringdown_c;
        r->inductance_h = r->ringdown_l;
    } else if (isfinite(c.l_h)) {
        r->capacitance_f = r->ringdown_c;
        r->inductance_h = r->ringdown_l;
    } else {
        r->capacitance_f = r->vi_c;
        r->inductance_h = r->vi_l;
    }
    if (!isfinite(r->resistance_ohm.value))
        est_none(&r->resistance_ohm);
    agreement(r, isfinite(c.c_f), isfinite(c.l_h));
    *out = r;
    return TF_OK;
}

/* ---- v-i and power methods over the bursts ------------------------------------------ */

static tf_status run_vi_power(const tf_capture *cap, const tf_roles *roles,
                              const tf_segment_result *seg, const tf_fit_options *opt,
                              tf_fit_result *r, tf_fit_burst *fb, double *scratch, tf_error *err)
{
    est_none(&r->vi_r);
    est_none(&r->vi_l);
    est_none(&r->vi_c);
    est_none(&r->power_r);
    if (opt->skew_set) {
        r->skew_s = opt->skew_s;
        r->skew_u_s = 0.0;
        snprintf(r->skew_method, sizeof r->skew_method, "given");
    }
    if (roles->voltage < 0 || (size_t)roles->voltage >= cap->nchan) {
        add_note(r, "%s", "no output-voltage channel: v-i identification and power method not run");
        return TF_OK;
    }
    if (seg->topology == TF_TOPO_RING_DOWN) {
        /* the voltage across a ringing tank is only the device drops: the circuit
         * equation is then homogeneous and fixes R/L and 1/(LC), not L and C */
        add_note(r, "%s", "ring-down: the output voltage carries only the device drops, so v-i "
                          "identification and the power method are not run");
        return TF_OK;
    }
    const float *v = cap->ch[roles->voltage].samples, *i = cap->ch[roles->current].samples;
    const size_t n = cap->n, nb = seg->nbursts;
    tf_window *win = malloc((nb + 1) * sizeof *win);
    double *pr = malloc(3 * (nb + 1) * sizeof *pr);
    if (!win || !pr) {
        free(win);
        free(pr);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    size_t nw = 0;
    for (size_t k = 0; k < nb; k++) {
        if (fb[k].status != TF_FITB_OK)
            continue;
        /* include half of the dead time on each side: the levels before and after a
         * burst (v = vc while no current flows) fix the scale of L and C */
        const tf_burst *b = &seg->bursts[k];
        const size_t len = b->i1 - b->i0;
        const size_t prev_end = k ? seg->bursts[k - 1].i1 : 0;
        const size_t next_start = k + 1 < nb ? seg->bursts[k + 1].i0 : n;
        size_t ml = b->i0 > prev_end ? (b->i0 - prev_end) / 2 : 0;
        size_t mr = next_start > b->i1 ? (next_start - b->i1) / 2 : 0;
        ml = ml > len / 2 ? len / 2 : (ml < 2 ? 2 : ml);
        mr = mr > len / 2 ? len / 2 : (mr < 2 ? 2 : mr);
        win[nw].i0 = b->i0 > ml ? b->i0 - ml : 0;
        win[nw].i1 = b->i1 + mr < n ? b->i1 + mr : n;
        /* no dead time after this burst (overlapping, continuous): the next firing's
         * voltage step must lie inside the window, so take the next burst in too */
        if (next_start < b->i1 + len / 10 && k + 1 < nb) {
            const size_t e2 = seg->bursts[k + 1].i1;
            win[nw].i1 = e2 + 2 < n ? e2 + 2 : n;
        }
        win[nw].burst = k;
        nw++;
    }
    tf_vi_result vi;
    tf_status st = TF_OK;
    if (nw) {
        st = tf_vi_identify(v, i, n, cap->dt_s, win, nw, opt->skew_set, opt->skew_s,
                            opt->skew_search_s, tf_fit_threads(opt->threads), &vi, pr,
                            pr + nb + 1, pr + 2 * (nb + 1), err);
        if (st == TF_OK && vi.valid) {
            est_set(&r->vi_r, vi.r_ohm, vi.u_r_ohm, "v-i");
            est_set(&r->vi_l, vi.l_h, vi.u_l_h, "v-i");
            est_set(&r->vi_c, vi.c_f, vi.u_c_f, "v-i");
            for (size_t w = 0; w < nw; w++) {
                fb[win[w].burst].vi_resistance_ohm = pr[w];
                fb[win[w].burst].vi_inductance_h = pr[nb + 1 + w];
                fb[win[w].burst].vi_capacitance_f = pr[2 * (nb + 1) + w];
            }
            if (!opt->skew_set) {
                r->skew_s = vi.skew_s;
                r->skew_u_s = vi.u_skew_s;
                snprintf(r->skew_method, sizeof r->skew_method, "v-i residual");
            }
        } else if (st == TF_ERR_NUMERIC) {
            add_note(r, "v-i identification failed: %.150s", err->msg);
            tf_error_clear(err);
            st = TF_OK;
        }
    }
    free(win);
    free(pr);
    if (st != TF_OK)
        return st;
    /* power method: whole firing periods of the first thyristor */
    size_t nbnd = 0;
    size_t *bnd = malloc((seg->ncycles + 1) * sizeof *bnd);
    if (!bnd)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    for (size_t k = 0; k < seg->ncycles; k++) {
        if (seg->cycles[k].thyristor != seg->cycles[0].thyristor)
            continue;
        double pos = (seg->cycles[k].start_s - cap->t0_s) / cap->dt_s;
        if (pos >= 0 && pos < (double)n)
            bnd[nbnd++] = (size_t)floor(pos + 0.5);
    }
    if (seg->topology == TF_TOPO_RING_DOWN)
        nbnd = 0; /* one release, no firing periods */
    if (nbnd >= 2) {
        const double sk = isfinite(r->skew_s) ? r->skew_s : 0.0;
        /* the skew's share of the uncertainty from R at skew +- u: one pass for all three */
        const int with_u = isfinite(r->skew_u_s) && r->skew_u_s > 0;
        const double skews[3] = {sk, sk + r->skew_u_s, sk - r->skew_u_s};
        double rp[3], up[3];
        if (tf_power_resistance(v, i, n, cap->dt_s, skews, with_u ? 3 : 1, bnd, nbnd,
                                tf_fit_threads(opt->threads), rp, up, err) == TF_OK) {
            if (with_u)
                up[0] = hypot(up[0], 0.5 * fabs(rp[1] - rp[2]));
            est_set(&r->power_r, rp[0], up[0], "power");
        } else
            tf_error_clear(err);
    } else
        add_note(r, "%s", "power method needs whole firing periods: not run");
    free(bnd);
    (void)scratch;
    return TF_OK;
}

void tf_fit_free(tf_fit_result *r)
{
    if (!r)
        return;
    fit_detail *d = r->detail;
    if (d) {
        free(d->bursts);
        free(d);
    }
    free(r);
}

const tf_fit_burst *tf_fit_bursts(const tf_fit_result *r, size_t *n)
{
    const fit_detail *d = r ? r->detail : NULL;
    *n = d ? d->nbursts : 0;
    return d ? d->bursts : NULL;
}

/* ---- JSON ------------------------------------------------------------------------- */

static json_t *num(double v) { return isfinite(v) ? json_real(v) : json_null(); }

static json_t *est_json(const tf_estimate *e)
{
    return json_pack("{s:o, s:o, s:s}", "value", num(e->value), "u", num(e->u), "method",
                     e->method);
}

static json_t *spread_json(const tf_fit_spread *s)
{
    return json_pack("{s:o, s:o, s:o, s:o, s:I}", "median", num(s->median), "spread",
                     num(s->spread), "min", num(s->min), "max", num(s->max), "count",
                     (json_int_t)s->count);
}

json_t *tf_fit_to_json(const tf_fit_result *r)
{
    json_t *o = json_object();
    if (!o || !r)
        return o;
    json_object_set_new(o, "damped_frequency_hz", est_json(&r->damped_frequency_hz));
    json_object_set_new(o, "decay_per_s", est_json(&r->decay_per_s));
    json_object_set_new(o, "decay_raw_per_s", est_json(&r->decay_raw_per_s));
    json_object_set_new(o, "undamped_frequency_hz", est_json(&r->undamped_frequency_hz));
    json_object_set_new(o, "q", est_json(&r->q));
    json_object_set_new(o, "log_decrement", est_json(&r->log_decrement));
    json_object_set_new(o, "inductance_h", est_json(&r->inductance_h));
    json_object_set_new(o, "capacitance_f", est_json(&r->capacitance_f));
    json_object_set_new(o, "resistance_ohm", est_json(&r->resistance_ohm));
    json_object_set_new(o, "resistance_raw_ohm", est_json(&r->resistance_raw_ohm));
    json_t *m = json_object();
    json_object_set_new(m, "ring_down", json_pack("{s:o, s:o, s:o}", "resistance_ohm",
                                                  est_json(&r->ringdown_r), "inductance_h",
                                                  est_json(&r->ringdown_l), "capacitance_f",
                                                  est_json(&r->ringdown_c)));
    json_object_set_new(m, "v_i", json_pack("{s:o, s:o, s:o}", "resistance_ohm",
                                            est_json(&r->vi_r), "inductance_h",
                                            est_json(&r->vi_l), "capacitance_f",
                                            est_json(&r->vi_c)));
    json_object_set_new(m, "power", json_pack("{s:o}", "resistance_ohm", est_json(&r->power_r)));
    json_object_set_new(o, "methods", m);
    json_object_set_new(o, "skew_s", json_pack("{s:o, s:o, s:s}", "value", num(r->skew_s), "u",
                                               num(r->skew_u_s), "method", r->skew_method));
    json_object_set_new(o, "bursts", json_pack("{s:I, s:I, s:I, s:I, s:I, s:I}", "fitted",
                                               (json_int_t)r->bursts_fitted, "excluded",
                                               (json_int_t)r->bursts_excluded, "clipped",
                                               (json_int_t)r->bursts_clipped, "anomalous",
                                               (json_int_t)r->bursts_anomalous, "failed",
                                               (json_int_t)r->bursts_failed, "short",
                                               (json_int_t)r->bursts_short));
    json_object_set_new(o, "spread", json_pack("{s:o, s:o, s:o, s:o}", "damped_frequency_hz",
                                               spread_json(&r->s_fd_hz), "decay_per_s",
                                               spread_json(&r->s_alpha_per_s), "q",
                                               spread_json(&r->s_q), "resistance_ohm",
                                               spread_json(&r->s_resistance_ohm)));
    json_object_set_new(o, "drops", json_pack("{s:b, s:o}", "modelled", r->drops_modelled,
                                              "step_v", num(r->drop_step_v)));
    json_object_set_new(
        o, "lobes",
        json_pack("{s:{s:o, s:o}, s:{s:o, s:o}}", "thyristor", "damped_frequency_hz",
                  spread_json(&r->lobes.thyristor_fd_hz), "decay_per_s",
                  spread_json(&r->lobes.thyristor_alpha_per_s), "diode", "damped_frequency_hz",
                  spread_json(&r->lobes.diode_fd_hz), "decay_per_s",
                  spread_json(&r->lobes.diode_alpha_per_s)));
    json_t *notes = json_array(), *warn = json_array();
    for (size_t k = 0; k < r->nnotes; k++)
        json_array_append_new(notes, json_string(r->notes[k]));
    for (size_t k = 0; k < r->nwarnings; k++)
        json_array_append_new(warn, json_string(r->warnings[k]));
    json_object_set_new(o, "notes", notes);
    json_object_set_new(o, "warnings", warn);
    return o;
}
