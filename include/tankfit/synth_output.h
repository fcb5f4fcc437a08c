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
 * written atomically; an existing file is TF_ERR_CANTCREAT unless overwrite. */
tf_status tf_synth_write(const tf_design *d, const char *out_path, const char *truth_path,
                         int overwrite, tf_error *err);

/* Simulate design d into memory (all channels the topology has). With noiseless
 * set, no noise, quantisation, clipping or skew are applied. *truth (may be NULL
 * to skip) receives the truth JSON. Caller owns both. */
tf_status tf_synth_to_capture(const tf_design *d, int noiseless, tf_capture **out,
                              json_t **truth, tf_error *err);

#ifdef __cplusplus
}
#endif
#endif
