/* tankfit verify: re-hash a record's inputs, re-run its analysis and say whether
 * the figures are reproduced exactly. */
#include "common.h"

#include <string.h>
#include <time.h>

#include "check_run.h"
#include "tf_version.h"

static void help(FILE *out)
{
    fputs("Usage: tankfit verify RECORD.json\n"
          "Re-hash the design file and every capture a record names, run the same analysis\n"
          "and checks again with the recorded options, and compare every figure, check and\n"
          "verdict with the record. The inputs are read from the absolute paths the record\n"
          "holds.\n\n"
          "Exit status: 0 the record is reproduced exactly, 1 something differs (each\n"
          "difference is listed), 64 usage, 65 not a tankfit record or bad data, 66 an input\n"
          "is missing.\n",
          out);
}

static int load_record(const char *path, json_t **rec)
{
    json_error_t je;
    FILE *f = fopen(path, "rb");
    if (!f) {
        fprintf(stderr, "tankfit: %s: cannot open the record\n", path);
        return EXIT_NOINPUT;
    }
    *rec = json_loadf(f, JSON_REJECT_DUPLICATES, &je);
    fclose(f);
    if (!*rec) {
        fprintf(stderr, "tankfit: %s:%d:%d: expected a JSON record, found: %s\n", path, je.line,
                je.column, je.text);
        return EXIT_DATAERR;
    }
    const char *schema = json_string_value(json_object_get(*rec, "schema"));
    json_t *ver = json_object_get(*rec, "schema_version");
    if (!schema || strcmp(schema, TF_RECORD_SCHEMA) != 0 || !json_is_integer(ver)) {
        fprintf(stderr, "tankfit: %s: expected a tankfit acceptance record (schema '%s'), "
                "found none\n", path, TF_RECORD_SCHEMA);
        return EXIT_DATAERR;
    }
    if (json_integer_value(ver) != TF_RECORD_SCHEMA_VERSION) {
        fprintf(stderr, "tankfit: %s: record schema version %lld; this tankfit reads version "
                "%d\n", path, (long long)json_integer_value(ver), TF_RECORD_SCHEMA_VERSION);
        return EXIT_DATAERR;
    }
    return 0;
}

/* Rebuild the command line of the recorded run. */
static int replay_args(const char *path, const json_t *rec, const char **argv, int max, int *argc)
{
    int n = 0;
    argv[n++] = "verify";
    const json_t *opts = json_object_get(json_object_get(rec, "options"), "argv");
    const char *design = json_string_value(json_object_get(json_object_get(rec, "design"), "path"));
    const json_t *caps = json_object_get(rec, "captures");
    if (!json_is_array(opts) || !design || !json_is_array(caps) || !json_array_size(caps)) {
        fprintf(stderr, "tankfit: %s: the record lacks options, design path or captures\n", path);
        return EXIT_DATAERR;
    }
    size_t k;
    json_t *v;
    json_array_foreach(opts, k, v) {
        if (!json_is_string(v) || n >= max - 4) {
            fprintf(stderr, "tankfit: %s: options.argv must be strings\n", path);
            return EXIT_DATAERR;
        }
        argv[n++] = json_string_value(v);
    }
    argv[n++] = "--design";
    argv[n++] = design;
    argv[n++] = "--";
    json_array_foreach(caps, k, v) {
        const char *p = json_string_value(json_object_get(v, "path"));
        if (!p || n >= max) {
            fprintf(stderr, "tankfit: %s: capture %zu has no path\n", path, k + 1);
            return EXIT_DATAERR;
        }
        argv[n++] = p;
    }
    *argc = n;
    return 0;
}

/* Hash every input the record names; a missing one is EXIT_NOINPUT. Differences
 * go to diffs. */
static int rehash(const json_t *rec, json_t *diffs)
{
    const json_t *d = json_object_get(rec, "design");
    const json_t *caps = json_object_get(rec, "captures");
    size_t n = 1 + json_array_size(caps);
    for (size_t k = 0; k < n; k++) {
        const json_t *o = k == 0 ? d : json_array_get(caps, k - 1);
        const char *path = json_string_value(json_object_get(o, "path"));
        const char *want = json_string_value(json_object_get(o, "sha256"));
        char hex[65];
        tf_error err;
        if (!path || !want) {
            fprintf(stderr, "tankfit: the record lacks a path or sha256 of %s\n",
                    k ? "a capture" : "the design");
            return EXIT_DATAERR;
        }
        if (tf_record_sha256_file(path, hex, NULL, &err) != TF_OK)
            return tf_cli_fail(&err);
        if (strcmp(hex, want) != 0) {
            char line[4400];
            snprintf(line, sizeof line, "%s %s changed: sha256 recorded %s, now %s",
                     k ? "capture" : "design", path, want, hex);
            json_array_append_new(diffs, json_string(line));
        }
    }
    return 0;
}

static int report(const char *path, json_t *diffs, const char *extra)
{
    size_t n = json_array_size(diffs) + (extra != NULL);
    printf("%s: NOT reproduced, %zu difference%s:\n", path, n, n == 1 ? "" : "s");
    size_t k;
    json_t *d;
    json_array_foreach(diffs, k, d) printf("  %s\n", json_string_value(d));
    if (extra)
        printf("  %s\n", extra);
    return fflush(stdout) == 0 ? 1 : EXIT_IOERR;
}

static int run(int argc, char **argv)
{
    if (argc != 2 || (argv[1][0] == '-' && argv[1][1]))
        return argc < 2 ? tf_cli_usage("verify", "expected a record file")
                        : argc > 2 ? tf_cli_usage("verify", "expected one record file, found "
                                                  "%d arguments", argc - 1)
                                   : tf_cli_usage("verify", "unknown option '%s'", argv[1]);
    json_t *rec = NULL;
    int rc = load_record(argv[1], &rec);
    if (rc) {
        json_decref(rec);
        return rc;
    }
    const char *av[TF_CHECK_MAX_CAPTURES + 512];
    int ac = 0;
    rc = replay_args(argv[1], rec, av, (int)(sizeof av / sizeof av[0]), &ac);
    tf_check_args a;
    tf_check_args_init(&a);
    if (!rc)
        rc = tf_check_args_parse(ac, (char **)av, &a, "verify");
    tf_check_run r;
    memset(&r, 0, sizeof r);
    json_t *changed = json_array();
    if (!rc)
        rc = rehash(rec, changed);
    if (!rc) {
        rc = tf_check_run_execute(&a, time(NULL), &r);
        /* a changed input that no longer analyses is a difference, not an error */
        if (rc && json_array_size(changed))
            rc = report(argv[1], changed, "the analysis could not be repeated on the changed "
                        "input (see the message above)");
        else if (!rc)
            rc = -1;
    }
    if (rc == -1) {
        json_t *diffs = json_array();
        size_t n = tf_record_diff(rec, r.record, diffs);
        const char *tv = json_string_value(json_object_get(json_object_get(rec, "tool"), "version"));
        if (tv && strcmp(tv, TF_VERSION_STRING) != 0)
            printf("note: recorded with tankfit %s, verified with %s\n", tv, TF_VERSION_STRING);
        if (!n) {
            printf("%s: reproduced exactly (%zu capture%s, inputs unchanged, every figure and "
                   "verdict identical; verdict %s)\n", argv[1], r.nitems, r.nitems == 1 ? "" : "s",
                   tf_verdict_name(r.overall));
            rc = 0;
        } else {
            printf("%s: NOT reproduced, %zu difference%s:\n", argv[1], n, n == 1 ? "" : "s");
            size_t k;
            json_t *d;
            json_array_foreach(diffs, k, d) printf("  %s\n", json_string_value(d));
            rc = 1;
        }
        json_decref(diffs);
        if (fflush(stdout) != 0)
            rc = EXIT_IOERR;
    }
    json_decref(changed);
    tf_check_run_free(&r);
    tf_check_args_free(&a);
    json_decref(rec);
    return rc;
}

const tf_cli_command tf_cmd_verify = {
    "verify", "re-run a check record and say whether it reproduces exactly", run, help};
