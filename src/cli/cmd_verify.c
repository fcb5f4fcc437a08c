/* tankfit verify: PLACEHOLDER until the command lands; reports itself unavailable. */
#include "common.h"

static void help(FILE *out)
{
    fputs("Usage: tankfit verify ...\nre-run a record's analysis and say whether it reproduces (not built yet)\n", out);
}

static int run(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fputs("tankfit verify: not built yet\n", stderr);
    return EXIT_UNAVAIL;
}

const tf_cli_command tf_cmd_verify = {"verify", "re-run a record's analysis and say whether it reproduces", run, help};
