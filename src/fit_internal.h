/* Private pieces shared by the fitter's source files (src/fit*.c). */
#ifndef TF_FIT_INTERNAL_H
#define TF_FIT_INTERNAL_H

#include <stddef.h>
#include <tankfit/fit.h>

/* Turn GSL's abort-on-error handler off once per process (the library never exits). */
void tf_fit_gsl_quiet(void);

/* Run fn(ctx, k) for k in [0, n) on up to `threads` threads (the caller's included);
 * fn must only write to its own k's outputs. */
void tf_fit_parallel_for(size_t n, int threads, void (*fn)(void *ctx, size_t k), void *ctx);

/* Threads for the fitter: threads > 0 as given, else one per online core (<= 16). */
int tf_fit_threads(int threads);

/* Median of x[0..n-1] (x is reordered). NAN when n == 0. */
double tf_fit_median(double *x, size_t n);

/* Median, 1.4826 MAD, min, max of the finite values of x[0..n-1] with a
 * stride of `stride` doubles; scratch holds n doubles. */
void tf_fit_spread_of(const double *x, size_t n, size_t stride, double *scratch,
                      tf_fit_spread *out);

/* Result of the v-i identification over a set of bursts. */
typedef struct tf_vi_result {
    int valid;
    double r_ohm, u_r_ohm, l_h, u_l_h, c_f, u_c_f;
    double skew_s, u_skew_s;
    int skew_estimated;
    size_t bursts_used;
} tf_vi_result;

/* Burst sample window [i0, i1) for the v-i and power methods. */
typedef struct tf_window { size_t i0, i1; size_t burst; } tf_window;

/* v-i identification on the windows (integrated circuit equation, linear least
 * squares per window), with the skew estimated when skew_set == 0. per_burst_*
 * (nwin each, may be NULL) receive each window's R, L, C. */
tf_status tf_vi_identify(const float *v, const float *i, size_t n, double dt_s,
                         const tf_window *win, size_t nwin, int skew_set, double skew_s,
                         double search_s, int threads, tf_vi_result *out, double *per_r,
                         double *per_l, double *per_c, tf_error *err);

/* Power method R = mean(v i) / mean(i^2) over [bounds[0], bounds[nb - 1]) with v
 * delayed back by each of the nsk (1..TF_POWER_MAX_SKEWS) skews skew_s[q], in one
 * pass over the samples (periods on `threads` threads, totals in period order);
 * r_ohm[q] and u_ohm[q] (from the spread over the periods between the nb >= 2
 * boundary indices) for each skew. */
#define TF_POWER_MAX_SKEWS 3
tf_status tf_power_resistance(const float *v, const float *i, size_t n, double dt_s,
                              const double *skew_s, size_t nsk, const size_t *bounds, size_t nb,
                              int threads, double *r_ohm, double *u_ohm, tf_error *err);

/* Value of channel x at fractional sample position pos (linear interpolation,
 * clamped at the ends). */
double tf_fit_interp(const float *x, size_t n, double pos);

/* The same fit as tf_dsfit_run, with GSL's gsl_multifit_nlinear (trust-region
 * Levenberg-Marquardt, analytic Jacobian) in place of the streamed normal
 * equations: slower, kept as a cross-check for tests and benchmarks. */
tf_status tf_dsfit_run_gsl(tf_dsfit_workspace *w, const float *x, size_t n, double dt_s,
                           const tf_dsfit_options *o, tf_dsfit *out, tf_error *err);

/* tf_dsfit_run started from (alpha0, wd0) in place of the matrix pencil (a neighbouring
 * burst's plain fit, say). The start is accepted when the plain fit meets its
 * convergence test and its pole alpha + j wd lies within 20 % of the start's modulus
 * of the start; otherwise the fit is redone from the matrix pencil. The result then
 * depends on the start only within the convergence tolerance (1 % of u). */
tf_status tf_dsfit_run_from(tf_dsfit_workspace *w, const float *x, size_t n, double dt_s,
                            const tf_dsfit_options *o, double alpha0_per_s, double wd0_rad_s,
                            tf_dsfit *out, tf_error *err);

#endif
