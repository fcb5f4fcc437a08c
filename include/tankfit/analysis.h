/* The whole analysis of one capture: roles, segmenter, fitter, spectrum and power. */
#ifndef TANKFIT_ANALYSIS_H
#define TANKFIT_ANALYSIS_H

#include <jansson.h>
#include <tankfit/capture.h>
#include <tankfit/design.h>
#include <tankfit/fit.h>
#include <tankfit/roles.h>
#include <tankfit/segment.h>
#include <tankfit/spectrum.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef struct tf_analysis_options {
    tf_role_names roles;
    tf_segment_options segment;
    tf_fit_options fit;
    tf_spectrum_options spectrum;
    int skip_fit, skip_spectrum;
} tf_analysis_options;

typedef struct tf_analysis {
    tf_roles roles;
    tf_segment_result *seg;
    tf_fit_result *fit;        /* NULL when skipped or not possible (see fit_error) */
    tf_spectrum_result *spec;  /* NULL when skipped or not possible */
    tf_error fit_error, spectrum_error;
} tf_analysis;

/* Default options; when design is not NULL its topology, C, L, drops and
 * channel names fill the options (explicit settings made later override). */
void tf_analysis_options_init(tf_analysis_options *o, const tf_design *design);

/* Run every stage. A segmenter failure is returned as the status; fit or
 * spectrum failures are kept in fit_error / spectrum_error and the stage's
 * result is NULL. *out is owned by the caller (tf_analysis_free). */
tf_status tf_analysis_run(const tf_capture *cap, const tf_design *design,
                          const tf_analysis_options *opt, tf_analysis **out, tf_error *err);
void tf_analysis_free(tf_analysis *a);

/* JSON of the analysis: "topology", "mode", segmenter keys, "resonance",
 * "spectrum", "power" (docs/json.md). New reference. */
json_t *tf_analysis_to_json(const tf_capture *cap, const tf_analysis *a);

#ifdef __cplusplus
}
#endif
#endif
