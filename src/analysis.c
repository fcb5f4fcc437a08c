/* Runs the pipeline stages on one capture and gathers their results. */
#include <tankfit/analysis.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

void tf_analysis_options_init(tf_analysis_options *o, const tf_design *d)
{
    memset(o, 0, sizeof *o);
    tf_segment_options_init(&o->segment);
    tf_fit_options_init(&o->fit);
    tf_spectrum_options_init(&o->spectrum);
    if (!d)
        return;
    o->segment.topology = d->topology;
    o->fit.capacitance_f = d->capacitance_f;
    o->fit.inductance_h = d->inductance_h;
    o->fit.thyristor_drop_v = d->thyristor_drop_v;
    o->fit.diode_drop_v = d->diode_drop_v;
}

tf_status tf_analysis_run(const tf_capture *cap, const tf_design *design,
                          const tf_analysis_options *opt, tf_analysis **out, tf_error *err)
{
    *out = NULL;
    tf_analysis *a = calloc(1, sizeof *a);
    if (!a)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    tf_status st = tf_roles_resolve(cap, &opt->roles, design, &a->roles, err);
    if (st == TF_OK)
        st = tf_segment_run(cap, &a->roles, &opt->segment, &a->seg, err);
    if (st != TF_OK) {
        tf_analysis_free(a);
        return st;
    }
    tf_spectrum_options so = opt->spectrum;
    if (!opt->skip_fit &&
        tf_fit_run(cap, &a->roles, a->seg, &opt->fit, &a->fit, &a->fit_error) != TF_OK)
        a->fit = NULL;
    if (a->fit && isfinite(a->fit->skew_s) && !opt->fit.skew_set)
        so.skew_s = a->fit->skew_s;
    else if (opt->fit.skew_set)
        so.skew_s = opt->fit.skew_s;
    if (!opt->skip_spectrum &&
        tf_spectrum_run(cap, &a->roles, a->seg, &so, &a->spec, &a->spectrum_error) != TF_OK)
        a->spec = NULL;
    *out = a;
    return TF_OK;
}

void tf_analysis_free(tf_analysis *a)
{
    if (!a)
        return;
    tf_segment_free(a->seg);
    tf_fit_free(a->fit);
    tf_spectrum_free(a->spec);
    free(a);
}

json_t *tf_analysis_to_json(const tf_capture *cap, const tf_analysis *a)
{
    json_t *o = tf_segment_to_json(a->seg);
    if (!o)
        return NULL;
    json_t *roles = json_object();
    const int idx[] = {a->roles.current, a->roles.voltage, a->roles.cap_voltage,
                       a->roles.switch_voltage};
    const char *const keys[] = {"current", "voltage", "cap_voltage", "switch_voltage"};
    for (int k = 0; k < 4; k++)
        json_object_set_new(roles, keys[k],
                            idx[k] >= 0 ? json_string(cap->ch[idx[k]].name) : json_null());
    if (a->roles.guessed[0])
        json_object_set_new(roles, "guessed", json_string(a->roles.guessed));
    json_object_set_new(o, "roles", roles);
    if (a->fit)
        json_object_set_new(o, "resonance", tf_fit_to_json(a->fit));
    else if (a->fit_error.code != TF_OK)
        json_object_set_new(o, "resonance_error", json_string(a->fit_error.msg));
    if (a->spec)
        tf_spectrum_to_json(a->spec, o);
    else if (a->spectrum_error.code != TF_OK)
        json_object_set_new(o, "spectrum_error", json_string(a->spectrum_error.msg));
    return o;
}
