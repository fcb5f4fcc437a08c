/* tankfit inspect: PLACEHOLDER until the command lands; reports itself unavailable. */
#include "common.h"

static void help(FILE *out)
{
    fputs("Usage: tankfit inspect ...\nreport a capture's layout, channels, noise, quantisation and clipping (not built yet)\n", out);
}

static int run(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fputs("tankfit inspect: not built yet\n", stderr);
    return EXIT_UNAVAIL;
}

const tf_cli_command tf_cmd_inspect = {"inspect", "report a capture's layout, channels, noise, quantisation and clipping", run, help};
