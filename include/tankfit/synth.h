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
    double r_ohm, l_h;           /* tank resistance and inductance in force at its start
                                  * ([tank] values, or the [schedule] at that time) */
} tf_synth_interval;

/* Opaque engine.
 *
 * Channels (docs/simulator.md section 1): i_load, the load current (A, positive through
 * T1); v_out, the voltage across the series L-R-C network, so v_out = L di/dt + R i + v_c
 * (the bridge output level while a device conducts, v_c while nothing does); v_c, the
 * capacitor voltage in the same frame (series half-bridge and single: above the negative
 * rail; split half-bridge: the C1/C2 node minus dc_link / 2; full bridge: across the
 * capacitor; ring-down: along the loop, starting at -precharge_v); v_ak1, T1's
 * anode-cathode voltage including stray L di/dt while D1 conducts; g1..g4, gate pulses
 * (1 while high). */
typedef struct tf_synth tf_synth;

/* Width of a gate pulse: 10 us, or a quarter of the firing period when that is
 * shorter. Ring-down holds the gate of T1 from the release on (free ringing). */
#define TF_SYNTH_GATE_WIDTH_S 10e-6

/* Create an engine for design d (copied; the design is not needed afterwards).
 * Required: [inverter] topology; [tank] capacitance, inductance (> 0) and
 * resistance (>= 0); dc_link (> 0) except for ring-down, precharge_v for
 * ring-down; firing_frequency (> 0) or a list of firing instants (ascending)
 * except for ring-down (released at the first listed instant, else t = 0);
 * reset_inductance (> 0) for single. Drops, stray inductance, reset resistance
 * and t_q that are NAN count as 0 (no t_q: no commutation failure is judged).
 * The simulation starts at rest before t = 0 (series capacitor at dc_link / 2,
 * split pair balanced, ring-down capacitor at precharge_v); the capture window
 * is [start_s, start_s + duration_s). NULL on error with err set (missing or
 * inconsistent design values, named by section and key). */
tf_synth *tf_synth_create(const tf_design *d, tf_error *err);

/* Free the engine; NULL is a no-op. */
void tf_synth_destroy(tf_synth *s);

/* Noiseless values of the simulated channels at times t_c,k = t0 + k dt - skew[c]
 * for k in [0, n), for each channel c with out[c] != NULL (out[c] holds n floats in
 * volts, amperes, or 0/1 for gates). skew may be NULL (all zero). Successive calls
 * must have non-decreasing t0 (streaming); |skew| <= 1 ms. Memory use does not
 * grow with the simulated duration. dt > 0. Errors: TF_ERR_USAGE (bad dt, skew,
 * or a time before the kept history), TF_ERR_NOMEM. Channels the topology does not
 * have (tf_synth_has_channel) are filled with 0. Values within an interval come
 * from an exact propagator recurrence re-anchored on the closed form every 256
 * samples (relative error below 1e-12 before the rounding to float). */
tf_status tf_synth_fill(tf_synth *s, double t0, double dt, size_t n, const double *skew,
                        float *const out[TF_SYN_NCHAN], tf_error *err);

/* Truth after the whole duration has been filled (or simulate to the design's
 * duration if not yet): every conduction interval, per thyristor firing the
 * turn-off time available, commutation failures, analytic alpha, w0, wd, Q, and
 * the exact RMS, mean power and harmonics from the noiseless waveform. New
 * reference (keys: docs/simulator.md). The truth is computed by a separate run of
 * the same design, so it does not disturb streaming. Needs [capture] duration > 0.
 * Errors: TF_ERR_DATA (no duration), TF_ERR_NOMEM. */
json_t *tf_synth_truth(tf_synth *s, tf_error *err);

/* Conduction intervals found so far (pointer valid until the next fill). The last
 * one may still be open (end_s NAN). */
const tf_synth_interval *tf_synth_intervals(const tf_synth *s, size_t *count);

/* Non-zero when the topology has channel c (i_load, v_out, v_c, v_ak1 always;
 * g1 for all; g2 for bridges; g3, g4 for the full bridge). */
int tf_synth_has_channel(const tf_synth *s, tf_synth_channel c);

/* Exact state at one instant, in double precision (for tests and design-expected
 * values). */
typedef struct tf_synth_point {
    double ch[TF_SYN_NCHAN]; /* channel values as tf_synth_fill gives them */
    double didt_a_s;         /* load current slope, A/s */
    double choke_a;          /* single: reset choke current (0 otherwise) */
    tf_device device;        /* conducting device, TF_DEV_UNKNOWN when none */
} tf_synth_point;

/* Evaluate at time t (seconds). t must not be earlier than about 1 ms before the
 * t0 of the last fill or the latest evaluated time (history is short); evaluation
 * moves the simulation forward as needed. Errors: TF_ERR_USAGE (t too early or not
 * finite), TF_ERR_NOMEM. */
tf_status tf_synth_eval(tf_synth *s, double t, tf_synth_point *p, tf_error *err);

#ifdef __cplusplus
}
#endif
#endif
