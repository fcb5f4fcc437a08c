/* tankfit analyze: conduction intervals, turn-off time, mode, resonance, harmonics, power. */
#include "common.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>

#include <tankfit/siformat.h>

#include "analyze_parts.h"

static void help(FILE *out)
{
    fputs("Usage: tankfit analyze FILE [OPTIONS]\n"
          "Measure a capture of a series resonant inverter stage: every conduction lobe and\n"
          "its device, the turn-off time available to each thyristor against its t_q, the\n"
          "operating mode, the tank's resonance and the harmonics and power.\n\n"
          "Channel roles (else from the design's [channels], else guessed from clear names):\n"
          "  --current NAME          load current (required unless it can be found)\n"
          "  --voltage NAME          bridge output voltage across the tank\n"
          "  --cap-voltage NAME      resonant capacitor voltage\n"
          "  --switch-voltage NAME   T1 anode-cathode voltage\n"
          "  --gate1 .. --gate4 NAME gate (firing) signals\n\n"
          "Stage and analysis:\n"
          "  --design FILE           design file: topology, C, L, drops, t_q, limits, roles\n"
          "  --topology T            single, half-bridge, full-bridge or ring-down\n"
          "  --capacitance F         known tank capacitance (e.g. 2.2uF)\n"
          "  --inductance H          known tank inductance\n"
          "  --thyristor-drop V      thyristor on-state drop for the fit\n"
          "  --diode-drop V          diode forward drop for the fit\n"
          "  --skew S                voltage-to-current probe delay (else estimated)\n"
          "  --harmonics N           harmonics to show (default 10)\n"
          "  --window                Hann window instead of whole-period analysis (less exact)\n"
          "  --band K                hysteresis band in noise sigmas (default 4)\n\n"
          "Output:\n"
          "  --cycles                table of every firing cycle\n"
          "  --json                  everything as JSON on stdout\n\n",
          out);
    tf_cli_import_options_help(out);
    fputs("\nCaution: these stages run at hundreds of volts and the tank capacitor stores\n"
          "energy. Connect probes only to a de-energised, discharged stage; use differential\n"
          "or isolated probes. Results support, never replace, a qualified engineer's\n"
          "judgement.\n",
          out);
}

typedef struct args {
    const char *path, *design, *topology;
    tf_role_names roles;
    int cycles, json, window, harmonics;
    double capacitance, inductance, vt, vd, skew, band;
    int skew_set;
    tf_import_options io;
} args;

static int parse(int argc, char **argv, args *a)
{
    static const struct { const char *flag, *unit; size_t off; } nums[] = {
        {"--capacitance", "F", offsetof(args, capacitance)},
        {"--inductance", "H", offsetof(args, inductance)},
        {"--thyristor-drop", "V", offsetof(args, vt)},
        {"--diode-drop", "V", offsetof(args, vd)},
        {"--skew", "s", offsetof(args, skew)},
        {"--band", "", offsetof(args, band)}};
    int files_only = 0;
    for (int i = 1; i < argc; i++) {
        const char *v;
        int r, done = 0;
        if ((r = tf_cli_operand("analyze", argv[i], &files_only, &a->path)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            continue;
        }
        if ((r = tf_cli_import_option(argc, argv, &i, &a->io)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            continue;
        }
        if ((r = tf_cli_role_option(argc, argv, &i, &a->roles)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            done = 1;
        }
        for (size_t k = 0; k < sizeof nums / sizeof nums[0] && !done; k++)
            if ((r = tf_cli_value(argc, argv, &i, nums[k].flag, &v)) != 0) {
                if (r < 0 ||
                    tf_cli_quantity("analyze", nums[k].flag, v, nums[k].unit, (double *)((char *)a + nums[k].off)))
                    return EXIT_USAGE;
                if (strcmp(nums[k].flag, "--skew") == 0)
                    a->skew_set = 1;
                done = 1;
            }
        if (done)
            continue;
        if ((r = tf_cli_value(argc, argv, &i, "--design", &v)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            a->design = v;
        } else if ((r = tf_cli_value(argc, argv, &i, "--topology", &v)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            if (tf_topology_parse(v) == TF_TOPO_UNKNOWN)
                return tf_cli_usage("analyze", "--topology: expected single, half-bridge, "
                                    "full-bridge or ring-down, found '%s'", v);
            a->topology = v;
        } else if ((r = tf_cli_value(argc, argv, &i, "--harmonics", &v)) != 0) {
            char *end;
            long h = r < 0 ? 0 : strtol(v, &end, 10);
            if (r < 0 || *end || h < 1 || h > 1000)
                return r < 0 ? EXIT_USAGE
                             : tf_cli_usage("analyze", "--harmonics: expected a whole number "
                                            "1..1000, found '%s'", v);
            a->harmonics = (int)h;
        } else if (strcmp(argv[i], "--cycles") == 0) {
            a->cycles = 1;
        } else if (strcmp(argv[i], "--json") == 0) {
            a->json = 1;
        } else if (strcmp(argv[i], "--window") == 0) {
            a->window = 1;
        } else {
            return tf_cli_usage("analyze", "unknown option '%s'", argv[i]);
        }
    }
    if (!a->path)
        return tf_cli_usage("analyze", "expected a capture file");
    if (a->band != a->band || a->band < 0)
        return tf_cli_usage("analyze", "--band: expected a positive number");
    return 0;
}

static const char *si(char *buf, double v, const char *unit)
{
    return tf_si_format(buf, 32, v, unit, 4);
}

/* An instant on the record's time axis: the rounding left by a time column that starts
 * at 0 (1e-22 s) is printed as 0, not as yoctoseconds. */
static const char *at(char *buf, double t)
{
    return si(buf, fabs(t) < 1e-15 ? 0.0 : t, "s");
}

static void print_roles(FILE *out, const tf_capture *cap, const tf_roles *r)
{
    const int idx[] = {r->current, r->voltage, r->cap_voltage, r->switch_voltage,
                       r->gate[0], r->gate[1], r->gate[2], r->gate[3]};
    const char *const lab[] = {"current", "voltage", "capacitor voltage", "switch voltage",
                               "gate 1", "gate 2", "gate 3", "gate 4"};
    fputs("Channels:", out);
    int any = 0;
    for (int k = 0; k < 8; k++)
        if (idx[k] >= 0) {
            fprintf(out, "%s %s '%s'", any ? "," : "", lab[k], cap->ch[idx[k]].name);
            any = 1;
        }
    fputc('\n', out);
    if (r->guessed[0])
        fprintf(out, "  guessed from names: %s\n", r->guessed);
}

static void print_stat(FILE *out, const char *label, const tf_stat3 *s, const char *unit)
{
    char a[32], b[32], c[32];
    if (!s->count) {
        fprintf(out, "  %-22s n/a\n", label);
        return;
    }
    fprintf(out, "  %-22s %12s %12s %12s\n", label, si(a, s->min, unit), si(b, s->median, unit),
            si(c, s->max, unit));
}

static void print_turnoff(FILE *out, const tf_segment_result *s, const tf_design *d)
{
    char a[32], b[32], c[32];
    size_t best = (size_t)-1;
    for (size_t k = 0; k < s->ncycles; k++)
        if (isfinite(s->cycles[k].turnoff_available_s) &&
            (best == (size_t)-1 ||
             s->cycles[k].turnoff_available_s < s->cycles[best].turnoff_available_s))
            best = k;
    if (best == (size_t)-1) {
        fputs("Shortest turn-off time available: n/a (no complete thyristor-diode pair)\n", out);
        return;
    }
    const tf_cycle *cy = &s->cycles[best];
    fprintf(out, "Shortest turn-off time available: %s (%s fired at %s)\n",
            si(a, cy->turnoff_available_s, "s"), tf_device_name(cy->thyristor),
            at(b, cy->start_s));
    if (d && isfinite(d->turnoff_time_s) && d->turnoff_time_s > 0) {
        double ratio = cy->turnoff_available_s / d->turnoff_time_s;
        double need = isfinite(d->turnoff_ratio_min) ? d->turnoff_ratio_min : 1.0;
        fprintf(out, "  against t_q %s (design): ratio %.3f, required %.3f: %s\n",
                si(c, d->turnoff_time_s, "s"), ratio, need,
                ratio >= need ? "enough" : "NOT ENOUGH (risk of commutation failure)");
    } else {
        fputs("  t_q not known: give a design file with [switch] turnoff_time\n", out);
    }
    if (s->reverse_bias_unresolved)
        fprintf(out, "  switch voltage: too coarse or noisy to show T1's reverse bias in %zu "
                "cycles (give it a smaller range or more bits)\n", s->reverse_bias_unresolved);
    if (!s->reverse_bias_s.count)
        return;
    /* the switch voltage shows how long T1 really stays reverse-biased: a stray
     * inductance in the thyristor-diode loop can lift it above zero early */
    size_t rb = (size_t)-1;
    for (size_t k = 0; k < s->ncycles; k++)
        if (isfinite(s->cycles[k].reverse_bias_s) &&
            (rb == (size_t)-1 || s->cycles[k].reverse_bias_s < s->cycles[rb].reverse_bias_s))
            rb = k;
    const tf_cycle *cr = &s->cycles[rb];
    fprintf(out, "  switch voltage: %s reverse-biased for at least %s (fired at %s), %.0f %% of "
            "its turn-off time available%s\n", tf_device_name(cr->thyristor),
            si(a, cr->reverse_bias_s, "s"), at(b, cr->start_s),
            100.0 * cr->reverse_bias_s / cr->turnoff_available_s,
            cr->reverse_bias_s < 0.98 * cr->turnoff_available_s
                ? ": forward-biased before its diode stops (loop inductance)" : "");
    if (d && isfinite(d->turnoff_time_s) && d->turnoff_time_s > 0)
        fprintf(out, "  against t_q %s: ratio %.3f\n", si(c, d->turnoff_time_s, "s"),
                cr->reverse_bias_s / d->turnoff_time_s);
}

static void print_cycles(FILE *out, const tf_segment_result *s)
{
    char b[8][32];
    int rb = s->reverse_bias_s.count > 0;
    fprintf(out, "\nCycles (%zu):\n  %-6s %12s %12s %12s %12s %12s %12s %12s%s\n", s->ncycles,
            "device", "fired", "frequency", "thyristor", "diode", "turn-off", "dead", "overlap",
            rb ? "      reverse" : "");
    for (size_t k = 0; k < s->ncycles; k++) {
        const tf_cycle *c = &s->cycles[k];
        fprintf(out, "  %-6s %12s %12s %12s %12s %12s %12s %12s", tf_device_name(c->thyristor),
                at(b[0], c->start_s), si(b[1], c->frequency_hz, "Hz"),
                si(b[2], c->thyristor_s, "s"), si(b[3], c->diode_s, "s"),
                si(b[4], c->turnoff_available_s, "s"), si(b[5], c->dead_s, "s"),
                si(b[6], c->overlap_s, "s"));
        if (rb)
            fprintf(out, " %12s", si(b[7], c->reverse_bias_s, "s"));
        fputc('\n', out);
    }
}

static void print_summary(FILE *out, const tf_capture *cap, const tf_analysis *a,
                          const tf_design *d, const args *g)
{
    const tf_segment_result *s = a->seg;
    char b1[32], b2[32];
    fprintf(out, "Capture: %s (%zu samples at %s)\n", g->path, cap->n,
            si(b1, 1.0 / cap->dt_s, "Hz"));
    print_roles(out, cap, &a->roles);
    fprintf(out, "Topology: %s (%s)\n", tf_topology_name(s->topology), s->topology_evidence);
    fprintf(out, "Mode: %s (%s)\n", tf_mode_name(s->mode), s->mode_evidence);
    fprintf(out, "Noise: sigma %s, band +/-%s; %zu lobes, %zu bursts, %zu cycles\n",
            si(b1, s->noise_sigma_a, "A"), si(b2, s->band_a, "A"), s->nlobes, s->nbursts,
            s->ncycles);
    fprintf(out, "Timing:                       %12s %12s %12s\n", "min", "median", "max");
    print_stat(out, "output frequency", &s->output_frequency_hz, "Hz");
    print_stat(out, "thyristor conduction", &s->thyristor_s, "s");
    print_stat(out, "diode conduction", &s->diode_s, "s");
    print_stat(out, "turn-off available", &s->turnoff_available_s, "s");
    print_stat(out, "dead time", &s->dead_s, "s");
    print_stat(out, "overlap", &s->overlap_s, "s");
    if (s->reverse_bias_s.count)
        print_stat(out, "T1 reverse bias", &s->reverse_bias_s, "s");
    print_turnoff(out, s, d);
    if (!s->nanomalies)
        fputs("Anomalies: none\n", out);
    else
        fprintf(out, "Anomalies (%zu):\n", s->nanomalies);
    for (size_t k = 0; k < s->nanomalies && k < 20; k++)
        fprintf(out, "  %s  %-19s %s\n", at(b1, s->anomalies[k].time_s),
                s->anomalies[k].kind, s->anomalies[k].text);
    if (s->nanomalies > 20)
        fprintf(out, "  ... and %zu more (see --json)\n", s->nanomalies - 20);
    if (g->cycles)
        print_cycles(out, s);
    fputc('\n', out);
    if (a->fit)
        tf_cli_print_resonance(out, cap, a->fit);
    else
        fprintf(out, "Resonance: not available (%s)\n",
                a->fit_error.msg[0] ? a->fit_error.msg : "skipped");
    fputc('\n', out);
    if (a->spec)
        tf_cli_print_spectrum(out, cap, a->spec, g->harmonics);
    else
        fprintf(out, "Harmonics and power: not available (%s)\n",
                a->spectrum_error.msg[0] ? a->spectrum_error.msg : "skipped");
}

static int run(int argc, char **argv)
{
    args a;
    memset(&a, 0, sizeof a);
    a.capacitance = a.inductance = a.vt = a.vd = a.skew = NAN;
    a.harmonics = 10;
    tf_import_options_init(&a.io);
    int rc = parse(argc, argv, &a);
    if (rc)
        return rc;
    tf_design *d = NULL;
    tf_error err;
    tf_error_clear(&err);
    if (a.design) {
        d = malloc(sizeof *d);
        if (!d) {
            fputs("tankfit: out of memory\n", stderr);
            return EXIT_SOFTWARE;
        }
        tf_design_init(d);
        if (tf_design_load(a.design, d, &err) != TF_OK) {
            free(d);
            return tf_cli_fail(&err);
        }
        if ((rc = tf_cli_design_scales(d, &a.io)) != 0) {
            free(d);
            return rc;
        }
    }
    tf_capture *cap = NULL;
    if ((rc = tf_cli_load_capture(a.path, &a.io, &cap)) != 0) {
        free(d);
        return rc;
    }
    tf_analysis_options o;
    tf_analysis_options_init(&o, d);
    o.roles = a.roles;
    tf_cli_stage_options(&o, a.topology, a.capacitance, a.inductance, a.vt, a.vd, a.skew_set,
                         a.skew);
    if (a.band > 0)
        o.segment.band_k = a.band;
    o.spectrum.window = a.window;
    tf_analysis *an = NULL;
    if (tf_analysis_run(cap, d, &o, &an, &err) != TF_OK) {
        rc = tf_cli_fail(&err);
    } else if (a.json) {
        rc = tf_cli_print_json(tf_analysis_to_json(cap, an));
    } else {
        print_summary(stdout, cap, an, d, &a);
        rc = fflush(stdout) == 0 ? 0 : EXIT_IOERR;
    }
    tf_analysis_free(an);
    tf_capture_destroy(cap);
    free(d);
    return rc;
}

const tf_cli_command tf_cmd_analyze = {
    "analyze", "conduction intervals, turn-off time, mode, resonance, harmonics, power", run,
    help};
