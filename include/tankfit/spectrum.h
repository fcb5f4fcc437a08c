/* Spectrum and power: synchronous (whole-period) harmonic analysis with FFTW. */
#ifndef TANKFIT_SPECTRUM_H
#define TANKFIT_SPECTRUM_H

#include <stddef.h>
#include <jansson.h>
#include <tankfit/capture.h>
#include <tankfit/roles.h>
#include <tankfit/segment.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Highest H accepted in tf_spectrum_options.harmonics. */
#define TF_SPECTRUM_MAX_HARMONICS 100000

/* Options of tf_spectrum_run; tf_spectrum_options_init sets the defaults. */
typedef struct tf_spectrum_options {
    int harmonics;             /* H, 1..TF_SPECTRUM_MAX_HARMONICS, default 40; capped by
                                * Nyquist (h f < fs / 2) */
    int window;                /* non-zero: Hann window with interpolated peaks over the
                                * raw samples (non-synchronous, less exact) */
    double fundamental_hz;     /* > 0 overrides the segmenter's output frequency */
    double skew_s;             /* voltage-to-current delay to correct before power: the
                                * voltage channel shows v(t - skew_s) relative to the
                                * current, so it is read at t + skew_s; |skew_s| < 1 ms */
    int threads;               /* added: 0 = one per core (at most 2), 1..8 = that many;
                                * windows under 2^20 points always use one */
} tf_spectrum_options;

typedef struct tf_harmonic {
    int n;
    double amplitude;          /* peak */
    double rms;
    double phase_deg;          /* relative to the output voltage's fundamental, cosine
                                * convention, (-180, 180] (see docs/spectrum.md) */
    double frequency_hz;       /* n * fundamental (window mode: the interpolated peak) */
} tf_harmonic;

typedef struct tf_channel_spectrum {
    int channel;               /* index in the capture */
    char role[24];             /* "current", "voltage", "cap_voltage" */
    size_t nharm;
    tf_harmonic *harm;         /* harm[0] is n = 1 */
    double dc, rms, crest_factor, thd;   /* thd as a fraction (NAN: no fundamental) */
    /* added by the spectrum module */
    char name[TF_NAME_SIZE];   /* channel name, copied from the capture */
    char unit[TF_UNIT_SIZE];   /* channel unit ("" when unknown) */
    double peak;               /* largest |sample| inside the analysed window */
    double aperiodic_rms;      /* RMS of what is not periodic at the fundamental (content
                                * between the harmonics: drift, noise, wrong frequency) */
    double shift_s;            /* time shift applied when reading it (skew_s for the
                                * voltage, 0 otherwise) */
    size_t clipped_samples;    /* samples in runs at the channel's extreme codes (from the
                                * capture's stats, computed when not yet valid): when
                                * non-zero, amplitudes, THD and power are not trusted */
} tf_channel_spectrum;

/* Power of one harmonic: V_h,rms I_h,rms cos(phi_V,h - phi_I,h). */
typedef struct tf_harmonic_power {
    int n;
    double mean_w;
} tf_harmonic_power;

typedef struct tf_power {
    int valid;                 /* zero when there is no current or no voltage channel */
    double mean_w, v_rms, i_rms, apparent_va, power_factor, displacement_factor;
    double energy_per_cycle_j; /* mean_w over one output period (one firing cycle) */
    /* added by the spectrum module */
    double dc_w;               /* V_dc I_dc */
    size_t nharm;
    tf_harmonic_power *harm;   /* harm[0] is n = 1, same H as the spectrum */
    double skew_s;             /* skew that was corrected */
    double cycle_energy_min_j, cycle_energy_median_j, cycle_energy_max_j; /* integral of
                                * v i over each complete firing cycle of the segmenter
                                * (NAN when there are none) */
    size_t cycles;             /* number of such cycles */
} tf_power;

typedef struct tf_spectrum_result {
    double fundamental_hz;
    size_t periods;            /* M whole periods analysed */
    int harmonics;             /* H used */
    tf_channel_spectrum *ch;   size_t nch;
    tf_power power;
    /* added by the spectrum module */
    char fundamental_source[16]; /* "option", "segmenter" or "estimated" */
    int window;                /* non-zero: Hann-window analysis was used */
    int harmonics_capped;      /* non-zero when the requested H was cut by Nyquist */
    double window_start_s;     /* start of the M periods (capture time) */
    size_t samples_per_period; /* S: resampled points per period (7-smooth) */
    double resample_step_s;    /* 1 / (S f) */
    size_t transform_length;   /* FFT length used (S, or the Hann length) */
    int reference_channel;     /* capture index whose fundamental is phase 0 */
} tf_spectrum_result;

/* Defaults: H = 40, synchronous (no window), fundamental from the segmenter,
 * no skew. */
void tf_spectrum_options_init(tf_spectrum_options *o);

/* Harmonics of every channel with a role (current, voltage, cap_voltage) and
 * the power between voltage and current, over the largest whole number M >= 1
 * of fundamental periods the capture holds.
 *
 * cap    capture (dt_s > 0, n >= 8 samples)
 * roles  resolved roles; at least one of current, voltage, cap_voltage >= 0
 * seg    segmenter result or NULL: its cycles give the fundamental (mean
 *        period) when opt->fundamental_hz is 0; without cycles the fundamental
 *        is estimated from the voltage (else the current) channel
 * opt    options (NULL: defaults)
 * out    receives the result, owned by the caller (tf_spectrum_free); NULL on
 *        failure
 * Errors: TF_ERR_USAGE (bad options), TF_ERR_DATA (no role channel, capture
 * shorter than one period, fundamental above Nyquist, no periodic content to
 * estimate a fundamental from), TF_ERR_NUMERIC (estimator did not converge),
 * TF_ERR_NOMEM. */
tf_status tf_spectrum_run(const tf_capture *cap, const tf_roles *roles,
                          const tf_segment_result *seg, const tf_spectrum_options *opt,
                          tf_spectrum_result **out, tf_error *err);

/* Free a result; NULL is a no-op. */
void tf_spectrum_free(tf_spectrum_result *r);

/* JSON "spectrum" and "power" members added to obj (keys: docs/spectrum.md).
 * "power" is null when there is no voltage-current pair. */
void tf_spectrum_to_json(const tf_spectrum_result *r, json_t *obj);

/* Estimate the fundamental of x[0..n-1] sampled every dt_s seconds: the
 * largest spectral peak of a Hann-windowed FFT (checked for a lower
 * fundamental whose harmonic it is), refined by a four-parameter sine fit
 * (IEEE Std 1057). n >= 16. Returns TF_OK and *freq_hz, TF_ERR_DATA when the
 * record holds no periodic content (constant, or fewer than two periods), or
 * TF_ERR_NUMERIC when the fit does not converge. */
tf_status tf_spectrum_estimate_fundamental(const float *x, size_t n, double dt_s,
                                           double *freq_hz, tf_error *err);

/* Smallest integer >= n whose prime factors are all 2, 3, 5 or 7 (n >= 1). */
size_t tf_spectrum_smooth_up(size_t n);

/* Largest integer <= n (n >= 1) whose prime factors are all 2, 3, 5 or 7. */
size_t tf_spectrum_smooth_down(size_t n);

#ifdef __cplusplus
}
#endif
#endif
