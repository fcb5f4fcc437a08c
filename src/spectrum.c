/* Synchronous harmonic analysis and power over whole periods: choose M periods, resample
 * to S points per period (cubic), fold, one S-point FFT per channel (docs/spectrum.md). */
#include <tankfit/spectrum.h>
#include <tankfit/stats.h>

#include "spectrum_internal.h"

#include <float.h>
#include <limits.h>
#include <stdatomic.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <pthread.h>
#include <unistd.h>

#define MAX_CH 3
#define MAX_THREADS 8

/* Per analysed channel working state. */
typedef struct work {
    int idx;
    const char *role;
    const float *x;
    double shift_s;      /* read at t + shift_s */
    double pos0;         /* fractional sample index of the window start */
    double *fold;        /* S sums, one per point of the period */
    double sumsq;        /* sum of squares of the resampled window */
    double peak;         /* largest |raw sample| in the window */
    double complex *ph;  /* H + 1 phasors (index h) referred to the window start */
    double *fh;          /* frequency of each phasor */
} work;

void tf_spectrum_options_init(tf_spectrum_options *o)
{
    memset(o, 0, sizeof *o);
    o->harmonics = 40;
}

void tf_spectrum_free(tf_spectrum_result *r)
{
    if (!r)
        return;
    for (size_t c = 0; c < r->nch; c++)
        free(r->ch[c].harm);
    free(r->ch);
    free(r->power.harm);
    free(r);
}

static double wrap_deg(double rad)
{
    double d = fmod(rad * 180.0 / M_PI, 360.0);
    if (d > 180.0)
        d -= 360.0;
    else if (d <= -180.0)
        d += 360.0;
    return d;
}

static int cmp_double(const void *a, const void *b)
{
    const double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* The fundamental and where it came from. */
static tf_status pick_fundamental(const tf_capture *cap, const tf_segment_result *seg,
                                  const tf_spectrum_options *opt, int ref, double *f,
                                  char *source, tf_error *err)
{
    if (opt->fundamental_hz > 0.0) {
        *f = opt->fundamental_hz;
        strcpy(source, "option");
        return TF_OK;
    }
    if (seg && seg->ncycles > 0) {
        /* mean of the periods within 5 % of their median: a missing firing
         * makes one period twice as long and must not bias the rest */
        double *p = malloc(sizeof(double) * seg->ncycles);
        size_t np = 0;
        for (size_t c = 0; p && c < seg->ncycles; c++)
            if (isfinite(seg->cycles[c].period_s) && seg->cycles[c].period_s > 0.0)
                p[np++] = seg->cycles[c].period_s;
        double sum = 0.0;
        size_t k = 0;
        if (np > 0) {
            qsort(p, np, sizeof *p, cmp_double);
            const double med = np % 2 ? p[np / 2] : 0.5 * (p[np / 2 - 1] + p[np / 2]);
            for (size_t c = 0; c < np; c++)
                if (fabs(p[c] - med) <= 0.05 * med) {
                    sum += p[c];
                    k++;
                }
        }
        free(p);
        if (k > 0) {
            *f = (double)k / sum;
            strcpy(source, "segmenter");
            return TF_OK;
        }
    }
    tf_status st = tf_spectrum_estimate_fundamental(cap->ch[ref].samples, cap->n, cap->dt_s, f, err);
    if (st != TF_OK) {
        char why[TF_ERROR_MSG_SIZE / 2] = "";
        if (err)
            memcpy(why, err->msg, sizeof why - 1);
        return tf_error_set(err, st, "channel '%s': cannot estimate the fundamental: %s",
                            cap->ch[ref].name, why);
    }
    strcpy(source, "estimated");
    return TF_OK;
}

/* Stencil of tf_sp_interp: first sample index and the four cubic weights. */
static inline size_t stencil(double pos, size_t n, double wt[4])
{
    if (pos < -0.5)
        pos = -0.5;
    else if (pos > (double)n - 0.5)
        pos = (double)n - 0.5;
    long k = (long)(pos + 1.0) - 2; /* pos + 1 > 0: truncation is floor */
    if (k < 0)
        k = 0;
    else if (k > (long)n - 4)
        k = (long)n - 4;
    const double u = pos - (double)k;
    const double a = u - 1.0, b = u - 2.0, c = u - 3.0;
    wt[0] = -(a * b * c * TF_SP_SIXTH);
    wt[1] = u * b * c * 0.5;
    wt[2] = -(u * a * c * 0.5);
    wt[3] = u * a * b * TF_SP_SIXTH;
    return (size_t)k;
}

/* ---- the pass over the samples -------------------------------------------------------
 * Everything that reads the whole window is one pass, cut into tasks fixed by the
 * geometry alone, never by the thread count: fold blocks (periods [m0, m1) of every
 * channel folded into the block's own sums, with its sums of squares and of v i and the
 * raw peaks of its share of the samples) and runs of firing cycles (their energies).
 * Threads take tasks in any order, each task writes only its own slots, and the slots
 * are combined in task order: one thread or eight give the same bits. */

#define TILE 128            /* grid points whose stencils are made in one go */
#define MAX_BLOCKS 16       /* fold blocks; fewer for short windows (BLOCK_POINTS) */
#define BLOCK_POINTS ((size_t)1 << 18)
#define BLOCK_BYTES ((size_t)32 << 20) /* bound on the blocks' own fold sums */
#define MAX_RUNS 16         /* runs of firing cycles */

typedef struct pass {
    int nw, ng, grp[MAX_CH], iv, ii;
    const float *x[MAX_CH];
    double gpos[MAX_CH];    /* window start of each stencil group: channels read
                             * without a shift share one stencil per point */
    size_t n, S, M, nblocks;
    double step;
    double *fold[MAX_BLOCKS][MAX_CH];
    double sumsq[MAX_BLOCKS][MAX_CH], vi[MAX_BLOCKS], peak[MAX_BLOCKS][MAX_CH];
    long raw_a[MAX_CH], raw_len[MAX_CH]; /* raw samples inside the window */
    /* energy per firing cycle: v read at k + sk against i[k] */
    const tf_cycle *cycles;
    size_t ncycles, nruns;
    const float *ev, *ei;
    double sk, t0, dt;
    double *energy;         /* one per cycle; NAN when the cycle is not integrated */
    size_t ntasks;
    atomic_size_t next;
} pass;

/* Stencils of L <= TILE consecutive grid points p0 + j step, j in [j0, j0 + L): the
 * arithmetic of stencil(), without its clamps when no point needs them, in loops the
 * compiler vectorises (the divisions by 6 cost most of the fold). */
typedef struct tile {
    size_t k[TILE];
    double w[4][TILE];
} tile;

static void tile_stencils(double p0, double step, size_t j0, size_t L, size_t n, tile *t)
{
    const double jd = (double)j0; /* (double)j0 + q is exact: both below 2^53 */
    const double first = p0 + jd * step, last = p0 + (jd + (double)(L - 1)) * step;
    if (first >= 1.0 && last <= (double)n - 3.0 && n < (size_t)INT_MAX) {
        int ki[TILE];
        for (int q = 0; q < (int)L; q++) {
            const double pos = p0 + (jd + (double)q) * step;
            const int k = (int)(pos + 1.0) - 2;
            const double u = pos - (double)k;
            const double a = u - 1.0, b = u - 2.0, c = u - 3.0;
            ki[q] = k;
            t->w[0][q] = -(a * b * c * TF_SP_SIXTH);
            t->w[1][q] = u * b * c * 0.5;
            t->w[2][q] = -(u * a * c * 0.5);
            t->w[3][q] = u * a * b * TF_SP_SIXTH;
        }
        for (size_t q = 0; q < L; q++)
            t->k[q] = (size_t)ki[q];
        return;
    }
    for (size_t q = 0; q < L; q++) {
        double wt[4];
        t->k[q] = stencil(p0 + (jd + (double)q) * step, n, wt);
        for (int i = 0; i < 4; i++)
            t->w[i][q] = wt[i];
    }
}

/* Largest |x[k]| (0 for none; NANs are passed over), in eight lanes so that the
 * compiler keeps it in vector registers: a maximum does not depend on the order. */
static double abs_max(const float *x, size_t n)
{
    float m[8] = {0};
    size_t k = 0;
    for (; k + 8 <= n; k += 8)
        for (int j = 0; j < 8; j++) {
            const float a = fabsf(x[k + j]);
            m[j] = a > m[j] ? a : m[j];
        }
    for (; k < n; k++) {
        const float a = fabsf(x[k]);
        m[0] = a > m[0] ? a : m[0];
    }
    float r = 0.0f;
    for (int j = 0; j < 8; j++)
        r = m[j] > r ? m[j] : r;
    return r;
}

/* One tile of one period: values of NW channels (a constant in each caller, so the
 * channel loop unrolls) folded into fold[c][q], squares and v i summed in point order. */
static inline void fold_tile(const int NW, const tile *const tc[MAX_CH],
                             const float *const x[MAX_CH], double *const fold[MAX_CH],
                             size_t L, int iv, int ii, double sq[MAX_CH], double *pvi)
{
    for (size_t q = 0; q < L; q++) {
        double val[MAX_CH];
        for (int c = 0; c < NW; c++) {
            const tile *tg = tc[c];
            const float *p = x[c] + tg->k[q];
            const double v = tg->w[0][q] * p[0] + tg->w[1][q] * p[1] + tg->w[2][q] * p[2] +
                             tg->w[3][q] * p[3];
            val[c] = v;
            fold[c][q] += v;
            sq[c] += v * v;
        }
        if (iv >= 0)
            *pvi += val[iv] * val[ii];
    }
}

/* Fold block b: resample every channel on the grid of its periods and add the values
 * into one period; sums of squares and of v i period by period. */
static void fold_block(pass *P, size_t b)
{
    const size_t S = P->S, m0 = P->M * b / P->nblocks, m1 = P->M * (b + 1) / P->nblocks;
    const int nw = P->nw;
    tile t[MAX_CH];
    const tile *tc[MAX_CH];
    for (int c = 0; c < nw; c++)
        tc[c] = &t[P->grp[c]];
    double sumsq[MAX_CH] = {0}, vi = 0.0;
    for (size_t m = m0; m < m1; m++) {
        double sq[MAX_CH] = {0}, pvi = 0.0;
        for (size_t s0 = 0; s0 < S; s0 += TILE) {
            const size_t L = S - s0 < TILE ? S - s0 : TILE;
            for (int g = 0; g < P->ng; g++)
                tile_stencils(P->gpos[g], P->step, m * S + s0, L, P->n, &t[g]);
            double *f[MAX_CH];
            for (int c = 0; c < nw; c++)
                f[c] = P->fold[b][c] + s0;
            if (nw == 3)
                fold_tile(3, tc, P->x, f, L, P->iv, P->ii, sq, &pvi);
            else if (nw == 2)
                fold_tile(2, tc, P->x, f, L, P->iv, P->ii, sq, &pvi);
            else
                fold_tile(1, tc, P->x, f, L, P->iv, P->ii, sq, &pvi);
        }
        for (int c = 0; c < nw; c++)
            sumsq[c] += sq[c];
        vi += pvi;
    }
    for (int c = 0; c < P->nw; c++) {
        P->sumsq[b][c] = sumsq[c];
        /* the block's share of the raw samples (a maximum does not depend on the split) */
        const long k0 = P->raw_a[c] + (long)((size_t)P->raw_len[c] * b / P->nblocks);
        const long k1 = P->raw_a[c] + (long)((size_t)P->raw_len[c] * (b + 1) / P->nblocks);
        P->peak[b][c] = abs_max(P->x[c] + k0, (size_t)(k1 - k0));
    }
    P->vi[b] = vi;
}

/* Sum of i[k] v(k + sk) over [ka, kb): the fractional shift is the same for every k,
 * so are the cubic weights (those of tf_sp_interp at u = 1 + frac(sk)); within a
 * sample of either end of the record tf_sp_interp itself. */
static double cycle_sum(const pass *P, long ka, long kb)
{
    const double fl = floor(P->sk);
    const long o = (long)fl - 1, n = (long)P->n;
    const double u = 1.0 + (P->sk - fl);
    const double a = u - 1.0, b = u - 2.0, c = u - 3.0;
    const double w0 = -(a * b * c * TF_SP_SIXTH), w1 = u * b * c * 0.5,
                 w2 = -(u * a * c * 0.5), w3 = u * a * b * TF_SP_SIXTH;
    long lo = ka > -o ? ka : -o, hi = kb < n - 3 - o ? kb : n - 3 - o;
    if (hi < lo)
        lo = hi = kb;
    const float *v = P->ev, *i = P->ei;
    double s = 0.0;
    for (long k = ka; k < lo; k++)
        s += (double)i[k] * tf_sp_interp(v, P->n, (double)k + P->sk);
    for (long k = lo; k < hi; k++) {
        const float *p = v + k + o;
        s += (double)i[k] * (w0 * p[0] + w1 * p[1] + w2 * p[2] + w3 * p[3]);
    }
    for (long k = hi; k < kb; k++)
        s += (double)i[k] * tf_sp_interp(v, P->n, (double)k + P->sk);
    return s;
}

/* Run r of the firing cycles: the integral of v(t + skew) i(t) over each complete
 * cycle, on the current's sample grid (rectangle rule; the ends are rounded to whole
 * samples). Cycles reaching outside the record are left out (NAN). */
static void energy_run(pass *P, size_t r)
{
    const size_t c0 = P->ncycles * r / P->nruns, c1 = P->ncycles * (r + 1) / P->nruns;
    const double dt = P->dt, lastpos = (double)(P->n - 1), sk = P->sk;
    for (size_t c = c0; c < c1; c++) {
        const tf_cycle *cy = &P->cycles[c];
        P->energy[c] = NAN;
        if (!isfinite(cy->period_s) || !(cy->period_s > 0.0) || !isfinite(cy->start_s))
            continue;
        const double a = (cy->start_s - P->t0) / dt, b = a + cy->period_s / dt;
        if (a + sk < 0.0 || a < 0.0 || b > lastpos || b + sk > lastpos)
            continue;
        P->energy[c] = cycle_sum(P, lround(a), lround(b)) * dt;
    }
}

static void *pass_worker(void *arg)
{
    pass *P = arg;
    for (;;) {
        const size_t t = atomic_fetch_add(&P->next, 1);
        if (t >= P->ntasks)
            break;
        if (t < P->nblocks)
            fold_block(P, t);
        else
            energy_run(P, t - P->nblocks);
    }
    return NULL;
}

static int thread_count(int requested, size_t points)
{
    if (requested == 1 || points < ((size_t)1 << 20))
        return 1;
    if (requested > 1)
        return requested > MAX_THREADS ? MAX_THREADS : requested;
    const long cores = sysconf(_SC_NPROCESSORS_ONLN);
    return cores >= 2 ? 2 : 1;
}

/* Fold blocks for M periods of S points of nw channels: about BLOCK_POINTS points
 * each, at most MAX_BLOCKS, and their own sums within BLOCK_BYTES. */
static size_t block_count(size_t M, size_t S, int nw)
{
    size_t nb = M * S / BLOCK_POINTS;
    if (nb > MAX_BLOCKS)
        nb = MAX_BLOCKS;
    if (nb > M)
        nb = M;
    const size_t per = (size_t)nw * S * sizeof(double);
    if (nb > 1 + BLOCK_BYTES / per)
        nb = 1 + BLOCK_BYTES / per;
    return nb < 1 ? 1 : nb;
}

/* The pass: fills every channel's fold, sum of squares and raw peak, returns the sum of
 * v i over the window (iv < 0: none) and, with cycles, their energies in *energy
 * (malloc'd, one per cycle, NAN where left out). Returns NAN when out of memory. */
static double run_pass(const tf_capture *cap, work *w, int nw, size_t M, size_t S,
                       double step, int iv, int ii, const tf_segment_result *seg, double sk,
                       int threads, double **energy)
{
    pass *P = calloc(1, sizeof *P);
    if (!P)
        return NAN;
    P->nw = nw;
    P->iv = iv;
    P->ii = ii;
    P->n = cap->n;
    P->S = S;
    P->M = M;
    P->step = step;
    P->nblocks = block_count(M, S, nw);
    for (int c = 0; c < nw; c++) {
        int g = 0;
        while (g < P->ng && P->gpos[g] != w[c].pos0)
            g++;
        if (g == P->ng)
            P->gpos[P->ng++] = w[c].pos0;
        P->grp[c] = g;
        P->x[c] = w[c].x;
        long a = (long)ceil(w[c].pos0), b = (long)floor(w[c].pos0 + (double)(M * S - 1) * step);
        if (a < 0)
            a = 0;
        if (b > (long)cap->n - 1)
            b = (long)cap->n - 1;
        P->raw_a[c] = a;
        P->raw_len[c] = b >= a ? b - a + 1 : 0;
    }
    double *own = calloc((P->nblocks - 1) * (size_t)nw * S + 1, sizeof(double));
    *energy = NULL;
    if (iv >= 0 && seg && seg->ncycles > 0) {
        P->cycles = seg->cycles;
        P->ncycles = seg->ncycles;
        P->nruns = seg->ncycles < MAX_RUNS ? seg->ncycles : MAX_RUNS;
        P->ev = w[iv].x;
        P->ei = w[ii].x;
        P->sk = sk / cap->dt_s;
        P->t0 = cap->t0_s;
        P->dt = cap->dt_s;
        *energy = P->energy = malloc(seg->ncycles * sizeof(double));
    }
    if (!own || (P->ncycles && !P->energy)) {
        free(own);
        free(*energy);
        *energy = NULL;
        free(P);
        return NAN;
    }
    for (size_t b = 0; b < P->nblocks; b++)
        for (int c = 0; c < nw; c++)
            P->fold[b][c] = b == 0 ? w[c].fold : own + ((b - 1) * (size_t)nw + (size_t)c) * S;
    P->ntasks = P->nblocks + P->nruns;
    atomic_init(&P->next, 0);
    int T = thread_count(threads, M * S);
    if ((size_t)T > P->ntasks)
        T = (int)P->ntasks;
    pthread_t tid[MAX_THREADS];
    int started = 0;
    while (started < T - 1 && pthread_create(&tid[started], NULL, pass_worker, P) == 0)
        started++;
    pass_worker(P);
    for (int t = 0; t < started; t++)
        pthread_join(tid[t], NULL);
    double vi = 0.0;
    for (int c = 0; c < nw; c++) {
        w[c].sumsq = 0.0;
        w[c].peak = 0.0;
    }
    for (size_t b = 0; b < P->nblocks; b++) {
        for (int c = 0; c < nw; c++) {
            if (b > 0)
                for (size_t s = 0; s < S; s++)
                    w[c].fold[s] += P->fold[b][c][s];
            w[c].sumsq += P->sumsq[b][c];
            if (P->peak[b][c] > w[c].peak)
                w[c].peak = P->peak[b][c];
        }
        vi += P->vi[b];
    }
    free(own);
    free(P);
    return vi;
}

/* Synchronous phasors: FFT of the folded period; exactly bins M h of the
 * M S-point DFT of the whole resampled window. */
static tf_status sync_phasors(work *w, size_t M, size_t S, int H, double f, double *dc,
                              double *msq_periodic, tf_error *err)
{
    double *p = fftw_malloc(sizeof(double) * S);
    fftw_complex *X = fftw_malloc(sizeof(fftw_complex) * (S / 2 + 1));
    fftw_plan plan = tf_sp_plan_r2c(S);
    if (!p || !X || !plan) {
        fftw_free(p);
        fftw_free(X);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory for a %zu-point FFT", S);
    }
    double ms = 0.0;
    for (size_t s = 0; s < S; s++) {
        p[s] = w->fold[s] / (double)M;
        ms += p[s] * p[s];
    }
    fftw_execute_dft_r2c(plan, p, X);
    *dc = creal(X[0]) / (double)S;
    *msq_periodic = ms / (double)S;
    w->ph[0] = *dc;
    w->fh[0] = 0.0;
    for (int h = 1; h <= H; h++) {
        w->ph[h] = 2.0 * X[h] / (double)S;
        w->fh[h] = h * f;
    }
    fftw_free(p);
    fftw_free(X);
    return TF_OK;
}

/* Length of the Hann transform: at most count, of the form 2^a m with a small odd m
 * (FFTW_ESTIMATE plans such lengths well: about 2.5x faster than a general
 * 7-smooth length near 10^7 points on this machine); short windows take the
 * largest 7-smooth length. */
static size_t hann_length(size_t count)
{
    static const size_t odd[] = {1, 3, 5, 7, 9, 15};
    if (count < 4096)
        return tf_spectrum_smooth_down(count);
    size_t best = 0;
    for (int i = 0; i < 6; i++) {
        size_t L = odd[i];
        while (L * 2 <= count)
            L *= 2;
        if (L > best)
            best = L;
    }
    return best;
}

/* Hann-window phasors on the raw samples of the window (non-synchronous). */
static tf_status hann_phasors(const tf_capture *cap, work *w, double t_a, size_t count, int H,
                              double f, size_t *used, tf_error *err)
{
    long k0 = (long)ceil(w->pos0 - 1e-9);
    if (k0 < 0)
        k0 = 0;
    if ((size_t)k0 + count > cap->n)
        count = cap->n - (size_t)k0;
    const size_t L = hann_length(count);
    double *buf = fftw_malloc(sizeof(double) * L);
    fftw_complex *X = fftw_malloc(sizeof(fftw_complex) * (L / 2 + 1));
    fftw_plan plan = tf_sp_plan_r2c(L);
    if (!buf || !X || !plan) {
        fftw_free(buf);
        fftw_free(X);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory for a %zu-point FFT", L);
    }
    *used = L;
    for (size_t k = 0; k < L; k++)
        buf[k] = w->x[(size_t)k0 + k];
    tf_sp_hann_apply(buf, L);
    fftw_execute_dft_r2c(plan, buf, X);
    const double dt = cap->dt_s, tk0 = tf_capture_time(cap, (size_t)k0);
    /* harmonics lie f L dt bins apart: search at most a third of that around each */
    const double spacing = f * (double)L * dt;
    const int search = spacing >= 6.0 ? 2 : (spacing >= 3.0 ? 1 : 0);
    for (int h = 1; h <= H; h++) {
        double nu, amp, phase;
        if (tf_sp_hann_peak(X, L, h * f * (double)L * dt, search, &nu, &amp, &phase) != 0) {
            nu = h * f * (double)L * dt;
            amp = 0.0;
            phase = 0.0;
        }
        const double fh = nu / ((double)L * dt);
        /* refer the phase to the window start in corrected time */
        phase += 2.0 * M_PI * fh * (t_a + w->shift_s - tk0);
        w->ph[h] = amp * cexp(I * phase);
        w->fh[h] = fh;
    }
    fftw_free(buf);
    fftw_free(X);
    return TF_OK;
}

/* Minimum, median and maximum of the energies of the cycles integrated by the pass. */
static void cycle_energies(double *e, size_t ncycles, tf_power *pw)
{
    pw->cycle_energy_min_j = pw->cycle_energy_median_j = pw->cycle_energy_max_j = NAN;
    pw->cycles = 0;
    size_t ne = 0;
    for (size_t c = 0; e && c < ncycles; c++)
        if (!isnan(e[c]))
            e[ne++] = e[c];
    if (ne > 0) {
        qsort(e, ne, sizeof *e, cmp_double);
        pw->cycle_energy_min_j = e[0];
        pw->cycle_energy_max_j = e[ne - 1];
        pw->cycle_energy_median_j = ne % 2 ? e[ne / 2] : 0.5 * (e[ne / 2 - 1] + e[ne / 2]);
        pw->cycles = ne;
    }
}

static tf_status check_inputs(const tf_capture *cap, const tf_roles *roles,
                              const tf_spectrum_options *opt, tf_error *err)
{
    if (!cap || !roles)
        return tf_error_set(err, TF_ERR_USAGE, "spectrum: no capture or roles given");
    if (opt->harmonics < 1 || opt->harmonics > TF_SPECTRUM_MAX_HARMONICS)
        return tf_error_set(err, TF_ERR_USAGE, "harmonics: expected 1..%d, found %d",
                            TF_SPECTRUM_MAX_HARMONICS, opt->harmonics);
    if (!isfinite(opt->fundamental_hz) || opt->fundamental_hz < 0.0)
        return tf_error_set(err, TF_ERR_USAGE,
                            "fundamental: expected a positive frequency, found %g",
                            opt->fundamental_hz);
    if (opt->threads < 0 || opt->threads > MAX_THREADS)
        return tf_error_set(err, TF_ERR_USAGE, "threads: expected 0..%d, found %d", MAX_THREADS,
                            opt->threads);
    if (!isfinite(opt->skew_s) || fabs(opt->skew_s) >= 1e-3)
        return tf_error_set(err, TF_ERR_USAGE, "skew: expected |skew| < 1 ms, found %g s",
                            opt->skew_s);
    if (!(cap->dt_s > 0.0) || cap->n < 8)
        return tf_error_set(err, TF_ERR_DATA,
                            "spectrum: the capture holds %zu samples, at least 8 are needed",
                            cap->n);
    return TF_OK;
}

/* Channels with a role, in a fixed order, and the phase reference. */
static int collect(const tf_capture *cap, const tf_roles *roles, work *w, int *ref, int *iv,
                   int *ii)
{
    const int idx[MAX_CH] = {roles->current, roles->voltage, roles->cap_voltage};
    static const char *const names[MAX_CH] = {"current", "voltage", "cap_voltage"};
    int nw = 0;
    *iv = *ii = -1;
    for (int r = 0; r < MAX_CH; r++) {
        if (idx[r] < 0 || (size_t)idx[r] >= cap->nchan || !cap->ch[idx[r]].samples)
            continue;
        w[nw].idx = idx[r];
        w[nw].role = names[r];
        w[nw].x = cap->ch[idx[r]].samples;
        if (r == 0)
            *ii = nw;
        if (r == 1)
            *iv = nw;
        nw++;
    }
    *ref = *iv >= 0 ? *iv : 0;
    return nw;
}

static void free_work(work *w, int nw)
{
    for (int c = 0; c < nw; c++) {
        free(w[c].fold);
        free(w[c].ph);
        free(w[c].fh);
    }
}

/* Fill one channel's result from its phasors. */
static tf_status fill_channel(const tf_capture *cap, const work *w, const work *ref, int H,
                              double dc, double rms, double msq_periodic,
                              tf_channel_spectrum *cs, tf_error *err)
{
    cs->channel = w->idx;
    snprintf(cs->role, sizeof cs->role, "%s", w->role);
    snprintf(cs->name, sizeof cs->name, "%s", cap->ch[w->idx].name);
    snprintf(cs->unit, sizeof cs->unit, "%s", cap->ch[w->idx].unit);
    cs->harm = calloc((size_t)H, sizeof *cs->harm);
    if (!cs->harm)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    cs->nharm = (size_t)H;
    const double ref1 = carg(ref->ph[1]);
    double sum2 = 0.0;
    for (int h = 1; h <= H; h++) {
        tf_harmonic *hm = &cs->harm[h - 1];
        hm->n = h;
        hm->amplitude = cabs(w->ph[h]);
        hm->rms = hm->amplitude / M_SQRT2;
        hm->phase_deg = wrap_deg(carg(w->ph[h]) - h * ref1);
        hm->frequency_hz = w->fh[h];
        if (h >= 2)
            sum2 += hm->amplitude * hm->amplitude;
    }
    cs->dc = dc;
    cs->rms = rms;
    cs->peak = w->peak;
    cs->crest_factor = rms > 0.0 ? w->peak / rms : NAN;
    cs->thd = cs->harm[0].amplitude > 0.0 ? sqrt(sum2) / cs->harm[0].amplitude : NAN;
    const double ap = rms * rms - msq_periodic;
    cs->aperiodic_rms = ap > 0.0 ? sqrt(ap) : 0.0;
    cs->shift_s = w->shift_s;
    const tf_channel *ch = &cap->ch[w->idx];
    if (ch->stats_valid) {
        cs->clipped_samples = ch->stats.clipped_samples;
    } else {
        tf_channel_stats st;
        tf_stats_compute(ch->samples, cap->n, &st);
        cs->clipped_samples = st.clipped_samples;
    }
    return TF_OK;
}

static tf_status fill_power(const work *wv, const work *wi, int H, double f, double vi_mean,
                            double v_rms, double i_rms, double dcv, double dci, double skew,
                            tf_power *pw, tf_error *err)
{
    pw->harm = calloc((size_t)H, sizeof *pw->harm);
    if (!pw->harm)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    pw->nharm = (size_t)H;
    pw->valid = 1;
    pw->mean_w = vi_mean;
    pw->v_rms = v_rms;
    pw->i_rms = i_rms;
    pw->apparent_va = v_rms * i_rms;
    pw->power_factor = pw->apparent_va > 0.0 ? vi_mean / pw->apparent_va : NAN;
    pw->displacement_factor = (cabs(wv->ph[1]) > 0.0 && cabs(wi->ph[1]) > 0.0)
                                  ? cos(carg(wv->ph[1]) - carg(wi->ph[1]))
                                  : NAN;
    pw->energy_per_cycle_j = vi_mean / f;
    pw->dc_w = dcv * dci;
    pw->skew_s = skew;
    for (int h = 1; h <= H; h++) {
        /* V_rms I_rms cos(dphi) = Re(V conj(I)) / 2 with peak phasors */
        pw->harm[h - 1].n = h;
        pw->harm[h - 1].mean_w = 0.5 * creal(wv->ph[h] * conj(wi->ph[h]));
    }
    return TF_OK;
}

/* Window geometry: S, M and start time shared by every channel. */
typedef struct geometry {
    double T, tau, step, t_a;
    size_t S, M;
} geometry;

static tf_status choose_geometry(const tf_capture *cap, double f, int H, double lo_shift,
                                 double hi_shift, geometry *g, tf_error *err)
{
    const double dt = cap->dt_s;
    g->T = 1.0 / f;
    double r = g->T / dt;
    if (fabs(r - round(r)) < 1e-9 * r)
        r = round(r);
    size_t need = (size_t)ceil(r);
    if (need < (size_t)(2 * H + 2))
        need = (size_t)(2 * H + 2);
    if (need < 8)
        need = 8;
    g->S = tf_spectrum_smooth_up(need);
    g->tau = g->T / (double)g->S;
    g->step = g->tau / dt;
    /* every channel, read at t + shift, must stay inside the record; the last
     * point may lie up to half a sample past the last sample (a capture of
     * exactly M periods ends one sample before the M-th period does) */
    g->t_a = cap->t0_s - lo_shift;
    const double t_last = tf_capture_time(cap, cap->n - 1) + 0.5 * dt - hi_shift;
    const double avail = t_last - g->t_a;
    const double periods = (avail + g->tau) / g->T;
    if (!(periods >= 1.0 - 1e-9))
        return tf_error_set(err, TF_ERR_DATA,
                            "the capture (%g s) holds %.3g periods of %g Hz; at least one whole "
                            "period is needed",
                            (double)cap->n * dt, periods > 0 ? periods : 0.0, f);
    g->M = (size_t)floor(periods + 1e-9);
    if (g->M > SIZE_MAX / g->S)
        return tf_error_set(err, TF_ERR_DATA, "capture too long to analyse");
    return TF_OK;
}

static tf_status analyse(const tf_capture *cap, const tf_segment_result *seg,
                         const tf_spectrum_options *opt, work *w, int nw, int ref, int iv,
                         int ii, tf_spectrum_result *r, tf_error *err)
{
    const double dt = cap->dt_s, fs = 1.0 / dt;
    const double f = r->fundamental_hz;
    if (!(f > 0.0) || !isfinite(f) || f >= 0.5 * fs)
        return tf_error_set(err, TF_ERR_DATA,
                            "fundamental %g Hz is not below the Nyquist frequency %g Hz", f,
                            0.5 * fs);
    int hmax = (int)fmin((double)TF_SPECTRUM_MAX_HARMONICS, ceil(0.5 * fs / f - 1e-9) - 1.0);
    if (hmax < 1)
        hmax = 1;
    int H = opt->harmonics;
    if (H > hmax) {
        H = hmax;
        r->harmonics_capped = 1;
    }
    r->harmonics = H;
    double lo = 0.0, hi = 0.0;
    for (int c = 0; c < nw; c++) {
        w[c].shift_s = (c == iv && ii >= 0) ? opt->skew_s : 0.0;
        lo = fmin(lo, w[c].shift_s);
        hi = fmax(hi, w[c].shift_s);
    }
    geometry g = {0};
    tf_status st = choose_geometry(cap, f, H, lo, hi, &g, err);
    if (st != TF_OK)
        return st;
    r->periods = g.M;
    r->samples_per_period = g.S;
    r->resample_step_s = g.tau;
    r->window_start_s = g.t_a;
    r->transform_length = g.S;
    r->window = opt->window != 0;
    const size_t N = g.M * g.S;
    for (int c = 0; c < nw; c++) {
        w[c].pos0 = (g.t_a + w[c].shift_s - cap->t0_s) / dt;
        w[c].fold = calloc(g.S, sizeof(double));
        w[c].ph = calloc((size_t)H + 1, sizeof(double complex));
        w[c].fh = calloc((size_t)H + 1, sizeof(double));
        if (!w[c].fold || !w[c].ph || !w[c].fh)
            return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    const int power = iv >= 0 && ii >= 0;
    double *energy = NULL;
    const double vi = run_pass(cap, w, nw, g.M, g.S, g.step, power ? iv : -1, ii, seg,
                               opt->skew_s, opt->threads, &energy);
    if (isnan(vi))
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    double dc[MAX_CH], msq[MAX_CH];
    for (int c = 0; c < nw && st == TF_OK; c++) {
        st = sync_phasors(&w[c], g.M, g.S, H, f, &dc[c], &msq[c], err);
        if (st == TF_OK && r->window) {
            st = hann_phasors(cap, &w[c], g.t_a, (size_t)floor((double)N * g.step) + 1, H, f,
                              &r->transform_length, err);
        }
    }
    if (st == TF_OK) {
        r->ch = calloc((size_t)nw, sizeof *r->ch);
        if (!r->ch)
            st = tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    if (st != TF_OK) {
        free(energy);
        return st;
    }
    r->reference_channel = w[ref].idx;
    r->nch = (size_t)nw;
    for (int c = 0; c < nw && st == TF_OK; c++)
        st = fill_channel(cap, &w[c], &w[ref], H, dc[c], sqrt(w[c].sumsq / (double)N), msq[c],
                          &r->ch[c], err);
    if (st == TF_OK && power) {
        st = fill_power(&w[iv], &w[ii], H, f, vi / (double)N, sqrt(w[iv].sumsq / (double)N),
                        sqrt(w[ii].sumsq / (double)N), dc[iv], dc[ii], opt->skew_s, &r->power,
                        err);
        if (st == TF_OK)
            cycle_energies(energy, seg ? seg->ncycles : 0, &r->power);
    }
    free(energy);
    return st;
}

tf_status tf_spectrum_run(const tf_capture *cap, const tf_roles *roles,
                          const tf_segment_result *seg, const tf_spectrum_options *opt,
                          tf_spectrum_result **out, tf_error *err)
{
    tf_spectrum_options defaults;
    if (out)
        *out = NULL;
    if (!opt) {
        tf_spectrum_options_init(&defaults);
        opt = &defaults;
    }
    if (!out)
        return tf_error_set(err, TF_ERR_USAGE, "spectrum: no output given");
    tf_status st = check_inputs(cap, roles, opt, err);
    if (st != TF_OK)
        return st;
    work w[MAX_CH];
    memset(w, 0, sizeof w);
    int ref, iv, ii;
    const int nw = collect(cap, roles, w, &ref, &iv, &ii);
    if (nw == 0)
        return tf_error_set(err, TF_ERR_DATA,
                            "spectrum: no current, voltage or capacitor-voltage channel");
    tf_spectrum_result *r = calloc(1, sizeof *r);
    if (!r)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    r->power.cycle_energy_min_j = r->power.cycle_energy_median_j =
        r->power.cycle_energy_max_j = NAN;
    st = pick_fundamental(cap, seg, opt, w[ref].idx, &r->fundamental_hz, r->fundamental_source,
                          err);
    if (st == TF_OK)
        st = analyse(cap, seg, opt, w, nw, ref, iv, ii, r, err);
    free_work(w, nw);
    if (st != TF_OK) {
        tf_spectrum_free(r);
        return st;
    }
    *out = r;
    return TF_OK;
}
