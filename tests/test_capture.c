/* The capture container and its JSON form (checked with Python's json module too). */
#include "tf_test.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <tankfit/capture.h>

static tf_capture *two_channels(size_t n)
{
    tf_capture *cap = tf_capture_create();
    tf_error err;
    assert_non_null(cap);
    assert_int_equal(tf_capture_alloc(cap, 2, n, &err), TF_OK);
    snprintf(cap->ch[0].name, TF_NAME_SIZE, "i_load");
    snprintf(cap->ch[0].unit, TF_UNIT_SIZE, "A");
    snprintf(cap->ch[1].name, TF_NAME_SIZE, "v_out");
    snprintf(cap->ch[1].unit, TF_UNIT_SIZE, "V");
    for (size_t k = 0; k < n; k++) {
        cap->ch[0].samples[k] = (float)((k % 4) - 1.5);   /* -1.5 -0.5 0.5 1.5 */
        cap->ch[1].samples[k] = 200.0f;
    }
    cap->dt_s = 1e-7;
    cap->t0_s = -2e-6;
    return cap;
}

static void test_capture_container(void **state)
{
    (void)state;
    tf_capture *cap = two_channels(1000);
    tf_error err;
    assert_int_equal(cap->n, 1000);
    assert_true(cap->ch[0].scale == 1.0);
    assert_int_equal(tf_capture_find(cap, "v_out"), 1);
    assert_int_equal(tf_capture_find(cap, "nope"), -1);
    assert_true(fabs(tf_capture_time(cap, 20) - 0.0) < 1e-18);
    assert_int_equal(tf_capture_add_metadata(cap, "Model,invented-7", 16), TF_OK);
    assert_int_equal(tf_capture_add_warning(cap, "%d gaps", 3), TF_OK);
    assert_int_equal(cap->nmeta, 1);
    assert_string_equal(cap->warnings[0], "3 gaps");
    assert_int_equal(tf_capture_truncate(cap, 10, &err), TF_OK);
    assert_int_equal(cap->n, 10);
    assert_int_equal(tf_capture_truncate(cap, 11, &err), TF_ERR_INTERNAL);
    /* a growth keeps the samples there were; a shrink back leaves them */
    float keep[10];
    memcpy(keep, cap->ch[1].samples, sizeof keep);
    assert_int_equal(tf_capture_resize(cap, 200000, &err), TF_OK);
    assert_int_equal(cap->n, 200000);
    assert_memory_equal(cap->ch[1].samples, keep, sizeof keep);
    cap->ch[1].samples[199999] = 7.0f;
    assert_int_equal(tf_capture_resize(cap, 10, &err), TF_OK);
    assert_memory_equal(cap->ch[1].samples, keep, sizeof keep);
    assert_int_equal(tf_capture_resize(cap, SIZE_MAX / 2, &err), TF_ERR_NOMEM);
    assert_int_equal(cap->n, 10);
    tf_capture_compute_stats(cap);
    /* mean of -1.5, -0.5, 0.5, 1.5 repeated (10 samples: two extra -1.5, -0.5) */
    assert_true(cap->ch[0].stats_valid);
    assert_true(fabs(cap->ch[0].stats.mean - (-2.0 / 10)) < 1e-12);
    tf_capture_destroy(cap);
    tf_capture_destroy(NULL);
}

/* Long channels share the cores (one whole channel per thread): every channel's figures
 * equal tf_stats_compute on that channel alone, bit for bit, and each channel's own
 * maximum (its square wave's crest plus the largest added step) lands in its own slot. */
static void test_capture_stats_long_channels(void **state)
{
    (void)state;
    const size_t n = (size_t)3 << 20, nchan = 5;
    tf_capture *cap = tf_capture_create();
    tf_error err;
    assert_non_null(cap);
    assert_int_equal(tf_capture_alloc(cap, nchan, n, &err), TF_OK);
    for (size_t c = 0; c < nchan; c++)
        for (size_t k = 0; k < n; k++)
            cap->ch[c].samples[k] = (float)(c + 1) * ((k / 100) % 2 ? 2.0f : -2.0f) +
                                    (float)((k * 2654435761u) % 7) * 0.01f;
    tf_capture_compute_stats(cap);
    for (size_t c = 0; c < nchan; c++) {
        tf_channel_stats alone;
        tf_stats_compute(cap->ch[c].samples, n, &alone);
        assert_true(cap->ch[c].stats_valid);
        assert_memory_equal(&cap->ch[c].stats, &alone, sizeof alone);
        assert_true(fabs(alone.max - (2.0 * (double)(c + 1) + 0.06)) < 1e-5);
    }
    tf_capture_destroy(cap);
}

static void test_capture_json_keys(void **state)
{
    (void)state;
    tf_capture *cap = two_channels(400);
    snprintf(cap->path, sizeof cap->path, "bench.wav");
    snprintf(cap->dialect.format, sizeof cap->dialect.format, "wav");
    snprintf(cap->dialect.wav_subformat, sizeof cap->dialect.wav_subformat, "PCM_16");
    cap->ch[0].full_scale = 100;
    cap->ch[0].skew_s = -12e-9;
    cap->ch[0].skew_known = 1;
    tf_capture_compute_stats(cap);
    json_t *j = tf_capture_to_json(cap);
    assert_non_null(j);
    assert_int_equal(json_integer_value(json_object_get(j, "samples")), 400);
    assert_true(fabs(json_real_value(json_object_get(j, "sample_rate_hz")) - 1e7) < 1e-6);
    /* duration of n samples at dt is n * dt */
    assert_true(fabs(json_real_value(json_object_get(j, "duration_s")) - 4e-5) < 1e-18);
    assert_true(json_real_value(json_object_get(j, "t0_s")) == -2e-6);
    json_t *d = json_object_get(j, "dialect");
    assert_string_equal(json_string_value(json_object_get(d, "format")), "wav");
    assert_true(json_is_null(json_object_get(d, "delimiter")));
    assert_string_equal(json_string_value(json_object_get(d, "wav_subformat")), "PCM_16");
    json_t *chans = json_object_get(j, "channels");
    assert_int_equal(json_array_size(chans), 2);
    json_t *c0 = json_array_get(chans, 0);
    const char *keys[] = {"name", "unit", "min", "max", "mean", "rms", "noise_sigma", "lsb",
                          "clipped_samples", "clipped_runs", "clipped_high", "clipped_low",
                          "scale", "offset", "full_scale", "skew_s", "gaps_filled"};
    for (size_t k = 0; k < sizeof keys / sizeof keys[0]; k++)
        assert_non_null(json_object_get(c0, keys[k]));
    assert_string_equal(json_string_value(json_object_get(c0, "name")), "i_load");
    assert_true(json_real_value(json_object_get(c0, "min")) == -1.5);
    /* RMS of the four levels: sqrt((2.25 + 0.25) / 2) (closed form) */
    assert_true(fabs(json_real_value(json_object_get(c0, "rms")) - sqrt(1.25)) < 1e-12);
    assert_true(json_real_value(json_object_get(c0, "skew_s")) == -12e-9);
    assert_true(json_real_value(json_object_get(c0, "full_scale")) == 100);
    json_t *c1 = json_array_get(chans, 1);
    assert_true(json_is_null(json_object_get(c1, "skew_s")));
    assert_true(json_is_null(json_object_get(c1, "full_scale")));
    assert_int_equal(json_integer_value(json_object_get(c1, "clipped_samples")), 0);
    json_decref(j);
    tf_capture_destroy(cap);
}

static void test_capture_json_unknowns(void **state)
{
    (void)state;
    /* stats not computed and non-finite values become null; a metadata line in
     * a legacy code page is kept with '?' for its non-ASCII bytes */
    tf_capture *cap = two_channels(10);
    snprintf(cap->dialect.format, sizeof cap->dialect.format, "csv");
    cap->dialect.delimiter = ';';
    cap->dialect.decimal = ',';
    cap->dialect.header_line = 3;
    cap->dialect.time_column = 0;
    cap->dialect.time_resolution_s = 1e-9;
    assert_int_equal(tf_capture_add_metadata(cap, "Probe \xb5 A", 9), TF_OK);
    json_t *j = tf_capture_to_json(cap);
    assert_non_null(j);
    json_t *c0 = json_array_get(json_object_get(j, "channels"), 0);
    assert_true(json_is_null(json_object_get(c0, "rms")));
    assert_true(json_is_null(json_object_get(c0, "clipped_samples")));
    json_t *d = json_object_get(j, "dialect");
    assert_string_equal(json_string_value(json_object_get(d, "delimiter")), ";");
    assert_string_equal(json_string_value(json_object_get(d, "decimal")), ",");
    assert_int_equal(json_integer_value(json_object_get(d, "header_line")), 3);
    assert_int_equal(json_integer_value(json_object_get(d, "time_column")), 0);
    assert_string_equal(json_string_value(json_array_get(json_object_get(j, "metadata"), 0)),
                        "Probe ? A");
    json_decref(j);
    cap->ch[0].stats_valid = 1;
    cap->ch[0].stats.rms = NAN;
    cap->ch[0].stats.noise_sigma = INFINITY;
    j = tf_capture_to_json(cap);
    c0 = json_array_get(json_object_get(j, "channels"), 0);
    assert_true(json_is_null(json_object_get(c0, "rms")));
    assert_true(json_is_null(json_object_get(c0, "noise_sigma")));
    json_decref(j);
    assert_null(tf_capture_to_json(NULL));
    tf_capture_destroy(cap);
}

static void test_capture_json_python(void **state)
{
    (void)state;
    /* reference: Python's json module parses the dump and reads the same values */
    assert_true(tf_test_have("/usr/bin/python3"));
    tf_capture *cap = two_channels(100);
    tf_capture_compute_stats(cap);
    json_t *j = tf_capture_to_json(cap);
    char *text = json_dumps(j, JSON_INDENT(2) | JSON_REAL_PRECISION(17));
    assert_non_null(text);
    const char *path = tf_test_tmpfile("cap.json");
    assert_int_equal(tf_test_write(path, text), 0);
    int r = tf_test_system("/usr/bin/python3 -c \"import json, math\n"
                           "d = json.load(open('%s'))\n"
                           "c = d['channels']\n"
                           "assert d['samples'] == 100 and len(c) == 2\n"
                           "assert c[1]['name'] == 'v_out' and c[1]['unit'] == 'V'\n"
                           "assert abs(c[0]['rms'] - math.sqrt(1.25)) < 1e-12\n"
                           "assert c[1]['max'] == 200.0 and c[1]['clipped_samples'] == 0\n"
                           "assert d['dialect']['delimiter'] is None\"", path);
    assert_int_equal(r, 0);
    free(text);
    json_decref(j);
    tf_capture_destroy(cap);
}

/* Every key of obj must be named as `key` in the documentation text. */
static void keys_documented(json_t *obj, const char *doc)
{
    const char *key;
    json_t *v;
    json_object_foreach(obj, key, v) {
        char quoted[80];
        snprintf(quoted, sizeof quoted, "`%s`", key);
        if (!strstr(doc, quoted))
            fprintf(stderr, "docs/inspect.md does not document key %s\n", key);
        assert_non_null(strstr(doc, quoted));
    }
}

static void test_capture_json_documented(void **state)
{
    (void)state;
    /* docs/inspect.md lists every JSON key (the document is the interface) */
    size_t len;
    char *doc = tf_test_slurp(tf_test_src("docs/inspect.md"), &len);
    assert_non_null(doc);
    tf_capture *cap = two_channels(50);
    tf_capture_compute_stats(cap);
    json_t *j = tf_capture_to_json(cap);
    keys_documented(j, doc);
    keys_documented(json_object_get(j, "dialect"), doc);
    keys_documented(json_array_get(json_object_get(j, "channels"), 0), doc);
    json_decref(j);
    tf_capture_destroy(cap);
    free(doc);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_capture_container),
        cmocka_unit_test(test_capture_stats_long_channels),
        cmocka_unit_test(test_capture_json_keys),
        cmocka_unit_test(test_capture_json_unknowns),
        cmocka_unit_test(test_capture_json_python),
        cmocka_unit_test(test_capture_json_documented),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
