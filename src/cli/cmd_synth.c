/* tankfit synth: PLACEHOLDER until the command lands; reports itself unavailable. */
#include "common.h"

static void help(FILE *out)
{
    fputs("Usage: tankfit synth ...\nsimulate a design and write a capture (CSV or WAV) and its truth (not built yet)\n", out);
}

static int run(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fputs("tankfit synth: not built yet\n", stderr);
    return EXIT_UNAVAIL;
}

const tf_cli_command tf_cmd_synth = {"synth", "simulate a design and write a capture (CSV or WAV) and its truth", run, help};
