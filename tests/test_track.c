/* Tests of track: PELT against exhaustive optimal partitioning, a simulated heating run
 * followed burst by burst, reflected resistance, and the command's files. */
#include "tf_test.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include <tankfit/tankfit.h>
#include <tankfit/track.h>

/* Straight-line RSS of x[a..b) by direct least squares (independent of the prefix
 * sums used in the library). */
static double line_rss(const double *x, size_t a, size_t b)
{
    double mk = 0, mx = 0;
    const double m = (double)(b - a);
    for (size_t k = a; k < b; k++) {
        mk += (double)k;
        mx += x[k];
    }
    mk /= m;
    mx /= m;
    double skk = 0, skx = 0;
    for (size_t k = a; k < b; k++) {
        skk += ((double)k - mk) * ((double)k - mk);
        skx += ((double)k - mk) * (x[k] - mx);
    }
    const double slope = skk > 0 ? skx / skk : 0;
    double r = 0;
    for (size_t k = a; k < b; k++) {
        const double e = x[k] - mx - slope * ((double)k - mk);
        r += e * e;
    }
    return r;
}

/* Optimal partitioning (Jackson et al. 2005): the exact O(n^2) minimiser that PELT
 * must reproduce (Killick, Fearnhead and Eckley 2012, theorem 3.2). */
static size_t optimal_partitioning(const double *x, size_t n, double beta, size_t min_seg,
                                   size_t *cps)
{
    double *F = malloc((n + 1) * sizeof *F);
    size_t *last = malloc((n + 1) * sizeof *last);
    F[0] = -beta;
    for (size_t t = 1; t <= n; t++) {
        F[t] = INFINITY;
        last[t] = 0;
        for (size_t tau = 0; tau + min_seg <= t; tau++) {
            if (!isfinite(F[tau]))
                continue;
            const double v = F[tau] + line_rss(x, tau, t) + beta;
            if (v < F[t]) {
                F[t] = v;
                last[t] = tau;
            }
        }
    }
    size_t cnt = 0, tmp[256];
    for (size_t t = n; t > 0 && last[t] > 0; t = last[t])
        tmp[cnt++] = last[t];
    for (size_t k = 0; k < cnt; k++)
        cps[k] = tmp[cnt - 1 - k];
    free(F);
    free(last);
    return cnt;
}

static void test_track_pelt_matches_optimal_partitioning(void **state)
{
    (void)state;
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    for (int trial = 0; trial < 20; trial++) {
        gsl_rng_set(r, 100 + (unsigned long)trial);
        const size_t n = 150;
        double x[150];
        /* a ramp, a step of random size at a random place, another ramp */
        const size_t at = 30 + gsl_rng_uniform_int(r, 90);
        const double step = gsl_ran_flat(r, -12, 12);
        for (size_t k = 0; k < n; k++)
            x[k] = 0.02 * (double)k + (k >= at ? step : 0) + gsl_ran_gaussian(r, 1.0);
        const double beta = 3.0 * log((double)n);
        size_t *cps, ncp, ref[64];
        tf_error e;
        const double *series[1] = {x};
        assert_int_equal(tf_changepoints_pelt(series, 1, n, beta, 3, &cps, &ncp, &e), TF_OK);
        size_t nref = optimal_partitioning(x, n, beta, 3, ref);
        /* reference: exhaustive optimal partitioning gives the same segmentation */
        assert_int_equal(ncp, nref);
        for (size_t k = 0; k < ncp; k++)
            assert_int_equal(cps[k], ref[k]);
        free(cps);
    }
    gsl_rng_free(r);
}

static void test_track_pelt_finds_step_not_noise(void **state)
{
    (void)state;
    gsl_rng *r = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(r, 5);
    const size_t n = 400;
    double *x = malloc(n * sizeof *x), *y = malloc(n * sizeof *y);
    size_t false_alarms = 0;
    for (int trial = 0; trial < 10; trial++) {
        for (size_t k = 0; k < n; k++) {
            x[k] = gsl_ran_gaussian(r, 1.0);
            y[k] = gsl_ran_gaussian(r, 1.0);
        }
        const double *s[2] = {x, y};
        size_t *cps, ncp;
        tf_error e;
        assert_int_equal(tf_changepoints_pelt(s, 2, n, 5.0 * log((double)n), 3, &cps, &ncp, &e), TF_OK);
        false_alarms += ncp;
        free(cps);
    }
    /* Schwarz penalty (5 ln n for 2 series): white noise gives no change in 10 runs */
    assert_int_equal(false_alarms, 0);
    for (size_t k = 0; k < n; k++) {
        x[k] = gsl_ran_gaussian(r, 1.0) + (k >= 250 ? -6.0 : 0.0);
        y[k] = gsl_ran_gaussian(r, 1.0) + (k >= 250 ? 4.0 : 0.0);
    }
    const double *s[2] = {x, y};
    size_t *cps, ncp;
    tf_error e;
    assert_int_equal(tf_changepoints_pelt(s, 2, n, 5.0 * log((double)n), 3, &cps, &ncp, &e), TF_OK);
    assert_int_equal(ncp, 1);
    assert_true(cps[0] >= 249 && cps[0] <= 251);
    free(cps);
    assert_int_equal(tf_changepoints_pelt(s, 2, n, 1.0, 2, &cps, &ncp, &e), TF_ERR_USAGE);
    free(x);
    free(y);
    gsl_rng_free(r);
}

/* The heating run: R rises 0.45 -> 0.60 ohm over 8 ms, drops to 0.42 ohm (and L from
 * 36 to 34 uH) within 50 us, then stays. 8-bit current at about 40 dB SNR. */
static const char *heating_design =
    "[inverter]\ntopology = half-bridge\ncapacitor = series\ndc_link = 540 V\n"
    "firing_frequency = 6 kHz\n"
    "[tank]\ncapacitance = 2.2 uF\ninductance = 36 uH\nresistance = 0.45 ohm\n"
    "coil_resistance = 60 mohm\n"
    "[switch]\nturnoff_time = 20 us\nthyristor_drop = 1.6 V\ndiode_drop = 1.1 V\n"
    "[channels]\ncurrent = i_load\noutput_voltage = v_out\n"
    "[capture]\nsample_rate = 10 MS/s\nduration = 14 ms\nseed = 3\n"
    "i_load.noise = 0.4 A\ni_load.range = 100 A\ni_load.bits = 8\n"
    "v_out.noise = 3 V\nv_out.range = 700 V\nv_out.skew = 50 ns\n"
    "[schedule]\npoint = 0 ms, 0.45 ohm, 36 uH\npoint = 8 ms, 0.60 ohm, 36 uH\n"
    "point = 8.05 ms, 0.42 ohm, 34 uH\npoint = 14 ms, 0.42 ohm, 34 uH\n";

static double sched_r(double t)
{
    if (t < 8e-3)
        return 0.45 + 0.15 * t / 8e-3;
    if (t < 8.05e-3)
        return 0.60 - 0.18 * (t - 8e-3) / 0.05e-3;
    return 0.42;
}

static void test_track_heating_run(void **state)
{
    (void)state;
    tf_design *d = malloc(sizeof *d);
    tf_error e;
    tf_design_init(d);
    assert_int_equal(tf_design_parse(heating_design, strlen(heating_design), "heating", d, &e), TF_OK);
    tf_capture *cap;
    json_t *truth;
    assert_int_equal(tf_synth_to_capture(d, 0, &cap, &truth, &e), TF_OK);
    tf_analysis_options o;
    tf_analysis_options_init(&o, d);
    o.skip_spectrum = 1;
    o.fit.skip_lobes = 1;
    tf_analysis *an;
    assert_int_equal(tf_analysis_run(cap, d, &o, &an, &e), TF_OK);
    assert_non_null(an->fit);
    tf_track_result *t;
    assert_int_equal(tf_track_build(an->fit, d->coil_resistance_ohm, 0, &t, &e), TF_OK);
    assert_true(t->rows_ok > 150);
    size_t checked = 0;
    for (size_t k = 0; k < t->nrows; k++) {
        const tf_track_row *w = &t->rows[k];
        if (!w->ok || fabs(w->time_s - 8e-3) < 0.2e-3)
            continue;
        /* source: the simulator's schedule (piecewise-linear R(t), applied per
         * conduction interval) */
        const double rt = sched_r(w->time_s);
        if (tf_test_reldiff(w->r_eff_ohm, rt) >= 0.05)
            print_message("burst %zu at %g s: R_eff %g, schedule %g\n", w->burst, w->time_s,
                          w->r_eff_ohm, rt);
        assert_true(tf_test_reldiff(w->r_eff_ohm, rt) < 0.05);
        /* R_w = R_eff - R_coil, efficiency R_w / R_eff (DOMAIN.md section 6) */
        assert_true(fabs(w->r_w_ohm - (w->r_eff_ohm - 0.060)) < 1e-12);
        assert_true(fabs(w->efficiency - w->r_w_ohm / w->r_eff_ohm) < 1e-12);
        checked++;
    }
    assert_true(checked > 150);
    /* one step change, within 2 bursts of 8 ms; R drops by ~0.18 ohm, fd rises
     * (L 36 -> 34 uH: fd up by about sqrt(36/34) - 1 = 2.9 %) */
    size_t steps = 0;
    for (size_t c = 0; c < t->nchanges; c++) {
        const tf_track_change *ch = &t->changes[c];
        print_message("change at %g s (burst %zu): R %g -> %g, fd %g -> %g, %s\n", ch->time_s,
                      t->rows[ch->index].burst, ch->r_before_ohm, ch->r_after_ohm,
                      ch->fd_before_hz, ch->fd_after_hz, ch->step ? "step" : "trend");
        if (!ch->step)
            continue;
        steps++;
        const double burst_period = 1.0 / 12e3;
        assert_true(fabs(ch->time_s - 8.0e-3) <= 2 * burst_period + 1e-9);
        assert_true(tf_test_reldiff(ch->r_step_ohm, -0.18) < 0.15);
        assert_true(ch->fd_step_hz > 0.02 * ch->fd_before_hz && ch->fd_step_hz < 0.04 * ch->fd_before_hz);
    }
    assert_int_equal(steps, 1);
    json_t *j = tf_track_to_json(t);
    assert_int_equal(json_array_size(json_object_get(j, "rows")), t->nrows);
    assert_int_equal(json_array_size(json_object_get(j, "changes")), t->nchanges);
    json_decref(j);
    tf_track_free(t);
    tf_analysis_free(an);
    json_decref(truth);
    tf_capture_destroy(cap);
    free(d);
}

static void test_track_needs_resistance(void **state)
{
    (void)state;
    tf_fit_result fit;
    memset(&fit, 0, sizeof fit);
    tf_track_result *t;
    tf_error e;
    /* no per-burst data at all */
    assert_int_equal(tf_track_build(&fit, NAN, 0, &t, &e), TF_ERR_DATA);
    assert_null(t);
    tf_track_free(NULL);
}

/* The command end to end: CSV, SVG and JSON, and no file is ever replaced. */
static void test_track_cli_files(void **state)
{
    (void)state;
    const char *design = tf_test_tmpfile("heat.ini");
    assert_int_equal(tf_test_write(design, heating_design), 0);
    tf_design *d = malloc(sizeof *d);
    tf_error e;
    tf_design_init(d);
    assert_int_equal(tf_design_load(design, d, &e), TF_OK);
    d->duration_s = 9e-3;
    const char *capf = tf_test_tmpfile("heat.csv");
    assert_int_equal(tf_synth_write(d, capf, NULL, 0, &e), TF_OK);
    free(d);
    const char *csv = tf_test_tmpfile("track.csv"), *svg = tf_test_tmpfile("track.svg");
    const char *json = tf_test_tmpfile("track.json");
    assert_int_equal(tf_test_system("'%s' track '%s' --design '%s' --csv '%s' --svg '%s' --json > '%s'",
                                    tf_test_cli(), capf, design, csv, svg, json), 0);
    size_t len;
    char *text = tf_test_slurp(csv, &len);
    assert_non_null(text);
    assert_non_null(strstr(text, "burst,time_s,status,used,r_eff_ohm"));
    size_t lines = 0;
    for (size_t k = 0; k < len; k++)
        lines += text[k] == '\n';
    assert_true(lines > 90);
    free(text);
    text = tf_test_slurp(svg, &len);
    assert_non_null(text);
    assert_non_null(strstr(text, "<svg"));
    assert_non_null(strstr(text, "</svg>"));
    assert_non_null(strstr(text, "stroke-dasharray")); /* the change is marked */
    free(text);
    json_error_t je;
    json_t *j = json_load_file(json, 0, &je);
    assert_non_null(j);
    assert_true(json_array_size(json_object_get(j, "rows")) > 90);
    assert_true(json_array_size(json_object_get(j, "changes")) >= 1);
    assert_non_null(json_object_get(json_object_get(j, "resonance"), "resistance_ohm"));
    json_decref(j);
    /* second run: the files exist, nothing is replaced (exit 73) */
    struct stat st0, st1;
    assert_int_equal(stat(csv, &st0), 0);
    assert_int_equal(tf_test_system("'%s' track '%s' --design '%s' --csv '%s' 2>/dev/null",
                                    tf_test_cli(), capf, design, csv), 73);
    assert_int_equal(stat(csv, &st1), 0);
    assert_true(st0.st_size == st1.st_size && st0.st_mtime == st1.st_mtime);
}

/* --baseline: the empty coil's capture gives R_coil, then R_w and the efficiency. */
static void test_track_cli_baseline(void **state)
{
    (void)state;
    const char *design = tf_test_tmpfile("b_heat.ini"), *empty = tf_test_tmpfile("b_empty.ini");
    /* the design says 80 mohm: only the baseline can give 60 mohm */
    char *htext = strdup(heating_design);
    char *cr = strstr(htext, "coil_resistance = 60 mohm");
    memcpy(cr, "coil_resistance = 80 mohm", strlen("coil_resistance = 80 mohm"));
    assert_int_equal(tf_test_write(design, htext), 0);
    free(htext);
    /* the empty coil: the same stage with 60 mohm and no schedule (an invented coil) */
    char *text = strdup(heating_design);
    char *sched = strstr(text, "[schedule]");
    *sched = '\0';
    char *r = strstr(text, "resistance = 0.45 ohm");
    memcpy(r, "resistance = 0.06 ohm", strlen("resistance = 0.06 ohm"));
    assert_int_equal(tf_test_write(empty, text), 0);
    free(text);
    tf_design *d = malloc(sizeof *d);
    tf_error e;
    const char *capf = tf_test_tmpfile("b_heat.csv"), *basef = tf_test_tmpfile("b_empty.csv");
    tf_design_init(d);
    assert_int_equal(tf_design_load(empty, d, &e), TF_OK);
    d->duration_s = 3e-3;
    assert_int_equal(tf_synth_write(d, basef, NULL, 0, &e), TF_OK);
    tf_design_init(d);
    assert_int_equal(tf_design_load(design, d, &e), TF_OK);
    d->duration_s = 3e-3;
    assert_int_equal(tf_synth_write(d, capf, NULL, 0, &e), TF_OK);
    free(d);
    const char *json = tf_test_tmpfile("b_track.json");
    assert_int_equal(tf_test_system("'%s' track '%s' --design '%s' --baseline '%s' --json > '%s'",
                                    tf_test_cli(), capf, design, basef, json), 0);
    json_error_t je;
    json_t *j = json_load_file(json, 0, &je);
    assert_non_null(j);
    const double rc = json_number_value(json_object_get(j, "r_coil_ohm"));
    /* source: the simulated empty coil's resistance (60 mohm; the design's key says
     * 80 mohm: the baseline wins) */
    assert_true(tf_test_reldiff(rc, 0.06) < 0.05);
    json_t *rows = json_object_get(j, "rows");
    size_t used = 0;
    for (size_t k = 0; k < json_array_size(rows); k++) {
        json_t *w = json_array_get(rows, k);
        if (!json_is_true(json_object_get(w, "used")))
            continue;
        const double re = json_number_value(json_object_get(w, "r_eff_ohm"));
        const double rw = json_number_value(json_object_get(w, "r_w_ohm"));
        const double ef = json_number_value(json_object_get(w, "efficiency"));
        /* DOMAIN.md section 6: R_w = R_eff - R_coil, efficiency R_w / R_eff */
        assert_true(fabs(rw - (re - rc)) < 1e-9 * re);
        assert_true(fabs(ef - rw / re) < 1e-9);
        used++;
    }
    assert_true(used > 20);
    json_decref(j);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_track_pelt_matches_optimal_partitioning),
        cmocka_unit_test(test_track_pelt_finds_step_not_noise),
        cmocka_unit_test(test_track_heating_run),
        cmocka_unit_test(test_track_needs_resistance),
        cmocka_unit_test(test_track_cli_files),
        cmocka_unit_test(test_track_cli_baseline),
    };
    if (getenv("TF_TEST_FILTER")) /* run one case by name, e.g. for timing */
        cmocka_set_test_filter(getenv("TF_TEST_FILTER"));
    return cmocka_run_group_tests(tests, NULL, NULL);
}
