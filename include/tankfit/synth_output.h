/* Simulator output: scope imperfections and streaming CSV/WAV writers for `tankfit synth`,
 * and in-memory captures of a design for tests and design-expected values. */
#ifndef TANKFIT_SYNTH_OUTPUT_H
#define TANKFIT_SYNTH_OUTPUT_H

#include <jansson.h>
#include <tankfit/capture.h>
#include <tankfit/design.h>
#include <tankfit/synth.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Simulate design d and write the capture to out_path (".csv" or ".wav": by
 * extension, else the design's [capture] format) and, when truth_path is not
 * NULL, the truth JSON. Streams: memory does not grow with duration. Files are
 * written atomically; an existing file is TF_ERR_CANTCREAT unless overwrite.
 * Samples: n = round(duration x sample_rate) at t = start + k / sample_rate.
 * The truth JSON is the engine's (tf_synth_truth) plus a "capture" object
 * describing the written file (docs/synth-output.md). */
tf_status tf_synth_write(const tf_design *d, const char *out_path, const char *truth_path,
                         int overwrite, tf_error *err);

/* Options of tf_synth_write_opts. Zero-initialise (or tf_synth_write_options_init). */
typedef struct tf_synth_write_options {
    int overwrite;        /* non-zero: replace existing output files */
    int noiseless;        /* non-zero: no noise, quantisation, clipping or skew */
    int format;           /* 0: by the output's extension, else the design's format;
                             1: CSV; 2: WAV */
    void (*progress)(void *ctx, double fraction); /* optional, called per block */
    void *progress_ctx;
} tf_synth_write_options;

void tf_synth_write_options_init(tf_synth_write_options *o);

/* tf_synth_write with options (NULL: defaults). Besides the capture, a WAV gets
 * its sidecar "<out_path>.tfscale" (names, units, full-scale values; format in
 * docs/synth-output.md). Every output is written to a temporary file in its
 * directory, fsync'ed and moved into place only when all are complete; nothing
 * is left behind on failure. Errors: TF_ERR_USAGE (a [capture] value out of
 * range, a WAV rate that is not a whole number of hertz), TF_ERR_CANTCREAT (an
 * output exists without overwrite, or cannot be created), TF_ERR_IO, errors of
 * tf_synth_create / tf_synth_fill. */
tf_status tf_synth_write_opts(const tf_design *d, const char *out_path, const char *truth_path,
                              const tf_synth_write_options *o, tf_error *err);

/* Bit mask (1 << tf_synth_channel) of the channels a topology has: i_load, v_out,
 * v_c, v_ak1 and g1 (single, ring-down), g1..g2 (half-bridge), g1..g4 (full-bridge). */
unsigned tf_synth_topology_channels(tf_topology t);

/* Bit mask of the channels written for design d: those with enabled set that the
 * topology has (others are skipped), or all the topology has when none is set.
 * TF_ERR_USAGE when the topology is unknown. */
tf_status tf_synth_output_channels(const tf_design *d, unsigned *mask, tf_error *err);

/* Unit of a simulated channel: "A", "V", or "" for gate channels (0/1). */
const char *tf_synth_channel_unit(tf_synth_channel c);

/* Simulate design d into memory (the channels tf_synth_output_channels gives, in
 * tf_synth_channel order, named as tf_synth_channel_name). With noiseless set, no
 * noise, quantisation, clipping or skew are applied; otherwise the samples equal
 * those tf_synth_write puts in a file (before printing). *truth (may be NULL to
 * skip) receives the truth JSON. Caller owns both (tf_capture_destroy,
 * json_decref); on error *out and *truth are NULL. */
tf_status tf_synth_to_capture(const tf_design *d, int noiseless, tf_capture **out,
                              json_t **truth, tf_error *err);

#ifdef __cplusplus
}
#endif
#endif
