/* tankfit track: PLACEHOLDER until the command lands; reports itself unavailable. */
#include "common.h"

static void help(FILE *out)
{
    fputs("Usage: tankfit track ...\nfollow R, L and fd burst by burst through a heating run (not built yet)\n", out);
}

static int run(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fputs("tankfit track: not built yet\n", stderr);
    return EXIT_UNAVAIL;
}

const tf_cli_command tf_cmd_track = {"track", "follow R, L and fd burst by burst through a heating run", run, help};
