/* Design validation: are the keys a use (simulation or acceptance checks) needs there? */
#include <tankfit/design.h>

#include <math.h>
#include <stdio.h>
#include <string.h>

static tf_status missing(const tf_design *d, tf_error *err, const char *section,
                         const char *key, const char *why)
{
    return tf_error_set(err, TF_ERR_DATA, "%s: [%s] %s: %s, not given",
                        d->path[0] ? d->path : "design", section, key, why);
}

static tf_status check_synth(const tf_design *d, tf_error *err)
{
    const char *why = "required to simulate the design";
    tf_topology t = d->topology;
    if (t == TF_TOPO_UNKNOWN)
        return tf_error_set(err, TF_ERR_DATA, "%s: [inverter] topology: required to simulate "
                            "the design (single, half-bridge, full-bridge or ring-down), not "
                            "given", d->path[0] ? d->path : "design");
    if (isnan(d->capacitance_f))
        return missing(d, err, "tank", "capacitance", why);
    if (isnan(d->inductance_h))
        return missing(d, err, "tank", "inductance", why);
    if (isnan(d->resistance_ohm))
        return missing(d, err, "tank", "resistance", why);
    if (t == TF_TOPO_RING_DOWN) {
        if (isnan(d->precharge_v))
            return missing(d, err, "inverter", "precharge", "required to simulate a ring-down");
    } else {
        if (isnan(d->dc_link_v))
            return missing(d, err, "inverter", "dc_link", why);
        if (isnan(d->firing_frequency_hz) && d->n_firing_times == 0)
            return missing(d, err, "inverter", "firing_frequency",
                           "required to simulate the design (or firing_times)");
        if (isnan(d->turnoff_time_s))
            return missing(d, err, "switch", "turnoff_time",
                           "required to simulate the thyristors' recovery");
    }
    if (t == TF_TOPO_SINGLE) {
        if (isnan(d->reset_inductance_h))
            return missing(d, err, "inverter", "reset_inductance",
                           "required for a single stage (the reset choke across the capacitor)");
        if (isnan(d->reset_resistance_ohm))
            return missing(d, err, "inverter", "reset_resistance",
                           "required for a single stage (the reset choke's resistance)");
    }
    for (int c = 0; c < TF_SYN_NCHAN; c++)
        if (fabs(d->chan[c].skew_s) > 1e-3)
            return tf_error_set(err, TF_ERR_DATA, "%s: [capture] %s.skew: must be within "
                                "+/- 1 ms for the simulator, found %g s",
                                d->path[0] ? d->path : "design",
                                tf_synth_channel_name((tf_synth_channel)c), d->chan[c].skew_s);
    if (!(d->sample_rate_hz * d->duration_s >= 2.0))
        return tf_error_set(err, TF_ERR_DATA, "%s: [capture] duration: %g s at sample_rate "
                            "%g S/s gives fewer than two samples",
                            d->path[0] ? d->path : "design", d->duration_s, d->sample_rate_hz);
    if (d->sample_rate_hz * d->duration_s > 1e11)
        return tf_error_set(err, TF_ERR_DATA, "%s: [capture] duration: %g s at sample_rate "
                            "%g S/s gives more than 1e11 samples",
                            d->path[0] ? d->path : "design", d->duration_s, d->sample_rate_hz);
    return TF_OK;
}

/* Each given limit with the design values it is compared against. */
static tf_status check_limits(const tf_design *d, tf_error *err)
{
    static const struct {
        const char *limit;
        size_t off;
        const char *section, *key;
        size_t need;
    } needs[] = {
        {"turnoff_ratio_min", offsetof(tf_design, turnoff_ratio_min), "switch", "turnoff_time",
         offsetof(tf_design, turnoff_time_s)},
        {"resonance_tolerance", offsetof(tf_design, resonance_tolerance), "tank", "capacitance",
         offsetof(tf_design, capacitance_f)},
        {"resonance_tolerance", offsetof(tf_design, resonance_tolerance), "tank", "inductance",
         offsetof(tf_design, inductance_h)},
        {"q_tolerance", offsetof(tf_design, q_tolerance), "tank", "capacitance",
         offsetof(tf_design, capacitance_f)},
        {"q_tolerance", offsetof(tf_design, q_tolerance), "tank", "inductance",
         offsetof(tf_design, inductance_h)},
        {"q_tolerance", offsetof(tf_design, q_tolerance), "tank", "resistance",
         offsetof(tf_design, resistance_ohm)},
        {"resistance_tolerance", offsetof(tf_design, resistance_tolerance), "tank", "resistance",
         offsetof(tf_design, resistance_ohm)},
    };
    const char *base = (const char *)d;
    for (size_t i = 0; i < sizeof needs / sizeof needs[0]; i++) {
        double lim, have;
        memcpy(&lim, base + needs[i].off, sizeof lim);
        memcpy(&have, base + needs[i].need, sizeof have);
        if (!isnan(lim) && isnan(have))
            return tf_error_set(err, TF_ERR_DATA, "%s: [%s] %s: needed by [limits] %s, not "
                                "given", d->path[0] ? d->path : "design", needs[i].section,
                                needs[i].key, needs[i].limit);
    }
    /* one column cannot play two roles */
    const char *roles[8] = {d->ch_current, d->ch_output_voltage, d->ch_capacitor_voltage,
                            d->ch_switch_voltage, d->ch_gate[0], d->ch_gate[1], d->ch_gate[2],
                            d->ch_gate[3]};
    static const char *const role_keys[8] = {"current", "output_voltage", "capacitor_voltage",
                                             "switch_voltage", "gate1", "gate2", "gate3", "gate4"};
    for (int a = 0; a < 8; a++)
        for (int b = a + 1; b < 8; b++)
            if (roles[a][0] && strcmp(roles[a], roles[b]) == 0)
                return tf_error_set(err, TF_ERR_DATA, "%s: [channels] %s and %s both name "
                                    "column '%s'", d->path[0] ? d->path : "design",
                                    role_keys[a], role_keys[b], roles[a]);
    /* a relative tolerance of zero ohms (an ideal lossless tank) means nothing */
    if (!isnan(d->resistance_tolerance) && d->resistance_ohm == 0)
        return tf_error_set(err, TF_ERR_DATA, "%s: [limits] resistance_tolerance: relative to "
                            "[tank] resistance, which is 0 ohm", d->path[0] ? d->path : "design");
    if (!isnan(d->q_tolerance) && d->resistance_ohm == 0)
        return tf_error_set(err, TF_ERR_DATA, "%s: [limits] q_tolerance: [tank] resistance is "
                            "0 ohm, so the design's Q is infinite", d->path[0] ? d->path : "design");
    /* a probe factor in V/V on the current column (or A/V on a voltage) is a mix-up */
    for (size_t i = 0; i < d->nscales; i++) {
        const tf_design_scale *s = &d->scales[i];
        int is_current = d->ch_current[0] && strcmp(s->column, d->ch_current) == 0;
        int is_voltage = (d->ch_output_voltage[0] && strcmp(s->column, d->ch_output_voltage) == 0) ||
                         (d->ch_capacitor_voltage[0] && strcmp(s->column, d->ch_capacitor_voltage) == 0) ||
                         (d->ch_switch_voltage[0] && strcmp(s->column, d->ch_switch_voltage) == 0);
        if ((is_current && strcmp(s->unit, "V/V") == 0) || (is_voltage && strcmp(s->unit, "A/V") == 0))
            return tf_error_set(err, TF_ERR_DATA, "%s: [channels] scale.%s: %s on a %s column",
                                d->path[0] ? d->path : "design", s->column, s->unit,
                                is_current ? "current" : "voltage");
    }
    return TF_OK;
}

tf_status tf_design_validate(const tf_design *d, int for_synth, tf_error *err)
{
    if (!d)
        return tf_error_set(err, TF_ERR_USAGE, "tf_design_validate: no design");
    tf_status st = check_limits(d, err);
    if (st == TF_OK && for_synth)
        st = check_synth(d, err);
    if (st == TF_OK)
        tf_error_clear(err);
    return st;
}
