/* Channel statistics: range, mean, RMS, robust noise, quantisation step and clipping. */
#include <tankfit/stats.h>

#include <float.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_statistics_double.h>

#if defined(__SSE__)
#include <xmmintrin.h>
#endif

/* The median-based estimates (noise, quantisation step) look at a bounded
 * sample of first differences: TF_DIFF_BLOCKS blocks of TF_DIFF_RUN
 * consecutive differences spread evenly over the record. 65536 differences
 * give the MAD-based sigma a relative standard error near 0.5 %. */
#define TF_DIFF_RUN 64
#define TF_DIFF_BLOCKS 1024
#define TF_DIFF_MAX (TF_DIFF_RUN * TF_DIFF_BLOCKS)
#define TF_DIFF_FALLBACK 2048 /* on the stack when malloc fails */

/* Consistency constant of the MAD for the Gaussian: 1 / Phi^-1(3/4)
 * (P. J. Rousseeuw and C. Croux, JASA 88(424), 1993). */
#define TF_MAD_GAUSS 1.482602218505602

/* A run at the extreme value counts as clipping when it holds at least this
 * many samples and at least TF_CLIP_RATIO times as many as the longer of the
 * runs beside it. The ratio keeps the flat top code of a smooth, heavily
 * oversampled quantised peak out: it is at most 4.83 times its neighbours
 * (see docs/inspect.md). */
#define TF_CLIP_MIN_RUN 3
#define TF_CLIP_RATIO 5
/* Neighbouring runs longer than this mean the trace is exactly flat beside the
 * run too: a noise-free record (a bridge voltage with dead zones), whose
 * plateaus are levels, not a rail. A real trace is noisy off the rail. */
#define TF_CLIP_MAX_NEIGHBOUR 16
/* On quantised data a clipped crest must have been headed at least this many
 * steps past the level (estimated from the slope over TF_CLIP_SLOPE_SPAN
 * samples beside the run). A smooth crest within its top code gives at most
 * (len + 4) / len steps, 2.3 for len >= 3; with noise it scatters a little. */
#define TF_CLIP_MIN_OVERSHOOT 3.0
#define TF_CLIP_SLOPE_SPAN 4

/* Levels a range may span for the data to count as visibly quantised
 * (scopes store 8 to 16 bits). */
#define TF_LSB_MAX_LEVELS 1048576.0
#define TF_LSB_MIN_LEVELS 8.0
#define TF_LSB_MAX_MULTIPLE 20.0
/* loose pass: values printed with 5 significant digits near 1000 codes are
 * off by up to 0.05, which is 1.7 % of a 10-bit step of 2.93 there; allow 5 %
 * of the step (a random residual passes 1 time in 10, so noise still fails) */
#define TF_LSB_LOOSE 0.05

enum { BLOCK = 256 };

/* The packed inner loops below vectorise on their own but not once inlined
 * into their callers' control flow (seen with GCC 12): keep them apart. */
#if defined(__GNUC__) && !defined(__clang__)
#define TF_NOINLINE __attribute__((noinline, noclone))
#elif defined(__GNUC__)
#define TF_NOINLINE __attribute__((noinline))
#else
#define TF_NOINLINE
#endif

/* Neumaier-compensated accumulator: sum of block sums. */
typedef struct {
    double s, c;
} ksum;

static void ksum_add(ksum *k, double v)
{
    double t = k->s + v;
    if (fabs(k->s) >= fabs(v))
        k->c += (k->s - t) + v;
    else
        k->c += (v - t) + k->s;
    k->s = t;
}

/* Sums of x and x^2 over 8 * m samples into eight lanes each: independent
 * lanes let the compiler use packed double arithmetic without reordering any
 * sum. */
TF_NOINLINE static void lane_sums(const float *restrict x, size_t m, double *restrict s,
                                  double *restrict q)
{
    double s8[8] = {0}, q8[8] = {0};
    for (size_t k = 0; k < m; k++, x += 8)
        for (int j = 0; j < 8; j++) {
            double v = x[j];
            s8[j] += v;
            q8[j] += v * v;
        }
    memcpy(s, s8, sizeof s8);
    memcpy(q, q8, sizeof q8);
}

/* Extremes of 8 * m samples in eight lanes. GCC does not vectorise the
 * float compare-select (NaN rules), so use SSE's min/max where present: for
 * finite input they select exactly what the scalar code does. */
TF_NOINLINE static void lane_extremes(const float *restrict x, size_t m, float *restrict lo,
                                      float *restrict hi)
{
#if defined(__SSE__)
    __m128 l0 = _mm_set1_ps(x[0]), l1 = l0, h0 = l0, h1 = l0;
    for (size_t k = 0; k < m; k++, x += 8) {
        __m128 a = _mm_loadu_ps(x), b = _mm_loadu_ps(x + 4);
        l0 = _mm_min_ps(l0, a);
        l1 = _mm_min_ps(l1, b);
        h0 = _mm_max_ps(h0, a);
        h1 = _mm_max_ps(h1, b);
    }
    _mm_storeu_ps(lo, l0);
    _mm_storeu_ps(lo + 4, l1);
    _mm_storeu_ps(hi, h0);
    _mm_storeu_ps(hi + 4, h1);
#else
    float l8[8], h8[8];
    for (int j = 0; j < 8; j++)
        l8[j] = h8[j] = x[0];
    for (size_t k = 0; k < m; k++, x += 8)
        for (int j = 0; j < 8; j++) {
            l8[j] = x[j] < l8[j] ? x[j] : l8[j];
            h8[j] = x[j] > h8[j] ? x[j] : h8[j];
        }
    memcpy(lo, l8, sizeof l8);
    memcpy(hi, h8, sizeof h8);
#endif
}

static void block_sums(const float *x, size_t m, double *s, double *q, float *lo, float *hi)
{
    double s8[8], q8[8];
    float l8[8], h8[8];
    lane_sums(x, m, s8, q8);
    lane_extremes(x, m, l8, h8);
    *s = ((s8[0] + s8[1]) + (s8[2] + s8[3])) + ((s8[4] + s8[5]) + (s8[6] + s8[7]));
    *q = ((q8[0] + q8[1]) + (q8[2] + q8[3])) + ((q8[4] + q8[5]) + (q8[6] + q8[7]));
    for (int j = 0; j < 8; j++) {
        *lo = l8[j] < *lo ? l8[j] : *lo;
        *hi = h8[j] > *hi ? h8[j] : *hi;
    }
}

/* min, max, mean and RMS in one pass: blocks of BLOCK samples are summed in
 * double (pairwise over eight lanes), the block sums are added with
 * compensation, so the error does not grow with n. */
static void moments(const float *x, size_t n, tf_channel_stats *out)
{
    ksum s = {0, 0}, q = {0, 0};
    float lo = x[0], hi = x[0];
    size_t k = 0;
    for (; k + BLOCK <= n; k += BLOCK) {
        double bs, bq;
        block_sums(x + k, BLOCK / 8, &bs, &bq, &lo, &hi);
        ksum_add(&s, bs);
        ksum_add(&q, bq);
    }
    for (; k < n; k++) {
        double v = x[k];
        ksum_add(&s, v);
        ksum_add(&q, v * v);
        lo = x[k] < lo ? x[k] : lo;
        hi = x[k] > hi ? x[k] : hi;
    }
    out->min = lo;
    out->max = hi;
    out->mean = (s.s + s.c) / (double)n;
    double ms = (q.s + q.c) / (double)n;
    out->rms = sqrt(ms > 0 ? ms : 0);
}

/* Fill d with first differences x[k+1] - x[k]: all of them when there are at
 * most cap, else blocks of TF_DIFF_RUN spread evenly. Returns the count. */
static size_t sample_diffs(const float *x, size_t n, double *d, size_t cap)
{
    if (n < 2)
        return 0;
    size_t nd = n - 1;
    if (nd <= cap) {
        for (size_t k = 0; k < nd; k++)
            d[k] = (double)x[k + 1] - (double)x[k];
        return nd;
    }
    size_t run = cap >= TF_DIFF_RUN ? TF_DIFF_RUN : cap;
    size_t blocks = cap / run, m = 0;
    size_t span = nd - run; /* last possible block start */
    for (size_t j = 0; j < blocks; j++) {
        size_t start = blocks > 1 ? (size_t)((double)span * (double)j / (double)(blocks - 1)) : 0;
        for (size_t k = start; k < start + run; k++)
            d[m++] = (double)x[k + 1] - (double)x[k];
    }
    return m;
}

/* 1.4826 * MAD(d) / sqrt(2); d is reordered and overwritten. */
static double mad_sigma(double *d, size_t m)
{
    if (m == 0)
        return 0;
    double med = gsl_stats_median(d, 1, m);
    for (size_t k = 0; k < m; k++)
        d[k] = fabs(d[k] - med);
    double mad = gsl_stats_median(d, 1, m);
    /* differences of independent noise have variance 2 sigma^2 */
    return TF_MAD_GAUSS * mad / sqrt(2.0);
}

/* Approximate greatest common divisor of a, b > 0: Euclid with the symmetric
 * remainder, stopping when the remainder is within the tolerance. */
static double fgcd(double a, double b, double tol, double rel)
{
    for (int it = 0; it < 64; it++) {
        if (a < b) {
            double t = a;
            a = b;
            b = t;
        }
        double r = fmod(a, b);
        if (b - r < r)
            r = b - r;
        if (r <= fmax(tol, rel * b))
            return b;
        a = b;
        b = r;
    }
    return 0;
}

/* One pass of the step search over the non-zero differences, starting from
 * the smallest one q. strict: every difference must be a multiple of the
 * candidate within max(tol, rel * q) (exact data: PCM codes, float values).
 * loose: only differences of at most TF_LSB_MAX_MULTIPLE candidate steps
 * decide, within max(tol, rel * difference, TF_LSB_LOOSE * q), since for printed values the
 * candidate's own error grows with the multiple; beyond that the tolerance
 * no longer tells a step from noise. Returns the step refined by least
 * squares, or 0. */
static double lsb_pass(const double *d, size_t m, double q, double tol, double rel, int loose)
{
    size_t used = 0;
    for (size_t k = 0; k < m && q > 0; k++) {
        double a = fabs(d[k]);
        if (a <= tol || (loose && a > TF_LSB_MAX_MULTIPLE * q))
            continue;
        used++;
        double kk = nearbyint(a / q);
        if (fabs(a - kk * q) > (loose ? fmax(tol, fmax(rel * a, TF_LSB_LOOSE * q)) : fmax(tol, rel * q)))
            q = fgcd(q, a, tol, rel);
        if (q < 16.0 * tol)
            return 0;
    }
    if (!(q > 0) || used < 16)
        return 0;
    double num = 0, den = 0;
    for (size_t k = 0; k < m; k++) {
        double a = fabs(d[k]);
        if (a <= tol || (loose && a > TF_LSB_MAX_MULTIPLE * q))
            continue;
        double kk = nearbyint(a / q);
        num += a * kk;
        den += kk * kk;
    }
    return den > 0 ? num / den : 0;
}

/* Quantisation step from the sampled differences d (read only): the common
 * spacing of the non-zero differences (a strict pass for exact data, then a
 * loose one for printed values); 0 when the spacing is at the float rounding
 * level or the range holds too few or too many levels. */
static double lsb_estimate(const double *d, size_t m, double lo, double hi)
{
    double scale = fmax(fabs(lo), fabs(hi));
    /* float32 storage rounds each value by half an ulp: a difference is off
     * by about FLT_EPSILON * scale */
    double tol = 4.0 * FLT_EPSILON * scale;
    const double rel = 2e-3; /* printed values (6 digits) stay within this */
    double q0 = INFINITY;
    size_t nz = 0;
    for (size_t k = 0; k < m; k++) {
        double a = fabs(d[k]);
        if (a > tol) {
            nz++;
            q0 = a < q0 ? a : q0;
        }
    }
    if (nz < 16)
        return 0;
    /* printed values: the smallest difference may be a step shortened by the
     * printing; start the loose pass from the mean of the one-step ones */
    double s1 = 0;
    size_t n1 = 0;
    for (size_t k = 0; k < m; k++) {
        double a = fabs(d[k]);
        if (a >= q0 && a < 1.5 * q0) {
            s1 += a;
            n1++;
        }
    }
    double q1 = n1 ? s1 / (double)n1 : q0;
    for (int loose = 0; loose < 2; loose++) {
        double q = lsb_pass(d, m, loose ? q1 : q0, tol, rel, loose);
        double levels = q > 0 ? (hi - lo) / q : 0;
        if (q >= 16.0 * tol && levels <= TF_LSB_MAX_LEVELS && levels >= TF_LSB_MIN_LEVELS)
            return q;
    }
    return 0;
}

/* Length of the run of samples equal to x[k] going back from k (inclusive). */
static size_t run_back(const float *x, size_t k)
{
    size_t s = k;
    while (s > 0 && x[s - 1] == x[k])
        s--;
    return k - s + 1;
}

/* Length of the run of samples equal to x[k] going forward from k. */
static size_t run_fwd(const float *x, size_t n, size_t k)
{
    size_t e = k;
    while (e + 1 < n && x[e + 1] == x[k])
        e++;
    return e - k + 1;
}

/* Non-zero when one of x[0..15] equals lo or hi (branch-free, packed). */
TF_NOINLINE static int block_touches(const float *x, float lo, float hi)
{
    int any = 0;
    for (int j = 0; j < 16; j++)
        any |= (x[j] == hi) | (x[j] == lo);
    return any;
}

/* Runs at lo or hi count as clipped when long and much longer than their
 * neighbours, which must be short (TF_CLIP_MIN_RUN, TF_CLIP_RATIO,
 * TF_CLIP_MAX_NEIGHBOUR). Samples away from the
 * extremes are skipped 16 at a time with a branch-free test. */
/* How far the trace would have gone past the run's level had it not been
 * held there: for a crest cut flat over len samples, the slope toward the
 * level (over the TF_CLIP_SLOPE_SPAN samples each side) times len / 4
 * (parabola). Returns -1 when neither side has enough samples. */
static double overshoot(const float *x, size_t n, size_t k, size_t len)
{
    const size_t K = TF_CLIP_SLOPE_SPAN;
    double slope = 0;
    int sides = 0;
    if (k >= K) {
        slope += fabs((double)x[k] - (double)x[k - K]) / (double)K;
        sides++;
    }
    size_t e = k + len - 1; /* last sample of the run */
    if (e + K < n) {
        slope += fabs((double)x[e] - (double)x[e + K]) / (double)K;
        sides++;
    }
    return sides ? slope / sides * (double)len / 4.0 : -1.0;
}

static void clipping(const float *x, size_t n, float lo, float hi, double lsb,
                     tf_channel_stats *out)
{
    if (!(lo < hi))
        return; /* a constant channel is flat, not clipped */
    size_t k = 0;
    while (k < n) {
        if (k + 16 <= n && !block_touches(x + k, lo, hi)) {
            k += 16;
            continue;
        }
        if (x[k] != hi && x[k] != lo) {
            k++;
            continue;
        }
        size_t len = run_fwd(x, n, k);
        size_t before = k > 0 ? run_back(x, k - 1) : 0;
        size_t after = k + len < n ? run_fwd(x, n, k + len) : 0;
        size_t nb = before > after ? before : after;
        int clipped = len >= TF_CLIP_MIN_RUN && len >= TF_CLIP_RATIO * nb &&
                      nb <= TF_CLIP_MAX_NEIGHBOUR;
        /* quantised data: a smooth crest can sit on its top code for a few
         * samples; it was cut only if it would have gone well past it */
        if (clipped && lsb > 0) {
            double over = overshoot(x, n, k, len);
            clipped = over < 0 || over >= TF_CLIP_MIN_OVERSHOOT * lsb;
        }
        if (clipped) {
            out->clipped_samples += len;
            out->clipped_runs++;
            if (x[k] == hi)
                out->clipped_high = 1;
            else
                out->clipped_low = 1;
        }
        k += len;
    }
}

/* Sampled differences in a malloc'd buffer, or in fallback when that fails. */
static double *diff_buffer(size_t n, double *fallback, size_t *cap)
{
    size_t want = n > 1 && n - 1 < TF_DIFF_MAX ? n - 1 : TF_DIFF_MAX;
    double *d = malloc((want ? want : 1) * sizeof *d);
    if (d) {
        *cap = want;
        return d;
    }
    *cap = TF_DIFF_FALLBACK;
    return fallback;
}

double tf_stats_noise_sigma(const float *x, size_t n)
{
    double fallback[TF_DIFF_FALLBACK], sigma;
    size_t cap;
    if (!x || n < 2)
        return 0;
    double *d = diff_buffer(n, fallback, &cap);
    size_t m = sample_diffs(x, n, d, cap);
    sigma = mad_sigma(d, m);
    if (d != fallback)
        free(d);
    return sigma;
}

void tf_stats_compute(const float *x, size_t n, tf_channel_stats *out)
{
    double fallback[TF_DIFF_FALLBACK];
    size_t cap;
    memset(out, 0, sizeof *out);
    if (!x || n == 0) {
        out->min = out->max = out->mean = out->rms = NAN;
        return;
    }
    moments(x, n, out);
    if (n < 2) {
        clipping(x, n, (float)out->min, (float)out->max, 0, out);
        return;
    }
    double *d = diff_buffer(n, fallback, &cap);
    size_t m = sample_diffs(x, n, d, cap);
    out->lsb = lsb_estimate(d, m, out->min, out->max);
    clipping(x, n, (float)out->min, (float)out->max, out->lsb, out);
    out->noise_sigma = mad_sigma(d, m);
    if (d != fallback)
        free(d);
}
