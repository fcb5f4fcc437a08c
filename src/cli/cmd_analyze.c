/* tankfit analyze: PLACEHOLDER until the command lands; reports itself unavailable. */
#include "common.h"

static void help(FILE *out)
{
    fputs("Usage: tankfit analyze ...\nconduction intervals, turn-off time, mode, resonance, harmonics, power (not built yet)\n", out);
}

static int run(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fputs("tankfit analyze: not built yet\n", stderr);
    return EXIT_UNAVAIL;
}

const tf_cli_command tf_cmd_analyze = {"analyze", "conduction intervals, turn-off time, mode, resonance, harmonics, power", run, help};
