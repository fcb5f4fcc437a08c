/* Segmenter, first pass: noise, the hysteresis scan, runs and their rough boundaries. */
#include "segment_internal.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_statistics_double.h>

void seg_vec_init(seg_vec *v, size_t item_size)
{
    memset(v, 0, sizeof *v);
    v->size = item_size;
}

void *seg_vec_push(seg_vec *v)
{
    if (v->n == v->cap) {
        size_t nc = v->cap ? 2 * v->cap : 64;
        void *p = realloc(v->data, nc * v->size);
        if (!p)
            return NULL;
        v->data = p;
        v->cap = nc;
    }
    void *item = (char *)v->data + v->n * v->size;
    v->n++;
    memset(item, 0, v->size);
    return item;
}

void seg_vec_free(seg_vec *v)
{
    free(v->data);
    memset(v, 0, sizeof *v);
}

#define NOISE_SUBSET 65536

double seg_noise_sigma(const float *x, size_t n)
{
    if (n < 3)
        return 0;
    size_t m = n - 1 < NOISE_SUBSET ? n - 1 : NOISE_SUBSET;
    double *d = malloc(m * sizeof *d);
    if (!d)
        return NAN;
    /* evenly spread differences: the subset sees dead zones and lobes alike */
    for (size_t j = 0; j < m; j++) {
        size_t k = (size_t)((double)j * (double)(n - 1) / (double)m);
        d[j] = (double)x[k + 1] - (double)x[k];
    }
    double med = gsl_stats_median(d, 1, m);
    for (size_t j = 0; j < m; j++)
        d[j] = fabs(d[j] - med);
    double mad = gsl_stats_median(d, 1, m);
    free(d);
    return 1.482602218505602 * mad / sqrt(2.0);
}

/* Noise from the quiet samples only: first differences of evenly spread sample
 * pairs that both lie within +/-quiet. When fewer than QUIET_MIN pairs (or 1 in
 * 64 of those looked at) are quiet, NAN: the record has no rest to measure. */
#define QUIET_MIN 32
#define QUIET_PAIRS 32768

float *seg_quiet_pairs(const float *x, size_t n, size_t *m)
{
    *m = 0;
    if (n < 3)
        return NULL;
    size_t mm = n - 1 < QUIET_PAIRS ? n - 1 : QUIET_PAIRS;
    /* gathered once: the passes of the window search then stay in cache (a pass over
     * strided samples of a 10^7-sample record costs a cache miss per pair) */
    float *p = malloc(2 * mm * sizeof *p);
    if (!p)
        return NULL;
    for (size_t j = 0; j < mm; j++) {
        size_t k = (size_t)((double)j * (double)(n - 1) / (double)mm);
        p[2 * j] = x[k];
        p[2 * j + 1] = x[k + 1];
    }
    *m = mm;
    return p;
}

double seg_quiet_sigma(const float *pairs, size_t m, double quiet, double *rest)
{
    if (rest)
        *rest = NAN;
    if (!pairs || m < QUIET_MIN || !(quiet > 0))
        return NAN;
    double *d = malloc(m * sizeof *d);
    if (!d)
        return NAN;
    const float lim = (float)quiet;
    size_t q = 0;
    if (rest) {
        /* the level the quiet samples rest at: 0, or a probe offset */
        for (size_t j = 0; j < m; j++)
            if (fabsf(pairs[2 * j]) <= lim && fabsf(pairs[2 * j + 1]) <= lim)
                d[q++] = pairs[2 * j];
        if (q >= QUIET_MIN && q >= m / 64)
            *rest = gsl_stats_median(d, 1, q);
        q = 0;
    }
    for (size_t j = 0; j < m; j++)
        if (fabsf(pairs[2 * j]) <= lim && fabsf(pairs[2 * j + 1]) <= lim)
            d[q++] = (double)pairs[2 * j + 1] - (double)pairs[2 * j];
    double sigma = NAN;
    if (q >= QUIET_MIN && q >= m / 64) {
        double med = gsl_stats_median(d, 1, q);
        for (size_t j = 0; j < q; j++)
            d[j] = fabs(d[j] - med);
        sigma = 1.482602218505602 * gsl_stats_median(d, 1, q) / sqrt(2.0);
    }
    free(d);
    return sigma;
}

tf_status seg_scan(const float *x, size_t n, double band, seg_vec *exc)
{
    const float b = (float)band, nb = -b;
    size_t k = 0;
    /* one tight loop per state: in the band (or NaN), above it, below it */
    while (k < n) {
        while (k < n && !(x[k] > b) && !(x[k] < nb))
            k++;
        if (k == n)
            break;
        size_t i0 = k, ipk = k;
        int sign;
        float pk;
        if (x[k] > b) {
            sign = 1;
            pk = x[k];
            for (k++; k < n && x[k] > b; k++)
                if (x[k] > pk) {
                    pk = x[k];
                    ipk = k;
                }
        } else {
            sign = -1;
            pk = x[k];
            for (k++; k < n && x[k] < nb; k++)
                if (x[k] < pk) {
                    pk = x[k];
                    ipk = k;
                }
            pk = -pk;
        }
        seg_exc *e = seg_vec_push(exc);
        if (!e)
            return TF_ERR_NOMEM;
        *e = (seg_exc){i0, k - 1, ipk, pk, sign};
    }
    return TF_OK;
}

int seg_line_zero(const float *x, size_t a, size_t b, double *zero, double *slope)
{
    if (b <= a)
        return -1;
    double m = (double)(b - a + 1), kc = 0.5 * ((double)a + (double)b);
    double sx = 0, skx = 0, skk = 0;
    for (size_t k = a; k <= b; k++) {
        double u = (double)k - kc;
        sx += x[k];
        skx += u * x[k];
        skk += u * u;
    }
    double s = skx / skk, mean = sx / m;
    if (slope)
        *slope = s;
    if (s == 0 || !isfinite(s))
        return -1;
    *zero = kc - mean / s;
    return 0;
}

/* Length of the line fit used at a run's end: a few samples, fewer on short runs. */
static size_t fit_len(const seg_run *r)
{
    size_t len = r->i1 - r->i0 + 1, m = len / 4;
    return m < 3 ? 3 : m > 12 ? 12 : m;
}

/* Where the line through the run's last (end = 1) or first samples reaches zero. */
static double edge_zero(const float *x, const seg_run *r, int end)
{
    size_t m = fit_len(r), len = r->i1 - r->i0 + 1;
    if (m > len)
        m = len;
    double z, s;
    int ok;
    if (end)
        ok = seg_line_zero(x, r->i1 + 1 - m, r->i1, &z, &s);
    else
        ok = seg_line_zero(x, r->i0, r->i0 + m - 1, &z, &s);
    /* the line must head towards zero out of the run */
    if (ok != 0 || (end && (s * r->sign >= 0)) || (!end && (s * r->sign <= 0)))
        return end ? (double)r->i1 + 0.5 : (double)r->i0 - 0.5;
    return z;
}

static double minabs(const float *x, size_t a, size_t b)
{
    float m = INFINITY;
    for (size_t k = a; k <= b; k++)
        if (fabsf(x[k]) < m)
            m = fabsf(x[k]);
    return m;
}

/* Samples a run's current takes to cross the band near its zero, from its own shape
 * (a half sine of its peak, whose out-of-band part is the run: the half sine is the
 * run and this travel at either end, which matters on lobes a few bands high): bounds
 * a noisy line's extrapolation. */
static double band_travel(const seg_run *r, double band)
{
    double len = (double)(r->i1 - r->i0 + 1), d = M_PI * (double)r->pk - 2 * band;
    return band * len / (d > M_PI * band ? d : M_PI * band) + 1.0;
}

/* Classify the gap between runs a and b and set their boundaries. lsb: quantisation
 * step (0: none). */
static void classify_gap(const float *x, double band, double lsb, seg_run *a, seg_run *b)
{
    double ze = edge_zero(x, a, 1), zs = edge_zero(x, b, 0);
    double lo = (double)a->i1, hi = (double)b->i0;
    /* a line through a few noisy samples may point far away: at most three times the
     * travel the lobe's own shape allows */
    ze = fmin(ze, lo + 3 * band_travel(a, band));
    zs = fmax(zs, hi - 3 * band_travel(b, band));
    ze = ze < lo ? lo : ze > hi ? hi : ze;
    zs = zs < ze ? ze : zs > hi ? hi : zs;
    double dead = zs - ze, travel = (ze - lo) + (hi - zs);
    double thr = fmax(2.0, 0.5 * travel);
    /* between lobes of opposite sign a noisy straight crossing can leave the band and
     * re-enter it, and the short lines then put a false dead zone there (a diode lobe
     * read as the next firing, 2 to 6 in 5556 bursts at 40 dB): a dead zone there must
     * outlast the band-crossing time the lobes' own shapes give */
    /* A quantised sample on the band's code stands for currents up to half a step
     * beyond it, so the stretch that reads as in-band is that much wider; and a
     * decaying lobe ends less steeply than the half sine of its peak (by
     * e^(-pi / 4Q): up to 1.3 x the travel at Q >= 3). A ring-down's tail a few
     * steps high sits on the zero and band codes for tens of samples at each
     * crossing, and read as dead zones without both */
    if (a->sign != b->sign) {
        double eff = band + 0.5 * lsb;
        thr = fmax(thr, 1.3 * band_travel(a, eff) + band_travel(b, eff));
    }
    if (dead > thr) {
        a->k_end = b->k_start = SEG_B_DEAD;
        a->t_end = ze;
        b->t_start = zs;
        return;
    }
    if (a->sign == b->sign) {
        a->k_end = b->k_start = SEG_B_TOUCH;
        a->t_end = ze;
        b->t_start = zs;
        return;
    }
    /* a straight crossing: a line through the band and a few samples either side */
    /* near a zero the sine is straight (its curvature vanishes there), so the line may
     * reach well past the band: more samples, less noise, no visible bias */
    size_t gap = b->i0 - a->i1, h = gap < 16 ? 16 : gap;
    size_t la = a->i1 - a->i0 + 1, lb = b->i1 - b->i0 + 1;
    if (h > la / 8 + 1)
        h = la / 8 + 1;
    if (h > lb / 8 + 1)
        h = lb / 8 + 1;
    size_t k0 = a->i1 + 1 >= h ? a->i1 + 1 - h : 0, k1 = b->i0 + h - 1;
    double z;
    if (seg_line_zero(x, k0, k1, &z, NULL) != 0 || z < lo || z > hi)
        z = 0.5 * (ze + zs);
    a->k_end = b->k_start = SEG_B_DIRECT;
    a->t_end = b->t_start = z;
}

tf_status seg_runs_from_excursions(const float *x, size_t n, double band, double lsb,
                                   const seg_vec *exc, seg_vec *runs)
{
    const seg_exc *e = exc->data;
    seg_run cur;
    int have = 0;
    for (size_t j = 0; j < exc->n; j++) {
        /* noise fragments: barely out of the band, or a spike of one or two samples */
        if (e[j].pk < 2.0 * band || e[j].i1 - e[j].i0 + 1 < 3)
            continue;
        if (have && e[j].sign == cur.sign && minabs(x, cur.i1 + 1, e[j].i0 - 1) > 0.5 * band) {
            cur.i1 = e[j].i1; /* a dip that never got near zero: same lobe */
            if (e[j].pk > cur.pk) {
                cur.pk = e[j].pk;
                cur.ipk = e[j].ipk;
            }
            continue;
        }
        if (have) {
            seg_run *r = seg_vec_push(runs);
            if (!r)
                return TF_ERR_NOMEM;
            *r = cur;
        }
        memset(&cur, 0, sizeof cur);
        cur.i0 = e[j].i0;
        cur.i1 = e[j].i1;
        cur.sign = e[j].sign;
        cur.ipk = e[j].ipk;
        cur.pk = e[j].pk;
        have = 1;
    }
    if (have) {
        seg_run *r = seg_vec_push(runs);
        if (!r)
            return TF_ERR_NOMEM;
        *r = cur;
    }
    seg_run *r = runs->data;
    for (size_t j = 0; j + 1 < runs->n; j++)
        classify_gap(x, band, lsb, &r[j], &r[j + 1]);
    if (runs->n) {
        /* capture edges: a lobe cut by the record start or end is partial */
        seg_run *f = &r[0], *l = &r[runs->n - 1];
        double zs = edge_zero(x, f, 0);
        if (f->i0 > 0 && ((zs > 1.0 && (double)f->i0 - zs < 0.5 * zs) ||
                          (zs > -5.0 && fabsf(x[0]) <= band))) {
            /* a rest before the lobe, or a record that starts at the firing itself */
            f->k_start = SEG_B_DEAD;
            f->t_start = zs < 0 ? 0 : zs;
        } else {
            f->k_start = SEG_B_EDGE;
            f->t_start = zs > 0 && f->i0 > 0 ? zs : 0;
        }
        double ze = edge_zero(x, l, 1), rest = (double)(n - 1) - ze;
        if (l->i1 + 1 < n && rest > 1.0 && ze - (double)l->i1 < 0.5 * rest) {
            l->k_end = SEG_B_DEAD;
            l->t_end = ze > (double)(n - 1) ? (double)(n - 1) : ze;
        } else {
            l->k_end = SEG_B_EDGE;
            l->t_end = l->i1 + 1 < n ? fmin(ze, (double)(n - 1)) : (double)(n - 1);
        }
    }
    return TF_OK;
}
