/* Fitter: PLACEHOLDER until the fitter lands; reports itself unavailable. */
#include <tankfit/fit.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

void tf_fit_options_init(tf_fit_options *o)
{
    memset(o, 0, sizeof *o);
    o->capacitance_f = o->inductance_h = o->thyristor_drop_v = o->diode_drop_v = NAN;
}
tf_status tf_fit_run(const tf_capture *cap, const tf_roles *roles, const tf_segment_result *seg,
                     const tf_fit_options *opt, tf_fit_result **out, tf_error *err)
{
    (void)cap; (void)roles; (void)seg; (void)opt;
    *out = NULL;
    return tf_error_set(err, TF_ERR_UNAVAILABLE, "the fitter is not built yet");
}
void tf_fit_free(tf_fit_result *r) { free(r); }
json_t *tf_fit_to_json(const tf_fit_result *r) { (void)r; return json_object(); }
