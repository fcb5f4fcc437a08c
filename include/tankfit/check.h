/* Acceptance checks of one analysed capture against its design: verdicts with the
 * limit, the design key it came from, the measured value and its uncertainty. */
#ifndef TANKFIT_CHECK_H
#define TANKFIT_CHECK_H

#include <stddef.h>
#include <tankfit/analysis.h>
#include <tankfit/capture.h>
#include <tankfit/design.h>
#include <tankfit/error.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Verdict of one check. NOT_APPLICABLE marks a check the design does not ask for
 * (its limit key is absent) or that the capture has no channel for when the check
 * is optional (reverse bias without a switch-voltage channel); it does not count
 * towards the overall verdict. */
typedef enum {
    TF_VERDICT_PASS = 0,
    TF_VERDICT_FAIL,
    TF_VERDICT_NOT_EVALUATED,
    TF_VERDICT_NOT_APPLICABLE
} tf_verdict;

/* "pass", "fail", "not-evaluated", "not-applicable"; never NULL. */
const char *tf_verdict_name(tf_verdict v);

/* Overall verdict from several: fail if any fails, else not-evaluated if any could
 * not be evaluated, else pass (not-applicable ones are ignored; none at all: pass). */
tf_verdict tf_verdict_combine(tf_verdict a, tf_verdict b);

/* Exit code of `tankfit check` for an overall verdict: 0 pass, 1 fail,
 * 2 not-evaluated (documented in docs/check.md). */
int tf_verdict_exit_code(tf_verdict v);

#define TF_CHECK_MAX 16
#define TF_CHECK_MAX_OFFENDERS 24
#define TF_CHECK_MAX_COMPARE 32

/* A cycle that broke a limit (shown in tables and the report). */
typedef struct tf_check_offender {
    double time_s;       /* firing instant of the cycle */
    double value;        /* the offending value, in the check's unit */
    tf_device device;    /* thyristor of the cycle */
} tf_check_offender;

/* One check. Values are in SI base units; percent flag: value and limits are
 * fractions shown as percent. */
typedef struct tf_check {
    char id[32];             /* stable id, e.g. "turnoff-margin" */
    char title[96];          /* what is measured, one line */
    char unit[8];            /* base unit of value, limits and expected ("" for ratios) */
    int percent;             /* non-zero: a fraction printed as percent */
    double value, u;         /* measured value and standard uncertainty (NAN: unknown) */
    double limit_lo, limit_hi; /* allowed closed range; NAN on an open side */
    double nominal;          /* design value a tolerance is taken around (NAN: none) */
    char limit_key[64];      /* design key(s) of the limit, "limits.turnoff_ratio_min" */
    double expected;         /* design-expected value from the simulated design (NAN) */
    tf_verdict verdict;
    char reason[320];        /* why not evaluated, or what failed, or a note */
    size_t noffenders;       /* offenders kept (first TF_CHECK_MAX_OFFENDERS) */
    size_t offenders_total;  /* offenders found */
    tf_check_offender offenders[TF_CHECK_MAX_OFFENDERS];
} tf_check;

/* A measured figure beside its design-expected value. */
typedef struct tf_check_compare {
    char id[32];             /* "output_frequency", "harmonic_3", ... */
    char label[48];          /* "output frequency", "current harmonic 3 (peak)" */
    char unit[8];
    double measured, expected; /* NAN where not available */
} tf_check_compare;

/* Capture quality facts the gates use. */
typedef struct tf_check_quality {
    double samples_per_period;   /* samples per damped resonant period (NAN: unknown) */
    size_t cycles;               /* complete firing cycles with a turn-off time */
    int clipped_current, clipped_voltage, clipped_cap_voltage, clipped_switch_voltage;
    double current_clip_level_a;  /* smallest |level| the current is clipped at (NAN: none) */
    int ring_down;                /* a ring-down test: the timing checks do not apply */
    int clipped_zeros;            /* the clipping reaches within TF_CHECK_CLIP_BAND_FACTOR
                                     hysteresis bands of zero: current zeros not trusted */
} tf_check_quality;

/* Timing checks use the current's zeros, which clipping at the peaks does not move:
 * they stay evaluated unless the clip level is within this many segmenter
 * hysteresis bands of zero (tankfit's rule). */
#define TF_CHECK_CLIP_BAND_FACTOR 10.0

/* Result of tf_check_evaluate. Plain struct, owned by the caller (tf_check_free). */
typedef struct tf_check_result {
    tf_check checks[TF_CHECK_MAX];
    size_t nchecks;
    tf_verdict overall;
    tf_check_quality quality;
    tf_check_compare compare[TF_CHECK_MAX_COMPARE];
    size_t ncompare;
    /* per segmenter cycle (ncycles of them, NAN for cycles of other thyristors or
     * without a switch-voltage channel): time reverse-biased within the turn-off
     * interval and the highest switch voltage in it */
    double *reverse_s, *excursion_v;
    size_t ncycles;
} tf_check_result;

/* What a check run looks at. */
typedef struct tf_check_input {
    const tf_design *design;     /* limits and nominal values (required) */
    const tf_capture *cap;       /* the measured capture (required) */
    const tf_analysis *an;       /* its analysis (required; parts may be NULL) */
    const tf_analysis *expected; /* analysis of the simulated design (NULL: none) */
    const tf_capture *expected_cap; /* the simulated capture it came from (NULL: none) */
    const char *expected_error;  /* why there is no expected analysis (or NULL) */
} tf_check_input;

/* Harmonic agreement limit used for "current-harmonics": each current harmonic
 * h = 1..TF_CHECK_HARMONICS within this fraction of the expected fundamental's
 * amplitude. The design file has no key for it (tankfit's own rule). */
#define TF_CHECK_HARMONIC_TOLERANCE 0.10
#define TF_CHECK_HARMONICS 15

/* Quality gates (common practice): below these a check that relies on them is
 * not evaluated. */
#define TF_CHECK_MIN_SAMPLES_PER_PERIOD 20.0
#define TF_CHECK_MIN_CYCLES 3

/* Evaluate every check (docs/check.md lists them) on in. Each check is
 * pass, fail, not-evaluated (with the reason: a stage that did not run, a clipped
 * channel it relies on, fewer than 20 samples per resonant period, fewer than 3
 * firing cycles, a missing channel) or not-applicable (no limit in the design).
 * Never guesses. *out receives a new result (tf_check_free). Errors: TF_ERR_USAGE
 * (missing input), TF_ERR_NOMEM. */
tf_status tf_check_evaluate(const tf_check_input *in, tf_check_result **out, tf_error *err);

/* Free a result; NULL is a no-op. */
void tf_check_free(tf_check_result *r);

/* Simulate design d without noise (tf_synth_to_capture) and analyse it with opt
 * (roles set to the simulator's channel names, the design's probe factors not
 * applied): the design-expected values. *cap and *an are owned by the caller
 * (tf_capture_destroy, tf_analysis_free); NULL on error. Errors of the simulator
 * (a design without what the simulator needs: TF_ERR_DATA naming the key) and of
 * the analysis. */
tf_status tf_check_expected_run(const tf_design *d, const tf_analysis_options *opt,
                                tf_capture **cap, tf_analysis **an, tf_error *err);

/* Textbook series-RLC values of the design (NAN when C, L or R is missing):
 * damped frequency fd = sqrt(1/(LC) - (R/2L)^2) / 2 pi and Q = sqrt(L/C) / R. */
double tf_check_design_fd(const tf_design *d);
double tf_check_design_q(const tf_design *d);

/* Reverse bias of T1 in one turn-off interval [t_a, t_b) (seconds) of the
 * switch-voltage channel x (sample period dt_s, first sample at t0_s, n samples):
 * the time the voltage, averaged over a sliding window of about 1 us (at least
 * one sample, at most a fifth of the interval, never reaching outside it), stays below 0 V, and the highest averaged voltage (worst positive
 * excursion). Returns 0, or -1 when the interval holds no sample. */
int tf_check_reverse_bias(const float *x, size_t n, double t0_s, double dt_s, double t_a,
                          double t_b, double *reverse_s, double *excursion_v);

#ifdef __cplusplus
}
#endif
#endif
