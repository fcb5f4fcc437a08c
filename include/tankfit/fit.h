/* Fitter: tank identification (fd, alpha, Q, R, L, C) by ring-down fit, v-i
 * identification and the power method, with uncertainties. */
#ifndef TANKFIT_FIT_H
#define TANKFIT_FIT_H

#include <stddef.h>
#include <jansson.h>
#include <tankfit/capture.h>
#include <tankfit/roles.h>
#include <tankfit/segment.h>

#ifdef __cplusplus
extern "C" {
#endif

/* A value with its standard uncertainty and the method that produced it. */
typedef struct tf_estimate {
    double value;              /* NAN when not available */
    double u;                  /* standard uncertainty (k = 1); NAN when unknown */
    char method[32];           /* "ring-down", "v-i", "power", "design", ... */
} tf_estimate;

typedef struct tf_fit_options {
    double capacitance_f;      /* known C (design or --capacitance); NAN if unknown */
    double inductance_h;       /* known L; NAN if unknown */
    double thyristor_drop_v;   /* for the drop-corrected model; NAN if unknown */
    double diode_drop_v;
    double skew_s;             /* voltage-to-current delay; used when skew_set */
    int skew_set;
    int offset_term;           /* fit a slow offset current term */
    int threads;               /* 0 = one per core */
    /* added by the fitter */
    int skip_lobes;            /* non-zero: do not fit each lobe on its own */
    double skew_search_s;      /* half-width of the skew search (0: default 20 samples) */
} tf_fit_options;

/* ---------------------------------------------------------------------------------
 * Damped-sine fit of one sample array (the per-burst core, usable on raw arrays).
 * Model, with t = k dt for sample k (t = 0 at x[0]):
 *   i(t) = A exp(-alpha t) sin(wd t + phi) [+ offset]
 *          + sum_j D_j exp(-alpha (t - t_j)) sin(wd (t - t_j)) H(t - t_j)
 * where t_j are the model's own zero crossings inside the window and
 * D_j = -sign(i just after t_j) * drop_step_a: the response of the series RLC to the
 * step of the driving level by the device drops at each thyristor-diode
 * commutation (docs/fit.md).
 * --------------------------------------------------------------------------------- */

typedef struct tf_dsfit_options {
    int offset_term;           /* fit a constant offset current */
    double drop_step_a;        /* (V_T + V_D) / (wd L) in amperes, >= 0; 0: plain model */
    int max_iter;              /* Levenberg-Marquardt iterations (0: default 50) */
    /* Alternatively (when drop_step_a is 0): the drop step in volts and the known C
     * or L (farads / henries, 0 or NAN when unknown); the step in amperes is then
     * taken from the plain fit's w0: L = 1 / (w0^2 C) or the given L. */
    double drop_step_v, drop_c_f, drop_l_h;
} tf_dsfit_options;

typedef struct tf_dsfit {
    double alpha_per_s, u_alpha_per_s;   /* decay rate and its standard uncertainty */
    double wd_rad_s, u_wd_rad_s;         /* damped angular frequency */
    double cov_alpha_wd;                 /* covariance of (alpha, wd), (1/s)(rad/s) */
    double amplitude_a, phase_rad;       /* A and phi of the model above */
    double offset_a, u_offset_a;         /* NAN when no offset term */
    double residual_rms;                 /* RMS of data - model, amperes */
    double init_alpha_per_s, init_wd_rad_s; /* matrix pencil start values */
    size_t ncross;                       /* zero crossings with a drop term */
    int iterations;                      /* Levenberg-Marquardt iterations used */
    double raw_alpha_per_s, raw_u_alpha_per_s, raw_wd_rad_s; /* the plain fit (= above
                                            when no drop model was used) */
    double drop_step_a;                  /* step used (0: plain model) */
} tf_dsfit;

/* Per-thread scratch space of the damped-sine fit (GSL workspaces kept between
 * fits). Opaque; create one per thread. NULL when out of memory. */
typedef struct tf_dsfit_workspace tf_dsfit_workspace;
tf_dsfit_workspace *tf_dsfit_workspace_create(void);
void tf_dsfit_workspace_destroy(tf_dsfit_workspace *w); /* NULL is a no-op */

/* Fit x[0..n-1] (amperes, sample period dt_s > 0), n >= 8. Starts from matrix
 * pencil estimates (Hua and Sarkar 1990) of block-averaged data, then runs
 * Levenberg-Marquardt (GSL gsl_multifit_nlinear, analytic Jacobian). Standard
 * uncertainties come from the Jacobian covariance scaled by the residual
 * variance. o may be NULL (plain model). Errors: TF_ERR_USAGE (bad arguments),
 * TF_ERR_NUMERIC (no oscillation found or no convergence), TF_ERR_NOMEM. */
tf_status tf_dsfit_run(tf_dsfit_workspace *w, const float *x, size_t n, double dt_s,
                       const tf_dsfit_options *o, tf_dsfit *out, tf_error *err);

/* Q from the logarithmic decrement delta = alpha Td of a damped oscillation:
 * Q = (pi / delta) sqrt(1 + (delta / 2 pi)^2) (textbook series RLC). delta > 0. */
double tf_q_from_log_decrement(double delta);

/* ---------------------------------------------------------------------------------
 * Results of tf_fit_run
 * --------------------------------------------------------------------------------- */

/* Why a burst was not used. */
typedef enum {
    TF_FITB_OK = 0,
    TF_FITB_CLIPPED,           /* touches clipped samples */
    TF_FITB_ANOMALOUS,         /* the segmenter flagged an anomaly */
    TF_FITB_SHORT,             /* too few samples */
    TF_FITB_FAILED             /* the fit did not converge */
} tf_fitb_status;

/* One burst as fitted (plain struct; NAN where not available). */
typedef struct tf_fit_burst {
    size_t index;                      /* index into seg->bursts */
    double start_s, end_s;
    tf_fitb_status status;
    double peak_a;                     /* largest |i| in the burst */
    double fd_hz, u_fd_hz;
    double alpha_per_s, u_alpha_per_s; /* drop-corrected when drops are modelled */
    double alpha_raw_per_s, u_alpha_raw_per_s; /* plain damped-sine fit */
    double w0_rad_s, q, u_q, log_decrement;
    double residual_rms_a;
    double resistance_ohm, u_resistance_ohm; /* 2 alpha L (C or L known) */
    double resistance_raw_ohm;
    double inductance_h, capacitance_f;      /* the one not given, from w0 */
    double vi_resistance_ohm, vi_inductance_h, vi_capacitance_f; /* v-i, per burst */
} tf_fit_burst;

/* Median, a robust spread (1.4826 MAD), min, max and count across bursts. */
typedef struct tf_fit_spread {
    double median, spread, min, max;
    size_t count;
} tf_fit_spread;

/* Lobes fitted on their own (each half-period alone), by kind. */
typedef struct tf_fit_lobes {
    tf_fit_spread thyristor_fd_hz, thyristor_alpha_per_s;
    tf_fit_spread diode_fd_hz, diode_alpha_per_s;
} tf_fit_lobes;

#define TF_FIT_MAX_NOTES 8

typedef struct tf_fit_result {
    tf_estimate damped_frequency_hz, decay_per_s, undamped_frequency_hz, q;
    tf_estimate inductance_h, capacitance_f, resistance_ohm;
    tf_estimate resistance_raw_ohm;   /* plain damped-sine fit, without drop model */
    double skew_s, skew_u_s;          /* estimated (or given) probe skew */
    size_t bursts_fitted, bursts_excluded;
    void *detail;                     /* per-burst data, owned (see src/fit.c) */
    /* added by the fitter */
    size_t bursts_clipped, bursts_anomalous, bursts_failed;
    size_t bursts_short;              /* fragments: one lobe, too few samples (in failed too) */
    tf_estimate decay_raw_per_s;      /* alpha of the plain fit */
    tf_estimate log_decrement;
    /* each method's R, L, C (value NAN when the method did not run) */
    tf_estimate ringdown_r, ringdown_l, ringdown_c;
    tf_estimate vi_r, vi_l, vi_c;
    tf_estimate power_r;
    char skew_method[32];             /* "v-i residual", "given", "none" */
    int drops_modelled;               /* the drop-corrected model was used */
    double drop_step_v;               /* V_T + V_D per commutation (x2 full bridge) */
    tf_fit_spread s_fd_hz, s_alpha_per_s, s_q, s_resistance_ohm;
    double r_burst_u_ohm;             /* typical (median) single-burst u of the ring-down R */
    tf_fit_lobes lobes;
    /* notes (what could not be derived and why) and agreement warnings */
    char notes[TF_FIT_MAX_NOTES][192];
    size_t nnotes;
    char warnings[TF_FIT_MAX_NOTES][256];
    size_t nwarnings;
} tf_fit_result;

/* Defaults: nothing known (NAN), skew estimated, no offset term, all cores. */
void tf_fit_options_init(tf_fit_options *o);

/* Identify the tank from every burst of seg (plain damped-sine and, when the drops
 * and C or L are known, drop-corrected fits; lobes alone; v-i identification and
 * the power method when roles->voltage exists). Bursts flagged clipped or
 * anomalous are excluded and counted. Uses opt->threads threads. Errors:
 * TF_ERR_DATA when no burst can be fitted (message says why), TF_ERR_NOMEM.
 * *out (NULL on error) is owned by the caller: tf_fit_free. */
tf_status tf_fit_run(const tf_capture *cap, const tf_roles *roles, const tf_segment_result *seg,
                     const tf_fit_options *opt, tf_fit_result **out, tf_error *err);
void tf_fit_free(tf_fit_result *r);   /* NULL is a no-op */

/* Per-burst results, in burst order (count in *n, all bursts including excluded
 * ones). Pointer valid while r lives. */
const tf_fit_burst *tf_fit_bursts(const tf_fit_result *r, size_t *n);

/* Name of a burst status ("ok", "clipped", "anomalous", "short", "failed"). */
const char *tf_fitb_status_name(tf_fitb_status s);

/* JSON "resonance" object (keys: docs/fit.md); new reference. */
json_t *tf_fit_to_json(const tf_fit_result *r);

#ifdef __cplusplus
}
#endif
#endif
