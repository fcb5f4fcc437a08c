/* Spectrum: PLACEHOLDER until the spectrum module lands; reports itself unavailable. */
#include <tankfit/spectrum.h>

#include <stdlib.h>
#include <string.h>

void tf_spectrum_options_init(tf_spectrum_options *o) { memset(o, 0, sizeof *o); o->harmonics = 40; }
tf_status tf_spectrum_run(const tf_capture *cap, const tf_roles *roles,
                          const tf_segment_result *seg, const tf_spectrum_options *opt,
                          tf_spectrum_result **out, tf_error *err)
{
    (void)cap; (void)roles; (void)seg; (void)opt;
    *out = NULL;
    return tf_error_set(err, TF_ERR_UNAVAILABLE, "the spectrum module is not built yet");
}
void tf_spectrum_free(tf_spectrum_result *r) { free(r); }
void tf_spectrum_to_json(const tf_spectrum_result *r, json_t *obj) { (void)r; (void)obj; }
