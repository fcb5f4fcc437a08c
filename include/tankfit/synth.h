/* Simulator engine: exact piecewise closed-form response of series resonant
 * inverter stages (single, half-bridge, full-bridge, ring-down), event by event. */
#ifndef TANKFIT_SYNTH_H
#define TANKFIT_SYNTH_H

#include <stddef.h>
#include <jansson.h>
#include <tankfit/design.h>
#include <tankfit/error.h>

#ifdef __cplusplus
extern "C" {
#endif

/* One conduction interval of a device, as simulated. */
typedef struct tf_synth_interval {
    tf_device device;
    double start_s, end_s;
    double peak_s, peak_a;       /* signed peak current within the interval */
} tf_synth_interval;

/* Opaque engine. */
typedef struct tf_synth tf_synth;

/* Create an engine for design d (copied). NULL on error with err set (missing or
 * inconsistent design values, named by section and key). */
tf_synth *tf_synth_create(const tf_design *d, tf_error *err);

void tf_synth_destroy(tf_synth *s);

/* Noiseless values of the simulated channels at times t_c,k = t0 + k dt - skew[c]
 * for k in [0, n), for each channel c with out[c] != NULL (out[c] holds n floats in
 * volts, amperes, or 0/1 for gates). skew may be NULL (all zero). Successive calls
 * must have non-decreasing t0 (streaming); |skew| <= 1 ms. Memory use does not
 * grow with the simulated duration. */
tf_status tf_synth_fill(tf_synth *s, double t0, double dt, size_t n, const double *skew,
                        float *const out[TF_SYN_NCHAN], tf_error *err);

/* Truth after the whole duration has been filled (or simulate to the design's
 * duration if not yet): every conduction interval, per thyristor firing the
 * turn-off time available, commutation failures, analytic alpha, w0, wd, Q, and
 * the exact RMS, mean power and harmonics from the noiseless waveform. New
 * reference (keys: docs/simulator.md). */
json_t *tf_synth_truth(tf_synth *s, tf_error *err);

/* Conduction intervals found so far (pointer valid until the next fill). */
const tf_synth_interval *tf_synth_intervals(const tf_synth *s, size_t *count);

#ifdef __cplusplus
}
#endif
#endif
