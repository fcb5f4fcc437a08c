/* Records: SHA-256 against FIPS 180-2 examples and sha256sum, atomic writes that
 * never replace a file and leave nothing behind when interrupted, the verify
 * comparison, and `tankfit check` / `tankfit verify` end to end with exit codes. */
#include "tf_test.h"

#include <dirent.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <tankfit/tankfit.h>
#include <tankfit/record.h>

#include "check_samples.h"

static size_t count_entries(const char *dir)
{
    DIR *d = opendir(dir);
    assert_non_null(d);
    size_t n = 0;
    struct dirent *e;
    while ((e = readdir(d)))
        n += strcmp(e->d_name, ".") != 0 && strcmp(e->d_name, "..") != 0;
    closedir(d);
    return n;
}

static const char *fresh_dir(const char *name)
{
    static char path[4096];
    snprintf(path, sizeof path, "%s/%s", tf_test_tmpdir(), name);
    assert_int_equal(mkdir(path, 0777), 0);
    return path;
}

/* source: FIPS 180-2, appendix B.1 ("abc") and the digest of the empty message;
 * reference: coreutils sha256sum on a 200 kB file. */
static void test_record_sha256(void **state)
{
    (void)state;
    char hex[65];
    unsigned long long n = 0;
    tf_error err;
    const char *p = tf_test_tmpfile("abc.txt");
    assert_int_equal(tf_test_write(p, "abc"), 0);
    assert_int_equal(tf_record_sha256_file(p, hex, &n, &err), TF_OK);
    assert_string_equal(hex, "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
    assert_int_equal(n, 3);
    p = tf_test_tmpfile("empty.txt");
    assert_int_equal(tf_test_write(p, ""), 0);
    assert_int_equal(tf_record_sha256_file(p, hex, &n, &err), TF_OK);
    assert_string_equal(hex, "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
    p = tf_test_tmpfile("big.bin");
    FILE *f = fopen(p, "wb");
    assert_non_null(f);
    for (int k = 0; k < 200000; k++)
        fputc((k * 7919) & 0xff, f);
    fclose(f);
    assert_int_equal(tf_record_sha256_file(p, hex, &n, &err), TF_OK);
    assert_int_equal(n, 200000);
    if (tf_test_have("sha256sum")) {
        const char *out = tf_test_tmpfile("big.sum");
        assert_int_equal(tf_test_system("sha256sum '%s' > '%s'", p, out), 0);
        char *text = tf_test_slurp(out, NULL);
        assert_non_null(text);
        assert_memory_equal(text, hex, 64);
        free(text);
    }
    assert_int_equal(tf_record_sha256_file(tf_test_tmpfile("none.bin"), hex, NULL, &err),
                     TF_ERR_NOINPUT);
}

/* A second record of the same unit and second gets the next counter; the first
 * stays byte for byte; names never leave the directory. */
static void test_record_never_overwritten(void **state)
{
    (void)state;
    const char *dir = fresh_dir("unique");
    char p1[4096], p2[4096], p3[4096];
    tf_error err;
    assert_int_equal(tf_record_write_unique(dir, "IH-7_20260101T000000Z", ".json", "first\n", 6,
                                            p1, sizeof p1, &err), TF_OK);
    assert_int_equal(tf_record_write_unique(dir, "IH-7_20260101T000000Z", ".json", "second\n", 7,
                                            p2, sizeof p2, &err), TF_OK);
    assert_string_not_equal(p1, p2);
    assert_non_null(strstr(p1, "-001.json"));
    assert_non_null(strstr(p2, "-002.json"));
    char *t = tf_test_slurp(p1, NULL);
    assert_string_equal(t, "first\n");
    free(t);
    t = tf_test_slurp(p2, NULL);
    assert_string_equal(t, "second\n");
    free(t);
    /* a serial with a path in it stays inside dir */
    assert_int_equal(tf_record_write_unique(dir, "../x/y", ".json", "z", 1, p3, sizeof p3, &err),
                     TF_OK);
    assert_null(strstr(p3 + strlen(dir), "/.."));
    assert_int_equal(count_entries(dir), 3);
    /* write_new refuses an existing name and keeps its content */
    assert_int_equal(tf_record_write_new(p1, "replaced", 8, &err), TF_ERR_CANTCREAT);
    t = tf_test_slurp(p1, NULL);
    assert_string_equal(t, "first\n");
    free(t);
    assert_int_equal(count_entries(dir), 3);
    /* missing directory */
    assert_int_equal(tf_record_write_unique(tf_test_tmpfile("no-such-dir"), "a", ".json", "x", 1,
                                            p3, sizeof p3, &err), TF_ERR_CANTCREAT);
}

/* Interrupted right after the temporary file was written: no record, no temporary
 * file, nothing at all in the directory. */
static void test_record_interrupted_write(void **state)
{
    (void)state;
    const char *dir = fresh_dir("interrupted");
    char p[4096], q[4096 + 16];
    tf_error err;
    tf_record_fault_after_temp(1);
    assert_int_equal(tf_record_write_unique(dir, "U", ".json", "{}", 2, p, sizeof p, &err),
                     TF_ERR_IO);
    snprintf(q, sizeof q, "%s/U-001.html", dir);
    assert_int_equal(tf_record_write_new(q, "<p>", 3, &err), TF_ERR_IO);
    tf_record_fault_after_temp(0);
    assert_int_equal(count_entries(dir), 0);
    assert_int_equal(tf_record_write_unique(dir, "U", ".json", "{}", 2, p, sizeof p, &err), TF_OK);
    assert_int_equal(count_entries(dir), 1);
}

static void test_record_numbers_and_diff(void **state)
{
    (void)state;
    json_t *n = tf_record_number(NAN);
    assert_true(json_is_null(n));
    json_decref(n);
    n = tf_record_number(0.1);
    assert_true(json_is_real(n) && json_real_value(n) == 0.1);
    json_decref(n);
    const char *text = "{\"schema\":\"tankfit-acceptance-record\",\"schema_version\":1,"
                       "\"verdict\":\"pass\",\"design\":{\"sha256\":\"aa\"},\"captures\":[{"
                       "\"path\":\"/x.csv\",\"sha256\":\"bb\",\"bytes\":10,\"verdict\":\"pass\","
                       "\"figures\":{\"q\":{\"value\":5.894,\"u\":0.002,\"unit\":\"1\"}},"
                       "\"expected\":{},\"checks\":[{\"id\":\"mode\",\"verdict\":\"pass\"}]}]}";
    json_error_t je;
    json_t *a = json_loads(text, 0, &je), *b = json_loads(text, 0, &je);
    assert_non_null(a);
    json_t *diffs = json_array();
    assert_int_equal(tf_record_diff(a, b, diffs), 0);
    /* the last digit of a figure */
    json_t *q = json_object_get(json_object_get(json_object_get(json_array_get(
                                    json_object_get(b, "captures"), 0), "figures"), "q"), "value");
    json_real_set(q, 5.8940000000000001 + 1e-15);
    assert_int_equal(tf_record_diff(a, b, diffs), 1);
    assert_non_null(strstr(json_string_value(json_array_get(diffs, 0)), "figure q"));
    json_decref(b);
    b = json_deep_copy(a);
    json_object_set_new(json_array_get(json_object_get(b, "captures"), 0), "sha256",
                        json_string("cc"));
    json_array_clear(diffs);
    assert_int_equal(tf_record_diff(a, b, diffs), 1);
    assert_non_null(strstr(json_string_value(json_array_get(diffs, 0)), "sha256"));
    json_decref(diffs);
    json_decref(a);
    json_decref(b);
}

/* ---- the CLI end to end ----------------------------------------------------------- */

static char *run_cli(int *rc, const char *fmt, const char *a1, const char *a2, const char *a3)
{
    const char *out = tf_test_tmpfile("cli.out");
    char args[4 * 4096 + 256];
    snprintf(args, sizeof args, fmt, a1, a2, a3);
    *rc = tf_test_system("'%s' %s > '%s' 2>&1", tf_test_cli(), args, out);
    char *text = tf_test_slurp(out, NULL);
    assert_non_null(text);
    return text;
}

static void latest_record(const char *dir, int nth, char *path)
{
    char pattern[4200];
    snprintf(pattern, sizeof pattern, "ls '%s'/*.json | sort | sed -n %dp > '%s'", dir, nth,
             tf_test_tmpfile("ls.out"));
    assert_int_equal(tf_test_system("%s", pattern), 0);
    char *t = tf_test_slurp(tf_test_tmpfile("ls.out"), NULL);
    assert_non_null(t);
    t[strcspn(t, "\n")] = 0;
    snprintf(path, 4096, "%s", t);
    free(t);
}

/* Pass (exit 0), a second run makes a second record, verify reproduces both;
 * a changed capture byte and a changed figure are found (exit 1). */
static void test_record_cli_check_and_verify(void **state)
{
    (void)state;
    char design[4096], capture[4096], rec1[4096], rec2[4096];
    tf_check_test_sample(tf_test_tmpdir(), "unit", NULL, design, capture);
    const char *out = fresh_dir("records");
    int rc;
    char *t = run_cli(&rc, "check '%s' --design '%s' --out '%s' --serial SN-1", capture, design, out);
    if (rc != 0)
        fail_msg("check exit %d:\n%s", rc, t);
    assert_non_null(strstr(t, "Overall verdict: PASS"));
    assert_non_null(strstr(t, "turnoff-margin"));
    free(t);
    t = run_cli(&rc, "check '%s' --design '%s' --out '%s' --serial SN-1", capture, design, out);
    assert_int_equal(rc, 0);
    free(t);
    assert_int_equal(count_entries(out), 4); /* two records, two reports */
    latest_record(out, 1, rec1);
    latest_record(out, 2, rec2);
    assert_string_not_equal(rec1, rec2);
    t = run_cli(&rc, "verify '%s'", rec1, "", "");
    if (rc != 0)
        fail_msg("verify exit %d:\n%s", rc, t);
    assert_non_null(strstr(t, "reproduced exactly"));
    free(t);
    /* two captures in one run: one record holding both, reproduced by verify */
    const char *out2 = fresh_dir("records-two");
    char rest[8300];
    snprintf(rest, sizeof rest, "--design '%s' --out '%s'", design, out2);
    t = run_cli(&rc, "check '%s' '%s' %s", capture, capture, rest);
    assert_int_equal(rc, 0);
    assert_non_null(strstr(t, "Capture 2:"));
    free(t);
    assert_int_equal(count_entries(out2), 2);
    char rec3[4096];
    latest_record(out2, 1, rec3);
    char *r3 = tf_test_slurp(rec3, NULL);
    json_t *j3 = json_loads(r3, 0, NULL);
    free(r3);
    assert_int_equal(json_array_size(json_object_get(j3, "captures")), 2);
    json_decref(j3);
    t = run_cli(&rc, "verify '%s'", rec3, "", "");
    assert_int_equal(rc, 0);
    free(t);
    /* a changed figure in the record: the last digits of the Q value */
    char *rec = tf_test_slurp(rec2, NULL);
    assert_non_null(rec);
    json_error_t je;
    json_t *j = json_loads(rec, 0, &je);
    free(rec);
    assert_non_null(j);
    json_t *qv = json_object_get(json_object_get(json_object_get(json_array_get(
                                     json_object_get(j, "captures"), 0), "figures"), "q"), "value");
    assert_true(json_is_real(qv));
    json_real_set(qv, json_real_value(qv) * (1 + 1e-12));
    const char *edited = tf_test_tmpfile("edited.json");
    assert_int_equal(json_dump_file(j, edited, JSON_REAL_PRECISION(17)), 0);
    json_decref(j);
    t = run_cli(&rc, "verify '%s'", edited, "", "");
    if (rc != 1)
        fail_msg("verify exit %d:\n%s", rc, t);
    assert_non_null(strstr(t, "figure q"));
    free(t);
    /* one byte of the capture changed: a digit of the current in the middle row */
    size_t len;
    char *csv = tf_test_slurp(capture, &len);
    assert_non_null(csv);
    size_t at = len / 2;
    while (at < len && csv[at] != '\n')
        at++;
    while (at < len && csv[at] != ',')
        at++; /* past the time field */
    while (at < len && (csv[at] < '1' || csv[at] > '8'))
        at++;
    assert_true(at < len);
    csv[at]++;
    FILE *f = fopen(capture, "wb");
    assert_non_null(f);
    assert_int_equal(fwrite(csv, 1, len, f), len);
    fclose(f);
    free(csv);
    t = run_cli(&rc, "verify '%s'", rec1, "", "");
    if (rc != 1)
        fail_msg("verify exit %d:\n%s", rc, t);
    assert_non_null(strstr(t, "sha256"));
    assert_non_null(strstr(t, "figure")); /* and the figures moved with it */
    free(t);
}

/* Exit codes: 1 when a check fails, 2 when a check cannot be evaluated and none
 * fails, 64 usage, 66 missing capture, 73 when DIR cannot be made, 65 for a file
 * that is no record. */
static void test_record_cli_exit_codes(void **state)
{
    (void)state;
    char design[4096], capture[4096], d2[4096], c2[4096];
    const char *slow[] = {"turnoff_time = 24 us", NULL};
    tf_check_test_sample(tf_test_tmpdir(), "slow", slow, design, capture);
    const char *out = fresh_dir("records-exit");
    int rc;
    char *t = run_cli(&rc, "check '%s' --design '%s' --out '%s'", capture, design, out);
    assert_int_equal(rc, 1);
    assert_non_null(strstr(t, "Overall verdict: FAIL"));
    free(t);
    const char *clip[] = {"i_load.range = 140 A", NULL};
    tf_check_test_sample(tf_test_tmpdir(), "clipped", clip, d2, c2);
    t = run_cli(&rc, "check '%s' --design '%s' --out '%s' --no-expected", c2, d2, out);
    assert_int_equal(rc, 2);
    assert_non_null(strstr(t, "not-evaluated"));
    free(t);
    t = run_cli(&rc, "check '%s' --out '%s' %s", capture, out, "");
    assert_int_equal(rc, 64);
    free(t);
    t = run_cli(&rc, "check '%s' --design '%s' --out '%s'", tf_test_tmpfile("missing.csv"), design,
                out);
    assert_int_equal(rc, 66);
    free(t);
    t = run_cli(&rc, "check '%s' --design '%s' --out '%s/sub'", capture, design, capture);
    assert_int_equal(rc, 73);
    free(t);
    t = run_cli(&rc, "verify '%s'", design, "", "");
    assert_int_equal(rc, 65);
    free(t);
    t = run_cli(&rc, "verify '%s'", tf_test_tmpfile("none.json"), "", "");
    assert_int_equal(rc, 66);
    free(t);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_record_sha256),
        cmocka_unit_test(test_record_never_overwritten),
        cmocka_unit_test(test_record_interrupted_write),
        cmocka_unit_test(test_record_numbers_and_diff),
        cmocka_unit_test(test_record_cli_check_and_verify),
        cmocka_unit_test(test_record_cli_exit_codes),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
