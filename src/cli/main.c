/* tankfit: command dispatcher. Each command lives in its own cmd_<name>.c. */
#include "common.h"

#include <string.h>

#include "tf_version.h"

static const tf_cli_command *const commands[] = {
    &tf_cmd_inspect, &tf_cmd_synth, &tf_cmd_analyze, &tf_cmd_track,
    &tf_cmd_check, &tf_cmd_verify, NULL};

static void help(FILE *out)
{
    fputs("Usage: tankfit COMMAND [OPTIONS] FILE...\n"
          "Measure captures of series resonant inverter stages: conduction intervals,\n"
          "turn-off time, resonance, Q, load resistance, harmonics, acceptance verdicts.\n\n"
          "Commands:\n", out);
    for (int k = 0; commands[k]; k++)
        fprintf(out, "  %-9s %s\n", commands[k]->name, commands[k]->summary);
    fputs("\n'tankfit COMMAND --help' describes a command; 'man tankfit' all of them.\n"
          "  --help      this text\n  --version   print the version\n", out);
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        help(stderr);
        return EXIT_USAGE;
    }
    if (strcmp(argv[1], "--help") == 0 || strcmp(argv[1], "-h") == 0 ||
        strcmp(argv[1], "help") == 0) {
        if (argc > 2 && strcmp(argv[1], "help") == 0) {
            for (int k = 0; commands[k]; k++)
                if (strcmp(argv[2], commands[k]->name) == 0) {
                    commands[k]->help(stdout);
                    return 0;
                }
        }
        help(stdout);
        return 0;
    }
    if (strcmp(argv[1], "--version") == 0 || strcmp(argv[1], "-V") == 0) {
        printf("tankfit %s\n", TF_VERSION_STRING);
        return 0;
    }
    for (int k = 0; commands[k]; k++) {
        if (strcmp(argv[1], commands[k]->name) != 0)
            continue;
        for (int i = 2; i < argc; i++) {
            if (strcmp(argv[i], "--") == 0)
                break;
            if (strcmp(argv[i], "--help") == 0 || strcmp(argv[i], "-h") == 0) {
                commands[k]->help(stdout);
                return 0;
            }
        }
        return commands[k]->run(argc - 1, argv + 1);
    }
    fprintf(stderr, "tankfit: unknown command '%s'\nTry 'tankfit --help'.\n", argv[1]);
    return EXIT_USAGE;
}
