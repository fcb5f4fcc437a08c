/* Segmenter JSON view: mode, topology, lobes, bursts, cycles, timing, anomalies. */
#include <tankfit/segment.h>

#include <math.h>

static json_t *num(double v) { return isfinite(v) ? json_real(v) : json_null(); }

static json_t *stat3_json(const tf_stat3 *s)
{
    return json_pack("{s:o,s:o,s:o,s:I}", "min", num(s->min), "median", num(s->median), "max",
                     num(s->max), "count", (json_int_t)s->count);
}

json_t *tf_segment_to_json(const tf_segment_result *r)
{
    if (!r)
        return json_object();
    json_t *o = json_object(), *lobes = json_array(), *cycles = json_array(),
           *bursts = json_array(), *an = json_array(), *fire = json_array();
    json_object_set_new(o, "topology", json_string(tf_topology_name(r->topology)));
    json_object_set_new(o, "topology_evidence", json_string(r->topology_evidence));
    json_object_set_new(o, "mode", json_string(tf_mode_name(r->mode)));
    json_object_set_new(o, "mode_evidence", json_string(r->mode_evidence));
    json_object_set_new(o, "noise_sigma_a", num(r->noise_sigma_a));
    json_object_set_new(o, "band_a", num(r->band_a));
    json_object_set_new(o, "damped_frequency_hz", num(r->damped_frequency_hz));
    for (size_t j = 0; j < r->nlobes; j++) {
        const tf_lobe *l = &r->lobes[j];
        json_array_append_new(lobes, json_pack(
            "{s:o,s:o,s:o,s:i,s:s,s:o,s:o,s:o,s:o,s:o,s:b,s:b,s:b,s:b,s:b}",
            "start_s", num(l->start_s), "end_s", num(l->end_s),
            "duration_s", num(l->end_s - l->start_s), "sign", l->sign,
            "device", tf_device_name(l->device), "peak_s", num(l->peak_s),
            "peak_a", num(l->peak_a), "charge_c", num(l->charge_c), "rms_a", num(l->rms_a),
            "burst", l->burst == TF_NO_BURST ? json_null() : json_integer((json_int_t)l->burst),
            "clipped", l->clipped, "partial", l->partial, "start_from_model", l->start_model,
            "end_from_model", l->end_model, "end_by_firing", l->end_by_firing));
    }
    for (size_t j = 0; j < r->nbursts; j++) {
        const tf_burst *b = &r->bursts[j];
        json_array_append_new(bursts, json_pack(
            "{s:o,s:o,s:I,s:I,s:b,s:b,s:b}", "start_s", num(b->start_s), "end_s",
            num(b->end_s), "first_lobe", (json_int_t)b->first_lobe, "lobes",
            (json_int_t)b->nlobes, "clipped", b->clipped, "anomalous", b->anomalous,
            "ends_by_firing", b->ends_by_firing));
    }
    for (size_t j = 0; j < r->ncycles; j++) {
        const tf_cycle *c = &r->cycles[j];
        json_array_append_new(cycles, json_pack(
            "{s:s,s:o,s:o,s:o,s:o,s:o,s:o,s:o,s:o,s:o,s:o}", "thyristor",
            tf_device_name(c->thyristor), "start_s", num(c->start_s), "period_s",
            num(c->period_s), "frequency_hz", num(c->frequency_hz), "thyristor_s",
            num(c->thyristor_s), "diode_s", num(c->diode_s), "turnoff_available_s",
            num(c->turnoff_available_s), "dead_s", num(c->dead_s), "overlap_s",
            num(c->overlap_s), "firing_voltage_s", num(c->firing_voltage_s), "reverse_bias_s",
            num(c->reverse_bias_s)));
    }
    for (size_t j = 0; j < r->nanomalies; j++)
        json_array_append_new(an, json_pack("{s:o,s:s,s:s}", "time_s",
                                            num(r->anomalies[j].time_s), "kind",
                                            r->anomalies[j].kind, "text", r->anomalies[j].text));
    for (size_t j = 0; j < r->nfirings; j++)
        json_array_append_new(fire, num(r->firings_s[j]));
    json_object_set_new(o, "lobes", lobes);
    json_object_set_new(o, "bursts", bursts);
    json_object_set_new(o, "cycles", cycles);
    json_object_set_new(o, "timing", json_pack(
        "{s:o,s:o,s:o,s:o,s:o,s:o,s:o}", "output_frequency_hz", stat3_json(&r->output_frequency_hz),
        "thyristor_s", stat3_json(&r->thyristor_s), "diode_s", stat3_json(&r->diode_s),
        "turnoff_available_s", stat3_json(&r->turnoff_available_s), "dead_s",
        stat3_json(&r->dead_s), "overlap_s", stat3_json(&r->overlap_s), "reverse_bias_s",
        stat3_json(&r->reverse_bias_s)));
    json_object_set_new(o, "anomalies", an);
    json_object_set_new(o, "firings_s", fire);
    json_object_set_new(o, "clipped_stretches", json_integer((json_int_t)r->clipped_stretches));
    json_object_set_new(o, "reverse_bias_unresolved",
                        json_integer((json_int_t)r->reverse_bias_unresolved));
    return o;
}
