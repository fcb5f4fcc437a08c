/* tankfit track: R_eff, L_eff or C, fd, Q and peak current burst by burst, changes, CSV/SVG. */
#include "common.h"

#include <errno.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <tankfit/siformat.h>
#include <tankfit/track.h>

static void help(FILE *out)
{
    fputs("Usage: tankfit track FILE [OPTIONS]\n"
          "Follow the tank burst by burst through a long capture (a heating cycle): time,\n"
          "effective resistance R_eff, L_eff (C known) or C (L known), damped frequency fd,\n"
          "Q and peak current of every burst, and the abrupt changes in R_eff and fd (a\n"
          "steel workpiece passing its magnetic transition), found by PELT change-point\n"
          "detection (Killick, Fearnhead and Eckley 2012).\n\n"
          "Stage:\n"
          "  --design FILE           design: topology, C, L, drops, coil_resistance, roles\n"
          "  --capacitance F         known tank capacitance (e.g. 10uF)\n"
          "  --inductance H          known tank inductance (when C is not known)\n"
          "  --thyristor-drop V      thyristor on-state drop (drop-corrected fit)\n"
          "  --diode-drop V          diode forward drop\n"
          "  --topology T            single, half-bridge, full-bridge or ring-down\n"
          "  --current NAME          load current channel\n"
          "  --voltage NAME          bridge output voltage (v-i R when C and L are unknown)\n"
          "  --cap-voltage, --switch-voltage, --gate1..--gate4 NAME  other roles, as analyze\n"
          "  --skew S                voltage-to-current probe delay (else estimated)\n"
          "  --baseline EMPTY        capture of the coil without workpiece: R_coil, so that\n"
          "                          R_w = R_eff - R_coil and efficiency R_w / R_eff\n"
          "                          (else the design's coil_resistance)\n"
          "  --penalty P             change-point penalty in noise variances\n"
          "                          (default 5 ln n, Schwarz criterion)\n\n"
          "Output (files are written whole and never replace an existing file):\n"
          "  --csv OUT               one row per burst\n"
          "  --svg OUT               plot of R_eff and fd against time, changes marked\n"
          "  --json                  rows and changes as JSON on stdout\n\n",
          out);
    tf_cli_import_options_help(out);
    fputs("\nCaution: induction-heating stages run at hundreds of volts and the tank\n"
          "capacitor stores energy. Connect probes only to a de-energised, discharged\n"
          "stage; use differential or isolated probes. Results support, never replace, a\n"
          "qualified engineer's judgement.\n",
          out);
}

typedef struct targs {
    const char *path, *design, *baseline, *csv, *svg, *topology;
    tf_role_names roles;
    int json;
    double capacitance, inductance, vt, vd, skew, penalty;
    int skew_set;
    tf_import_options io;
} targs;

static int parse(int argc, char **argv, targs *a)
{
    static const struct { const char *flag, *unit; size_t off; } nums[] = {
        {"--capacitance", "F", offsetof(targs, capacitance)},
        {"--inductance", "H", offsetof(targs, inductance)},
        {"--thyristor-drop", "V", offsetof(targs, vt)},
        {"--diode-drop", "V", offsetof(targs, vd)},
        {"--skew", "s", offsetof(targs, skew)},
        {"--penalty", "", offsetof(targs, penalty)}};
    static const struct { const char *flag; size_t off; } strs[] = {
        {"--design", offsetof(targs, design)},   {"--baseline", offsetof(targs, baseline)},
        {"--csv", offsetof(targs, csv)},         {"--svg", offsetof(targs, svg)},
        {"--topology", offsetof(targs, topology)}};
    int files_only = 0;
    for (int i = 1; i < argc; i++) {
        const char *v;
        int r, done = 0;
        if ((r = tf_cli_operand("track", argv[i], &files_only, &a->path)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            continue;
        }
        if (strcmp(argv[i], "--json") == 0) {
            a->json = 1;
            continue;
        }
        for (size_t k = 0; !done && k < sizeof nums / sizeof nums[0]; k++)
            if ((r = tf_cli_value(argc, argv, &i, nums[k].flag, &v)) != 0) {
                if (r < 0)
                    return EXIT_USAGE;
                double *dst = (double *)((char *)a + nums[k].off);
                if (tf_cli_quantity("track", nums[k].flag, v, nums[k].unit, dst))
                    return EXIT_USAGE;
                if (nums[k].off == offsetof(targs, skew))
                    a->skew_set = 1;
                done = 1;
            }
        for (size_t k = 0; !done && k < sizeof strs / sizeof strs[0]; k++)
            if ((r = tf_cli_value(argc, argv, &i, strs[k].flag, &v)) != 0) {
                if (r < 0)
                    return EXIT_USAGE;
                *(const char **)((char *)a + strs[k].off) = v;
                done = 1;
            }
        if (!done && (r = tf_cli_role_option(argc, argv, &i, &a->roles)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            done = 1;
        }
        if (done)
            continue;
        if ((r = tf_cli_import_option(argc, argv, &i, &a->io)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            continue;
        }
        return tf_cli_usage("track", "unknown option '%s'", argv[i]);
    }
    if (!a->path)
        return tf_cli_usage("track", "expected a capture file");
    if (a->topology && tf_topology_parse(a->topology) == TF_TOPO_UNKNOWN)
        return tf_cli_usage("track", "--topology: expected single, half-bridge, full-bridge or ring-down, found '%s'",
                            a->topology);
    if (a->penalty < 0)
        return tf_cli_usage("track", "--penalty: expected a number >= 0");
    return 0;
}

/* ---- atomic output: temporary file in the same directory, fsync, link (never replaces) */

typedef int (*writer_fn)(FILE *f, const void *ctx);

static int write_new_file(const char *path, writer_fn fn, const void *ctx)
{
    if (access(path, F_OK) == 0) {
        fprintf(stderr, "tankfit track: %s exists; not replacing it (choose another name)\n", path);
        return EXIT_CANTCREAT;
    }
    size_t len = strlen(path);
    char *tmp = malloc(len + 16);
    if (!tmp)
        return EXIT_SOFTWARE;
    snprintf(tmp, len + 16, "%s.tmpXXXXXX", path);
    int fd = mkstemp(tmp);
    if (fd < 0) {
        fprintf(stderr, "tankfit track: cannot create %s: %s\n", path, strerror(errno));
        free(tmp);
        return EXIT_CANTCREAT;
    }
    FILE *f = fdopen(fd, "w");
    int rc = 0;
    if (!f) {
        close(fd);
        rc = EXIT_IOERR;
    } else {
        if (fn(f, ctx) != 0 || fflush(f) != 0 || fsync(fileno(f)) != 0)
            rc = EXIT_IOERR;
        if (fclose(f) != 0)
            rc = EXIT_IOERR;
    }
    if (rc == 0 && link(tmp, path) != 0) {
        rc = errno == EEXIST ? EXIT_CANTCREAT : EXIT_IOERR;
        fprintf(stderr, "tankfit track: cannot create %s: %s\n", path, strerror(errno));
    } else if (rc)
        fprintf(stderr, "tankfit track: error writing %s\n", path);
    unlink(tmp);
    free(tmp);
    return rc;
}

static void csv_num(FILE *f, double v)
{
    if (isfinite(v))
        fprintf(f, ",%.10g", v);
    else
        fputs(",", f);
}

static int write_csv(FILE *f, const void *ctx)
{
    const tf_track_result *t = ctx;
    fputs("burst,time_s,status,used,r_eff_ohm,u_r_eff_ohm,l_eff_h,c_f,fd_hz,q,peak_a,r_w_ohm,efficiency\n", f);
    for (size_t k = 0; k < t->nrows; k++) {
        const tf_track_row *w = &t->rows[k];
        fprintf(f, "%zu,%.10g,%s,%d", w->burst, w->time_s, tf_fitb_status_name(w->status), w->ok);
        csv_num(f, w->r_eff_ohm);
        csv_num(f, w->u_r_eff_ohm);
        csv_num(f, w->l_eff_h);
        csv_num(f, w->c_f);
        csv_num(f, w->fd_hz);
        csv_num(f, w->q);
        csv_num(f, w->peak_a);
        csv_num(f, w->r_w_ohm);
        csv_num(f, w->efficiency);
        fputc('\n', f);
    }
    return ferror(f) ? -1 : 0;
}

/* ---- a small SVG plot: R_eff (top) and fd (bottom) against time ---------------------- */

enum { SVG_W = 820, SVG_H = 520, PL = 90, PR = 20, PT = 40, PH = 190, GAP = 60 };

static void svg_panel(FILE *f, const tf_track_result *t, int top, int which, double t0, double t1)
{
    double lo = INFINITY, hi = -INFINITY;
    for (size_t k = 0; k < t->nrows; k++) {
        if (!t->rows[k].ok)
            continue;
        double v = which ? t->rows[k].fd_hz : t->rows[k].r_eff_ohm;
        lo = fmin(lo, v);
        hi = fmax(hi, v);
    }
    if (!(hi > lo)) {
        double m = isfinite(lo) ? fabs(lo) * 1e-3 + 1e-12 : 1;
        lo -= m;
        hi += m;
    }
    const double pad = 0.05 * (hi - lo);
    lo -= pad;
    hi += pad;
    const int w = SVG_W - PL - PR;
    const char *unit = which ? "Hz" : "Ohm";
    char b[48];
    fprintf(f, "<rect x='%d' y='%d' width='%d' height='%d' fill='none' stroke='#444'/>\n", PL, top, w, PH);
    for (int k = 0; k <= 4; k++) {
        double v = lo + (hi - lo) * k / 4.0;
        int y = top + PH - (int)lround(PH * k / 4.0);
        fprintf(f, "<line x1='%d' y1='%d' x2='%d' y2='%d' stroke='#ddd'/>\n", PL, y, PL + w, y);
        fprintf(f, "<text x='%d' y='%d' text-anchor='end' font-size='11'>%s</text>\n", PL - 6, y + 4,
                tf_si_format(b, sizeof b, v, unit, 4));
        double tv = t0 + (t1 - t0) * k / 4.0;
        int x = PL + (int)lround(w * k / 4.0);
        fprintf(f, "<text x='%d' y='%d' text-anchor='middle' font-size='11'>%s</text>\n", x,
                top + PH + 15, tf_si_format(b, sizeof b, tv, "s", 3));
    }
    fprintf(f, "<text x='%d' y='%d' font-size='13'>%s</text>\n", PL, top - 8,
            which ? "damped frequency fd" : "effective resistance R_eff");
    fputs("<polyline fill='none' stroke='#1f3a93' stroke-width='1.2' points='", f);
    for (size_t k = 0; k < t->nrows; k++) {
        if (!t->rows[k].ok)
            continue;
        double v = which ? t->rows[k].fd_hz : t->rows[k].r_eff_ohm;
        double x = PL + w * (t->rows[k].time_s - t0) / (t1 - t0);
        double y = top + PH - PH * (v - lo) / (hi - lo);
        fprintf(f, "%.1f,%.1f ", x, y);
    }
    fputs("'/>\n", f);
    for (size_t c = 0; c < t->nchanges; c++) {
        double x = PL + w * (t->changes[c].time_s - t0) / (t1 - t0);
        fprintf(f, "<line x1='%.1f' y1='%d' x2='%.1f' y2='%d' stroke='#b03a2e' stroke-dasharray='5,4'/>\n",
                x, top, x, top + PH);
    }
}

static int write_svg(FILE *f, const void *ctx)
{
    const tf_track_result *t = ctx;
    double t0 = INFINITY, t1 = -INFINITY;
    for (size_t k = 0; k < t->nrows; k++)
        if (t->rows[k].ok) {
            t0 = fmin(t0, t->rows[k].time_s);
            t1 = fmax(t1, t->rows[k].time_s);
        }
    if (!(t1 > t0))
        t1 = t0 + 1e-6;
    fprintf(f, "<?xml version='1.0' encoding='UTF-8'?>\n"
               "<svg xmlns='http://www.w3.org/2000/svg' width='%d' height='%d' viewBox='0 0 %d %d' "
               "font-family='sans-serif'>\n<rect width='100%%' height='100%%' fill='white'/>\n",
            SVG_W, SVG_H, SVG_W, SVG_H);
    fprintf(f, "<text x='%d' y='20' font-size='14'>tankfit track: %zu bursts, %zu change%s (dashed)</text>\n",
            PL, t->rows_ok, t->nchanges, t->nchanges == 1 ? "" : "s");
    svg_panel(f, t, PT, 0, t0, t1);
    svg_panel(f, t, PT + PH + GAP, 1, t0, t1);
    fprintf(f, "<text x='%d' y='%d' text-anchor='middle' font-size='12'>time</text>\n</svg>\n",
            PL + (SVG_W - PL - PR) / 2, SVG_H - 8);
    return ferror(f) ? -1 : 0;
}

/* ---- running the analysis ---------------------------------------------------------- */

static void set_options(const targs *a, const tf_design *d, tf_analysis_options *o)
{
    tf_analysis_options_init(o, d);
    o->roles = a->roles;
    o->skip_spectrum = 1;
    tf_cli_stage_options(o, a->topology, a->capacitance, a->inductance, a->vt, a->vd,
                         a->skew_set, a->skew);
    o->fit.skip_lobes = 1;
}

/* Capture -> analysis with a fit; prints errors and returns an exit code. */
static int analyse(const char *path, const targs *a, const tf_design *d, tf_capture **cap,
                   tf_analysis **an)
{
    tf_import_options io = a->io;
    int rc = tf_cli_load_capture(path, &io, cap);
    if (rc)
        return rc;
    tf_analysis_options o;
    set_options(a, d, &o);
    tf_error err;
    tf_error_clear(&err);
    if (tf_analysis_run(*cap, d, &o, an, &err) != TF_OK)
        return tf_cli_fail(&err);
    if (!(*an)->fit) {
        fprintf(stderr, "tankfit track: %s: %s\n", path,
                (*an)->fit_error.msg[0] ? (*an)->fit_error.msg : "the fit did not run");
        return (*an)->fit_error.code ? tf_exit_code((*an)->fit_error.code) : EXIT_DATAERR;
    }
    return 0;
}

static void print_summary(FILE *out, const tf_track_result *t, const char *coil_src,
                          const targs *a)
{
    char b1[48], b2[48], b3[48], b4[48], b5[48], b6[48], b7[48];
    double rlo = INFINITY, rhi = -INFINITY, flo = INFINITY, fhi = -INFINITY;
    for (size_t k = 0; k < t->nrows; k++)
        if (t->rows[k].ok) {
            rlo = fmin(rlo, t->rows[k].r_eff_ohm);
            rhi = fmax(rhi, t->rows[k].r_eff_ohm);
            flo = fmin(flo, t->rows[k].fd_hz);
            fhi = fmax(fhi, t->rows[k].fd_hz);
        }
    fprintf(out, "Track: %zu bursts, %zu used; R_eff from %s\n", t->nrows, t->rows_ok, t->r_source);
    fprintf(out, "  R_eff  %s .. %s (burst-to-burst noise %s)\n", tf_si_format(b1, 48, rlo, "Ohm", 4),
            tf_si_format(b2, 48, rhi, "Ohm", 4), tf_si_format(b3, 48, t->sigma_r_ohm, "Ohm", 2));
    fprintf(out, "  fd     %s .. %s (burst-to-burst noise %s)\n", tf_si_format(b1, 48, flo, "Hz", 6),
            tf_si_format(b2, 48, fhi, "Hz", 6), tf_si_format(b3, 48, t->sigma_fd_hz, "Hz", 2));
    if (isfinite(t->r_coil_ohm))
        fprintf(out, "  R_coil %s (%s): R_w = R_eff - R_coil and efficiency R_w / R_eff per burst\n",
                tf_si_format(b1, 48, t->r_coil_ohm, "Ohm", 4), coil_src);
    fprintf(out, "Changes (PELT, piecewise-linear cost, penalty %.3g noise variances): %zu\n",
            t->penalty, t->nchanges);
    for (size_t c = 0; c < t->nchanges; c++) {
        const tf_track_change *ch = &t->changes[c];
        char dur[64] = "";
        if (ch->duration_s > 0) {
            char bd[48];
            snprintf(dur, sizeof dur, " over %s", tf_si_format(bd, 48, ch->duration_s, "s", 3));
        }
        fprintf(out, "  %s at %s%s (burst %zu): R_eff %s -> %s (%s), fd %s -> %s (%s)\n",
                ch->step ? "step " : "trend", tf_si_format(b1, 48, ch->time_s, "s", 5), dur,
                t->rows[ch->index].burst, tf_si_format(b2, 48, ch->r_before_ohm, "Ohm", 4),
                tf_si_format(b3, 48, ch->r_after_ohm, "Ohm", 4),
                tf_si_format(b4, 48, ch->r_step_ohm, "Ohm", 3),
                tf_si_format(b5, 48, ch->fd_before_hz, "Hz", 6),
                tf_si_format(b6, 48, ch->fd_after_hz, "Hz", 6),
                tf_si_format(b7, 48, ch->fd_step_hz, "Hz", 3));
    }
    if (a->csv)
        fprintf(out, "Wrote %s\n", a->csv);
    if (a->svg)
        fprintf(out, "Wrote %s\n", a->svg);
    if (!a->csv && !a->json)
        fputs("(per-burst rows: --csv OUT or --json)\n", out);
}

static int run(int argc, char **argv)
{
    targs a;
    memset(&a, 0, sizeof a);
    a.capacitance = a.inductance = a.vt = a.vd = a.skew = NAN;
    tf_import_options_init(&a.io);
    int rc = parse(argc, argv, &a);
    if (rc)
        return rc;
    /* refuse before the (long) analysis when an output exists */
    const char *outs[2] = {a.csv, a.svg};
    for (int k = 0; k < 2; k++)
        if (outs[k] && access(outs[k], F_OK) == 0) {
            fprintf(stderr, "tankfit track: %s exists; not replacing it (choose another name)\n", outs[k]);
            return EXIT_CANTCREAT;
        }
    if (a.csv && a.svg && strcmp(a.csv, a.svg) == 0)
        return tf_cli_usage("track", "--csv and --svg name the same file '%s'", a.csv);
    tf_design *d = NULL;
    tf_error err;
    tf_error_clear(&err);
    if (a.design) {
        if (!(d = malloc(sizeof *d))) {
            fputs("tankfit: out of memory\n", stderr);
            return EXIT_SOFTWARE;
        }
        tf_design_init(d);
        if (tf_design_load(a.design, d, &err) != TF_OK) {
            free(d);
            return tf_cli_fail(&err);
        }
        int rc = tf_cli_design_scales(d, &a.io);
        if (rc != 0) {
            free(d);
            return rc;
        }
    }
    double r_coil = NAN;
    char coil_src[4200] = "";
    if (a.baseline) {
        tf_capture *bc = NULL;
        tf_analysis *ba = NULL;
        rc = analyse(a.baseline, &a, d, &bc, &ba);
        if (!rc) {
            r_coil = ba->fit->resistance_ohm.value;
            snprintf(coil_src, sizeof coil_src, "baseline %s, %s", a.baseline,
                     ba->fit->resistance_ohm.method);
            if (!isfinite(r_coil)) {
                fprintf(stderr, "tankfit track: %s: no resistance from the baseline (give the capacitance or a voltage channel)\n",
                        a.baseline);
                rc = EXIT_DATAERR;
            }
        }
        tf_analysis_free(ba);
        tf_capture_destroy(bc);
        if (rc) {
            free(d);
            return rc;
        }
    } else if (d && isfinite(d->coil_resistance_ohm)) {
        r_coil = d->coil_resistance_ohm;
        snprintf(coil_src, sizeof coil_src, "design coil_resistance");
    }
    tf_capture *cap = NULL;
    tf_analysis *an = NULL;
    tf_track_result *t = NULL;
    rc = analyse(a.path, &a, d, &cap, &an);
    if (!rc && tf_track_build(an->fit, r_coil, a.penalty, &t, &err) != TF_OK)
        rc = tf_cli_fail(&err);
    if (!rc && a.csv)
        rc = write_new_file(a.csv, write_csv, t);
    if (!rc && a.svg)
        rc = write_new_file(a.svg, write_svg, t);
    if (!rc) {
        if (a.json) {
            json_t *j = tf_track_to_json(t);
            json_object_set_new(j, "resonance", tf_fit_to_json(an->fit));
            rc = tf_cli_print_json(j);
        } else {
            print_summary(stdout, t, coil_src, &a);
            rc = fflush(stdout) == 0 ? 0 : EXIT_IOERR;
        }
    }
    tf_track_free(t);
    tf_analysis_free(an);
    tf_capture_destroy(cap);
    free(d);
    return rc;
}

const tf_cli_command tf_cmd_track = {"track", "follow R, L and fd burst by burst through a heating run", run, help};
