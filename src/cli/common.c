/* Shared CLI helpers: option values, import options, error and JSON printing. */
#include "common.h"

#include <math.h>
#include <stdarg.h>
#include <stddef.h>
#include <string.h>
#include <unistd.h>

int tf_cli_value(int argc, char **argv, int *i, const char *flag, const char **value)
{
    const char *a = argv[*i];
    size_t fl = strlen(flag);
    if (strncmp(a, flag, fl) != 0)
        return 0;
    if (a[fl] == '=') {
        *value = a + fl + 1;
        return 1;
    }
    if (a[fl] != '\0')
        return 0;
    if (*i + 1 >= argc) {
        fprintf(stderr, "tankfit: %s expects a value\n", flag);
        return -1;
    }
    *value = argv[++*i];
    return 1;
}

int tf_cli_import_option(int argc, char **argv, int *i, tf_import_options *o)
{
    static const struct { const char *flag; tf_opt_kind kind; } kv[] = {
        {"--scale", TF_OPT_SCALE}, {"--offset", TF_OPT_OFFSET}, {"--unit", TF_OPT_UNIT},
        {"--rename", TF_OPT_RENAME}, {"--full-scale", TF_OPT_FULL_SCALE}};
    const char *v;
    int r;
    tf_error err;
    for (size_t k = 0; k < sizeof kv / sizeof kv[0]; k++) {
        if ((r = tf_cli_value(argc, argv, i, kv[k].flag, &v)) != 0) {
            if (r < 0)
                return -1;
            if (tf_import_options_add(o, kv[k].kind, v, &err) != TF_OK) {
                fprintf(stderr, "tankfit: %s\n", err.msg);
                return -1;
            }
            return 1;
        }
    }
    if ((r = tf_cli_value(argc, argv, i, "--channels", &v)) != 0) {
        if (r < 0)
            return -1;
        if (strlen(v) >= sizeof o->channels) {
            fprintf(stderr, "tankfit: --channels: list too long\n");
            return -1;
        }
        strcpy(o->channels, v);
        return 1;
    }
    const char *rate_flags[] = {"--sample-rate", "--dt"};
    for (int k = 0; k < 2; k++) {
        if ((r = tf_cli_value(argc, argv, i, rate_flags[k], &v)) != 0) {
            double x;
            char unit[16];
            if (r < 0)
                return -1;
            if (tf_parse_quantity(v, &x, unit, sizeof unit) != 0 || !(x > 0)) {
                fprintf(stderr, "tankfit: %s: expected a positive number%s, found '%s'\n",
                        rate_flags[k], k ? " of seconds" : " of hertz", v);
                return -1;
            }
            if (k == 0)
                o->sample_rate_hz = x;
            else
                o->dt_s = x;
            return 1;
        }
    }
    if ((r = tf_cli_value(argc, argv, i, "--gaps", &v)) != 0) {
        if (r < 0)
            return -1;
        if (strcmp(v, "interpolate") == 0)
            o->gaps_interpolate = 1;
        else if (strcmp(v, "error") == 0)
            o->gaps_interpolate = 0;
        else {
            fprintf(stderr, "tankfit: --gaps: expected 'error' or 'interpolate', found '%s'\n", v);
            return -1;
        }
        return 1;
    }
    return 0;
}

int tf_cli_role_option(int argc, char **argv, int *i, tf_role_names *roles)
{
    static const struct { const char *flag; size_t off; } names[] = {
        {"--current", offsetof(tf_role_names, current)},
        {"--voltage", offsetof(tf_role_names, voltage)},
        {"--cap-voltage", offsetof(tf_role_names, cap_voltage)},
        {"--switch-voltage", offsetof(tf_role_names, switch_voltage)},
        {"--gate1", offsetof(tf_role_names, gate[0])},
        {"--gate2", offsetof(tf_role_names, gate[1])},
        {"--gate3", offsetof(tf_role_names, gate[2])},
        {"--gate4", offsetof(tf_role_names, gate[3])}};
    for (size_t k = 0; k < sizeof names / sizeof names[0]; k++) {
        const char *v;
        int r = tf_cli_value(argc, argv, i, names[k].flag, &v);
        if (r < 0)
            return -1;
        if (r > 0) {
            *(const char **)((char *)roles + names[k].off) = v;
            return 1;
        }
    }
    return 0;
}

int tf_cli_quantity(const char *cmd, const char *flag, const char *text, const char *unit,
                    double *v)
{
    char u[16];
    if (tf_parse_quantity(text, v, u, sizeof u) != 0 || !isfinite(*v) ||
        (u[0] && strcmp(u, unit) != 0))
        return tf_cli_usage(cmd, "%s: expected a number%s%s, found '%s'", flag,
                            unit[0] ? " of " : "", unit, text);
    return 0;
}

int tf_cli_design_scales(const tf_design *d, tf_import_options *io)
{
    for (size_t k = 0; k < d->nscales; k++) {
        int given = 0;
        for (size_t j = 0; j < io->nscale; j++)
            given |= strcmp(io->scale[j].name, d->scales[k].column) == 0;
        if (given)
            continue;
        char text[128];
        tf_error err;
        snprintf(text, sizeof text, "%s=%.17g", d->scales[k].column, d->scales[k].factor);
        if (tf_import_options_add(io, TF_OPT_SCALE, text, &err) != TF_OK)
            return tf_cli_fail(&err);
    }
    return 0;
}

void tf_cli_stage_options(tf_analysis_options *o, const char *topology, double capacitance,
                          double inductance, double thyristor_drop, double diode_drop,
                          int skew_set, double skew)
{
    if (topology)
        o->segment.topology = tf_topology_parse(topology);
    if (isfinite(capacitance))
        o->fit.capacitance_f = capacitance;
    if (isfinite(inductance))
        o->fit.inductance_h = inductance;
    if (isfinite(thyristor_drop))
        o->fit.thyristor_drop_v = thyristor_drop;
    if (isfinite(diode_drop))
        o->fit.diode_drop_v = diode_drop;
    if (skew_set) {
        o->fit.skew_s = skew;
        o->fit.skew_set = 1;
    }
}

void tf_cli_import_options_help(FILE *out)
{
    fputs("Capture options (every command):\n"
          "  --scale NAME=FACTOR     multiply channel NAME (e.g. a probe's A/V: i=100A/V)\n"
          "  --offset NAME=VALUE     add VALUE after scaling\n"
          "  --unit NAME=UNIT        set the channel's unit\n"
          "  --rename OLD=NEW        rename a channel\n"
          "  --channels A,B          load only these channels\n"
          "  --full-scale NAME=VALUE WAV: physical value of full scale (e.g. ch2=200A)\n"
          "  --sample-rate HZ        sample rate when the CSV has no time column;\n"
          "                          replaces a WAV's rate\n"
          "  --dt S                  sample period, the same as 1/--sample-rate\n"
          "  --gaps error|interpolate  empty or non-finite values (default error)\n",
          out);
}

int tf_cli_fail(const tf_error *err)
{
    fprintf(stderr, "tankfit: %s\n", err->msg[0] ? err->msg : tf_strerror(err->code));
    return tf_exit_code(err->code);
}

int tf_cli_usage(const char *cmd, const char *fmt, ...)
{
    va_list ap;
    fprintf(stderr, "tankfit %s: ", cmd);
    va_start(ap, fmt);
    vfprintf(stderr, fmt, ap);
    va_end(ap);
    fprintf(stderr, "\nTry 'tankfit %s --help'.\n", cmd);
    return EXIT_USAGE;
}

void tf_cli_print_warnings(const tf_capture *cap)
{
    for (size_t k = 0; k < cap->nwarn; k++)
        fprintf(stderr, "tankfit: warning: %s\n", cap->warnings[k]);
}

int tf_cli_print_json(json_t *j)
{
    if (!j)
        return EXIT_SOFTWARE;
    int r = json_dumpf(j, stdout, JSON_INDENT(2) | JSON_REAL_PRECISION(10));
    json_decref(j);
    if (r != 0 || fputc('\n', stdout) == EOF || fflush(stdout) != 0)
        return EXIT_IOERR;
    return 0;
}

void tf_cli_progress(void *ctx, double fraction)
{
    static int last = -1;
    if (!isatty(STDERR_FILENO))
        return;
    int pct = (int)(fraction * 100.0);
    if (pct == last)
        return;
    last = pct;
    fprintf(stderr, "\r%s %3d%%%s", ctx ? (const char *)ctx : "", pct, pct >= 100 ? "\n" : "");
    if (pct >= 100)
        last = -1;
}

int tf_cli_load_capture(const char *path, tf_import_options *opt, tf_capture **cap)
{
    tf_error err;
    tf_error_clear(&err);
    if (!opt->progress && isatty(STDERR_FILENO)) {
        opt->progress = tf_cli_progress;
        opt->progress_ctx = (void *)"reading";
    }
    if (tf_import_file(path, opt, cap, &err) != TF_OK)
        return tf_cli_fail(&err);
    tf_cli_print_warnings(*cap);
    return 0;
}

int tf_cli_operand(const char *cmd, const char *arg, int *files_only, const char **path)
{
    if (!*files_only && strcmp(arg, "--") == 0) {
        *files_only = 1;
        return 1;
    }
    if (!*files_only && arg[0] == '-' && arg[1] != '\0')
        return 0;
    if (*path) {
        tf_cli_usage(cmd, "expected one capture file, found a second: '%s'", arg);
        return -1;
    }
    *path = arg;
    return 1;
}
