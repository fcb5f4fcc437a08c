/* tankfit check: analyse captures against a design, print verdicts, write a record
 * and a report. */
#include "common.h"

#include <errno.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>

#include <tankfit/report.h>

#include "check_run.h"
#include "tf_version.h"

static void help(FILE *out)
{
    fputs("Usage: tankfit check CAPTURE... --design DESIGN.ini [OPTIONS]\n"
          "Acceptance test: analyse every capture, judge it against the design's limits,\n"
          "print a verdict table, and write one JSON record and one HTML report per run.\n\n"
          "Run:\n"
          "  --design FILE           design file with [limits] (required)\n"
          "  --out DIR               where the record and report go (default ./tankfit-records;\n"
          "                          created when missing; files are never replaced)\n"
          "  --serial S              unit serial (else the design's [record] unit_serial)\n"
          "  --operator NAME         who ran the test (else [record] operator)\n"
          "  --test-id ID            test id (else [record] test_id)\n"
          "  --notes TEXT            notes (else [record] notes)\n"
          "  --no-expected           do not simulate the design for expected values\n\n"
          "Channel roles and analysis (as for 'tankfit analyze'):\n"
          "  --current, --voltage, --cap-voltage, --switch-voltage, --gate1..--gate4 NAME\n"
          "  --topology T  --capacitance F  --inductance H  --thyristor-drop V\n"
          "  --diode-drop V  --skew S  --band K  --window\n\n",
          out);
    tf_cli_import_options_help(out);
    fputs("\nExit status: 0 every check passed, 1 a check failed, 2 a check could not be\n"
          "evaluated and nothing failed; 64 usage, 65 bad data, 66 missing input,\n"
          "73 cannot create the record, 74 I/O error. 'tankfit verify RECORD' re-checks a\n"
          "record later.\n\n"
          "Caution: these stages run at hundreds of volts and the tank capacitor stores\n"
          "energy. Connect probes only to a de-energised, discharged stage; use differential\n"
          "or isolated probes; follow local codes. Verdicts support, never replace, a\n"
          "qualified engineer's judgement.\n",
          out);
}

static int ensure_dir(const char *dir)
{
    struct stat sb;
    if (stat(dir, &sb) == 0) {
        if (S_ISDIR(sb.st_mode))
            return 0;
        fprintf(stderr, "tankfit: %s exists and is not a directory\n", dir);
        return EXIT_CANTCREAT;
    }
    if (mkdir(dir, 0777) != 0) {
        fprintf(stderr, "tankfit: cannot create the directory %s: %s\n", dir, strerror(errno));
        return EXIT_CANTCREAT;
    }
    return 0;
}

static int write_outputs(const tf_check_args *a, tf_check_run *r, char *rec_path, size_t size,
                         char *rep_path, size_t rep_size)
{
    tf_error err;
    tf_error_clear(&err);
    char *text = json_dumps(r->record, JSON_INDENT(2) | JSON_REAL_PRECISION(17) |
                                           JSON_ENSURE_ASCII);
    if (!text) {
        fputs("tankfit: out of memory\n", stderr);
        return EXIT_SOFTWARE;
    }
    size_t len = strlen(text);
    char stem[256];
    snprintf(stem, sizeof stem, "%s_%s", r->serial && r->serial[0] ? r->serial : "unit",
             r->time_compact);
    /* the text ends with a newline like any text file */
    char *withnl = realloc(text, len + 2);
    if (!withnl) {
        free(text);
        fputs("tankfit: out of memory\n", stderr);
        return EXIT_SOFTWARE;
    }
    withnl[len++] = '\n';
    withnl[len] = 0;
    tf_status st = tf_record_write_unique(a->out_dir, stem, ".json", withnl, len, rec_path, size,
                                          &err);
    free(withnl);
    if (st != TF_OK)
        return tf_cli_fail(&err);
    tf_report_capture caps[TF_CHECK_MAX_CAPTURES];
    for (size_t k = 0; k < r->nitems; k++)
        caps[k] = (tf_report_capture){r->items[k].path, r->items[k].sha256, r->items[k].bytes,
                                      r->items[k].cap, r->items[k].an, r->items[k].res,
                                      r->exp_an};
    const char *base = strrchr(rec_path, '/');
    base = base ? base + 1 : rec_path;
    tf_report_info info = {r->serial, r->operator_name, r->test_id, r->notes, r->time_iso,
                           TF_VERSION_STRING, a->design, r->design_sha256, r->design, base,
                           r->exp_an ? NULL : r->exp_note, r->overall};
    char *html = NULL;
    size_t hlen = 0;
    if (tf_report_html(&info, caps, r->nitems, &html, &hlen, &err) != TF_OK)
        return tf_cli_fail(&err);
    snprintf(rep_path, rep_size, "%.*s.html", (int)(strlen(rec_path) - 5), rec_path);
    st = tf_record_write_new(rep_path, html, hlen, &err);
    free(html);
    if (st != TF_OK)
        return tf_cli_fail(&err);
    return 0;
}

static int run(int argc, char **argv)
{
    tf_check_args a;
    tf_check_args_init(&a);
    int rc = tf_check_args_parse(argc, argv, &a, "check");
    if (rc) {
        tf_check_args_free(&a);
        return rc;
    }
    tf_check_run r;
    memset(&r, 0, sizeof r);
    rc = tf_check_run_execute(&a, time(NULL), &r);
    if (!rc)
        rc = ensure_dir(a.out_dir);
    char rec[4096], rep[4096];
    if (!rc)
        rc = write_outputs(&a, &r, rec, sizeof rec, rep, sizeof rep);
    if (!rc) {
        tf_check_run_print(stdout, &r);
        printf("Record: %s\nReport: %s\n", rec, rep);
        rc = fflush(stdout) == 0 ? tf_verdict_exit_code(r.overall) : EXIT_IOERR;
    }
    tf_check_run_free(&r);
    tf_check_args_free(&a);
    return rc;
}

const tf_cli_command tf_cmd_check = {
    "check", "acceptance check against a design: verdicts, record and report", run, help};
