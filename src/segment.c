/* Segmenter: noise band, zero crossings, lobes, devices, cycles and mode of the current. */
#include <tankfit/segment.h>

#include <math.h>
#include <pthread.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "segment_internal.h"

void tf_segment_options_init(tf_segment_options *o)
{
    memset(o, 0, sizeof *o);
    o->topology = TF_TOPO_UNKNOWN;
    o->band_k = 0;
}

double seg_lsb(const float *x, size_t n)
{
    if (n < 16)
        return 0;
    size_t m = n - 1 < 4096 ? n - 1 : 4096, nz = 0;
    double lsb = INFINITY;
    for (size_t j = 0; j < m; j++) {
        size_t k = (size_t)((double)j * (double)(n - 1) / (double)m);
        double d = fabs((double)x[k + 1] - (double)x[k]);
        if (d > 0 && d < lsb)
            lsb = d;
    }
    if (!isfinite(lsb))
        return 0;
    size_t whole = 0;
    for (size_t j = 0; j < m; j++) {
        size_t k = (size_t)((double)j * (double)(n - 1) / (double)m);
        double d = fabs((double)x[k + 1] - (double)x[k]);
        if (d == 0)
            continue;
        nz++;
        double q = d / lsb;
        if (fabs(q - floor(q + 0.5)) < 1e-3 * q + 1e-6)
            whole++;
    }
    return nz >= 32 && whole >= 0.95 * (double)nz ? lsb : 0;
}

tf_status seg_find_clipping(const float *x, float lo, float hi, double lsb, const seg_vec *runs,
                            seg_vec *clips)
{
    if (!runs->n)
        return TF_OK;
    const seg_run *r = runs->data;
    for (size_t j = 0; j < runs->n; j++) {
        float ext = r[j].sign > 0 ? hi : lo;
        if (x[r[j].ipk] != ext)
            continue;
        /* the whole span between the first and last sample at the extreme: noise may
         * pull single samples off the rail inside it */
        size_t a = r[j].ipk, b = a, at = 0;
        for (size_t k = r[j].ipk; k <= r[j].i1; k++)
            if (x[k] == ext) {
                b = k;
                at++;
            }
        at--;
        size_t w4 = (r[j].i1 - r[j].i0) / 16 + 2;
        a = a > r[j].i0 + w4 ? a - w4 : r[j].i0;
        b = b + w4 < r[j].i1 ? b + w4 : r[j].i1;
        /* a quantised sine stays at its top code for about 2 sqrt(2 lsb / A) / w samples */
        double dur = r[j].t_end - r[j].t_start, w = dur > 0 ? M_PI / dur : 0;
        double flat = lsb > 0 && w > 0 ? 2.0 * sqrt(2.0 * lsb / fabs((double)ext)) / w : 0;
        if ((double)(at + 1) < fmax(3.0, 1.5 * flat + 1.0))
            continue;
        seg_clip *c = seg_vec_push(clips);
        if (!c)
            return TF_ERR_NOMEM;
        c->i0 = a;
        c->i1 = b;
        c->at = at + 1;
        c->rail = ext;
    }
    return TF_OK;
}

/* Rising edges of the gate channels, as firing instants in the current's index units. */
static tf_status gate_firings(const tf_capture *cap, const tf_roles *roles, seg_vec *fire,
                              int *ngates)
{
    const tf_channel *ci = &cap->ch[roles->current];
    *ngates = 0;
    for (int g = 0; g < 4; g++) {
        if (roles->gate[g] < 0)
            continue;
        const tf_channel *c = &cap->ch[roles->gate[g]];
        const float *y = c->samples;
        float lo = y[0], hi = y[0];
        for (size_t k = 1; k < cap->n; k++) {
            lo = y[k] < lo ? y[k] : lo;
            hi = y[k] > hi ? y[k] : hi;
        }
        if (!(hi - lo > 0))
            continue;
        double thr = 0.5 * ((double)lo + (double)hi), shift = 0;
        if (c->skew_known || ci->skew_known)
            shift = (c->skew_s - ci->skew_s) / cap->dt_s;
        size_t before = fire->n;
        if (y[0] >= thr) {
            /* high from the first sample: fired at (or before) the record's start */
            double *f = seg_vec_push(fire);
            if (!f)
                return TF_ERR_NOMEM;
            f[0] = -shift;
            f[1] = g;
        }
        for (size_t k = 1; k < cap->n; k++) {
            if (!(y[k - 1] < thr && y[k] >= thr))
                continue;
            double *f = seg_vec_push(fire);
            if (!f)
                return TF_ERR_NOMEM;
            f[0] = (double)(k - 1) + (thr - y[k - 1]) / ((double)y[k] - y[k - 1]) - shift;
            f[1] = g;
        }
        if (fire->n > before)
            (*ngates)++;
    }
    return TF_OK;
}

static int cmp_fire(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

static int is_zero_kind(seg_bkind k) { return k == SEG_B_DEAD || k == SEG_B_TOUCH; }

/* Runs j..q form a chain of pieces sharing zeros (see seg_chain_fit): fit it and put
 * every boundary on the model. Returns 1 when done. */
static int refine_chain(const seg_input *in, seg_run *r, size_t j, size_t q, double prior[2],
                        int ts_only)
{
    size_t np = q - j + 1;
    double med = 0, lo = INFINITY, hi = 0;
    for (size_t p = j; p <= q; p++) {
        double d = r[p].t_end - r[p].t_start;
        if ((p == q && r[q].k_end == SEG_B_EDGE) || r[p].pk < 8 * in->band)
            continue; /* partial or weak lobes: their rough durations say little */
        lo = fmin(lo, d);
        hi = fmax(hi, d);
        med += d;
    }
    size_t nfull = 0;
    for (size_t p = j; p <= q; p++)
        nfull += !((p == q && r[q].k_end == SEG_B_EDGE) || r[p].pk < 8 * in->band);
    /* a chain of 20-sample periods still fits: 5 samples a lobe and 16 in all (checked
     * by seg_chain_fit) pin a damped sine of known shape. A chain of faint lobes only
     * (the rest of a ring-down after a chain cut at its length limit) keeps the last
     * chain's w and decay and fits its start and amplitudes */
    int faint = !nfull && prior[0] > 0 && r[j].k_start == SEG_B_DIRECT;
    if ((!nfull && !faint) || (nfull && hi > 1.2 * lo) || r[j].i1 < r[j].i0 + 4) {
        return 0;
    }
    if (faint) {
        med = M_PI / prior[0];
        ts_only = 1;
    } else {
        med /= (double)nfull;
    }
    double ts = r[j].t_start, w = M_PI / med, a = 0, amp[64];
    /* the tank changes slowly: the last chain's w and decay are the better priors */
    if (prior[0] > 0 && fabs(prior[0] - w) < 0.03 * w) {
        /* held w only while the lobes still agree with it (a load step moves it) */
        if (fabs(prior[0] - w) > 0.01 * w)
            ts_only = 0;
        w = prior[0];
        a = prior[1];
    } else {
        ts_only = 0;
    }
    for (size_t p = j; p <= q; p++) {
        /* amplitude from the lobe's peak, at a quarter period into its piece */
        double tp = ((double)(p - j) + 0.5) * M_PI / w;
        amp[p - j] = (double)r[p].pk * exp(a * tp) * r[j].sign; /* A_p sin(w tau) has the lobe sign */
    }
    size_t k1 = r[q].k_end == SEG_B_EDGE ? r[q].i1 : r[q].i1 - 1;
    if (seg_chain_fit(in->x, r[j].i0 + 1, k1, in->clips, in->nclips, np, amp, ts_only, &ts, &w,
                      &a) != 0) {
        return 0;
    }
    if (!ts_only) {
        /* held values for the quick fits: a running mean of the full fits, so that the
         * bursts in between do not all share one fit's noise */
        int fresh = !(prior[0] > 0) || fabs(prior[0] - w) > 0.01 * w;
        prior[0] = fresh ? w : 0.75 * prior[0] + 0.25 * w;
        prior[1] = fresh ? a : 0.75 * prior[1] + 0.25 * a;
    }
    double half = M_PI / w;
    /* a quick fit (w held) must land on the rough boundaries within their own scatter */
    double lim = ts_only ? 3.0 + 0.01 * half : 0.1 * half;
    for (size_t p = j; p <= q; p++) {
        double t0 = ts + (double)(p - j) * half, t1 = t0 + half;
        if (r[p].pk >= 8 * in->band &&
            (fabs(t0 - r[p].t_start) > lim ||
             (r[p].k_end != SEG_B_EDGE && fabs(t1 - r[p].t_end) > lim))) {
            return 0;
        }
    }
    for (size_t p = j; p <= q; p++) {
        r[p].t_start = ts + (double)(p - j) * half;
        r[p].start_model = 1;
        if (r[p].k_end != SEG_B_EDGE) {
            r[p].t_end = r[p].t_start + half;
            r[p].end_model = 1;
        }
    }
    return 1;
}

/* A full chain fit (w and decay too) at least every this many bursts. */
#define SEG_FULL_EVERY 8u

typedef struct chain_job {
    const seg_input *in;
    seg_run *r;
    size_t from, to, n;
} chain_job;

static void *chain_worker(void *arg)
{
    chain_job *c = arg;
    seg_run *r = c->r;
    double prior[2] = {0, 0};
    unsigned since_full = SEG_FULL_EVERY;
    size_t resume = SIZE_MAX; /* a chain cut at its length limit goes on from here */
    for (size_t j = c->from; j < c->to; j++) {
        /* the piece after a cut chain starts at a zero the chain shares: a chain of
         * its own (a ring-down of more than 64 lobes) */
        if (!is_zero_kind(r[j].k_start) && j != resume)
            continue;
        size_t q = j;
        /* a ring-down's tail fades into the noise: the chain runs on while its lobes
         * are whole (a lobe the noise breaks into fragments ends it: no straight
         * crossing there), down to the weakest the scan keeps; their zeros follow
         * from the strong lobes' w */
        while (q + 1 < c->n && r[q].k_end == SEG_B_DIRECT && q - j + 1 < 64)
            q++;
        if (q == j)
            continue;
        /* w and the decay are refitted every few bursts (they follow a heating load);
         * in between only the start and the amplitudes */
        int quick = since_full < SEG_FULL_EVERY;
        int ok = refine_chain(c->in, r, j, q, prior, quick);
        if (!ok && quick)
            ok = refine_chain(c->in, r, j, q, prior, (quick = 0));
        since_full = ok && !quick ? 1 : since_full + 1;
        if (ok) {
            if (q - j + 1 == 64 && r[q].k_end == SEG_B_DIRECT)
                resume = q + 1;
            j = q;
        }
    }
    return NULL;
}

/* Zero of lobe j's own model near its start (end = 0) or end (end = 1). */
static int lobe_zero(const seg_input *in, const seg_run *r, int end, int offset, double *z)
{
    double dur = r->t_end - r->t_start;
    if (!(dur > 8) || r->i1 < r->i0 + 10)
        return -1;
    size_t k0 = r->k_start == SEG_B_DIRECT || r->k_start == SEG_B_FIRING
                    ? (size_t)ceil(r->t_start) + 1 : r->i0 + 1;
    size_t k1 = r->k_end == SEG_B_DIRECT || r->k_end == SEG_B_FIRING
                    ? (size_t)floor(r->t_end) - 1 : r->i1 - 1;
    double tb = end ? r->t_end : r->t_start;
    if (seg_model_zero(in->x, k0, k1, in->clips, in->nclips, tb, M_PI / dur, 0.0, offset, z) != 0) {
        return -1;
    }

    if (fabs(*z - tb) > 0.2 * dur || (!end && *z > (double)r->i0 + 0.5) ||
        (end && *z < (double)r->i1 - 0.5))
        return -1;
    return 0;
}

void seg_refine_boundaries(const seg_input *in, seg_vec *runs, tf_topology topo)
{
    seg_run *r = runs->data;
    double prior[2] = {0, 0};
    /* a reset choke (single switch) adds a slow current: the pieces no longer share
     * zeros, so each lobe gets its own model with an offset term */
    int single = topo == TF_TOPO_SINGLE;
    (void)prior;
    /* a ring-down is one free oscillation: it does not rest between its lobes until it
     * stops. Where its tail is a few code steps high, the current sits on the zero code
     * for many samples at each crossing and the line fits of the gap rule read a dead
     * zone there; a decaying lobe of the other sign after it is the same oscillation
     * (a new excitation rises to more than twice the lobe before it) */
    if (topo == TF_TOPO_RING_DOWN)
        for (size_t j = 0; j + 1 < runs->n; j++)
            if (is_zero_kind(r[j].k_end) && r[j + 1].sign != r[j].sign &&
                r[j + 1].pk <= 2 * r[j].pk) {
                r[j].k_end = r[j + 1].k_start = SEG_B_DIRECT;
                r[j].t_end = r[j + 1].t_start = 0.5 * (r[j].t_end + r[j + 1].t_start);
            }
    /* chains: from a lobe rising out of zero, through straight crossings, to a lobe
     * that returns to zero (or runs off the record); two threads on long records */
    if (!single) {
        size_t mid = runs->n;
        if (in->n >= SEG_THREAD_SAMPLES && runs->n >= 8) {
            mid = runs->n / 2;
            while (mid < runs->n && !is_zero_kind(r[mid].k_start))
                mid++;
        }
        chain_job jobs[2] = {{in, r, 0, mid, runs->n}, {in, r, mid, runs->n, runs->n}};
        pthread_t th;
        int threaded = mid < runs->n && pthread_create(&th, NULL, chain_worker, &jobs[1]) == 0;
        chain_worker(&jobs[0]);
        if (threaded)
            pthread_join(th, NULL);
        else if (mid < runs->n)
            chain_worker(&jobs[1]);
    }
    double *zs = malloc((runs->n + 1) * 3 * sizeof *zs);
    if (!zs)
        return; /* the rough boundaries stay: still valid, less precise */
    double *chained = zs + 2 * (runs->n + 1);
    int bridge = topo == TF_TOPO_HALF_BRIDGE || topo == TF_TOPO_FULL_BRIDGE;
    for (size_t j = 0; j < runs->n; j++) {
        zs[2 * j] = zs[2 * j + 1] = NAN;
        chained[j] = r[j].start_model || r[j].end_model;
        /* a bridge's stretch between two crossings may hold a diode piece and the next
         * thyristor piece (overlapping): one model does not fit it, so its neighbours'
         * own models give those crossings */
        if (chained[j] || (bridge && r[j].k_start == SEG_B_DIRECT && r[j].k_end == SEG_B_DIRECT))
            continue;
        double z;
        if ((single || is_zero_kind(r[j].k_start) || r[j].k_start == SEG_B_DIRECT) &&
            r[j].k_start != SEG_B_EDGE && lobe_zero(in, &r[j], 0, single, &z) == 0)
            zs[2 * j] = z;
        if ((single || is_zero_kind(r[j].k_end) || r[j].k_end == SEG_B_DIRECT) &&
            r[j].k_end != SEG_B_EDGE && lobe_zero(in, &r[j], 1, single, &z) == 0)
            zs[2 * j + 1] = z;
    }
    for (size_t j = 0; j < runs->n; j++) {
        if (chained[j])
            continue;
        if (isfinite(zs[2 * j + 1]) && r[j].k_end != SEG_B_DIRECT) {
            r[j].t_end = zs[2 * j + 1];
            r[j].end_model = 1;
        }
        if (isfinite(zs[2 * j]) && r[j].k_start != SEG_B_DIRECT) {
            r[j].t_start = zs[2 * j];
            r[j].start_model = 1;
        }
        if (r[j].k_end == SEG_B_DIRECT && j + 1 < runs->n && !chained[j + 1] &&
            isfinite(zs[2 * j + 1]) != isfinite(zs[2 * j + 2]) &&
            fabs((isfinite(zs[2 * j + 1]) ? zs[2 * j + 1] : zs[2 * j + 2]) - r[j].t_end) < 3.0) {
            /* only one side has a model (the other is an overlapping stretch) */
            double z = isfinite(zs[2 * j + 1]) ? zs[2 * j + 1] : zs[2 * j + 2];
            r[j].t_end = r[j + 1].t_start = z;
            r[j].end_model = r[j + 1].start_model = 1;
        }
        /* a straight crossing: both lobes' models, averaged, when they agree */
        if (r[j].k_end == SEG_B_DIRECT && j + 1 < runs->n && !chained[j + 1] &&
            isfinite(zs[2 * j + 1]) && isfinite(zs[2 * j + 2]) &&
            fabs(zs[2 * j + 1] - zs[2 * j + 2]) < 3.0) {
            double z = 0.5 * (zs[2 * j + 1] + zs[2 * j + 2]);
            r[j].t_end = r[j + 1].t_start = z;
            r[j].end_model = r[j + 1].start_model = 1;
        }
    }
    free(zs);
}

typedef struct scan_job {
    const float *x;
    size_t n, offset;
    double band;
    seg_vec exc;
    tf_status st;
} scan_job;

static void *scan_worker(void *arg)
{
    scan_job *j = arg;
    j->st = seg_scan(j->x + j->offset, j->n, j->band, &j->exc);
    return NULL;
}

/* The scan on two threads for long records: cut at a sample inside the band (no
 * excursion spans it), scan both halves, join the lists. */
static tf_status scan_parallel(const float *x, size_t n, double band, seg_vec *exc)
{
    size_t mid = n / 2;
    while (mid < n && fabsf(x[mid]) > (float)band)
        mid++;
    if (n < SEG_THREAD_SAMPLES || mid >= n - 1)
        return seg_scan(x, n, band, exc);
    scan_job hi = {x, n - mid, mid, band, {0}, TF_OK};
    seg_vec_init(&hi.exc, sizeof(seg_exc));
    pthread_t th;
    int threaded = pthread_create(&th, NULL, scan_worker, &hi) == 0;
    tf_status st = seg_scan(x, mid, band, exc);
    if (threaded)
        pthread_join(th, NULL);
    else
        scan_worker(&hi);
    if (st == TF_OK)
        st = hi.st;
    const seg_exc *e = hi.exc.data;
    for (size_t i = 0; i < hi.exc.n && st == TF_OK; i++) {
        seg_exc *d = seg_vec_push(exc);
        if (!d) {
            st = TF_ERR_NOMEM;
            break;
        }
        *d = e[i];
        d->i0 += mid;
        d->i1 += mid;
        d->ipk += mid;
    }
    seg_vec_free(&hi.exc);
    return st;
}

tf_status tf_segment_run(const tf_capture *cap, const tf_roles *roles,
                         const tf_segment_options *opt, tf_segment_result **out, tf_error *err)
{
    *out = NULL;
    if (!cap || !roles || roles->current < 0 || (size_t)roles->current >= cap->nchan)
        return tf_error_set(err, TF_ERR_USAGE, "segmenter: no current channel given");
    const tf_channel *ch = &cap->ch[roles->current];
    if (cap->n < 16)
        return tf_error_set(err, TF_ERR_DATA,
                            "%s: expected at least 16 samples of the current, found %zu",
                            cap->path[0] ? cap->path : "capture", cap->n);
    if (!(cap->dt_s > 0))
        return tf_error_set(err, TF_ERR_DATA, "segmenter: the sample period must be positive");
    const float *x = ch->samples;
    size_t n = cap->n;
    double k = opt && opt->band_k > 0 ? opt->band_k : SEG_BAND_K;
    tf_topology topo = opt ? opt->topology : TF_TOPO_UNKNOWN;

    tf_segment_result *r = calloc(1, sizeof *r);
    if (!r)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    double sigma = tf_stats_noise_sigma(x, n);
    if (!isfinite(sigma) || sigma < 0)
        sigma = seg_noise_sigma(x, n);
    /* eight lanes (vector min/max; the same extremes as one sequential pass, NaN samples
     * skipped as there) */
    float lo = x[0], hi = x[0];
    {
        enum { LN = 8 };
        float l8[LN], h8[LN];
        for (int l = 0; l < LN; l++)
            l8[l] = h8[l] = x[0];
        size_t i = 1;
        for (; i + LN <= n; i += LN)
            for (int l = 0; l < LN; l++) {
                float v = x[i + (size_t)l];
                l8[l] = v < l8[l] ? v : l8[l];
                h8[l] = v > h8[l] ? v : h8[l];
            }
        for (; i < n; i++) {
            lo = x[i] < lo ? x[i] : lo;
            hi = x[i] > hi ? x[i] : hi;
        }
        for (int l = 0; l < LN; l++) {
            lo = l8[l] < lo ? l8[l] : lo;
            hi = h8[l] > hi ? h8[l] : hi;
        }
    }
    double peak = fmax(fabs((double)lo), fabs((double)hi));
    /* Differences over the whole record measure the lobes' slope, not the noise,
     * when few samples rest between lobes (coarse sampling: 20 samples per period
     * gave a band above the peak). The rests alone then tell the noise; trusted
     * only when the quiet window is 8 of their sigmas wide, so it does not clip it:
     * a window that proves too narrow for the noise is widened (at most to 0.4 of
     * the peak), one much wider than the noise is narrowed, which drops the lobes'
     * first and last samples whose steps inflate the estimate. */
    double quiet = SEG_QUIET_FRACTION * peak, rest = NAN;
    size_t npairs = 0;
    float *pairs = seg_quiet_pairs(x, n, &npairs);
    double sq = seg_quiet_sigma(pairs, npairs, quiet, &rest);
    for (int pass = 0; pass < 4 && isfinite(sq) && sq > 0; pass++) {
        double wnew = 8 * sq;
        if (wnew > 0.4 * peak || fabs(wnew - quiet) < 0.05 * quiet)
            break;
        double s2 = seg_quiet_sigma(pairs, npairs, wnew, NULL);
        if (!isfinite(s2))
            break;
        quiet = wnew;
        sq = s2;
    }
    free(pairs);
    if (isfinite(sq) && sq < sigma && 8 * sq <= 1.1 * quiet)
        sigma = sq;
    double lsb = ch->stats_valid && ch->stats.lsb > 0 ? ch->stats.lsb : seg_lsb(x, n);
    /* floors: a noiseless record still needs a band above rounding and one code step */
    double band = fmax(k * sigma, fmax(lsb, 1e-3 * peak));
    /* rests away from zero (a probe offset, reported as an "offset" anomaly) must stay
     * inside the band, or every dead zone would read as a lobe */
    if (isfinite(rest) && fabs(rest) + k * sigma > band)
        band = fabs(rest) + k * sigma + fmax(lsb, 1e-3 * peak);
    r->noise_sigma_a = sigma;
    r->band_a = band;
    if (!(peak > 2 * band)) {
        free(r);
        return tf_error_set(err, TF_ERR_DATA,
                            "current channel '%s': expected lobes above the noise band "
                            "(%.3g), found a peak of %.3g", ch->name, band, peak);
    }

    seg_vec exc, runs, clips, fire;
    seg_vec_init(&exc, sizeof(seg_exc));
    seg_vec_init(&runs, sizeof(seg_run));
    seg_vec_init(&clips, sizeof(seg_clip));
    seg_vec_init(&fire, 2 * sizeof(double));
    tf_status st = scan_parallel(x, n, band, &exc);
    if (st == TF_OK)
        st = seg_runs_from_excursions(x, n, band, lsb, &exc, &runs);
    seg_vec_free(&exc);
    if (st == TF_OK)
        st = seg_find_clipping(x, lo, hi, lsb, &runs, &clips);
    int ngates = 0;
    if (st == TF_OK)
        st = gate_firings(cap, roles, &fire, &ngates);
    double *fire_t = NULL;
    int *fire_g = NULL;
    if (st == TF_OK && fire.n) {
        qsort(fire.data, fire.n, 2 * sizeof(double), cmp_fire);
        fire_t = malloc(fire.n * sizeof *fire_t);
        fire_g = malloc(fire.n * sizeof *fire_g);
        if (!fire_t || !fire_g)
            st = TF_ERR_NOMEM;
        else
            for (size_t i = 0; i < fire.n; i++) {
                fire_t[i] = ((double *)fire.data)[2 * i];
                fire_g[i] = (int)((double *)fire.data)[2 * i + 1];
            }
    }
    seg_input in = {cap, roles, x, n, band, clips.data, clips.n, fire_t, fire_g, fire.n, ngates};
    if (st == TF_OK && runs.n == 0)
        st = tf_error_set(err, TF_ERR_DATA, "current channel '%s': no conduction lobe found",
                          ch->name);
    else if (st == TF_OK) {
        if (topo == TF_TOPO_UNKNOWN)
            topo = seg_infer_topology(&in, runs.data, runs.n, r->topology_evidence,
                                      sizeof r->topology_evidence);
        else
            snprintf(r->topology_evidence, sizeof r->topology_evidence, "given");
        seg_refine_boundaries(&in, &runs, topo);
        st = seg_attribute(&in, &runs, topo, r);
    }
    if (st == TF_OK && fire.n) {
        r->firings_s = malloc(fire.n * sizeof *r->firings_s);
        if (!r->firings_s)
            st = TF_ERR_NOMEM;
        else {
            r->nfirings = fire.n;
            for (size_t i = 0; i < fire.n; i++)
                r->firings_s[i] = tf_capture_time(cap, 0) + fire_t[i] * cap->dt_s;
        }
    }
    seg_vec_free(&runs);
    seg_vec_free(&clips);
    seg_vec_free(&fire);
    free(fire_t);
    free(fire_g);
    if (st != TF_OK) {
        if (st == TF_ERR_NOMEM)
            tf_error_set(err, st, "out of memory");
        tf_segment_free(r);
        return st;
    }
    *out = r;
    return TF_OK;
}

void tf_segment_free(tf_segment_result *r)
{
    if (!r)
        return;
    free(r->lobes);
    free(r->bursts);
    free(r->cycles);
    free(r->anomalies);
    free(r->firings_s);
    free(r);
}
