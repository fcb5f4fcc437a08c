/* The run shared by `tankfit check` and `tankfit verify`: options, analysis of
 * every capture, checks, design-expected values and the record JSON. */
#ifndef TF_CLI_CHECK_RUN_H
#define TF_CLI_CHECK_RUN_H

#include <jansson.h>
#include <tankfit/tankfit.h>
#include <tankfit/check.h>
#include <tankfit/record.h>

#define TF_CHECK_MAX_CAPTURES 64

typedef struct tf_check_args {
    const char *design;
    const char *captures[TF_CHECK_MAX_CAPTURES];
    size_t ncaptures;
    const char *out_dir, *serial, *operator_name, *test_id, *notes;
    const char *topology;
    tf_role_names roles;
    double capacitance, inductance, vt, vd, skew, band;
    int skew_set, window, no_expected;
    tf_import_options io;
    json_t *argv;           /* the analysis options as given (recorded, replayed by verify) */
} tf_check_args;

/* One analysed and checked capture. */
typedef struct tf_check_item {
    const char *path;       /* as given */
    char abspath[4096];
    char sha256[65];
    unsigned long long bytes;
    tf_capture *cap;
    tf_analysis *an;
    tf_check_result *res;
} tf_check_item;

typedef struct tf_check_run {
    tf_design *design;
    char design_abs[4096];
    char design_sha256[65];
    tf_check_item items[TF_CHECK_MAX_CAPTURES];
    size_t nitems;
    tf_capture *exp_cap;    /* design-expected simulation (NULL when not possible) */
    tf_analysis *exp_an;
    char exp_note[TF_ERROR_MSG_SIZE];
    tf_verdict overall;
    json_t *record;         /* the record (time_utc and names filled) */
    char time_iso[32], time_compact[32];
    const char *serial, *operator_name, *test_id, *notes;
} tf_check_run;

/* Defaults (NAN numbers, out dir "tankfit-records"). */
void tf_check_args_init(tf_check_args *a);
void tf_check_args_free(tf_check_args *a);

/* Parse `check` arguments (argv[0] is the command name); cmd names the command in
 * messages. Returns 0 or an exit code after printing the error. */
int tf_check_args_parse(int argc, char **argv, tf_check_args *a, const char *cmd);

/* Load, analyse, check and build the record. Returns 0 or an exit code after
 * printing the error. r must be zeroed; release with tf_check_run_free. */
int tf_check_run_execute(const tf_check_args *a, time_t when, tf_check_run *r);
void tf_check_run_free(tf_check_run *r);

/* The verdict table of a run on out. */
void tf_check_run_print(FILE *out, const tf_check_run *r);

#endif
