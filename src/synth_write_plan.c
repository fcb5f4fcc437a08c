/* What the simulator output writes for a design: samples, channels, imperfections, file layout. */
#include "synth_write.h"

#include <math.h>
#include <stdio.h>
#include <string.h>
#include <strings.h>
#include <tankfit/synth_output.h>

#define BIT(c) (1u << (c))

unsigned tf_synth_topology_channels(tf_topology t)
{
    unsigned analog = BIT(TF_SYN_I_LOAD) | BIT(TF_SYN_V_OUT) | BIT(TF_SYN_V_C) | BIT(TF_SYN_V_AK1);
    switch (t) {
    case TF_TOPO_SINGLE:
    case TF_TOPO_RING_DOWN: return analog | BIT(TF_SYN_G1);
    case TF_TOPO_HALF_BRIDGE: return analog | BIT(TF_SYN_G1) | BIT(TF_SYN_G2);
    case TF_TOPO_FULL_BRIDGE:
        return analog | BIT(TF_SYN_G1) | BIT(TF_SYN_G2) | BIT(TF_SYN_G3) | BIT(TF_SYN_G4);
    default: return 0;
    }
}

tf_status tf_synth_output_channels(const tf_design *d, unsigned *mask, tf_error *err)
{
    unsigned have = tf_synth_topology_channels(d->topology), want = 0;
    *mask = 0;
    if (!have)
        return tf_error_set(err, TF_ERR_USAGE, "[inverter] topology: expected single, "
                            "half-bridge, full-bridge or ring-down, found '%s'",
                            tf_topology_name(d->topology));
    for (int c = 0; c < TF_SYN_NCHAN; c++)
        if (d->chan[c].enabled)
            want |= BIT(c);
    /* channels the topology lacks are skipped: tf_design_init enables all eight and
     * the design parser rejects an explicit g3.enabled on a half-bridge */
    want &= have;
    if (!want)
        want = have;
    *mask = want;
    return TF_OK;
}

const char *tf_synth_channel_unit(tf_synth_channel c)
{
    if (c == TF_SYN_I_LOAD)
        return "A";
    if (c == TF_SYN_V_OUT || c == TF_SYN_V_C || c == TF_SYN_V_AK1)
        return "V";
    return "";
}

int tf_sw_ext_format(const char *path, int *known)
{
    size_t n = strlen(path);
    *known = 0;
    if (n >= 4 && strcasecmp(path + n - 4, ".wav") == 0) {
        *known = 1;
        return 1;
    }
    if (n >= 4 && strcasecmp(path + n - 4, ".csv") == 0)
        *known = 1;
    return 0;
}

static int is_gate(tf_synth_channel c) { return c >= TF_SYN_G1; }

/* WAV: PCM_16 when every analogue channel is quantised to <= 16 bits over a range */
static int choose_pcm16(const tf_sw_plan *p)
{
    if (p->noiseless)
        return 0;
    for (size_t i = 0; i < p->nchan; i++) {
        const tf_sw_scope *sc = &p->scope[i];
        if (is_gate(p->chan[i]) && sc->bits == 0)
            continue;
        if (sc->bits < 1 || sc->bits > 16)
            return 0;
    }
    return 1;
}

static tf_status check_time(const tf_design *d, tf_sw_plan *p, tf_error *err)
{
    double fs = d->sample_rate_hz, dur = d->duration_s;
    if (!(fs > 0) || !isfinite(fs))
        return tf_error_set(err, TF_ERR_USAGE,
                            "[capture] sample_rate: expected a rate > 0 Hz, found %g", fs);
    if (!(dur > 0) || !isfinite(dur))
        return tf_error_set(err, TF_ERR_USAGE,
                            "[capture] duration: expected a duration > 0 s, found %g", dur);
    double n = floor(dur * fs + 0.5);
    if (n < 2 || n > 1e12)
        return tf_error_set(err, TF_ERR_USAGE,
                            "[capture] duration x sample_rate: expected 2 to 1e12 samples, "
                            "found %.0f", n);
    p->n = (size_t)n;
    p->dt_s = 1.0 / fs;
    p->t0_s = isnan(d->start_s) ? 0.0 : d->start_s;
    if (!isfinite(p->t0_s))
        return tf_error_set(err, TF_ERR_USAGE, "[capture] start: expected a finite time");
    return TF_OK;
}

static tf_status check_digits(const tf_design *d, tf_sw_plan *p, tf_error *err)
{
    int td = d->time_digits ? d->time_digits : 9;
    int vd = d->value_digits ? d->value_digits : 6;
    if (td < 1 || td > 15)
        return tf_error_set(err, TF_ERR_USAGE,
                            "[capture] time_digits: expected 1 to 15 significant digits, found %d",
                            td);
    if (vd < 1 || vd > 15)
        return tf_error_set(err, TF_ERR_USAGE,
                            "[capture] value_digits: expected 1 to 15 significant digits, found %d",
                            vd);
    p->lay.time_digits = td;
    p->lay.value_digits = vd;
    return TF_OK;
}

tf_status tf_sw_plan_make(const tf_design *d, int noiseless, int wav, tf_sw_plan *p,
                          tf_error *err)
{
    memset(p, 0, sizeof *p);
    p->noiseless = noiseless;
    p->wav = wav;
    unsigned mask;
    tf_status st = tf_synth_output_channels(d, &mask, err);
    if (st == TF_OK)
        st = check_time(d, p, err);
    if (st == TF_OK)
        st = check_digits(d, p, err);
    if (st != TF_OK)
        return st;
    for (int c = 0; c < TF_SYN_NCHAN; c++) {
        if (!(mask & BIT(c)))
            continue;
        const tf_capture_channel_cfg *cfg = &d->chan[c];
        const char *name = tf_synth_channel_name((tf_synth_channel)c);
        size_t i = p->nchan++;
        p->chan[i] = (tf_synth_channel)c;
        tf_capture_channel_cfg cc = *cfg;
        /* a gate is a logic level: a design-wide adc_bits does not quantise it unless
         * the gate channel has a range of its own */
        if (is_gate((tf_synth_channel)c) && !(cc.range > 0))
            cc.bits = 0;
        st = tf_sw_scope_init(&p->scope[i], &cc, name, d->seed, (uint64_t)c, noiseless, err);
        if (st != TF_OK)
            return st;
        double skew = isnan(cfg->skew_s) ? 0.0 : cfg->skew_s;
        if (!(fabs(skew) <= 1e-3))
            return tf_error_set(err, TF_ERR_USAGE,
                                "[capture] %s.skew: expected at most 1 ms either way, found %g s",
                                name, skew);
        p->skew_s[c] = noiseless ? 0.0 : skew;
        p->lay.name[i] = name;
        p->lay.unit[i] = tf_synth_channel_unit((tf_synth_channel)c);
    }
    p->lay.nchan = p->nchan;
    p->lay.t0_s = p->t0_s;
    p->lay.dt_s = p->dt_s;
    if (wav) {
        p->lay.pcm16 = choose_pcm16(p);
        for (size_t i = 0; i < p->nchan; i++) {
            const tf_sw_scope *sc = &p->scope[i];
            int gate_plain = is_gate(p->chan[i]) && sc->bits == 0;
            /* a plain gate (0/1) in PCM_16: full scale 2 puts 1 at code 16384, exactly */
            p->lay.full_scale[i] = gate_plain ? (p->lay.pcm16 ? 2.0 : 1.0)
                                              : (sc->range > 0 ? sc->range : 1.0);
            p->lay.bits[i] = gate_plain ? 16 : sc->bits;
        }
        double bytes = (double)p->n * (double)p->nchan * (p->lay.pcm16 ? 2 : 4);
        if (bytes > 4.0e9)
            return tf_error_set(err, TF_ERR_USAGE,
                                "[capture] duration: %.3g bytes of samples do not fit a WAV file "
                                "(4 GB at most); write CSV or shorten the capture", bytes);
    }
    return TF_OK;
}

json_t *tf_sw_plan_json(const tf_sw_plan *p, const tf_design *d)
{
    json_t *chans = json_array();
    for (size_t i = 0; i < p->nchan; i++) {
        const tf_sw_scope *sc = &p->scope[i];
        json_t *c = json_pack("{s:s, s:s, s:f, s:f, s:i, s:f}", "name", p->lay.name[i], "unit",
                              p->lay.unit[i], "noise", sc->noise, "range", sc->range, "bits",
                              sc->bits, "skew_s", p->skew_s[p->chan[i]]);
        if (c && p->wav)
            json_object_set_new(c, "full_scale", json_real(p->lay.full_scale[i]));
        json_array_append_new(chans, c);
    }
    return json_pack("{s:s, s:s?, s:f, s:f, s:I, s:f, s:b, s:I, s:i, s:i, s:o}", "format",
                     p->wav ? "wav" : "csv", "wav_subformat",
                     p->wav ? (p->lay.pcm16 ? "PCM_16" : "FLOAT") : NULL, "sample_rate_hz",
                     1.0 / p->dt_s, "start_s", p->t0_s, "samples", (json_int_t)p->n, "dt_s",
                     p->dt_s, "noiseless", p->noiseless, "seed", (json_int_t)d->seed,
                     "time_digits", p->lay.time_digits, "value_digits", p->lay.value_digits,
                     "channels", chans);
}
