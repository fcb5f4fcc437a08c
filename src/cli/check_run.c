/* The run shared by `tankfit check` and `tankfit verify`. */
#include "check_run.h"

#include <limits.h>
#include <math.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>

#include <tankfit/siformat.h>

#include "common.h"
#include "tf_version.h"

void tf_check_args_init(tf_check_args *a)
{
    memset(a, 0, sizeof *a);
    a->capacitance = a->inductance = a->vt = a->vd = a->skew = a->band = NAN;
    a->out_dir = "tankfit-records";
    tf_import_options_init(&a->io);
    a->argv = json_array();
}

void tf_check_args_free(tf_check_args *a)
{
    json_decref(a->argv);
    a->argv = NULL;
}

static void keep(tf_check_args *a, char **argv, int from, int to)
{
    for (int k = from; k <= to; k++)
        json_array_append_new(a->argv, json_string(argv[k]));
}

int tf_check_args_parse(int argc, char **argv, tf_check_args *a, const char *cmd)
{
    static const struct { const char *flag, *unit; size_t off; } nums[] = {
        {"--capacitance", "F", offsetof(tf_check_args, capacitance)},
        {"--inductance", "H", offsetof(tf_check_args, inductance)},
        {"--thyristor-drop", "V", offsetof(tf_check_args, vt)},
        {"--diode-drop", "V", offsetof(tf_check_args, vd)},
        {"--skew", "s", offsetof(tf_check_args, skew)},
        {"--band", "", offsetof(tf_check_args, band)}};
    static const struct { const char *flag; size_t off; } texts[] = {
        {"--out", offsetof(tf_check_args, out_dir)},
        {"--serial", offsetof(tf_check_args, serial)},
        {"--operator", offsetof(tf_check_args, operator_name)},
        {"--test-id", offsetof(tf_check_args, test_id)},
        {"--notes", offsetof(tf_check_args, notes)}};
    int only_files = 0;
    for (int i = 1; i < argc; i++) {
        const char *v;
        int r, start = i, done = 0;
        if (!only_files && strcmp(argv[i], "--") == 0) {
            only_files = 1;
            continue;
        }
        if (!only_files && argv[i][0] == '-' && argv[i][1]) {
            if ((r = tf_cli_import_option(argc, argv, &i, &a->io)) != 0) {
                if (r < 0)
                    return EXIT_USAGE;
                keep(a, argv, start, i);
                continue;
            }
            if ((r = tf_cli_role_option(argc, argv, &i, &a->roles)) != 0) {
                if (r < 0)
                    return EXIT_USAGE;
                keep(a, argv, start, i);
                done = 1;
            }
            for (size_t k = 0; k < sizeof nums / sizeof nums[0] && !done; k++)
                if ((r = tf_cli_value(argc, argv, &i, nums[k].flag, &v)) != 0) {
                    if (r < 0 || tf_cli_quantity(cmd, nums[k].flag, v, nums[k].unit,
                                          (double *)((char *)a + nums[k].off)))
                        return EXIT_USAGE;
                    if (strcmp(nums[k].flag, "--skew") == 0)
                        a->skew_set = 1;
                    keep(a, argv, start, i);
                    done = 1;
                }
            for (size_t k = 0; k < sizeof texts / sizeof texts[0] && !done; k++)
                if ((r = tf_cli_value(argc, argv, &i, texts[k].flag, &v)) != 0) {
                    if (r < 0)
                        return EXIT_USAGE;
                    *(const char **)((char *)a + texts[k].off) = v;
                    done = 1;
                }
            if (done)
                continue;
            if ((r = tf_cli_value(argc, argv, &i, "--design", &v)) != 0) {
                if (r < 0)
                    return EXIT_USAGE;
                a->design = v;
            } else if ((r = tf_cli_value(argc, argv, &i, "--topology", &v)) != 0) {
                if (r < 0)
                    return EXIT_USAGE;
                if (tf_topology_parse(v) == TF_TOPO_UNKNOWN)
                    return tf_cli_usage(cmd, "--topology: expected single, half-bridge, "
                                        "full-bridge or ring-down, found '%s'", v);
                a->topology = v;
                keep(a, argv, start, i);
            } else if (strcmp(argv[i], "--window") == 0) {
                a->window = 1;
                keep(a, argv, i, i);
            } else if (strcmp(argv[i], "--no-expected") == 0) {
                a->no_expected = 1;
                keep(a, argv, i, i);
            } else {
                return tf_cli_usage(cmd, "unknown option '%s'", argv[i]);
            }
            continue;
        }
        if (a->ncaptures >= TF_CHECK_MAX_CAPTURES)
            return tf_cli_usage(cmd, "at most %d captures per run", TF_CHECK_MAX_CAPTURES);
        a->captures[a->ncaptures++] = argv[i];
    }
    if (!a->ncaptures)
        return tf_cli_usage(cmd, "expected at least one capture file");
    if (!a->design)
        return tf_cli_usage(cmd, "expected --design DESIGN.ini (the limits come from it)");
    if (isfinite(a->band) && a->band <= 0)
        return tf_cli_usage(cmd, "--band: expected a positive number");
    return 0;
}

static void analysis_options(const tf_check_args *a, const tf_design *d, tf_analysis_options *o)
{
    tf_analysis_options_init(o, d);
    o->roles = a->roles;
    tf_cli_stage_options(o, a->topology, a->capacitance, a->inductance, a->vt, a->vd,
                         a->skew_set, a->skew);
    if (isfinite(a->band))
        o->segment.band_k = a->band;
    o->spectrum.window = a->window;
    /* fixed thread counts: the same split of the work on every machine, so the
     * figures are byte-identical wherever the record is verified */
    o->fit.threads = 2;
    o->spectrum.threads = 2;
}

static void absolute(const char *path, char *out, size_t size)
{
    char buf[PATH_MAX];
    if (realpath(path, buf))
        snprintf(out, size, "%s", buf);
    else
        snprintf(out, size, "%s", path);
}

static const char *pick(const char *given, const char *design)
{
    return given ? given : design;
}

static json_t *options_json(const tf_check_args *a, const tf_analysis_options *o)
{
    json_t *j = json_object();
    json_object_set(j, "argv", a->argv);
    json_t *an = json_object();
    json_object_set_new(an, "topology", json_string(tf_topology_name(o->segment.topology)));
    json_object_set_new(an, "band_k", tf_record_number(o->segment.band_k));
    json_object_set_new(an, "capacitance_f", tf_record_number(o->fit.capacitance_f));
    json_object_set_new(an, "inductance_h", tf_record_number(o->fit.inductance_h));
    json_object_set_new(an, "thyristor_drop_v", tf_record_number(o->fit.thyristor_drop_v));
    json_object_set_new(an, "diode_drop_v", tf_record_number(o->fit.diode_drop_v));
    json_object_set_new(an, "skew_s", o->fit.skew_set ? tf_record_number(o->fit.skew_s)
                                                      : json_string("estimated"));
    json_object_set_new(an, "window", json_boolean(o->spectrum.window));
    json_object_set_new(an, "harmonics", json_integer(o->spectrum.harmonics));
    json_object_set_new(an, "fit_threads", json_integer(o->fit.threads));
    json_object_set_new(an, "spectrum_threads", json_integer(o->spectrum.threads));
    json_object_set_new(an, "design_expected", json_boolean(!a->no_expected));
    json_object_set_new(j, "analysis", an);
    json_t *sc = json_array();
    for (size_t k = 0; k < a->io.nscale; k++)
        json_array_append_new(sc, json_pack("{s:s,s:o}", "column", a->io.scale[k].name, "factor",
                                            tf_record_number(a->io.scale[k].value)));
    json_object_set_new(j, "scales_applied", sc);
    return j;
}

static const char *role_name(const tf_capture *cap, int idx)
{
    return idx >= 0 ? cap->ch[idx].name : NULL;
}

static json_t *capture_json(const tf_check_item *it)
{
    const tf_capture *cap = it->cap;
    json_t *c = json_object();
    json_object_set_new(c, "path", json_string(it->abspath));
    json_object_set_new(c, "path_given", json_string(it->path));
    json_object_set_new(c, "sha256", json_string(it->sha256));
    json_object_set_new(c, "bytes", json_integer((json_int_t)it->bytes));
    json_object_set_new(c, "format", json_string(cap->dialect.format));
    json_object_set_new(c, "samples", json_integer((json_int_t)cap->n));
    json_object_set_new(c, "sample_rate_hz", tf_record_number(1.0 / cap->dt_s));
    json_t *roles = json_object();
    const int idx[] = {it->an->roles.current, it->an->roles.voltage, it->an->roles.cap_voltage,
                       it->an->roles.switch_voltage};
    const char *const keys[] = {"current", "voltage", "cap_voltage", "switch_voltage"};
    for (int k = 0; k < 4; k++) {
        const char *n = role_name(cap, idx[k]);
        json_object_set_new(roles, keys[k], n ? json_string(n) : json_null());
    }
    json_object_set_new(c, "roles", roles);
    json_object_set_new(c, "topology", json_string(tf_topology_name(it->an->seg->topology)));
    json_object_set_new(c, "mode", json_string(tf_mode_name(it->an->seg->mode)));
    json_object_set_new(c, "figures", tf_record_figures(cap, it->an));
    json_object_set_new(c, "expected", tf_record_compare(it->res));
    json_object_set_new(c, "checks", tf_record_checks(it->res));
    json_object_set_new(c, "verdict", json_string(tf_verdict_name(it->res->overall)));
    if (it->an->fit_error.code != TF_OK)
        json_object_set_new(c, "fit_error", json_string(it->an->fit_error.msg));
    if (it->an->spectrum_error.code != TF_OK)
        json_object_set_new(c, "spectrum_error", json_string(it->an->spectrum_error.msg));
    return c;
}

static void build_record(const tf_check_args *a, const tf_analysis_options *o, tf_check_run *r)
{
    json_t *j = json_object();
    json_object_set_new(j, "schema", json_string(TF_RECORD_SCHEMA));
    json_object_set_new(j, "schema_version", json_integer(TF_RECORD_SCHEMA_VERSION));
    json_object_set_new(j, "tool", json_pack("{s:s,s:s}", "name", "tankfit", "version",
                                             TF_VERSION_STRING));
    json_object_set_new(j, "time_utc", json_string(r->time_iso));
    json_object_set_new(j, "unit_serial", json_string(r->serial));
    json_object_set_new(j, "operator", json_string(r->operator_name));
    json_object_set_new(j, "test_id", json_string(r->test_id));
    json_object_set_new(j, "notes", json_string(r->notes));
    json_t *d = json_object();
    json_object_set_new(d, "path", json_string(r->design_abs));
    json_object_set_new(d, "path_given", json_string(a->design));
    json_object_set_new(d, "sha256", json_string(r->design_sha256));
    json_object_set_new(d, "values", tf_design_to_json(r->design));
    json_object_set_new(j, "design", d);
    json_object_set_new(j, "options", options_json(a, o));
    json_object_set_new(j, "design_expected",
                        r->exp_an ? json_string("simulated")
                                  : json_string(r->exp_note[0] ? r->exp_note : "not simulated"));
    json_t *caps = json_array();
    for (size_t k = 0; k < r->nitems; k++)
        json_array_append_new(caps, capture_json(&r->items[k]));
    json_object_set_new(j, "captures", caps);
    json_object_set_new(j, "verdict", json_string(tf_verdict_name(r->overall)));
    r->record = j;
}

/* The hash of a capture is computed on a second thread while it is imported: both
 * read the same file, and the hash then costs little wall time where a core is free. */
typedef struct hash_job {
    const char *path;
    char *hex;
    unsigned long long *bytes;
    tf_error err;
    tf_status st;
} hash_job;

static void *hash_thread(void *arg)
{
    hash_job *j = arg;
    j->st = tf_record_sha256_file(j->path, j->hex, j->bytes, &j->err);
    return NULL;
}

static int load_and_hash(tf_check_item *it, tf_import_options *io)
{
    hash_job job = {it->path, it->sha256, &it->bytes, {TF_OK, ""}, TF_OK};
    pthread_t th;
    int threaded = pthread_create(&th, NULL, hash_thread, &job) == 0;
    if (!threaded)
        hash_thread(&job);
    int rc = tf_cli_load_capture(it->path, io, &it->cap);
    if (threaded)
        pthread_join(th, NULL);
    if (rc)
        return rc;
    if (job.st != TF_OK)
        return tf_cli_fail(&job.err);
    return 0;
}

int tf_check_run_execute(const tf_check_args *a, time_t when, tf_check_run *r)
{
    tf_error err;
    tf_error_clear(&err);
    r->design = malloc(sizeof *r->design);
    if (!r->design) {
        fputs("tankfit: out of memory\n", stderr);
        return EXIT_SOFTWARE;
    }
    if (tf_design_load(a->design, r->design, &err) != TF_OK ||
        tf_design_validate(r->design, 0, &err) != TF_OK)
        return tf_cli_fail(&err);
    if (tf_record_sha256_file(a->design, r->design_sha256, NULL, &err) != TF_OK)
        return tf_cli_fail(&err);
    absolute(a->design, r->design_abs, sizeof r->design_abs);
    tf_import_options io = a->io;
    int rc = tf_cli_design_scales(r->design, &io);
    if (rc)
        return rc;
    tf_analysis_options o;
    analysis_options(a, r->design, &o);
    tf_record_utc(when, r->time_iso, r->time_compact);
    r->serial = pick(a->serial, r->design->unit_serial);
    r->operator_name = pick(a->operator_name, r->design->operator_name);
    r->test_id = pick(a->test_id, r->design->test_id);
    r->notes = pick(a->notes, r->design->notes);
    if (a->no_expected) {
        snprintf(r->exp_note, sizeof r->exp_note, "not simulated (--no-expected)");
    } else {
        tf_error e2;
        tf_error_clear(&e2);
        if (tf_check_expected_run(r->design, &o, &r->exp_cap, &r->exp_an, &e2) != TF_OK)
            snprintf(r->exp_note, sizeof r->exp_note, "%s", e2.msg);
    }
    r->overall = TF_VERDICT_PASS;
    for (size_t k = 0; k < a->ncaptures; k++) {
        tf_check_item *it = &r->items[k];
        it->path = a->captures[k];
        r->nitems = k + 1;
        absolute(it->path, it->abspath, sizeof it->abspath);
        tf_import_options iok = io;
        if ((rc = load_and_hash(it, &iok)) != 0)
            return rc;
        tf_capture_compute_stats(it->cap);
        if (tf_analysis_run(it->cap, r->design, &o, &it->an, &err) != TF_OK) {
            fprintf(stderr, "tankfit: %s: %s\n", it->path, err.msg);
            return tf_exit_code(err.code);
        }
        tf_check_input in = {r->design, it->cap, it->an, r->exp_an, r->exp_cap, r->exp_note};
        if (tf_check_evaluate(&in, &it->res, &err) != TF_OK)
            return tf_cli_fail(&err);
        r->overall = tf_verdict_combine(r->overall, it->res->overall);
    }
    build_record(a, &o, r);
    return r->record ? 0 : EXIT_SOFTWARE;
}

void tf_check_run_free(tf_check_run *r)
{
    for (size_t k = 0; k < r->nitems; k++) {
        tf_check_free(r->items[k].res);
        tf_analysis_free(r->items[k].an);
        tf_capture_destroy(r->items[k].cap);
    }
    tf_analysis_free(r->exp_an);
    tf_capture_destroy(r->exp_cap);
    json_decref(r->record);
    free(r->design);
    memset(r, 0, sizeof *r);
}

static const char *fmt_value_d(char *buf, size_t size, const tf_check *c, double v, int digits)
{
    if (!isfinite(v))
        snprintf(buf, size, "-");
    else if (c->percent)
        snprintf(buf, size, "%.*f %%", digits > 2 ? 2 : 3, 100 * v);
    else if (strcmp(c->id, "mode") == 0)
        snprintf(buf, size, "%s", tf_mode_name((tf_mode)(int)v));
    else if (!c->unit[0])
        tf_si_format(buf, size, v, "", digits);
    else
        tf_si_format(buf, size, v, strcmp(c->unit, "ohm") == 0 ? "Ohm" : c->unit, digits);
    return buf;
}

static const char *fmt_value(char *buf, size_t size, const tf_check *c, double v)
{
    return fmt_value_d(buf, size, c, v, 4);
}

static void limit_text(char *buf, size_t size, const tf_check *c)
{
    char a[48], b[48];
    if (strcmp(c->id, "mode") == 0 && isfinite(c->limit_lo))
        snprintf(buf, size, "%s", fmt_value(a, sizeof a, c, c->limit_lo));
    else if (isfinite(c->limit_lo) && isfinite(c->limit_hi))
        snprintf(buf, size, "%s .. %s", fmt_value(a, sizeof a, c, c->limit_lo),
                 fmt_value(b, sizeof b, c, c->limit_hi));
    else if (isfinite(c->limit_lo))
        snprintf(buf, size, ">= %s", fmt_value(a, sizeof a, c, c->limit_lo));
    else if (isfinite(c->limit_hi))
        snprintf(buf, size, "<= %s", fmt_value(a, sizeof a, c, c->limit_hi));
    else
        snprintf(buf, size, "-");
}

void tf_check_run_print(FILE *out, const tf_check_run *r)
{
    char a[64], b[64], m[160], l[160];
    for (size_t k = 0; k < r->nitems; k++) {
        const tf_check_item *it = &r->items[k];
        fprintf(out, "Capture %zu: %s  [%s]\n", k + 1, it->path, tf_verdict_name(it->res->overall));
        fprintf(out, "  %-19s %-24s %-26s %-15s %s\n", "check", "measured (+- u)", "limit",
                "verdict", "limit from");
        for (size_t j = 0; j < it->res->nchecks; j++) {
            const tf_check *c = &it->res->checks[j];
            fmt_value(a, sizeof a, c, c->value);
            if (isfinite(c->u) && isfinite(c->value) && strcmp(c->id, "mode") != 0)
                snprintf(m, sizeof m, "%s +- %s", a, fmt_value_d(b, sizeof b, c, c->u, 2));
            else
                snprintf(m, sizeof m, "%s", a);
            limit_text(l, sizeof l, c);
            fprintf(out, "  %-19s %-24s %-26s %-15s %s\n", c->id, m, l, tf_verdict_name(c->verdict),
                    c->limit_key);
            if (c->reason[0] && c->verdict != TF_VERDICT_PASS)
                fprintf(out, "  %-19s   %s\n", "", c->reason);
            for (size_t o = 0; o < c->noffenders && o < 5; o++)
                fprintf(out, "  %-19s   %s fired at %s: %s\n", "",
                        tf_device_name(c->offenders[o].device),
                        tf_si_format(a, sizeof a, c->offenders[o].time_s, "s", 4),
                        tf_si_format(b, sizeof b, c->offenders[o].value, "s", 4));
            if (c->offenders_total > 5)
                fprintf(out, "  %-19s   ... %zu cycles in all\n", "", c->offenders_total);
        }
        if (r->exp_an) {
            fprintf(out, "  design-expected (simulated) beside measured:\n");
            for (size_t j = 0; j < it->res->ncompare && j < 9; j++) {
                const tf_check_compare *q = &it->res->compare[j];
                char e[48], d[48];
                const char *u = strcmp(q->unit, "ohm") == 0 ? "Ohm" : q->unit;
                fprintf(out, "    %-34s %12s %12s  diff %s\n", q->label,
                        tf_si_format(a, sizeof a, q->measured, u, 4),
                        tf_si_format(e, sizeof e, q->expected, u, 4),
                        tf_si_format(d, sizeof d, q->measured - q->expected, u, 3));
            }
        } else {
            fprintf(out, "  design-expected values: %s\n", r->exp_note);
        }
        fputc('\n', out);
    }
    fprintf(out, "Overall verdict: %s\n",
            r->overall == TF_VERDICT_PASS ? "PASS"
            : r->overall == TF_VERDICT_FAIL ? "FAIL" : "NOT EVALUATED (nothing failed)");
}
