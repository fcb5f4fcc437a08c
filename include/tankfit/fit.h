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
    double value;
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
} tf_fit_options;

/* Opaque to callers that only need the summary: fields are in fit_result_t of
 * src/fit*.c, summary below. */
typedef struct tf_fit_result {
    tf_estimate damped_frequency_hz, decay_per_s, undamped_frequency_hz, q;
    tf_estimate inductance_h, capacitance_f, resistance_ohm;
    tf_estimate resistance_raw_ohm;   /* plain damped-sine fit, without drop model */
    double skew_s, skew_u_s;          /* estimated (or given) probe skew */
    size_t bursts_fitted, bursts_excluded;
    void *detail;                     /* per-burst data, owned (see src/fit.c) */
} tf_fit_result;

void tf_fit_options_init(tf_fit_options *o);

tf_status tf_fit_run(const tf_capture *cap, const tf_roles *roles, const tf_segment_result *seg,
                     const tf_fit_options *opt, tf_fit_result **out, tf_error *err);
void tf_fit_free(tf_fit_result *r);

/* JSON "resonance" object (keys: docs/json.md); new reference. */
json_t *tf_fit_to_json(const tf_fit_result *r);

#ifdef __cplusplus
}
#endif
#endif
