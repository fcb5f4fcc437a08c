/* tankfit synth: simulate a design file and write its capture (CSV or WAV) and truth JSON. */
#include "common.h"

#include <stdlib.h>
#include <string.h>

static void help(FILE *out)
{
    fputs("Usage: tankfit synth DESIGN.ini -o OUT.csv|OUT.wav [--truth OUT.json] [--force]\n"
          "                     [--noiseless]\n"
          "\n"
          "Simulate the inverter stage described by DESIGN (exact piecewise response of the\n"
          "series L-R-C tank with its thyristors and diodes) and write what a scope would\n"
          "have captured, with the [capture] section's noise, ADC bits, vertical range\n"
          "(clipping), probe skew and printed digits.\n"
          "\n"
          "  -o, --output FILE  the capture: .csv (time column + one column per channel)\n"
          "                     or .wav (plus FILE.tfscale with names, units, full scale);\n"
          "                     another extension uses the design's [capture] format\n"
          "  --truth FILE       also write the simulator's truth as JSON: every conduction\n"
          "                     interval, turn-off time available per firing, commutation\n"
          "                     failures, alpha, w0, wd, Q, RMS, power, harmonics\n"
          "  --force            replace output files that already exist\n"
          "  --noiseless        no noise, quantisation, clipping or skew (exact values)\n"
          "\n"
          "The same design always gives the same bytes (the noise is seeded by\n"
          "[capture] seed). Files appear only when complete.\n"
          "\n"
          "Exit status: 0 done, 64 usage, 65 bad design, 66 design not found,\n"
          "73 output exists or cannot be created, 74 I/O error.\n"
          "\n"
          "Caution: simulated waveforms do not replace measurements on a real stage, which\n"
          "runs at hundreds of volts with stored energy in its capacitors.\n",
          out);
}

typedef struct args {
    const char *design, *out, *truth;
    int force, noiseless;
} args;

static int parse(int argc, char **argv, args *a)
{
    for (int i = 1; i < argc; i++) {
        const char *v;
        int r;
        if ((r = tf_cli_value(argc, argv, &i, "-o", &v)) != 0 ||
            (r = tf_cli_value(argc, argv, &i, "--output", &v)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            if (a->out)
                return tf_cli_usage("synth", "-o given twice");
            a->out = v;
        } else if ((r = tf_cli_value(argc, argv, &i, "--truth", &v)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            if (a->truth)
                return tf_cli_usage("synth", "--truth given twice");
            a->truth = v;
        } else if (strcmp(argv[i], "--force") == 0) {
            a->force = 1;
        } else if (strcmp(argv[i], "--noiseless") == 0) {
            a->noiseless = 1;
        } else if (argv[i][0] == '-' && argv[i][1] != '\0') {
            return tf_cli_usage("synth", "unknown option '%s'", argv[i]);
        } else if (!a->design) {
            a->design = argv[i];
        } else {
            return tf_cli_usage("synth", "one design file expected, found also '%s'", argv[i]);
        }
    }
    if (!a->design)
        return tf_cli_usage("synth", "missing the design file");
    if (!a->out)
        return tf_cli_usage("synth", "missing -o OUT.csv or -o OUT.wav");
    return 0;
}

static int run(int argc, char **argv)
{
    args a = {0};
    int rc = parse(argc, argv, &a);
    if (rc)
        return rc;
    tf_design *d = malloc(sizeof *d);
    if (!d) {
        fputs("tankfit: out of memory\n", stderr);
        return EXIT_SOFTWARE;
    }
    tf_error err;
    tf_error_clear(&err);
    tf_design_init(d);
    if (tf_design_load(a.design, d, &err) != TF_OK ||
        tf_design_validate(d, 1, &err) != TF_OK) {
        free(d);
        return tf_cli_fail(&err);
    }
    tf_synth_write_options o;
    tf_synth_write_options_init(&o);
    o.overwrite = a.force;
    o.noiseless = a.noiseless;
    o.progress = tf_cli_progress;
    o.progress_ctx = (void *)"synth";
    tf_status st = tf_synth_write_opts(d, a.out, a.truth, &o, &err);
    free(d);
    if (st != TF_OK)
        return tf_cli_fail(&err);
    return 0;
}

const tf_cli_command tf_cmd_synth = {"synth",
                                     "simulate a design and write a capture (CSV or WAV) and its truth",
                                     run, help};
