/* JSON view of the spectrum and power results (keys: docs/spectrum.md). */
#include <tankfit/spectrum.h>

#include <math.h>

static json_t *num(double x)
{
    return isfinite(x) ? json_real(x) : json_null();
}

static json_t *channel_json(const tf_channel_spectrum *c)
{
    json_t *o = json_object();
    json_object_set_new(o, "channel", json_string(c->name));
    json_object_set_new(o, "unit", json_string(c->unit));
    json_t *hs = json_array();
    for (size_t h = 0; h < c->nharm; h++) {
        const tf_harmonic *hm = &c->harm[h];
        json_t *e = json_object();
        json_object_set_new(e, "n", json_integer(hm->n));
        json_object_set_new(e, "frequency_hz", num(hm->frequency_hz));
        json_object_set_new(e, "amplitude", num(hm->amplitude));
        json_object_set_new(e, "rms", num(hm->rms));
        json_object_set_new(e, "phase_deg", num(hm->phase_deg));
        json_array_append_new(hs, e);
    }
    json_object_set_new(o, "harmonics", hs);
    json_object_set_new(o, "thd_percent", num(100.0 * c->thd));
    json_object_set_new(o, "dc", num(c->dc));
    json_object_set_new(o, "rms", num(c->rms));
    json_object_set_new(o, "crest_factor", num(c->crest_factor));
    json_object_set_new(o, "peak", num(c->peak));
    json_object_set_new(o, "aperiodic_rms", num(c->aperiodic_rms));
    json_object_set_new(o, "shift_s", num(c->shift_s));
    json_object_set_new(o, "clipped_samples", json_integer((json_int_t)c->clipped_samples));
    return o;
}

static json_t *power_json(const tf_power *p)
{
    if (!p->valid)
        return json_null();
    json_t *o = json_object();
    json_object_set_new(o, "mean_w", num(p->mean_w));
    json_object_set_new(o, "v_rms", num(p->v_rms));
    json_object_set_new(o, "i_rms", num(p->i_rms));
    json_object_set_new(o, "apparent_va", num(p->apparent_va));
    json_object_set_new(o, "power_factor", num(p->power_factor));
    json_object_set_new(o, "displacement_factor", num(p->displacement_factor));
    json_object_set_new(o, "energy_per_cycle_j", num(p->energy_per_cycle_j));
    json_object_set_new(o, "dc_w", num(p->dc_w));
    json_object_set_new(o, "skew_s", num(p->skew_s));
    json_t *hs = json_array();
    for (size_t h = 0; h < p->nharm; h++) {
        json_t *e = json_object();
        json_object_set_new(e, "n", json_integer(p->harm[h].n));
        json_object_set_new(e, "mean_w", num(p->harm[h].mean_w));
        json_array_append_new(hs, e);
    }
    json_object_set_new(o, "harmonics", hs);
    json_t *ce = json_object();
    json_object_set_new(ce, "count", json_integer((json_int_t)p->cycles));
    json_object_set_new(ce, "min", num(p->cycle_energy_min_j));
    json_object_set_new(ce, "median", num(p->cycle_energy_median_j));
    json_object_set_new(ce, "max", num(p->cycle_energy_max_j));
    json_object_set_new(o, "cycle_energy_j", ce);
    return o;
}

void tf_spectrum_to_json(const tf_spectrum_result *r, json_t *obj)
{
    if (!r || !obj)
        return;
    json_t *s = json_object();
    json_object_set_new(s, "fundamental_hz", num(r->fundamental_hz));
    json_object_set_new(s, "fundamental_source", json_string(r->fundamental_source));
    json_object_set_new(s, "periods", json_integer((json_int_t)r->periods));
    json_object_set_new(s, "harmonics_h", json_integer(r->harmonics));
    json_object_set_new(s, "harmonics_capped", json_boolean(r->harmonics_capped));
    json_object_set_new(s, "method", json_string(r->window ? "hann-window" : "synchronous"));
    json_object_set_new(s, "interpolation", json_string("cubic-lagrange"));
    json_object_set_new(s, "samples_per_period", json_integer((json_int_t)r->samples_per_period));
    json_object_set_new(s, "transform_length", json_integer((json_int_t)r->transform_length));
    json_object_set_new(s, "window_start_s", num(r->window_start_s));
    json_t *ref = json_null();
    json_t *chans = json_object();
    for (size_t c = 0; c < r->nch; c++) {
        json_object_set_new(chans, r->ch[c].role, channel_json(&r->ch[c]));
        if (r->ch[c].channel == r->reference_channel) {
            json_decref(ref);
            ref = json_string(r->ch[c].name);
        }
    }
    json_object_set_new(s, "phase_reference", ref);
    json_object_set_new(s, "channels", chans);
    json_object_set_new(obj, "spectrum", s);
    json_object_set_new(obj, "power", power_json(&r->power));
}
