/* tankfit check: PLACEHOLDER until the command lands; reports itself unavailable. */
#include "common.h"

static void help(FILE *out)
{
    fputs("Usage: tankfit check ...\nacceptance check against a design: verdicts, record and report (not built yet)\n", out);
}

static int run(int argc, char **argv)
{
    (void)argc;
    (void)argv;
    fputs("tankfit check: not built yet\n", stderr);
    return EXIT_UNAVAIL;
}

const tf_cli_command tf_cmd_check = {"check", "acceptance check against a design: verdicts, record and report", run, help};
