/* Segmenter: zero crossings, current lobes, device attribution, firing cycles, mode. */
#ifndef TANKFIT_SEGMENT_H
#define TANKFIT_SEGMENT_H

#include <stddef.h>
#include <jansson.h>
#include <tankfit/capture.h>
#include <tankfit/roles.h>
#include <tankfit/types.h>

#ifdef __cplusplus
extern "C" {
#endif

/* One current lobe: a stretch of one sign between two zeros (or a zero and a
 * slope break in overlapping operation). Times in seconds, currents in amperes,
 * charge in coulombs. */
typedef struct tf_lobe {
    double start_s, end_s;      /* sub-sample boundaries */
    int sign;                   /* +1 or -1 */
    tf_device device;
    double peak_s, peak_a;      /* time and value of the extreme (signed) */
    double charge_c;            /* integral of i over the lobe */
    double rms_a;               /* RMS over the lobe */
    size_t i0, i1;              /* sample index range [i0, i1) */
    size_t burst;               /* index of the burst it belongs to */
    int clipped;                /* touches clipped current samples: peak not trusted */
    int start_model, end_model; /* boundary taken from the burst's damped-sine model */
    int end_by_firing;          /* ended by the next firing (overlapping), not a zero */
    int partial;                /* cut by the start or end of the record */
} tf_lobe;

/* tf_lobe.burst of a lobe that belongs to no burst (e.g. a partial first lobe). */
#define TF_NO_BURST ((size_t)-1)

/* One burst: a thyristor lobe and the diode lobe that follows it (or a whole
 * ring-down), the unit the fitter works on. */
typedef struct tf_burst {
    size_t first_lobe, nlobes;
    size_t i0, i1;              /* sample range [i0, i1) */
    double start_s, end_s;
    int clipped;                /* touches clipped samples */
    int anomalous;              /* has an anomaly (excluded from fits) */
    int ends_by_firing;         /* cut short by the next firing (overlapping) */
} tf_burst;

/* One firing cycle of a thyristor. */
typedef struct tf_cycle {
    double start_s;             /* firing instant (thyristor lobe start) */
    double period_s;            /* to the same thyristor's next firing (NAN for the last) */
    double frequency_hz;        /* 1 / period_s */
    double thyristor_s;         /* thyristor conduction time */
    double diode_s;             /* diode conduction time */
    double turnoff_available_s; /* thyristor current zero until forward voltage returns */
    double dead_s;              /* zero-current time after the diode lobe */
    double overlap_s;           /* diode time cut by the next firing (overlapping) */
    tf_device thyristor;
    size_t lobe_thyristor, lobe_diode; /* indices into lobes; lobe_diode = (size_t)-1 if none */
    double firing_voltage_s;    /* overlapping: the output-voltage step found near the
                                   split (NAN when no voltage channel or not found) */
    double reverse_bias_s;      /* T1 (or T1+T2) with a switch-voltage channel: from the
                                   thyristor's current zero until its anode-cathode voltage
                                   first turns positive (NAN otherwise); shorter than
                                   turnoff_available_s when a stray loop inductance lifts
                                   the voltage during the diode interval */
} tf_cycle;

typedef struct tf_anomaly {
    double time_s;
    char kind[32];              /* "missing-firing", "out-of-sequence", "commutation-failure",
                                   "clipped", "offset" (the current rests away from zero) */
    char text[192];
} tf_anomaly;

typedef struct tf_stat3 { double min, median, max; size_t count; } tf_stat3;

typedef struct tf_segment_options {
    tf_topology topology;       /* TF_TOPO_UNKNOWN: infer from the gates and lobe pattern */
    double band_k;              /* hysteresis band in noise sigmas, > 0; 0: the default 4
                                   (docs/segmenter.md explains the choice) */
} tf_segment_options;

typedef struct tf_segment_result {
    tf_topology topology;
    tf_mode mode;
    char mode_evidence[256];
    double noise_sigma_a, band_a;
    tf_lobe *lobes;         size_t nlobes;
    tf_burst *bursts;       size_t nbursts;
    tf_cycle *cycles;       size_t ncycles;
    tf_anomaly *anomalies;  size_t nanomalies;
    double *firings_s;      size_t nfirings;    /* firing instants (gates or inferred) */
    tf_stat3 output_frequency_hz, diode_s, turnoff_available_s;
    tf_stat3 thyristor_s, dead_s, overlap_s;
    tf_stat3 reverse_bias_s;      /* over the cycles that have it */
    char topology_evidence[256];  /* how the topology was chosen */
    double damped_frequency_hz;   /* rough fd from the lobes (pi / lobe duration, or the
                                     overlapping split model); NAN when unknown */
    size_t clipped_stretches;     /* clipped stretches of the current found */
    size_t reverse_bias_unresolved; /* T1 cycles whose switch voltage was too coarse or
                                       noisy to show the reverse bias (then NAN) */
} tf_segment_result;

/* Defaults: topology inferred, band of 4 noise sigmas. */
void tf_segment_options_init(tf_segment_options *o);

/* Segment the load current of a capture into lobes, bursts and firing cycles.
 *
 * cap: the capture (n >= 16 samples, dt_s > 0); not modified.
 * roles: roles->current (required) is the load current in amperes; roles->gate[0..3]
 *   (gate signals, any levels: a rising edge half way between the channel's extremes is a
 *   firing), roles->voltage (output voltage: its step at each overlapping split is
 *   reported) and roles->switch_voltage (T1 anode-cathode, volts: T1's reverse-bias time)
 *   are used when >= 0. Known probe skews (tf_channel.skew_s) of gates are removed.
 * opt: may be NULL (defaults).
 * out: receives the result (owned by the caller, free with tf_segment_free); NULL on error.
 * err: may be NULL.
 * Times in the result are on the capture's time base (t0_s + k dt_s), in seconds.
 * Errors: TF_ERR_USAGE (no current role), TF_ERR_DATA (too few samples, a non-positive
 * sample period, a current with nothing above its noise band, no lobe found),
 * TF_ERR_NOMEM. Never prints; uses at most two threads on records of 2e6 samples and
 * more; memory grows with the number of lobes, not of samples (plus the capture). */
tf_status tf_segment_run(const tf_capture *cap, const tf_roles *roles,
                         const tf_segment_options *opt, tf_segment_result **out,
                         tf_error *err);

/* Free a result and everything it owns. NULL is a no-op. */
void tf_segment_free(tf_segment_result *r);

/* JSON view: "topology", "mode", "lobes", "bursts", "cycles", "timing", "anomalies", ...
 * (every key: docs/segmenter.md). A new reference owned by the caller (json_decref);
 * NULL only when out of memory; an empty object for r == NULL. */
json_t *tf_segment_to_json(const tf_segment_result *r);

#ifdef __cplusplus
}
#endif
#endif
