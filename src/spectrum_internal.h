/* Private helpers of the spectrum module: resampling, cached FFTW plans, Hann peaks. */
#ifndef TF_SPECTRUM_INTERNAL_H
#define TF_SPECTRUM_INTERNAL_H

#include <math.h>
#include <stddef.h>
#include <complex.h>
#include <fftw3.h>
#include <tankfit/capture.h>
#include <tankfit/segment.h>

#define TF_SP_MAX_CH 3      /* channels analysed: current, voltage, capacitor voltage */
#define TF_SP_MAX_THREADS 8

/* 1/6 of the cubic weights as a product: a division costs most of the resampling
 * (the product differs from the quotient by at most one unit in the last place). */
#define TF_SP_SIXTH (1.0 / 6.0)

/* The stencil of tf_sp_interp: its first sample index and the four cubic weights. */
static inline size_t tf_sp_stencil(double pos, size_t n, double wt[4])
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

/* Cubic Lagrange interpolation of x[0..n-1] (n >= 4) at fractional index pos,
 * through the four samples around it (the stencil moves inwards at the ends). At an integer position it returns
 * the sample exactly. Up to half a sample beyond either end the cubic through
 * the last four samples extrapolates; further out the position is clamped. Error bound for a sinusoid of amplitude A with P samples
 * per period: 36.5 A / P^4 (docs/spectrum.md). */
static inline double tf_sp_interp(const float *x, size_t n, double pos)
{
    double w[4];
    const float *p = x + tf_sp_stencil(pos, n, w);
    return w[0] * p[0] + w[1] * p[1] + w[2] * p[2] + w[3] * p[3];
}

/* out[j] = tf_sp_interp(x, n, pos0 + j * step) for j in [0, count): the
 * resampled window the synchronous analysis folds (exposed for tests). */
void tf_sp_resample(const float *x, size_t n, double pos0, double step, size_t count,
                    double *out);

/* A real-to-complex FFTW plan of length n (FFTW_ESTIMATE), made once per size
 * and kept for the life of the process; execute it with fftw_execute_dft_r2c
 * on arrays from fftw_malloc. NULL when FFTW cannot plan. Thread-safe. */
fftw_plan tf_sp_plan_r2c(size_t n);

/* Hann-windowed peak near fractional bin nu_guess (searched within +/- search
 * bins) of the r2c spectrum X of L points windowed by the periodic Hann
 * window: interpolated bin position, peak amplitude and phase (cosine
 * convention, at the window's first sample), by the two-bin ratio method
 * (Grandke 1983). Returns 0, or -1 when no peak fits in the spectrum. */
int tf_sp_hann_peak(const fftw_complex *X, size_t L, double nu_guess, int search,
                    double *nu, double *amp, double *phase);

/* Apply the periodic Hann window w[k] = 0.5 - 0.5 cos(2 pi k / L) to x. */
void tf_sp_hann_apply(double *x, size_t L);

/* One channel of the pass: its samples and window start (fractional sample index) in,
 * its S folded sums (zeroed by the caller), sum of squares and largest |sample| out. */
typedef struct tf_sp_channel {
    const float *x;
    double pos0;
    double *fold;
    double sumsq, peak;
} tf_sp_channel;

/* The pass over M periods of S points (grid step `step` samples) of nw <= TF_SP_MAX_CH
 * channels of cap: fills each channel's fold, sum of squares and raw peak and returns the
 * sum of v i over the window (channel iv against ii; iv < 0: none, 0 returned). With
 * iv >= 0 and the cycles of seg, *energy gets the integral of v(t + skew_s) i(t) over
 * each complete cycle (malloc'd, one per cycle, NAN where a cycle reaches outside the
 * record; the caller frees it), else NULL. threads: 0 = one per core (at most 2),
 * 1..TF_SP_MAX_THREADS; every count gives the same bits. NAN when out of memory. */
double tf_sp_pass(const tf_capture *cap, tf_sp_channel *ch, int nw, size_t M, size_t S,
                  double step, int iv, int ii, const tf_segment_result *seg, double skew_s,
                  int threads, double **energy);

#endif
