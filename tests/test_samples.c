/* The shipped samples: each regenerates byte for byte from its design with `tankfit synth`,
 * and each shows the scenario its design file describes. */
#include "tf_test.h"

#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

typedef struct sample {
    const char *name;
    const char *ext;
} sample;

static const sample samples[] = {
    {"ih-hb-2207-pass", "csv"},     {"ih-hb-2211-turnoff", "csv"}, {"ih-hb-2214-overlap", "csv"},
    {"ih-fb-0931-fullbridge", "wav"}, {"ih-hb-2207-heating", "wav"},
};
#define NSAMPLES (sizeof samples / sizeof samples[0])

static void same_bytes(const char *shipped, const char *made)
{
    size_t na = 0, nb = 0;
    char *a = tf_test_slurp(shipped, &na), *b = tf_test_slurp(made, &nb);
    if (!a)
        fail_msg("missing shipped file %s (run samples/make-samples)", shipped);
    assert_non_null(b);
    if (na != nb || memcmp(a, b, na) != 0)
        fail_msg("%s differs from its regeneration %s (%zu vs %zu bytes): run "
                 "samples/make-samples and commit the result if the change is intended",
                 shipped, made, na, nb);
    free(a);
    free(b);
}

static void test_samples_regenerate_byte_identical(void **state)
{
    (void)state;
    for (size_t i = 0; i < NSAMPLES; i++) {
        const sample *s = &samples[i];
        char design[1024], out[1024], truth[1024], rel[256];
        snprintf(rel, sizeof rel, "samples/%s.ini", s->name);
        snprintf(design, sizeof design, "%s", tf_test_src(rel));
        snprintf(out, sizeof out, "%s/%s.%s", tf_test_tmpdir(), s->name, s->ext);
        snprintf(truth, sizeof truth, "%s/%s.truth.json", tf_test_tmpdir(), s->name);
        assert_int_equal(tf_test_system("'%s' synth '%s' -o '%s' --truth '%s'", tf_test_cli(),
                                        design, out, truth),
                         0);
        snprintf(rel, sizeof rel, "samples/%s.%s", s->name, s->ext);
        same_bytes(tf_test_src(rel), out);
        snprintf(rel, sizeof rel, "samples/%s.truth.json", s->name);
        same_bytes(tf_test_src(rel), truth);
        if (strcmp(s->ext, "wav") == 0) {
            char side[1100];
            snprintf(side, sizeof side, "%s.tfscale", out);
            snprintf(rel, sizeof rel, "samples/%s.wav.tfscale", s->name);
            same_bytes(tf_test_src(rel), side);
        }
    }
}

static void test_samples_small(void **state)
{
    (void)state;
    /* the issue: together under 5 MB */
    double total = 0;
    const char *suffix[] = {".ini", ".truth.json", ".csv", ".wav", ".wav.tfscale"};
    for (size_t i = 0; i < NSAMPLES; i++)
        for (size_t k = 0; k < 5; k++) {
            char rel[256];
            struct stat st;
            snprintf(rel, sizeof rel, "samples/%s%s", samples[i].name, suffix[k]);
            if (stat(tf_test_src(rel), &st) == 0)
                total += (double)st.st_size;
        }
    print_message("samples: %.2f MB\n", total / 1e6);
    assert_true(total > 1e5 && total < 5e6);
}

static json_t *truth_of(const char *name)
{
    char rel[256];
    snprintf(rel, sizeof rel, "samples/%s.truth.json", name);
    json_error_t e;
    json_t *t = json_load_file(tf_test_src(rel), 0, &e);
    if (!t)
        fail_msg("%s: %s", rel, e.text);
    return t;
}

static double min_ratio(json_t *t)
{
    double m = INFINITY;
    size_t i;
    json_t *x;
    json_array_foreach(json_object_get(t, "turnoff"), i, x)
        m = fmin(m, json_real_value(json_object_get(x, "ratio")));
    return m;
}

static void test_samples_scenarios(void **state)
{
    (void)state;
    /* what each design file's comment says its capture shows, checked on its truth:
     * the turn-off ratio against the design's turnoff_ratio_min of 1.3 (common practice
     * range 1.2 to 1.5), the mode, no commutation failure */
    json_t *pass = truth_of("ih-hb-2207-pass");
    assert_string_equal(json_string_value(json_object_get(pass, "mode")), "non-overlapping");
    assert_true(min_ratio(pass) >= 1.3);
    assert_int_equal(json_array_size(json_object_get(pass, "commutation_failures")), 0);
    json_decref(pass);

    json_t *slow = truth_of("ih-hb-2211-turnoff");
    assert_true(min_ratio(slow) < 1.3 && min_ratio(slow) > 1.0);
    assert_int_equal(json_array_size(json_object_get(slow, "commutation_failures")), 0);
    json_decref(slow);

    json_t *ov = truth_of("ih-hb-2214-overlap");
    assert_string_equal(json_string_value(json_object_get(ov, "mode")), "overlapping");
    assert_true(min_ratio(ov) >= 1.3);
    /* the current channel is clipped at its 250 A range: the noiseless peak exceeds it */
    assert_true(json_real_value(json_object_get(ov, "peak_current_a")) > 250);
    json_decref(ov);

    json_t *fb = truth_of("ih-fb-0931-fullbridge");
    assert_string_equal(json_string_value(json_object_get(fb, "topology")), "full-bridge");
    json_t *cap = json_object_get(fb, "capture");
    assert_string_equal(json_string_value(json_object_get(cap, "wav_subformat")), "PCM_16");
    json_decref(fb);

    /* heating: R rises, then drops by more than a third within 0.5 ms (the magnetic
     * transition), and the T1 lobes lengthen by more than 2 % as L grows */
    json_t *heat = truth_of("ih-hb-2207-heating");
    size_t i;
    json_t *x;
    double first = 0, last = 0, r_first = 0, r_max = 0, r_last = 0;
    json_array_foreach(json_object_get(heat, "intervals"), i, x)
    {
        if (strcmp(json_string_value(json_object_get(x, "device")), "T1") != 0)
            continue;
        double len = json_real_value(json_object_get(x, "end_s")) -
                     json_real_value(json_object_get(x, "start_s"));
        double r = json_real_value(json_object_get(x, "resistance_ohm"));
        if (first == 0) {
            first = len;
            r_first = r;
        }
        if (isfinite(len) && len > 0)
            last = len;
        r_max = fmax(r_max, r);
        r_last = r;
    }
    assert_true(first > 0 && last / first > 1.02);
    assert_true(r_max > 1.2 * r_first && r_last < 0.66 * r_max);
    json_decref(heat);

    /* reference: sox reads the full-bridge WAV as 8 channels of 16-bit PCM at 5 MHz */
    char cmd_path[1024];
    snprintf(cmd_path, sizeof cmd_path, "%s", tf_test_src("samples/ih-fb-0931-fullbridge.wav"));
    assert_int_equal(tf_test_system("sox --i '%s' | grep -q 'Channels *: 8' && "
                                    "sox --i '%s' | grep -q '16-bit Signed Integer PCM' && "
                                    "sox --i '%s' | grep -q 'Sample Rate *: 5e+06'",
                                    cmd_path, cmd_path, cmd_path),
                     0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_samples_regenerate_byte_identical),
        cmocka_unit_test(test_samples_small),
        cmocka_unit_test(test_samples_scenarios),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
