/* Segmenter, second stage: topology, overlapping splits, devices, bursts, cycles, mode. */
#include "segment_internal.h"

#include <math.h>
#include <pthread.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_sort.h>
#include <gsl/gsl_statistics_double.h>

static int zero_kind(seg_bkind k) { return k == SEG_B_DEAD || k == SEG_B_TOUCH; }

static double median_of(double *v, size_t n)
{
    if (!n)
        return NAN;
    gsl_sort(v, 1, n);
    return gsl_stats_median_from_sorted_data(v, 1, n);
}

/* ---- topology ------------------------------------------------------------------- */

tf_topology seg_infer_topology(const seg_input *in, const seg_run *r, size_t nr, char *ev,
                               size_t evsize)
{
    if (in->ngates >= 3) {
        snprintf(ev, evsize, "%d gate channels fire: full-bridge", in->ngates);
        return TF_TOPO_FULL_BRIDGE;
    }
    if (in->ngates == 2) {
        snprintf(ev, evsize, "2 gate channels fire: half-bridge");
        return TF_TOPO_HALF_BRIDGE;
    }
    /* the pattern is read on strong lobes only: a ring-down's tail, down in the noise,
     * breaks into fragments with gaps that are not dead zones of a firing sequence */
    size_t same = 0, opp = 0, starts = 0, strong = 0;
    /* strong: well above the band and at least a fifth of the largest lobe, so that the
     * pattern does not hang on where the band happens to cut a ring-down's tail (the
     * lobes of a bridge at Q >= 3 stay within a factor 2 of each other) */
    float maxpk = 0;
    for (size_t j = 0; j < nr; j++)
        maxpk = r[j].pk > maxpk ? r[j].pk : maxpk;
    /* (at low SNR, 8 bands can exceed the peak: half the largest lobe is then enough) */
    const float big = fmaxf(fminf((float)(8 * in->band), 0.5f * maxpk), 0.2f * maxpk);
    for (size_t j = 0; j + 1 < nr; j++) {
        if (!zero_kind(r[j].k_end) || r[j].pk < big || r[j + 1].pk < big)
            continue;
        if (r[j].sign == r[j + 1].sign)
            same++;
        else
            opp++;
    }
    for (size_t j = 0; j < nr; j++) {
        if (r[j].pk < big)
            continue;
        strong++;
        starts += zero_kind(r[j].k_start) || (j == 0 && r[j].k_start == SEG_B_EDGE);
    }
    if (in->ngates == 1 && in->nfire > 1) {
        snprintf(ev, evsize, "one gate channel fires: single switch");
        return TF_TOPO_SINGLE;
    }
    if ((in->ngates == 1 && in->nfire == 1) || (starts <= 1 && strong >= 4 && same + opp <= 1)) {
        double first = r[0].pk, last = r[nr - 1].pk;
        /* a free oscillation decays geometrically, in its second half as in its first;
         * a bridge in overlapping operation after its start-up transient shrinks in the
         * first only (9.1 kHz on the simulator's tank read as a ring-down without this;
         * a lobe cut by the record's end says nothing) */
        size_t nw = nr > 1 && r[nr - 1].k_end == SEG_B_EDGE ? nr - 1 : nr;
        if (nw >= 3 && r[nw - 1].pk >= 0.85 * r[nw / 2].pk)
            last = first;
        if (in->nfire == 1 || last < 0.7 * first) {
            snprintf(ev, evsize, "one firing followed by %zu alternating decaying lobes: "
                     "ring-down", nr);
            return TF_TOPO_RING_DOWN;
        }
    }
    if (strong < 2) {
        /* one lobe (or a current that never returns to zero) shows no pattern */
        snprintf(ev, evsize, "%zu strong lobe%s in the record: nothing shows the topology "
                 "(half-bridge assumed; give --topology)", strong, strong == 1 ? "" : "s");
        return TF_TOPO_HALF_BRIDGE;
    }
    if (same + opp == 0) {
        snprintf(ev, evsize, "no dead zone and lobes of steady size: bridge in overlapping "
                 "operation (half-bridge assumed; give --topology full-bridge for a full bridge)");
        return TF_TOPO_HALF_BRIDGE;
    }
    if (same >= opp) {
        snprintf(ev, evsize, "%zu of %zu dead zones lie between lobes of the same sign "
                 "(diode, then the other thyristor): half-bridge assumed (give --topology "
                 "full-bridge for a full bridge)", same, same + opp);
        return TF_TOPO_HALF_BRIDGE;
    }
    snprintf(ev, evsize, "%zu of %zu dead zones lie between a negative and a positive lobe "
             "(diode, then the same thyristor again): single switch", opp, same + opp);
    return TF_TOPO_SINGLE;
}

/* ---- overlapping splits --------------------------------------------------------- */

typedef struct lobe_rec {
    double t0, t1;
    seg_bkind k0, k1;
    int sign, m0, m1;
    double w;          /* model w of a split stretch (rad/sample), 0 when none */
    double vstep;      /* output-voltage step near a split (index units), NAN if none */
} lobe_rec;

/* The output voltage's step nearest a firing at s (index units): where it crosses half
 * way between its levels before and after; NAN when there is no voltage channel or no
 * clear step within 20 samples. */
static double voltage_step(const seg_input *in, double s)
{
    if (in->roles->voltage < 0)
        return NAN;
    const float *v = in->cap->ch[in->roles->voltage].samples;
    long k = (long)floor(s), n = (long)in->n;
    if (k < 40 || k + 40 >= n)
        return NAN;
    double before = 0, after = 0;
    for (long i = 25; i < 40; i++) {
        before += v[k - i];
        after += v[k + i];
    }
    before /= 15;
    after /= 15;
    double mid = 0.5 * (before + after), best = NAN;
    if (fabs(after - before) < 1e-9)
        return NAN;
    for (long i = k - 20; i < k + 20; i++)
        if ((v[i] - mid) * (v[i + 1] - mid) <= 0 && v[i] != v[i + 1]) {
            double t = (double)i + (mid - v[i]) / ((double)v[i + 1] - v[i]);
            if (!isfinite(best) || fabs(t - s) < fabs(best - s))
                best = t;
        }
    return best;
}

static int push_rec(seg_vec *v, const lobe_rec *l)
{
    lobe_rec *p = seg_vec_push(v);
    if (!p)
        return -1;
    *p = *l;
    return 0;
}

/* A firing strictly inside (a, b), index units; -1 when none. */
static double firing_inside(const seg_input *in, double a, double b)
{
    for (size_t i = 0; i < in->nfire; i++)
        if (in->fire[i] > a + 1 && in->fire[i] < b - 1)
            return in->fire[i];
    return -1;
}

static tf_status split_runs(const seg_input *in, const seg_run *r, size_t nr, tf_topology topo,
                            seg_vec *recs, double *w_out)
{
    int bridge = topo == TF_TOPO_HALF_BRIDGE || topo == TF_TOPO_FULL_BRIDGE;
    /* w from lobes that are whole pieces (start and end at a zero of their own piece) */
    double *tmp = malloc(2 * (nr + 1) * sizeof *tmp);
    if (!tmp)
        return TF_ERR_NOMEM;
    size_t nw = 0;
    for (size_t j = 0; j < nr; j++)
        if ((zero_kind(r[j].k_start) && r[j].k_end == SEG_B_DIRECT) ||
            (r[j].k_start == SEG_B_DIRECT && zero_kind(r[j].k_end)))
            tmp[nw++] = r[j].t_end - r[j].t_start;
    double wpiece = nw ? M_PI / median_of(tmp, nw) : 0;
    *w_out = wpiece;
    /* candidate stretches: start at a crossing, end at a crossing (or the record end) */
    int *cand = calloc(nr ? nr : 1, sizeof *cand);
    if (!cand) {
        free(tmp);
        return TF_ERR_NOMEM;
    }
    /* a touch in a bridge (diode run, then a run of the same sign: the current came
     * within the band of zero and went on) holds the same two pieces; cand 2 marks the
     * first run of such a pair, its stretch running to the end of the second */
    if (bridge)
        for (size_t j = 1; j + 1 < nr; j++)
            if (r[j].k_start == SEG_B_DIRECT && r[j].k_end == SEG_B_TOUCH &&
                r[j + 1].k_end == SEG_B_DIRECT && r[j + 1].sign == r[j].sign)
                cand[j] = 2;
    if (bridge)
        for (size_t j = 1; j < nr; j++) {
            if (r[j].k_start != SEG_B_DIRECT || r[j].k_end != SEG_B_DIRECT)
                continue;
            double len = r[j].t_end - r[j].t_start;
            if (firing_inside(in, r[j].t_start, r[j].t_end) >= 0 || !(wpiece > 0) ||
                len > 1.15 * M_PI / wpiece)
                cand[j] = 1;
        }
    /* a stretch the record's end cuts (cand 3): split at a gate edge inside it, or,
     * when it outlasts the diode piece's natural end, where the diode piece meets a
     * thyristor piece whose zero lies past the end */
    if (bridge && nr > 1 && r[nr - 1].k_start == SEG_B_DIRECT && r[nr - 1].k_end == SEG_B_EDGE &&
        (firing_inside(in, r[nr - 1].t_start, r[nr - 1].t_end) >= 0 ||
         (wpiece > 0 && r[nr - 1].t_end - r[nr - 1].t_start > M_PI / wpiece + 3)))
        cand[nr - 1] = 3;
    /* the tank's w and decay from a few stretches (searched), then every split with
     * them fixed: the shared values steady the split (w alone is known from whole pieces
     * in mixed operation) */
    double wsplit = wpiece, asplit = 0;
    {
        size_t m = 0;
        double *av = tmp + nr + 1;
        for (size_t j = 0; j < nr && m < 9; j++) {
            if (!cand[j] || cand[j] == 3)
                continue;
            double w = wpiece, a = 0, s, te = cand[j] == 2 ? r[j + 1].t_end : r[j].t_end;
            if (seg_split_pieces(in->x, (size_t)ceil(r[j].t_start) + 1, (size_t)floor(te) - 1,
                                 r[j].t_start, te, &w, &a, 0, &s) == 0) {
                tmp[m] = w;
                av[m++] = a;
            }
        }
        if (m) {
            wsplit = median_of(tmp, m);
            asplit = median_of(av, m);
        }
        if (!(wpiece > 0))
            *w_out = wsplit;
    }
    free(tmp);
    double touch = NAN; /* split of the touch that ended the previous run, or NAN */
    seg_bkind touch_kind = SEG_B_FIRING;
    for (size_t j = 0; j < nr; j++) {
        lobe_rec a = {r[j].t_start, r[j].t_end, r[j].k_start, r[j].k_end, r[j].sign,
                      r[j].start_model, r[j].end_model, 0, NAN};
        if (isfinite(touch)) {
            a.t0 = touch;
            a.k0 = touch_kind;
            a.m0 = 0;
            a.w = wsplit;
            touch = NAN;
        }
        if (cand[j] == 2) {
            /* the diode piece started from zero at z0 and would reach zero again at
             * z0 + pi / w; the thyristor piece ends at zero at z1 and, had it started
             * from zero, began at z1 - pi / w. When the first of these lies clearly after
             * the second, the firing cut the diode interval short (overlapping: the
             * current was within the band at the firing) and the pieces' meeting point
             * between them is the split; otherwise the current did reach zero (a
             * continuous touch, or a dead zone too short to show) and the touch stays */
            double g = -1, wa = wsplit, aa = asplit, c = -1, z0 = r[j].t_start,
                   z1 = r[j + 1].t_end;
            double nat = wa > 0 ? z0 + M_PI / wa : NAN, rise = wa > 0 ? z1 - M_PI / wa : NAN;
            if (wa > 0 && nat - rise > 0.5 &&
                seg_split_pieces(in->x, (size_t)ceil(z0) + 1, (size_t)floor(z1) - 1, z0, z1,
                                 &wa, &aa, 1, &c) != 0)
                c = -1;
            if (wa > 0 && nat - rise > 0.5)
                g = firing_inside(in, rise - 2, nat + 2);
            double sp = g >= 0 ? (c >= 0 && fabs(c - g) < 2.0 ? c : g) : c;
            if (sp >= rise - 1 && sp <= nat + 1) {
                touch = sp;
                touch_kind = SEG_B_FIRING;
                a.t1 = sp;
                a.k1 = SEG_B_FIRING;
                a.m1 = 0;
                a.w = wa;
                a.vstep = voltage_step(in, sp);
            }
            if (push_rec(recs, &a) != 0) {
                free(cand);
                return TF_ERR_NOMEM;
            }
            continue;
        }
        double s = -1, w = wsplit, vstep = NAN;
        if (cand[j] == 3) {
            double g = firing_inside(in, r[j].t_start, r[j].t_end), c = -1;
            if (w > 0 && seg_split_open(in->x, (size_t)ceil(r[j].t_start) + 1,
                                        (size_t)floor(r[j].t_end), r[j].t_start, w, asplit,
                                        &c) != 0)
                c = -1;
            if (c >= 0 && (c < r[j].t_start + 3 || c > r[j].t_start + M_PI / w + 1))
                c = -1;
            s = g >= 0 ? (c >= 0 && fabs(c - g) < 2.0 ? c : g) : c;
            if (s >= 0)
                vstep = voltage_step(in, s);
        }
        if (cand[j] == 1) {
            /* the gate edge is only known to the sample; the meeting point of the two
             * pieces is finer, so it is used when the two agree */
            double g = firing_inside(in, r[j].t_start, r[j].t_end), a = asplit, c = -1;
            if (w > 0 &&
                seg_split_pieces(in->x, (size_t)ceil(r[j].t_start) + 1,
                                 (size_t)floor(r[j].t_end) - 1, r[j].t_start, r[j].t_end, &w,
                                 &a, 1, &c) != 0)
                c = -1;
            s = g >= 0 ? (c >= 0 && fabs(c - g) < 2.0 ? c : g) : c;
            if (s >= 0)
                vstep = voltage_step(in, s);
        }
        if (s < 0) {
            if (push_rec(recs, &a) != 0) {
                free(cand);
                return TF_ERR_NOMEM;
            }
            continue;
        }
        lobe_rec b = a;
        a.t1 = s;
        a.k1 = SEG_B_FIRING;
        a.m1 = 0;
        a.w = w;
        a.vstep = vstep;
        b.t0 = s;
        b.k0 = SEG_B_FIRING;
        b.m0 = 0;
        b.w = w;
        if (push_rec(recs, &a) != 0 || push_rec(recs, &b) != 0) {
            free(cand);
            return TF_ERR_NOMEM;
        }
    }
    free(cand);
    return TF_OK;
}

/* ---- lobes ---------------------------------------------------------------------- */

static void lobe_stats(const seg_input *in, tf_lobe *L, double t0, double t1)
{
    const tf_capture *cap = in->cap;
    size_t i0 = (size_t)ceil(t0 < 0 ? 0 : t0), i1 = (size_t)ceil(t1);
    if (i1 > in->n)
        i1 = in->n;
    if (i1 <= i0)
        i1 = i0 + 1 <= in->n ? i0 + 1 : i0;
    /* four lanes: the sums no longer wait on each other; the peak is the first largest
     * sample, as one sequential search finds it (ties go to the lower index) */
    enum { LN = 4 };
    double ql[LN] = {0}, sl[LN] = {0}, bl[LN] = {-1, -1, -1, -1};
    size_t kl[LN] = {i0, i0, i0, i0}, k = i0;
    const double sg = L->sign;
    for (; k + LN <= i1; k += LN)
        for (int l = 0; l < LN; l++) {
            double v = in->x[k + (size_t)l], a = v * sg;
            ql[l] += v;
            sl[l] += v * v;
            if (a > bl[l]) {
                bl[l] = a;
                kl[l] = k + (size_t)l;
            }
        }
    for (int l = 0; k < i1; k++, l++) {
        double v = in->x[k], a = v * sg;
        ql[l] += v;
        sl[l] += v * v;
        if (a > bl[l]) {
            bl[l] = a;
            kl[l] = k;
        }
    }
    double q = (ql[0] + ql[1]) + (ql[2] + ql[3]), s2 = (sl[0] + sl[1]) + (sl[2] + sl[3]);
    double best = bl[0];
    size_t kp = kl[0];
    for (int l = 1; l < LN; l++)
        if (bl[l] > best || (bl[l] == best && kl[l] < kp)) {
            best = bl[l];
            kp = kl[l];
        }
    double tp = (double)kp, vp = in->x[kp];
    if (kp > i0 && kp + 1 < i1) {
        double ym = in->x[kp - 1], y0 = in->x[kp], yp = in->x[kp + 1], den = ym - 2 * y0 + yp;
        if (den != 0) {
            double d = 0.5 * (ym - yp) / den;
            if (fabs(d) <= 1) {
                tp += d;
                vp = y0 - 0.25 * (ym - yp) * d;
            }
        }
    }
    L->i0 = i0;
    L->i1 = i1;
    L->start_s = tf_capture_time(cap, 0) + t0 * cap->dt_s;
    L->end_s = tf_capture_time(cap, 0) + t1 * cap->dt_s;
    L->peak_s = tf_capture_time(cap, 0) + tp * cap->dt_s;
    L->peak_a = vp;
    L->charge_c = q * cap->dt_s;
    L->rms_a = i1 > i0 ? sqrt(s2 / (double)(i1 - i0)) : 0;
    for (size_t c = 0; c < in->nclips; c++)
        if (in->clips[c].i0 < i1 && in->clips[c].i1 >= i0)
            L->clipped = 1;
}

typedef struct stats_job {
    const seg_input *in;
    tf_lobe *L;
    const lobe_rec *rec;
    size_t from, to;
} stats_job;

static void *stats_worker(void *arg)
{
    stats_job *j = arg;
    for (size_t q = j->from; q < j->to; q++) {
        tf_lobe *l = &j->L[q];
        const lobe_rec *c = &j->rec[q];
        l->sign = c->sign;
        lobe_stats(j->in, l, c->t0, c->t1);
        l->start_model = c->m0;
        l->end_model = c->m1;
        l->end_by_firing = c->k1 == SEG_B_FIRING;
        l->partial = c->k0 == SEG_B_EDGE || c->k1 == SEG_B_EDGE;
    }
    return NULL;
}

/* ---- anomalies ------------------------------------------------------------------ */

static tf_status add_anomaly(seg_vec *an, double time_s, const char *kind, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 4, 5)))
#endif
    ;

static tf_status add_anomaly(seg_vec *an, double time_s, const char *kind, const char *fmt, ...)
{
    tf_anomaly *a = seg_vec_push(an);
    if (!a)
        return TF_ERR_NOMEM;
    a->time_s = time_s;
    snprintf(a->kind, sizeof a->kind, "%s", kind);
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(a->text, sizeof a->text, fmt, ap);
    va_end(ap);
    return TF_OK;
}

static tf_device thyristor_for(tf_topology topo, int sign)
{
    switch (topo) {
    case TF_TOPO_SINGLE: return TF_DEV_T1;
    case TF_TOPO_HALF_BRIDGE: return sign > 0 ? TF_DEV_T1 : TF_DEV_T2;
    case TF_TOPO_FULL_BRIDGE: return sign > 0 ? TF_DEV_T1T2 : TF_DEV_T3T4;
    default: return TF_DEV_RING;
    }
}

static tf_device diode_of(tf_device t)
{
    switch (t) {
    case TF_DEV_T1: return TF_DEV_D1;
    case TF_DEV_T2: return TF_DEV_D2;
    case TF_DEV_T1T2: return TF_DEV_D1D2;
    case TF_DEV_T3T4: return TF_DEV_D3D4;
    default: return TF_DEV_UNKNOWN;
    }
}

static tf_device gate_device(tf_topology topo, int gate)
{
    if (topo == TF_TOPO_FULL_BRIDGE)
        return gate < 2 ? TF_DEV_T1T2 : TF_DEV_T3T4;
    if (topo == TF_TOPO_HALF_BRIDGE)
        return gate == 0 ? TF_DEV_T1 : TF_DEV_T2;
    return TF_DEV_T1;
}

/* Index of the firing nearest t within tol (index units), or SIZE_MAX. */
static size_t firing_near(const seg_input *in, double t, double tol)
{
    size_t best = SIZE_MAX;
    double bd = tol;
    for (size_t i = 0; i < in->nfire; i++) {
        double d = fabs(in->fire[i] - t);
        if (d <= bd) {
            bd = d;
            best = i;
        }
    }
    return best;
}

static tf_status attribute_devices(const seg_input *in, tf_topology topo, tf_lobe *L,
                                   const lobe_rec *rec, size_t nl, seg_vec *an, int *inverted)
{
    int r_note_inverted = 0;
    const tf_capture *cap = in->cap;
    tf_status st = TF_OK;
    /* the thyristor sign of a single switch: the usual sign of lobes rising from zero */
    int tsign = 1;
    if (topo == TF_TOPO_SINGLE) {
        long vote = 0;
        for (size_t j = 0; j < nl; j++)
            if (zero_kind(rec[j].k0))
                vote += rec[j].sign;
        tsign = vote < 0 ? -1 : 1;
    }
    /* bridges: T1 (T1+T2) carries the positive current; when the gates say the opposite
     * for most firings, the current probe is inverted: name the devices by the gates */
    int flip = 1;
    if ((topo == TF_TOPO_HALF_BRIDGE || topo == TF_TOPO_FULL_BRIDGE) && in->nfire) {
        long agree = 0, disagree = 0;
        for (size_t j = 0; j < nl; j++) {
            if (!(zero_kind(rec[j].k0) || rec[j].k0 == SEG_B_FIRING))
                continue;
            size_t f = firing_near(in, rec[j].t0, fmax(3.0, 0.03 * (rec[j].t1 - rec[j].t0)));
            if (f == SIZE_MAX)
                continue;
            if (gate_device(topo, in->fire_gate[f]) == thyristor_for(topo, rec[j].sign))
                agree++;
            else
                disagree++;
        }
        if (disagree > agree) {
            flip = -1;
            r_note_inverted = 1;
        }
    }
    unsigned char *used = in->nfire ? calloc(in->nfire, 1) : NULL;
    if (in->nfire && !used)
        return TF_ERR_NOMEM;
    for (size_t j = 0; j < nl && st == TF_OK; j++) {
        tf_lobe *l = &L[j];
        double ts = l->start_s;
        if (topo == TF_TOPO_RING_DOWN) {
            /* one bidirectional switch: the thyristor carries the first lobe's direction,
             * its diode the other one */
            l->device = l->sign == L[0].sign ? TF_DEV_T1 : TF_DEV_D1;
            continue;
        }
        int tpos = zero_kind(rec[j].k0) || rec[j].k0 == SEG_B_FIRING;
        const tf_lobe *p = j ? &L[j - 1] : NULL;
        if (rec[j].k0 == SEG_B_EDGE) {
            /* cut by the record start: a thyristor lobe if a diode lobe follows it */
            int next_is_diode = j + 1 < nl && rec[j + 1].k0 == SEG_B_DIRECT &&
                                rec[j + 1].k1 != SEG_B_DIRECT;
            tpos = rec[j].k1 == SEG_B_DIRECT && next_is_diode;
            if (!tpos) {
                l->device = diode_of(thyristor_for(topo, topo == TF_TOPO_SINGLE ? tsign
                                                                                : -flip * l->sign));
                continue;
            }
        }
        if (tpos) {
            if (topo == TF_TOPO_SINGLE && l->sign != tsign) {
                l->device = TF_DEV_UNKNOWN;
                st = add_anomaly(an, ts, "out-of-sequence", "a %s lobe rises from zero where "
                                 "the thyristor conducts %s", l->sign > 0 ? "positive" : "negative",
                                 tsign > 0 ? "positively" : "negatively");
                continue;
            }
            l->device = thyristor_for(topo, flip * l->sign);
            if (in->nfire && rec[j].k0 != SEG_B_EDGE) {
                double tol = fmax(3.0, 0.03 * (rec[j].t1 - rec[j].t0));
                size_t f = firing_near(in, rec[j].t0, tol);
                if (f == SIZE_MAX)
                    st = add_anomaly(an, ts, "commutation-failure", "%s conducts without a "
                                     "firing (no gate edge within %.3g s)",
                                     tf_device_name(l->device), tol * cap->dt_s);
                else {
                    for (size_t q = 0; q < in->nfire; q++)
                        if (fabs(in->fire[q] - in->fire[f]) <= tol)
                            used[q] = 1; /* a diagonal pair fires two gates at once */
                    tf_device g = gate_device(topo, in->fire_gate[f]);
                    if (g != l->device)
                        st = add_anomaly(an, ts, "out-of-sequence", "gate %d fired but the "
                                         "current's sign belongs to %s", in->fire_gate[f] + 1,
                                         tf_device_name(l->device));
                }
            }
            continue;
        }
        /* starts at a crossing: the diode of the thyristor before it */
        if (p && tf_device_is_thyristor(p->device) && p->sign != l->sign) {
            l->device = diode_of(p->device);
            continue;
        }
        if (p && !tf_device_is_thyristor(p->device) && p->device != TF_DEV_UNKNOWN &&
            p->sign != l->sign && (topo == TF_TOPO_SINGLE ? l->sign == tsign : 1)) {
            /* current reverses again at the end of a diode interval: the thyristor
             * regained forward voltage too early and conducts without a firing */
            l->device = thyristor_for(topo, flip * l->sign);
            st = add_anomaly(an, ts, "commutation-failure", "%s conducts again straight after "
                             "%s's interval of %.4g s, without a firing",
                             tf_device_name(l->device), tf_device_name(p->device),
                             p->end_s - p->start_s);
            continue;
        }
        l->device = TF_DEV_UNKNOWN;
        st = add_anomaly(an, ts, "out-of-sequence", "a %s lobe follows %s without a zero "
                         "pause or firing", l->sign > 0 ? "positive" : "negative",
                         p ? tf_device_name(p->device) : "the record start");
    }
    for (size_t f = 0; f < in->nfire && st == TF_OK; f++) {
        double t = in->fire[f];
        if (used[f] || t < 2 || t > (double)in->n - 3)
            continue;
        /* a firing that started nothing: the current did not follow the gate */
        st = add_anomaly(an, tf_capture_time(cap, 0) + t * cap->dt_s, "missing-firing",
                         "gate %d fired but no conduction lobe started", in->fire_gate[f] + 1);
    }
    free(used);
    *inverted = r_note_inverted;
    return st;
}

/* The level the current rests at in the dead zones: the median of samples taken from
 * the middle half of each dead zone (chosen by time, not value). A probe offset shows
 * here; the band is centred on zero, so it is reported rather than guessed away. */
static tf_status rest_level(const seg_input *in, const seg_run *r, size_t nr, seg_vec *an)
{
    double *v = malloc(4096 * sizeof *v);
    if (!v)
        return TF_ERR_NOMEM;
    size_t m = 0;
    for (size_t j = 0; j + 1 < nr && m < 4096; j++) {
        if (r[j].k_end != SEG_B_DEAD)
            continue;
        double a = r[j].t_end, b = r[j + 1].t_start, q = 0.25 * (b - a);
        for (size_t k = (size_t)ceil(a + q); (double)k <= b - q && m < 4096; k++)
            v[m++] = in->x[k];
    }
    tf_status st = TF_OK;
    if (m >= 32) {
        double med = median_of(v, m);
        if (fabs(med) > 0.25 * in->band)
            st = add_anomaly(an, tf_capture_time(in->cap, 0), "offset",
                             "between lobes the current rests at %.4g A, not at zero (probe "
                             "offset?): correct it with --offset NAME=%.4g", med, -med);
    }
    free(v);
    return st;
}

/* ---- cycles, timing, mode ------------------------------------------------------- */

static void stat3(double *v, size_t n, tf_stat3 *s)
{
    size_t m = 0;
    for (size_t i = 0; i < n; i++)
        if (isfinite(v[i]))
            v[m++] = v[i];
    s->count = m;
    if (!m) {
        s->min = s->median = s->max = NAN;
        return;
    }
    gsl_sort(v, 1, m);
    s->min = v[0];
    s->max = v[m - 1];
    s->median = gsl_stats_median_from_sorted_data(v, 1, m);
}

/* From index z (a thyristor's current zero) to where the switch voltage v first turns
 * positive before index lim: the last upward zero crossing before it clearly exceeds
 * the noise (h), interpolated. NAN when it stays negative or never was. */
static double reverse_until(const float *v, double z, size_t lim, double h)
{
    size_t k = (size_t)ceil(z);
    while (k < lim && v[k] > h)
        k++; /* the thyristor's own on-state drop may still show at the zero */
    size_t start = k;
    while (k < lim && v[k] <= h)
        k++;
    if (k >= lim || k == start)
        return NAN;
    size_t j2 = k;
    while (j2 > start && v[j2 - 1] > 0)
        j2--;
    if (j2 == start)
        return (double)j2;
    /* a quantised voltage may sit at the zero code for a while: interpolate between the
     * last negative and the first positive sample */
    size_t j1 = j2 - 1;
    while (j1 > start && v[j1] == 0)
        j1--;
    double a = v[j1], b = v[j2];
    if (!(a < 0))
        return 0.5 * ((double)j1 + (double)j2);
    return (double)j1 + (0 - a) / (b - a) * (double)(j2 - j1);
}

static tf_status build_cycles(const seg_input *in, tf_lobe *L, const lobe_rec *rec, size_t nl,
                              double wsplit, int ring, seg_vec *cyc, size_t *unresolved)
{
    const double dt = in->cap->dt_s;
    const float *vsw = in->roles->switch_voltage >= 0
                           ? in->cap->ch[in->roles->switch_voltage].samples : NULL;
    double hsw = 0, sig_sw = 0, q_sw = 0;
    if (vsw) {
        /* forward means clearly above zero: a few noise sigmas or one code step */
        double sig = seg_noise_sigma(vsw, in->n), q = seg_lsb(vsw, in->n);
        sig_sw = isfinite(sig) ? sig : 0;
        q_sw = q;
        hsw = fmax(3 * sig_sw, 1.5 * q);
    }
    for (size_t j = 0; j < nl; j++) {
        if (!tf_device_is_thyristor(L[j].device) || rec[j].k0 == SEG_B_EDGE ||
            rec[j].k1 == SEG_B_EDGE)
            continue;
        (void)ring; /* in a ring-down every lobe of the thyristor's direction counts */
        tf_cycle *c = seg_vec_push(cyc);
        if (!c)
            return TF_ERR_NOMEM;
        c->start_s = L[j].start_s;
        c->thyristor = L[j].device;
        c->lobe_thyristor = j;
        c->lobe_diode = (size_t)-1;
        c->thyristor_s = L[j].end_s - L[j].start_s;
        c->diode_s = c->turnoff_available_s = c->dead_s = c->overlap_s = NAN;
        c->period_s = c->frequency_hz = NAN;
        c->firing_voltage_s = NAN;
        c->reverse_bias_s = NAN;
        if (j + 1 < nl && L[j + 1].device == diode_of(L[j].device) && rec[j + 1].k1 != SEG_B_EDGE) {
            const tf_lobe *d = &L[j + 1];
            c->lobe_diode = j + 1;
            c->diode_s = d->end_s - d->start_s;
            /* forward voltage returns at the diode's natural end, or at the opposite
             * firing when that cuts the diode interval short */
            c->turnoff_available_s = c->diode_s;
            c->overlap_s = 0;
            if (rec[j + 1].k1 == SEG_B_FIRING) {
                double w = rec[j + 1].w > 0 ? rec[j + 1].w : wsplit;
                if (isfinite(rec[j + 1].vstep))
                    c->firing_voltage_s = tf_capture_time(in->cap, 0) + rec[j + 1].vstep * dt;
                c->overlap_s = w > 0 ? fmax(0, M_PI / w * dt - c->diode_s) : NAN;
                c->dead_s = 0;
            } else if (j + 2 < nl) {
                c->dead_s = fmax(0, L[j + 2].start_s - d->end_s);
            }
            if (vsw && (L[j].device == TF_DEV_T1 || L[j].device == TF_DEV_T1T2)) {
                /* the switch voltage is T1's; it must show the reverse bias (about one
                 * diode drop) clearly during the first half of the diode interval, else
                 * its resolution or noise hides it and nothing is measured */
                size_t a0 = (size_t)ceil(rec[j + 1].t0), a1 = (size_t)ceil(0.5 * (rec[j + 1].t0 + rec[j + 1].t1));
                double sum = 0;
                for (size_t k = a0; k < a1 && k < in->n; k++)
                    sum += vsw[k];
                double mean = a1 > a0 ? sum / (double)(a1 - a0) : 0;
                /* the mean of N samples carries sigma / sqrt(N) of noise: the bias is
                 * shown when that mean lies clearly below zero (the same averaging
                 * that lets the acceptance check time a one-diode-drop bias) */
                double hmean = a1 > a0 ? fmax(3 * sig_sw / sqrt((double)(a1 - a0)), 1.5 * q_sw)
                                       : hsw;
                size_t lim = (size_t)ceil(rec[j + 1].t1) + 8;
                double tr = mean < -hmean ? reverse_until(vsw, rec[j].t1, lim < in->n ? lim : in->n, hsw)
                                          : NAN;
                if (isfinite(tr))
                    c->reverse_bias_s = (tr - rec[j].t1) * dt;
                else if (!(mean < -hmean))
                    (*unresolved)++;
            }
        }
        for (size_t q = j + 1; q < nl; q++)
            if (L[q].device == L[j].device && rec[q].k0 != SEG_B_EDGE) {
                c->period_s = L[q].start_s - L[j].start_s;
                c->frequency_hz = 1.0 / c->period_s;
                break;
            }
    }
    return TF_OK;
}

static void decide_mode(tf_segment_result *r, const lobe_rec *rec, double dt_s)
{
    size_t dead = 0, touch = 0, fire = 0, tot = 0;
    double *dv = malloc((r->ncycles + 1) * sizeof *dv);
    size_t nd = 0;
    for (size_t i = 0; i < r->ncycles; i++) {
        const tf_cycle *c = &r->cycles[i];
        if (c->lobe_diode == (size_t)-1)
            continue;
        seg_bkind k = rec[c->lobe_diode].k1;
        if (k == SEG_B_EDGE)
            continue;
        tot++;
        if (k == SEG_B_DEAD) {
            dead++;
            if (dv && isfinite(c->dead_s))
                dv[nd++] = c->dead_s;
        } else if (k == SEG_B_TOUCH)
            touch++;
        else if (k == SEG_B_FIRING)
            fire++;
    }
    double med = dv ? median_of(dv, nd) : NAN;
    free(dv);
    if (r->topology == TF_TOPO_RING_DOWN) {
        r->mode = TF_MODE_UNKNOWN;
        snprintf(r->mode_evidence, sizeof r->mode_evidence,
                 "ring-down: one free oscillation, no firing sequence");
        return;
    }
    if (!tot) {
        r->mode = TF_MODE_UNKNOWN;
        snprintf(r->mode_evidence, sizeof r->mode_evidence,
                 "no complete thyristor-diode pair in the record");
        return;
    }
    if (fire * 2 > tot) {
        r->mode = TF_MODE_OVERLAPPING;
        size_t vs = 0, agree = 0;
        for (size_t i = 0; i < r->ncycles; i++) {
            const tf_cycle *c = &r->cycles[i];
            if (c->lobe_diode == (size_t)-1 || !isfinite(c->firing_voltage_s))
                continue;
            vs++;
            double split = r->lobes[c->lobe_diode].end_s;
            agree += fabs(c->firing_voltage_s - split) <= 3 * dt_s;
        }
        int l = snprintf(r->mode_evidence, sizeof r->mode_evidence,
                         "%zu of %zu diode intervals are cut short by the next firing (slope "
                         "break inside a same-sign stretch)", fire, tot);
        if (vs && l > 0 && (size_t)l < sizeof r->mode_evidence)
            snprintf(r->mode_evidence + l, sizeof r->mode_evidence - (size_t)l,
                     "; the output voltage steps within 3 samples of %zu of %zu splits", agree,
                     vs);
    } else if (dead * 2 > tot) {
        r->mode = TF_MODE_NON_OVERLAPPING;
        snprintf(r->mode_evidence, sizeof r->mode_evidence,
                 "%zu of %zu diode intervals end at a current zero followed by a dead zone "
                 "(median %.4g s)", dead, tot, med);
    } else if (touch * 2 > tot) {
        r->mode = TF_MODE_CONTINUOUS;
        snprintf(r->mode_evidence, sizeof r->mode_evidence,
                 "%zu of %zu diode intervals end at a current zero where the next thyristor "
                 "takes over at once (no dead zone)", touch, tot);
    } else {
        r->mode = TF_MODE_UNKNOWN;
        snprintf(r->mode_evidence, sizeof r->mode_evidence,
                 "mixed: %zu with dead zone, %zu continuous, %zu overlapping of %zu", dead,
                 touch, fire, tot);
    }
}

static tf_status period_anomalies(tf_segment_result *r, seg_vec *an)
{
    double *v = malloc((r->ncycles + 1) * sizeof *v);
    if (!v)
        return TF_ERR_NOMEM;
    size_t m = 0;
    for (size_t i = 0; i < r->ncycles; i++)
        if (isfinite(r->cycles[i].period_s))
            v[m++] = r->cycles[i].period_s;
    double med = median_of(v, m);
    free(v);
    for (size_t i = 0; i < r->ncycles && m >= 3; i++) {
        const tf_cycle *c = &r->cycles[i];
        if (isfinite(c->period_s) && c->period_s > 1.6 * med)
            if (add_anomaly(an, c->start_s + med, "missing-firing", "%s was not fired: "
                            "%.4g s to its next firing, median period %.4g s",
                            tf_device_name(c->thyristor), c->period_s, med) != TF_OK)
                return TF_ERR_NOMEM;
    }
    return TF_OK;
}

static int cmp_anomaly(const void *a, const void *b)
{
    double x = ((const tf_anomaly *)a)->time_s, y = ((const tf_anomaly *)b)->time_s;
    return (x > y) - (x < y);
}

static tf_status build_bursts(tf_segment_result *r, const lobe_rec *rec)
{
    seg_vec b;
    seg_vec_init(&b, sizeof(tf_burst));
    tf_burst *cur = NULL;
    double maxpk = 0;
    for (size_t j = 0; j < r->nlobes; j++)
        maxpk = fmax(maxpk, fabs(r->lobes[j].peak_a));
    for (size_t j = 0; j < r->nlobes; j++) {
        tf_lobe *l = &r->lobes[j];
        /* a ring-down's tail breaks into fragments where the noise dips it below the
         * band: those stay in the burst; a new excitation rises well above the tail */
        int starts = r->topology == TF_TOPO_RING_DOWN
                         ? (j == 0 || (zero_kind(rec[j].k0) &&
                                       fabs(l->peak_a) > 2 * fabs(r->lobes[j - 1].peak_a) &&
                                       fabs(l->peak_a) >= 0.2 * maxpk))
                         : tf_device_is_thyristor(l->device);
        if (starts) {
            cur = seg_vec_push(&b);
            if (!cur) {
                seg_vec_free(&b);
                return TF_ERR_NOMEM;
            }
            cur->first_lobe = j;
            cur->i0 = l->i0;
            cur->start_s = l->start_s;
        }
        if (!cur) {
            l->burst = TF_NO_BURST;
            continue;
        }
        l->burst = b.n - 1;
        cur->nlobes++;
        cur->i1 = l->i1;
        cur->end_s = l->end_s;
        cur->clipped |= l->clipped;
        cur->anomalous |= l->partial || l->device == TF_DEV_UNKNOWN;
        cur->ends_by_firing = l->end_by_firing;
    }
    tf_burst *bs = b.data;
    for (size_t a = 0; a < r->nanomalies; a++)
        for (size_t k = 0; k < b.n; k++)
            if (r->anomalies[a].time_s >= bs[k].start_s && r->anomalies[a].time_s <= bs[k].end_s)
                bs[k].anomalous = 1;
    r->bursts = b.data;
    r->nbursts = b.n;
    return TF_OK;
}

tf_status seg_attribute(const seg_input *in, seg_vec *runs, tf_topology topo,
                        tf_segment_result *r)
{
    const seg_run *rr = runs->data;
    r->topology = topo;
    seg_vec recs, an, cyc;
    seg_vec_init(&recs, sizeof(lobe_rec));
    seg_vec_init(&an, sizeof(tf_anomaly));
    seg_vec_init(&cyc, sizeof(tf_cycle));
    double wsplit = 0;
    tf_status st = split_runs(in, rr, runs->n, topo, &recs, &wsplit);
    const lobe_rec *rec = recs.data;
    size_t nl = recs.n;
    if (st == TF_OK && !(r->lobes = calloc(nl ? nl : 1, sizeof *r->lobes)))
        st = TF_ERR_NOMEM;
    if (st == TF_OK) {
        r->nlobes = nl;
        stats_job jobs[2] = {{in, r->lobes, rec, 0, nl / 2}, {in, r->lobes, rec, nl / 2, nl}};
        pthread_t th;
        int threaded = in->n >= SEG_THREAD_SAMPLES && nl >= 8 &&
                       pthread_create(&th, NULL, stats_worker, &jobs[1]) == 0;
        stats_worker(&jobs[0]);
        if (threaded)
            pthread_join(th, NULL);
        else
            stats_worker(&jobs[1]);
        int inverted = 0;
        st = attribute_devices(in, topo, r->lobes, rec, nl, &an, &inverted);
        size_t l = strlen(r->topology_evidence);
        if (inverted && l < sizeof r->topology_evidence)
            snprintf(r->topology_evidence + l, sizeof r->topology_evidence - l,
                     "; the gates fire the negative lobes of T1: current probe inverted, "
                     "devices named by the gates");
    }
    for (size_t c = 0; c < in->nclips && st == TF_OK; c++)
        st = add_anomaly(&an, tf_capture_time(in->cap, in->clips[c].i0), "clipped",
                         "%zu samples of the current sit at its extreme %.4g (clipped): "
                         "the lobe's peak is not trusted", in->clips[c].at,
                         (double)in->clips[c].rail);
    r->clipped_stretches = in->nclips;
    if (st == TF_OK)
        st = rest_level(in, rr, runs->n, &an);
    if (st == TF_OK)
        st = build_cycles(in, r->lobes, rec, nl, wsplit, topo == TF_TOPO_RING_DOWN, &cyc,
                          &r->reverse_bias_unresolved);
    if (st == TF_OK) {
        r->cycles = cyc.data;
        r->ncycles = cyc.n;
        cyc.data = NULL;
        st = period_anomalies(r, &an);
    }
    if (st == TF_OK) {
        if (an.n)
            qsort(an.data, an.n, sizeof(tf_anomaly), cmp_anomaly);
        r->anomalies = an.data;
        r->nanomalies = an.n;
        an.data = NULL;
        st = build_bursts(r, rec);
    }
    if (st == TF_OK) {
        decide_mode(r, rec, in->cap->dt_s);
        size_t m = r->ncycles + 1;
        double *v = malloc(m * sizeof *v);
        if (!v)
            st = TF_ERR_NOMEM;
        else {
            struct { tf_stat3 *s; size_t off; } f[] = {
                {&r->output_frequency_hz, offsetof(tf_cycle, frequency_hz)},
                {&r->diode_s, offsetof(tf_cycle, diode_s)},
                {&r->turnoff_available_s, offsetof(tf_cycle, turnoff_available_s)},
                {&r->thyristor_s, offsetof(tf_cycle, thyristor_s)},
                {&r->dead_s, offsetof(tf_cycle, dead_s)},
                {&r->overlap_s, offsetof(tf_cycle, overlap_s)},
                {&r->reverse_bias_s, offsetof(tf_cycle, reverse_bias_s)}};
            for (size_t q = 0; q < sizeof f / sizeof f[0]; q++) {
                for (size_t i = 0; i < r->ncycles; i++)
                    v[i] = *(const double *)((const char *)&r->cycles[i] + f[q].off);
                stat3(v, r->ncycles, f[q].s);
            }
            free(v);
        }
        r->damped_frequency_hz = wsplit > 0 ? wsplit / (2 * M_PI * in->cap->dt_s) : NAN;
    }
    seg_vec_free(&recs);
    seg_vec_free(&an);
    seg_vec_free(&cyc);
    return st;
}
