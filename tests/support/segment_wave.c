/* Exact piecewise series-RLC waveforms for segmenter tests (see segment_wave.h).
 * source: textbook series RLC response, i = e^{-at}(P cos wt + Q sin wt) per piece. */
#include "segment_wave.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

void segw_defaults(segw_cfg *c)
{
    memset(c, 0, sizeof *c);
    c->topo = TF_TOPO_HALF_BRIDGE;
    c->L = 50e-6;
    c->C = 12e-6;
    c->R = 0.25;
    c->E = 300;
    c->fire_step_s = 180e-6;
    c->t_first_s = 20e-6;
    c->fs = 10e6;
    c->duration_s = 2e-3;
    c->skip_firing = -1;
    c->seed = 1;
}

typedef struct piece {
    double t0, t1, P, Q, V, vc0;
    tf_device dev;
} piece;

typedef struct sim {
    const segw_cfg *c;
    double a, w;
    piece *p;
    size_t np, cap;
    segw_interval *iv;
    size_t niv, ivcap;
} sim;

static int push_piece(sim *s, const piece *p)
{
    if (s->np == s->cap) {
        s->cap = s->cap ? 2 * s->cap : 256;
        piece *q = realloc(s->p, s->cap * sizeof *q);
        if (!q)
            return -1;
        s->p = q;
    }
    s->p[s->np++] = *p;
    return 0;
}

static int push_iv(sim *s, tf_device d, double t0, double t1, int refire)
{
    if (s->niv == s->ivcap) {
        s->ivcap = s->ivcap ? 2 * s->ivcap : 256;
        segw_interval *q = realloc(s->iv, s->ivcap * sizeof *q);
        if (!q)
            return -1;
        s->iv = q;
    }
    s->iv[s->niv++] = (segw_interval){d, t0, t1, refire, 0.0};
    return 0;
}

static double p_i(const sim *s, const piece *p, double t)
{
    double u = t - p->t0;
    return exp(-s->a * u) * (p->P * cos(s->w * u) + p->Q * sin(s->w * u));
}

static double p_vc(const sim *s, const piece *p, double t)
{
    double u = t - p->t0, e = exp(-s->a * u), co = cos(s->w * u), si = sin(s->w * u);
    double i = e * (p->P * co + p->Q * si);
    double di = e * ((-s->a * p->P + s->w * p->Q) * co + (-s->a * p->Q - s->w * p->P) * si);
    return p->V - s->c->L * di - s->c->R * i;
}

/* first zero of the piece's current after t0 (the start may itself be a zero) */
static double p_zero(const sim *s, const piece *p)
{
    double phi = atan2(p->P, p->Q), th = fmod(-phi, M_PI);
    if (th < 0)
        th += M_PI;
    if (th < 1e-9)
        th += M_PI;
    return p->t0 + th / s->w;
}

static piece start_piece(const sim *s, double t, double i0, double vc0, double V, tf_device d)
{
    piece p = {t, 0, i0, 0, V, vc0, d};
    p.Q = ((V - vc0 - s->c->R * i0) / s->c->L + s->a * i0) / s->w;
    return p;
}

static tf_device thy(const segw_cfg *c, int upper)
{
    if (c->topo == TF_TOPO_FULL_BRIDGE)
        return upper ? TF_DEV_T1T2 : TF_DEV_T3T4;
    if (c->topo == TF_TOPO_RING_DOWN)
        return TF_DEV_T1;
    return upper ? TF_DEV_T1 : TF_DEV_T2;
}

static tf_device dio(const segw_cfg *c, int upper)
{
    if (c->topo == TF_TOPO_FULL_BRIDGE)
        return upper ? TF_DEV_D1D2 : TF_DEV_D3D4;
    if (c->topo == TF_TOPO_RING_DOWN)
        return TF_DEV_D1;
    return upper ? TF_DEV_D1 : TF_DEV_D2;
}

/* drive voltage of the side (upper +E, lower -E; single: E) for current sign sg */
static double drive(const segw_cfg *c, int upper, int sg)
{
    double base = c->topo == TF_TOPO_SINGLE ? c->E : c->topo == TF_TOPO_RING_DOWN ? 0
                  : upper ? c->E : -c->E;
    int thyristor = upper ? sg > 0 : sg < 0;
    if (c->topo == TF_TOPO_SINGLE)
        thyristor = sg > 0;
    return base - sg * (thyristor ? c->vt : c->vd);
}

static int simulate(sim *s, double **fire, size_t *nfire)
{
    const segw_cfg *c = s->c;
    double t = 0, vc = c->topo == TF_TOPO_RING_DOWN ? c->E : 0, end = c->duration_s;
    size_t kf = 0, nf = 0, fcap = 64;
    double *f = malloc(fcap * sizeof *f);
    if (!f)
        return -1;
    int side = -1; /* conducting side: 1 upper, 0 lower, -1 none */
    double last_thy_zero = -1;
    int last_thy_side = -1;
    while (t < end) {
        double tf_next = c->t_first_s + (double)kf * c->fire_step_s;
        if (c->topo == TF_TOPO_RING_DOWN && kf > 0)
            tf_next = INFINITY;
        int fire_upper = c->topo == TF_TOPO_SINGLE || c->topo == TF_TOPO_RING_DOWN || kf % 2 == 0;
        if (side < 0) {
            /* idle: current zero until the next firing */
            double t1 = fmin(tf_next, end);
            piece p = {t, t1, 0, 0, 0, vc, TF_DEV_UNKNOWN};
            if (push_piece(s, &p))
                return -1;
            t = t1;
            if (t >= end)
                break;
            int skip = (int)kf == c->skip_firing;
            kf++;
            if (skip)
                continue;
            if (nf == fcap) {
                fcap *= 2;
                double *g = realloc(f, fcap * sizeof *g);
                if (!g)
                    return -1;
                f = g;
            }
            f[nf++] = t;
            if (c->topo == TF_TOPO_SINGLE)
                vc = c->reset_v;
            side = fire_upper;
            int sg = c->topo == TF_TOPO_RING_DOWN ? (c->E > 0 ? -1 : 1) : (side ? 1 : -1);
            (void)sg;
            continue;
        }
        /* conducting: sign of the coming current from the drive */
        piece p0 = start_piece(s, t, 0, vc, drive(c, side, side ? 1 : -1), TF_DEV_UNKNOWN);
        int sg = p0.Q > 0 ? 1 : -1;
        if (c->topo == TF_TOPO_SINGLE)
            sg = 1;
        double i = 0;
        int first = 1;
        /* follow lobes of this side until the current stops or the other side fires */
        for (;;) {
            double V = drive(c, side, sg);
            piece p = start_piece(s, t, i, vc, V, TF_DEV_UNKNOWN);
            int thyr = c->topo == TF_TOPO_SINGLE ? sg > 0 : side ? sg > 0 : sg < 0;
            p.dev = thyr ? thy(c, side) : dio(c, side);
            double tz = p_zero(s, &p);
            double tn = c->topo == TF_TOPO_RING_DOWN ? INFINITY
                        : c->t_first_s + (double)kf * c->fire_step_s;
            int other = c->topo == TF_TOPO_HALF_BRIDGE || c->topo == TF_TOPO_FULL_BRIDGE;
            int refire = !first && thyr;
            if (other && tn < tz && tn < end && (int)kf != c->skip_firing && !thyr) {
                /* overlapping: the other side fires during this diode interval */
                p.t1 = tn;
                if (push_piece(s, &p) || push_iv(s, p.dev, t, tn, refire))
                    return -1;
                i = p_i(s, &p, tn);
                vc = p_vc(s, &p, tn);
                t = tn;
                side = !side;
                kf++;
                if (nf == fcap) {
                    fcap *= 2;
                    double *g = realloc(f, fcap * sizeof *g);
                    if (!g)
                        return -1;
                    f = g;
                }
                f[nf++] = tn;
                sg = i > 0 ? 1 : -1;
                first = 1;
                continue;
            }
            double t1 = fmin(tz, end);
            p.t1 = t1;
            if (push_piece(s, &p) || push_iv(s, p.dev, t, t1, refire))
                return -1;
            vc = p_vc(s, &p, t1);
            t = t1;
            i = 0;
            first = 0;
            if (t >= end)
                break;
            if (thyr) {
                last_thy_zero = t;
                last_thy_side = side;
                sg = -sg; /* its diode follows */
                continue;
            }
            if (c->topo == TF_TOPO_RING_DOWN) {
                sg = -sg;
                continue;
            }
            /* diode interval over: forward voltage back on the thyristor of this side */
            if (c->tq_s > 0 && last_thy_side == side && t - last_thy_zero < c->tq_s) {
                sg = -sg; /* not recovered: it conducts again without a firing */
                continue;
            }
            side = -1;
            break;
        }
        if (kf > 0 && t >= c->t_first_s + (double)kf * c->fire_step_s && side < 0) {
            /* a firing fell while the other device conducted without overlap: skip it */
            while (c->t_first_s + (double)kf * c->fire_step_s <= t)
                kf++;
        }
    }
    *fire = f;
    *nfire = nf;
    return 0;
}

static double gauss(unsigned long long *st)
{
    double u[2];
    for (int k = 0; k < 2; k++) {
        *st ^= *st << 13;
        *st ^= *st >> 7;
        *st ^= *st << 17;
        u[k] = ((double)(*st >> 11) + 0.5) / 9007199254740992.0;
    }
    return sqrt(-2 * log(u[0])) * cos(2 * M_PI * u[1]);
}

int segw_make(const segw_cfg *c, segw_out *o)
{
    memset(o, 0, sizeof *o);
    sim s = {c, c->R / (2 * c->L), 0, NULL, 0, 0, NULL, 0, 0};
    double w0 = 1 / sqrt(c->L * c->C);
    s.w = sqrt(w0 * w0 - s.a * s.a);
    o->wd = s.w;
    o->alpha = s.a;
    if (simulate(&s, &o->fire, &o->nfire))
        return -1;
    size_t n = (size_t)floor(c->duration_s * c->fs);
    int ng = c->gates ? (c->topo == TF_TOPO_FULL_BRIDGE ? 4 : c->topo == TF_TOPO_HALF_BRIDGE ? 2 : 1) : 0;
    o->cap = tf_capture_create();
    if (!o->cap || tf_capture_alloc(o->cap, 1 + (size_t)ng, n, NULL) != TF_OK)
        return -1;
    o->cap->dt_s = 1 / c->fs;
    o->cap->t0_s = 0;
    strcpy(o->cap->ch[0].name, "i_load");
    strcpy(o->cap->ch[0].unit, "A");
    float *x = o->cap->ch[0].samples;
    size_t pi = 0;
    (void)0;
    unsigned long long st = c->seed * 0x9E3779B97F4A7C15ull + 1;
    double q = c->bits ? 2 * c->range / pow(2, c->bits) : 0, s2 = 0;
    for (size_t k = 0; k < n; k++) {
        double t = (double)k / c->fs;
        while (pi + 1 < s.np && t >= s.p[pi].t1)
            pi++;
        double v = s.p[pi].P == 0 && s.p[pi].Q == 0 ? 0 : p_i(&s, &s.p[pi], t);
        x[k] = (float)v;
        s2 += v * v;
    }
    o->rms = sqrt(s2 / (double)(n ? n : 1));
    for (size_t v = 0; v < s.niv; v++) {
        double pk = 0;
        for (size_t k = (size_t)fmax(0.0, ceil(s.iv[v].t0 * c->fs)); k < n && (double)k / c->fs <= s.iv[v].t1; k++)
            pk = fmax(pk, fabs((double)x[k]));
        s.iv[v].peak = pk;
    }
    double sigma = c->snr_db > 0 ? o->rms / pow(10, c->snr_db / 20) : c->noise;
    o->noise = sigma;
    for (size_t k = 0; k < n; k++) {
        double v = x[k];
        if (sigma > 0)
            v += sigma * gauss(&st);
        if (c->range > 0)
            v = v > c->range ? c->range : v < -c->range ? -c->range : v;
        if (q > 0)
            v = q * floor(v / q + 0.5);
        x[k] = (float)v;
    }
    for (int g = 0; g < ng; g++) {
        float *y = o->cap->ch[1 + g].samples;
        snprintf(o->cap->ch[1 + g].name, TF_NAME_SIZE, "g%d", g + 1);
        memset(y, 0, n * sizeof *y);
        for (size_t f = 0; f < o->nfire; f++) {
            int upper = c->topo != TF_TOPO_HALF_BRIDGE && c->topo != TF_TOPO_FULL_BRIDGE
                            ? 1 : f % 2 == 0;
            /* firing order of the bridge alternates sides: recover the side from the
             * interval that starts there */
            for (size_t v = 0; v < s.niv; v++)
                if (fabs(s.iv[v].t0 - o->fire[f]) < 1e-12) {
                    tf_device d = s.iv[v].dev;
                    upper = d == TF_DEV_T1 || d == TF_DEV_T1T2 || d == TF_DEV_D1 || d == TF_DEV_D1D2;
                    break;
                }
            int mine = ng == 1 ? 1 : ng == 2 ? (g == 0) == upper : (g < 2) == upper;
            if (!mine)
                continue;
            size_t k0 = (size_t)ceil(o->fire[f] * c->fs), k1 = k0 + (size_t)(5e-6 * c->fs);
            for (size_t k = k0; k < k1 && k < n; k++)
                y[k] = 1;
        }
    }
    free(s.p);
    /* drop the idle pieces' zero-length records: intervals are already conduction only */
    o->iv = s.iv;
    o->niv = s.niv;
    return 0;
}

void segw_free(segw_out *o)
{
    tf_capture_destroy(o->cap);
    free(o->iv);
    free(o->fire);
    memset(o, 0, sizeof *o);
}
