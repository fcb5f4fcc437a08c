/* analyze: the harmonic table of every role channel and the power block. */
#include "analyze_parts.h"

#include <math.h>
#include <string.h>

#include <tankfit/siformat.h>

#define DEFAULT_SHOW 10

/* value with an SI prefix and 4 significant digits, e.g. "1.234 kW" */
static const char *si(char *buf, size_t size, double v, const char *unit)
{
    return tf_si_format(buf, size, v, unit, 4);
}

static const char *unit_of(const tf_channel_spectrum *c)
{
    return c->unit[0] ? c->unit : "";
}

static void print_channel(FILE *out, const tf_channel_spectrum *c, int H, int nshow)
{
    char b1[32], b2[32], b3[32];
    fprintf(out, "\n%s '%s'%s%s%s: DC %s, RMS %s, crest factor %.3g\n", c->role, c->name,
            c->unit[0] ? " [" : "", c->unit, c->unit[0] ? "]" : "",
            si(b1, sizeof b1, c->dc, unit_of(c)), si(b2, sizeof b2, c->rms, unit_of(c)),
            c->crest_factor);
    if (c->clipped_samples > 0)
        fprintf(out, "  WARNING: %zu samples clipped at the vertical range: amplitudes, THD "
                     "and power from this channel are not trusted\n",
                c->clipped_samples);
    if (isfinite(c->thd))
        fprintf(out, "  THD %.3f %% of the fundamental over harmonics 2..%d\n", 100.0 * c->thd, H);
    else
        fputs("  THD: undefined (no fundamental)\n", out);
    if (c->aperiodic_rms > 1e-3 * c->rms)
        fprintf(out, "  not periodic at the fundamental: %s RMS (drift, noise or a changing "
                     "frequency)\n",
                si(b1, sizeof b1, c->aperiodic_rms, unit_of(c)));
    fprintf(out, "  %4s  %12s  %12s  %12s  %9s  %8s\n", "n", "frequency", "peak", "rms",
            "% of h1", "phase");
    const double a1 = c->nharm ? c->harm[0].amplitude : 0.0;
    for (int h = 0; h < nshow && (size_t)h < c->nharm; h++) {
        const tf_harmonic *hm = &c->harm[h];
        fprintf(out, "  %4d  %12s  %12s  %12s  %9.3f  %8.1f\n", hm->n,
                si(b1, sizeof b1, hm->frequency_hz, "Hz"),
                si(b2, sizeof b2, hm->amplitude, unit_of(c)),
                si(b3, sizeof b3, hm->rms, unit_of(c)),
                a1 > 0.0 ? 100.0 * hm->amplitude / a1 : NAN, hm->phase_deg);
    }
}

static void print_power(FILE *out, const tf_spectrum_result *s, int nshow)
{
    const tf_power *p = &s->power;
    char b[32];
    if (!p->valid) {
        fputs("\nPower: needs both a current and an output-voltage channel\n", out);
        return;
    }
    for (size_t c = 0; c < s->nch; c++)
        if (s->ch[c].clipped_samples > 0 && strcmp(s->ch[c].role, "cap_voltage") != 0)
            fprintf(out, "\nWARNING: '%s' is clipped: the power below is not trusted",
                    s->ch[c].name);
    fprintf(out, "\nPower over the same %zu periods", s->periods);
    if (p->skew_s != 0.0)
        fprintf(out, " (voltage read %s %s to correct the probe skew)",
                si(b, sizeof b, fabs(p->skew_s), "s"), p->skew_s > 0.0 ? "later" : "earlier");
    fputs("\n", out);
    fprintf(out, "  %-22s %14s\n", "mean power P", si(b, sizeof b, p->mean_w, "W"));
    fprintf(out, "  %-22s %14s\n", "V_rms", si(b, sizeof b, p->v_rms, "V"));
    fprintf(out, "  %-22s %14s\n", "I_rms", si(b, sizeof b, p->i_rms, "A"));
    fprintf(out, "  %-22s %14s\n", "apparent power S", si(b, sizeof b, p->apparent_va, "VA"));
    fprintf(out, "  %-22s %14.4f\n", "power factor P/S", p->power_factor);
    fprintf(out, "  %-22s %14.4f\n", "displacement factor", p->displacement_factor);
    fprintf(out, "  %-22s %14s\n", "energy per cycle", si(b, sizeof b, p->energy_per_cycle_j, "J"));
    if (p->cycles > 0) {
        char b2[32], b3[32];
        fprintf(out, "  %-22s %s / %s / %s (min / median / max of %zu cycles)\n",
                "energy of each cycle", si(b, sizeof b, p->cycle_energy_min_j, "J"),
                si(b2, sizeof b2, p->cycle_energy_median_j, "J"),
                si(b3, sizeof b3, p->cycle_energy_max_j, "J"), p->cycles);
    }
    fprintf(out, "  %-22s %14s\n", "power at DC", si(b, sizeof b, p->dc_w, "W"));
    fprintf(out, "  power per harmonic:");
    for (int h = 0; h < nshow && (size_t)h < p->nharm; h++)
        fprintf(out, "%s %d: %s", h ? "," : "", p->harm[h].n,
                si(b, sizeof b, p->harm[h].mean_w, "W"));
    fputs("\n", out);
}

/* nshow <= 0 shows the first DEFAULT_SHOW harmonics. */
void tf_cli_print_spectrum(FILE *out, const tf_capture *cap, const tf_spectrum_result *spec,
                           int nshow)
{
    (void)cap;
    char b[32];
    if (!spec) {
        fputs("Harmonics: not available\n", out);
        return;
    }
    if (nshow <= 0)
        nshow = DEFAULT_SHOW;
    if (nshow > spec->harmonics)
        nshow = spec->harmonics;
    fprintf(out, "Harmonics: %s over %zu whole periods of %s (fundamental from %s)\n",
            spec->window ? "Hann window with interpolated peaks (less exact)"
                         : "synchronous analysis",
            spec->periods, si(b, sizeof b, spec->fundamental_hz, "Hz"),
            strcmp(spec->fundamental_source, "option") == 0 ? "the command line"
                                                            : spec->fundamental_source);
    fprintf(out, "  resampled to %zu points per period (cubic interpolation); H = %d%s\n",
            spec->samples_per_period, spec->harmonics,
            spec->harmonics_capped ? " (capped by the Nyquist frequency)" : "");
    const char *ref = "";
    for (size_t c = 0; c < spec->nch; c++)
        if (spec->ch[c].channel == spec->reference_channel)
            ref = spec->ch[c].name;
    fprintf(out, "  phases in degrees against the fundamental of '%s' (cosine convention)\n", ref);
    for (size_t c = 0; c < spec->nch; c++)
        print_channel(out, &spec->ch[c], spec->harmonics, nshow);
    print_power(out, spec, nshow);
}
