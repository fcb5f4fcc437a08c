/* The pass over the samples of the synchronous analysis: resample and fold every channel,
 * sums of squares and of v i, raw peaks and the energy of every firing cycle, in tasks
 * shared by the threads (docs/spectrum.md, section 1.1). */
#include "spectrum_internal.h"

#include <limits.h>
#include <stdatomic.h>
#include <stdlib.h>
#include <pthread.h>
#include <unistd.h>

#define MAX_CH TF_SP_MAX_CH
#define MAX_THREADS TF_SP_MAX_THREADS


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
 * arithmetic of tf_sp_stencil(), without its clamps when no point needs them, in loops the
 * compiler vectorises. */
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
        t->k[q] = tf_sp_stencil(p0 + (jd + (double)q) * step, n, wt);
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

double tf_sp_pass(const tf_capture *cap, tf_sp_channel *w, int nw, size_t M, size_t S,
                  double step, int iv, int ii, const tf_segment_result *seg, double skew_s,
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
        P->sk = skew_s / cap->dt_s;
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
