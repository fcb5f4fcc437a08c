/* Shared pieces of the CLI: the command table, option helpers, error printing. */
#ifndef TF_CLI_COMMON_H
#define TF_CLI_COMMON_H

#include <stdio.h>
#include <jansson.h>
#include <tankfit/tankfit.h>

/* sysexits(3) codes used by the CLI */
enum { EXIT_USAGE = 64, EXIT_DATAERR = 65, EXIT_NOINPUT = 66, EXIT_UNAVAIL = 69,
       EXIT_SOFTWARE = 70, EXIT_CANTCREAT = 73, EXIT_IOERR = 74 };

typedef struct tf_cli_command {
    const char *name;
    const char *summary;            /* one line for `tankfit --help` */
    int (*run)(int argc, char **argv); /* argv[0] is the command name */
    void (*help)(FILE *out);        /* full help for `tankfit COMMAND --help` */
} tf_cli_command;

/* One entry per command, each defined in its own cmd_<name>.c. */
extern const tf_cli_command tf_cmd_inspect, tf_cmd_synth, tf_cmd_analyze, tf_cmd_track,
    tf_cmd_check, tf_cmd_verify;

/* If argv[*i] is FLAG (as "FLAG VALUE" or "FLAG=VALUE"), set *value, advance *i past
 * it and return 1; return 0 when argv[*i] is another argument; -1 (after printing
 * a usage error) when the value is missing. */
int tf_cli_value(int argc, char **argv, int *i, const char *flag, const char **value);

/* Consume one of the channel/import options shared by every command (--scale,
 * --offset, --unit, --rename, --channels, --full-scale, --sample-rate, --dt,
 * --gaps). Returns 1 when consumed, 0 when argv[*i] is not one of them, -1 after
 * printing an error (then exit with EXIT_USAGE). */
int tf_cli_import_option(int argc, char **argv, int *i, tf_import_options *o);

/* Consume a channel-role option (--current, --voltage, --cap-voltage,
 * --switch-voltage, --gate1..--gate4 NAME) into roles. Returns 1 when consumed, 0
 * when argv[*i] is not one of them, -1 after printing an error. */
int tf_cli_role_option(int argc, char **argv, int *i, tf_role_names *roles);

/* Parse a number with an optional SI prefix and the given unit ("" for none) as the
 * value of flag. Returns 0, or prints a usage error for cmd and returns EXIT_USAGE. */
int tf_cli_quantity(const char *cmd, const char *flag, const char *text, const char *unit,
                    double *v);

/* Add the design's [channels] scale factors to io, except for columns the command
 * line already scales. Returns 0, or prints the error and returns its exit code. */
int tf_cli_design_scales(const tf_design *d, tf_import_options *io);

/* Stage values given on the command line, over what tf_analysis_options_init took
 * from the design: topology (NULL = not given), C, L, drops (NAN = not given) and the
 * probe skew (used when skew_set). */
void tf_cli_stage_options(tf_analysis_options *o, const char *topology, double capacitance,
                          double inductance, double thyristor_drop, double diode_drop,
                          int skew_set, double skew);

/* Help text for those shared options. */
void tf_cli_import_options_help(FILE *out);

/* Print "tankfit: MESSAGE" for err to stderr and return its exit code. */
int tf_cli_fail(const tf_error *err);

/* Print "tankfit CMD: MESSAGE" plus a hint to stderr and return EXIT_USAGE. */
int tf_cli_usage(const char *cmd, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

/* The one capture-file operand of inspect, analyze and track. "--" ends the options:
 * every argument after it is a file, even one that starts with '-'. Returns 1 when
 * arg was "--" or the file (stored in *path), 0 when it is an option for the caller to
 * parse, -1 (message printed) on a second file. */
int tf_cli_operand(const char *cmd, const char *arg, int *files_only, const char **path);

/* Print each capture warning as "tankfit: warning: ..." on stderr. */
void tf_cli_print_warnings(const tf_capture *cap);

/* Dump j (consumed) to stdout, indented, with a trailing newline. Returns 0 or EXIT_IOERR. */
int tf_cli_print_json(json_t *j);

/* Progress callback for long work: prints a percentage on stderr only when
 * stderr is a terminal. ctx is a const char * label. */
void tf_cli_progress(void *ctx, double fraction);

/* Import a capture with the shared options (progress on a terminal), printing
 * errors; returns 0 and sets *cap, or an exit code. */
int tf_cli_load_capture(const char *path, tf_import_options *opt, tf_capture **cap);

#endif
