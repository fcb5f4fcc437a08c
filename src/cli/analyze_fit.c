/* analyze: resonance section (fd, alpha, Q, R, L, C with uncertainties, methods' agreement). */
#include "analyze_parts.h"

#include <math.h>
#include <string.h>

#include <tankfit/siformat.h>

static const char *si(char *buf, size_t size, double v, const char *unit, int digits)
{
    if (!isfinite(v)) {
        snprintf(buf, size, "-");
        return buf;
    }
    return tf_si_format(buf, size, v, unit, digits);
}

static void row(FILE *out, const char *label, const tf_estimate *e, const char *unit)
{
    char v[48], u[48];
    if (!isfinite(e->value)) {
        fprintf(out, "  %-22s -\n", label);
        return;
    }
    si(v, sizeof v, e->value, unit, 6);
    if (isfinite(e->u) && e->u > 0)
        fprintf(out, "  %-22s %-16s +- %-12s %s\n", label, v, si(u, sizeof u, e->u, unit, 2),
                e->method);
    else
        fprintf(out, "  %-22s %-16s    %-12s %s\n", label, v, "", e->method);
}

static void method_row(FILE *out, const char *name, const tf_estimate *r, const tf_estimate *l,
                       const tf_estimate *c)
{
    char a[48], b[48], d[48];
    fprintf(out, "  %-10s %-14s %-14s %-14s\n", name, si(a, sizeof a, r->value, "Ohm", 5),
            l ? si(b, sizeof b, l->value, "H", 5) : "-", c ? si(d, sizeof d, c->value, "F", 5) : "-");
}

void tf_cli_print_resonance(FILE *out, const tf_capture *cap, const tf_fit_result *fit)
{
    (void)cap;
    char a[48], b[48];
    if (!fit) {
        fputs("Resonance: not available\n", out);
        return;
    }
    fprintf(out, "Resonance (%zu bursts fitted, %zu excluded: %zu clipped, %zu anomalous, "
                 "%zu fragments, %zu failed):\n",
            fit->bursts_fitted, fit->bursts_excluded, fit->bursts_clipped, fit->bursts_anomalous,
            fit->bursts_short, fit->bursts_failed - fit->bursts_short);
    row(out, "damped frequency fd", &fit->damped_frequency_hz, "Hz");
    row(out, "decay alpha", &fit->decay_per_s, "1/s");
    if (fit->drops_modelled)
        row(out, "decay, plain fit", &fit->decay_raw_per_s, "1/s");
    row(out, "undamped frequency f0", &fit->undamped_frequency_hz, "Hz");
    row(out, "Q", &fit->q, "");
    row(out, "log decrement", &fit->log_decrement, "");
    row(out, "inductance L", &fit->inductance_h, "H");
    row(out, "capacitance C", &fit->capacitance_f, "F");
    row(out, "resistance R", &fit->resistance_ohm, "Ohm");
    if (fit->drops_modelled)
        row(out, "resistance, plain fit", &fit->resistance_raw_ohm, "Ohm");
    if (fit->drops_modelled)
        fprintf(out, "  device drops modelled: %s per commutation\n",
                si(a, sizeof a, fit->drop_step_v, "V", 3));
    fputs("Methods:\n", out);
    fprintf(out, "  %-10s %-14s %-14s %-14s\n", "", "R", "L", "C");
    method_row(out, "ring-down", &fit->ringdown_r, &fit->ringdown_l, &fit->ringdown_c);
    method_row(out, "v-i", &fit->vi_r, &fit->vi_l, &fit->vi_c);
    method_row(out, "power", &fit->power_r, NULL, NULL);
    if (isfinite(fit->skew_s))
        fprintf(out, "  probe skew (voltage after current): %s +- %s (%s)\n",
                si(a, sizeof a, fit->skew_s, "s", 4), si(b, sizeof b, fit->skew_u_s, "s", 2),
                fit->skew_method);
    if (fit->lobes.thyristor_fd_hz.count || fit->lobes.diode_fd_hz.count)
        fprintf(out, "  lobes alone: thyristor fd %s, alpha %s; diode fd %s, alpha %s\n",
                si(a, sizeof a, fit->lobes.thyristor_fd_hz.median, "Hz", 5),
                si(b, sizeof b, fit->lobes.thyristor_alpha_per_s.median, "1/s", 4),
                si((char[48]){0}, 48, fit->lobes.diode_fd_hz.median, "Hz", 5),
                si((char[48]){0}, 48, fit->lobes.diode_alpha_per_s.median, "1/s", 4));
    if (!fit->nwarnings && (isfinite(fit->vi_r.value) || isfinite(fit->power_r.value)) &&
        isfinite(fit->ringdown_r.value))
        fputs("  the methods agree within their uncertainties\n", out);
    for (size_t k = 0; k < fit->nwarnings; k++)
        fprintf(out, "  warning: %s\n", fit->warnings[k]);
    for (size_t k = 0; k < fit->nnotes; k++)
        fprintf(out, "  note: %s\n", fit->notes[k]);
}
