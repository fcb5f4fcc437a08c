/* Segmenter tests: lobes, devices, crossings, turn-off time and mode against exact
 * piecewise series-RLC waveforms (source: textbook series RLC response), and against
 * the simulator when available. */
#include "tf_test.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <tankfit/tankfit.h>

#include "segment_wave.h"
#include "spice.h"

static tf_roles roles_for(const tf_capture *cap)
{
    tf_roles r;
    memset(&r, 0, sizeof r);
    r.current = 0;
    r.voltage = r.cap_voltage = r.switch_voltage = -1;
    for (int g = 0; g < 4; g++)
        r.gate[g] = (size_t)(1 + g) < cap->nchan ? 1 + g : -1;
    return r;
}

static tf_segment_result *segment(const segw_out *w, tf_topology topo)
{
    tf_roles roles = roles_for(w->cap);
    tf_segment_options o;
    tf_segment_options_init(&o);
    o.topology = topo;
    tf_segment_result *r = NULL;
    tf_error err;
    tf_error_clear(&err);
    tf_status st = tf_segment_run(w->cap, &roles, &o, &r, &err);
    if (st != TF_OK)
        fprintf(stderr, "segment: %s\n", err.msg);
    assert_int_equal(st, TF_OK);
    assert_non_null(r);
    if (getenv("SEG_DEBUG")) {
        fprintf(stderr, "topology %s (%s), mode %s (%s), band %g\n",
                tf_topology_name(r->topology), r->topology_evidence, tf_mode_name(r->mode),
                r->mode_evidence, r->band_a);
        for (size_t j = 0; j < r->nlobes && j < 40; j++)
            fprintf(stderr, "lobe %2zu %-5s %+d %.9f %.9f model %d%d fire %d pk %g\n", j,
                    tf_device_name(r->lobes[j].device), r->lobes[j].sign, r->lobes[j].start_s,
                    r->lobes[j].end_s, r->lobes[j].start_model, r->lobes[j].end_model,
                    r->lobes[j].end_by_firing, r->lobes[j].peak_a);
        for (size_t v = 0; v < w->niv && v < 40; v++)
            fprintf(stderr, "truth %2zu %-5s %.9f %.9f\n", v, tf_device_name(w->iv[v].dev),
                    w->iv[v].t0, w->iv[v].t1);
        for (size_t a = 0; a < r->nanomalies && a < 10; a++)
            fprintf(stderr, "anomaly %s %g %s\n", r->anomalies[a].kind, r->anomalies[a].time_s,
                    r->anomalies[a].text);
    }
    return r;
}

typedef struct match_stats {
    size_t truth, found, attributed;
    double max_err_s;         /* largest boundary error over zero-crossing boundaries */
    double max_fire_err_s;    /* largest boundary error at firings inside a stretch */
} match_stats;

/* Every truth interval that the record holds whole must be a lobe with the right
 * device and boundaries. */
static match_stats match(const segw_out *w, const tf_segment_result *r, double margin_s)
{
    match_stats m = {0};
    double dur = (double)w->cap->n * w->cap->dt_s;
    for (size_t v = 0; v < w->niv; v++) {
        const segw_interval *iv = &w->iv[v];
        if (iv->t0 < margin_s || iv->t1 > dur - margin_s)
            continue;
        m.truth++;
        double half = 0.5 * (iv->t1 - iv->t0);
        for (size_t j = 0; j < r->nlobes; j++) {
            const tf_lobe *l = &r->lobes[j];
            if (fabs(l->start_s - iv->t0) > half || fabs(l->end_s - iv->t1) > half)
                continue;
            m.found++;
            m.attributed += l->device == iv->dev;
            double es = fabs(l->start_s - iv->t0), ee = fabs(l->end_s - iv->t1);
            if (getenv("SEG_DEBUG") && fmax(es, ee) > 0.3 * w->cap->dt_s)
                fprintf(stderr, "lobe %zu %s: start err %+.3f model %d, end err %+.3f model %d "
                        "(samples)\n", j, tf_device_name(l->device),
                        (l->start_s - iv->t0) / w->cap->dt_s, l->start_model,
                        (l->end_s - iv->t1) / w->cap->dt_s, l->end_model);
            if (l->end_by_firing)
                m.max_fire_err_s = fmax(m.max_fire_err_s, ee);
            else
                m.max_err_s = fmax(m.max_err_s, ee);
            if (j > 0 && r->lobes[j - 1].end_by_firing)
                m.max_fire_err_s = fmax(m.max_fire_err_s, es);
            else
                m.max_err_s = fmax(m.max_err_s, es);
            break;
        }
    }
    return m;
}

/* Turn-off time available per thyristor interval of the truth: its zero until the
 * diode interval that follows it ends (naturally or at the opposite firing). */
static void check_turnoff(const segw_out *w, const tf_segment_result *r, double margin_s)
{
    double dt = w->cap->dt_s, dur = (double)w->cap->n * dt;
    size_t checked = 0;
    for (size_t v = 0; v + 1 < w->niv; v++) {
        if (!tf_device_is_thyristor(w->iv[v].dev) || w->iv[v].t0 < margin_s ||
            w->iv[v + 1].t1 > dur - margin_s)
            continue;
        double truth = w->iv[v + 1].t1 - w->iv[v + 1].t0;
        int found = 0;
        for (size_t c = 0; c < r->ncycles; c++)
            if (fabs(r->cycles[c].start_s - w->iv[v].t0) < 2 * dt) {
                found = 1;
                double e = fabs(r->cycles[c].turnoff_available_s - truth);
                if (e > dt + 0.005 * truth)
                    fprintf(stderr, "turn-off at %g: %g vs truth %g\n", w->iv[v].t0,
                            r->cycles[c].turnoff_available_s, truth);
                /* issue requirement: within 1 sample period + 0.5 % */
                assert_true(e <= dt + 0.005 * truth);
            }
        assert_true(found);
        checked++;
    }
    assert_true(checked >= 3);
}

static void expect_all(const segw_out *w, const tf_segment_result *r, double tol_s)
{
    match_stats m = match(w, r, 2e-6);
    if (getenv("SEG_ERR") || m.found != m.truth || m.attributed != m.truth || m.max_err_s > tol_s)
        fprintf(stderr, "truth %zu found %zu attributed %zu max err %.3g s (tol %.3g)\n",
                m.truth, m.found, m.attributed, m.max_err_s, tol_s);
    assert_true(m.truth >= 4);
    assert_int_equal(m.found, m.truth);
    assert_int_equal(m.attributed, m.truth);
    assert_true(m.max_err_s <= tol_s);
}

static size_t count_anomalies(const tf_segment_result *r, const char *kind)
{
    size_t n = 0;
    for (size_t a = 0; a < r->nanomalies; a++)
        n += strcmp(r->anomalies[a].kind, kind) == 0;
    return n;
}

/* Noiseless half-bridge: every zero-to-zero piece lasts pi / wd exactly. */
static void test_segment_textbook_diode_interval(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    assert_int_equal(r->topology, TF_TOPO_HALF_BRIDGE);
    assert_int_equal(r->mode, TF_MODE_NON_OVERLAPPING);
    expect_all(&w, r, 0.05 * w.cap->dt_s);
    /* source: textbook series RLC response: the current of an isolated burst returns to
     * zero after pi / wd, so the diode interval is pi / wd */
    double want = M_PI / w.wd;
    assert_true(r->diode_s.count >= 5);
    assert_true(tf_test_reldiff(r->diode_s.median, want) < 1e-4);
    assert_true(tf_test_reldiff(r->diode_s.min, want) < 1e-4);
    assert_true(tf_test_reldiff(r->diode_s.max, want) < 1e-4);
    /* output frequency: one firing of each thyristor per two firing steps */
    assert_true(tf_test_reldiff(r->output_frequency_hz.median, 1 / (2 * c.fire_step_s)) < 1e-4);
    assert_int_equal(count_anomalies(r, "commutation-failure"), 0);
    tf_segment_free(r);
    segw_free(&w);
}

/* Noiseless and unquantised, every piece is exactly the chain model's damped sine (a
 * constant drive from zero current: textbook series RLC response), so the fits
 * (the full ones and the quick ones with w and the decay held between them) must land
 * on the simulator's zeros far inside the 0.5-sample requirement (float32 samples
 * allow about 1e-6 sample here): a fit stopped short of its optimum shows. */
static void test_segment_chain_fit_converges(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.vt = 1.6;
    c.vd = 1.1;
    c.noise = 0;
    c.snr_db = 0;
    c.range = 0;
    c.bits = 0;
    c.duration_s = 6e-3;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_HALF_BRIDGE);
    match_stats m = match(&w, r, 2e-4);
    size_t model = 0;
    for (size_t j = 0; j < r->nlobes; j++)
        model += r->lobes[j].start_model && r->lobes[j].end_model;
    if (getenv("SEG_ERR"))
        fprintf(stderr, "truth %zu found %zu model %zu max err %.3g samples\n", m.truth,
                m.found, model, m.max_err_s / w.cap->dt_s);
    assert_true(m.truth >= 2 * 8 * 2); /* quick fits between full ones */
    assert_int_equal(m.found, m.truth);
    assert_true(model >= m.truth);
    /* 3.5e-7 sample measured; quick fits stopped after one step under 0.25 sample (the
     * rule before they were iterated to convergence) left 1.7e-5 */
    assert_true(m.max_err_s <= 1e-5 * w.cap->dt_s);
    tf_segment_free(r);
    segw_free(&w);
}

/* Noise (SNR about 36 dB), 8-bit quantisation and device drops. */
static void test_segment_noisy_half_bridge(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.vt = 1.6;
    c.vd = 1.1;
    c.snr_db = 40;
    c.range = 200;
    c.bits = 8;
    c.seed = 7;
    c.duration_s = 4e-3;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    assert_int_equal(r->topology, TF_TOPO_HALF_BRIDGE);
    assert_int_equal(r->mode, TF_MODE_NON_OVERLAPPING);
    /* issue requirement: crossing times within 0.5 sample period */
    expect_all(&w, r, 0.5 * w.cap->dt_s);
    check_turnoff(&w, r, 2e-6);
    assert_int_equal(r->nanomalies, 0);
    tf_segment_free(r);
    segw_free(&w);
}

/* Dead-zone boundary bias: near a dead zone the current rises out of the noise, so a
 * crossing interpolated from the raw samples (here: the last sign change before the
 * current leaves the band) lands where noise last crossed zero, not where the lobe
 * began; it is biased by a good part of a sample or more. The boundary from the burst's
 * damped-sine model must show no bias beyond its spread. */
static void test_segment_dead_zone_bias_removed(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.snr_db = 30;
    c.duration_s = 36e-3;
    c.seed = 11;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_HALF_BRIDGE);
    const float *x = w.cap->ch[0].samples;
    double dt = w.cap->dt_s, sum_model = 0, sum_naive = 0;
    size_t n = 0;
    for (size_t v = 0; v < w.niv; v++) {
        const segw_interval *iv = &w.iv[v];
        if (!tf_device_is_thyristor(iv->dev) || iv->t0 < 5e-6 || iv->t1 > c.duration_s - 5e-6)
            continue;
        const tf_lobe *l = NULL;
        for (size_t j = 0; j < r->nlobes; j++)
            if (fabs(r->lobes[j].start_s - iv->t0) < 20 * dt)
                l = &r->lobes[j];
        if (!l || !l->start_model)
            for (size_t j = 0; j < r->nlobes; j++)
                if (fabs(r->lobes[j].start_s - iv->t0) < 100e-6)
                    fprintf(stderr, "truth %s %.9f..%.9f: lobe %s %.9f..%.9f model %d%d\n",
                            tf_device_name(iv->dev), iv->t0, iv->t1,
                            tf_device_name(r->lobes[j].device), r->lobes[j].start_s,
                            r->lobes[j].end_s, r->lobes[j].start_model, r->lobes[j].end_model);
        assert_non_null(l);
        assert_true(l->start_model);
        sum_model += iv->t0 - l->start_s; /* positive: boundary too early, lobe too long */
        /* naive: walk back from the band exit to the last sign change and interpolate */
        size_t k = (size_t)ceil(iv->t0 / dt);
        while (fabs(x[k]) <= r->band_a)
            k++;
        while (k > 0 && x[k - 1] * l->sign > 0)
            k--;
        double tn = ((double)k - 1 + x[k - 1] / (x[k - 1] - x[k])) * dt;
        sum_naive += iv->t0 - tn;
        n++;
    }
    assert_true(n >= 150);
    double bias_model = sum_model / (double)n / dt, bias_naive = sum_naive / (double)n / dt;
    fprintf(stderr, "dead-zone start bias over %zu lobes: model %+.3f samples, naive %+.3f\n",
            n, bias_model, bias_naive);
    /* the naive estimator is visibly biased (so this check can fail) ... */
    assert_true(fabs(bias_naive) > 0.3);
    /* ... the model boundary is not (mean of n errors; spread about 0.3 sample each) */
    assert_true(fabs(bias_model) < 0.1);
    tf_segment_free(r);
    segw_free(&w);
}

static void test_segment_single_switch(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.topo = TF_TOPO_SINGLE;
    c.E = 300;
    c.reset_v = -150;
    c.fire_step_s = 250e-6;
    /* each lobe is fitted on its own here (a reset choke breaks the shared zeros), which
     * is less precise than the burst model: 0.5 sample needs about 45 dB */
    c.snr_db = 45;
    c.vt = 1.5;
    c.vd = 1.0;
    c.duration_s = 3e-3;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    assert_int_equal(r->topology, TF_TOPO_SINGLE);
    assert_int_equal(r->mode, TF_MODE_NON_OVERLAPPING);
    expect_all(&w, r, 0.5 * w.cap->dt_s);
    check_turnoff(&w, r, 2e-6);
    assert_true(tf_test_reldiff(r->output_frequency_hz.median, 1 / c.fire_step_s) < 1e-3);
    tf_segment_free(r);
    segw_free(&w);
}

static void test_segment_full_bridge_gates(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.topo = TF_TOPO_FULL_BRIDGE;
    c.gates = 1;
    c.snr_db = 40;
    c.vt = 3.2;
    c.vd = 2.2;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    assert_int_equal(r->topology, TF_TOPO_FULL_BRIDGE);
    expect_all(&w, r, 0.5 * w.cap->dt_s);
    check_turnoff(&w, r, 2e-6);
    assert_int_equal(r->nanomalies, 0);
    assert_true(r->nfirings >= 10);
    tf_segment_free(r);
    segw_free(&w);
}

/* Continuous operation: each firing comes as the diode interval ends (firing step = one
 * damped period 2 pi / wd, textbook series RLC response), no dead zone. */
static void test_segment_continuous(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    double L = c.L, C = c.C, a = c.R / (2 * L), w0 = 1 / sqrt(L * C);
    /* a third of a sample later than the diode's natural end: the test waveform stays
     * clear of the exact coincidence, and no dead zone can be seen */
    c.fire_step_s = 2 * M_PI / sqrt(w0 * w0 - a * a) + 0.3 / c.fs;
    c.snr_db = 40;
    c.vt = 1.5;
    c.vd = 1.0;
    c.duration_s = 3e-3;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    assert_int_equal(r->topology, TF_TOPO_HALF_BRIDGE);
    assert_int_equal(r->mode, TF_MODE_CONTINUOUS);
    expect_all(&w, r, 0.5 * w.cap->dt_s);
    check_turnoff(&w, r, 2e-6);
    tf_segment_free(r);
    segw_free(&w);
}

static void overlapping(int gates)
{
    segw_cfg c;
    segw_defaults(&c);
    c.fire_step_s = 120e-6; /* shorter than one damped period: the diode interval is cut */
    c.snr_db = 45;
    c.gates = gates;
    c.vt = 1.5;
    c.vd = 1.0;
    c.duration_s = 3e-3;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    assert_int_equal(r->topology, TF_TOPO_HALF_BRIDGE);
    assert_int_equal(r->mode, TF_MODE_OVERLAPPING);
    match_stats m = match(&w, r, 2e-6);
    fprintf(stderr, "overlapping (gates %d): truth %zu found %zu attributed %zu crossing err "
            "%.3g s, split err %.3g s\n", gates, m.truth, m.found, m.attributed, m.max_err_s,
            m.max_fire_err_s);
    assert_true(m.truth >= 10);
    assert_int_equal(m.found, m.truth);
    assert_int_equal(m.attributed, m.truth);
    assert_true(m.max_err_s <= 0.5 * w.cap->dt_s);
    /* the split at the next firing: from the gate edge, or from the current alone by the
     * two-piece residual: within 0.5 sample like every crossing (issue 4; measured 0.2) */
    assert_true(m.max_fire_err_s <= 0.5 * w.cap->dt_s);
    check_turnoff(&w, r, 2e-6);
    for (size_t k = 0; k < r->ncycles; k++)
        if (isfinite(r->cycles[k].overlap_s))
            assert_true(r->cycles[k].overlap_s > 0);
    tf_segment_free(r);
    segw_free(&w);
}

static void test_segment_overlapping_current_only(void **state)
{
    (void)state;
    overlapping(0);
}

static void test_segment_overlapping_gates(void **state)
{
    (void)state;
    overlapping(1);
}

/* Coarse sampling, 20 samples per resonant period: the first differences of the whole
 * record then measure the lobes' slope; the noise must come from the dead zones. */
static void test_segment_coarse_sampling(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    double fd = w.wd / (2 * M_PI);
    segw_free(&w);
    c.fs = 20 * fd;
    c.noise = 0.2;
    c.duration_s = 8e-3; /* about 40 dead zones of 3 samples each */
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    /* reference: the generator's Gaussian sigma (a MAD estimate from about a hundred
     * dead-zone samples scatters by about 15 %) */
    assert_true(fabs(r->noise_sigma_a - w.noise) < 0.3 * w.noise);
    assert_int_equal(r->topology, TF_TOPO_HALF_BRIDGE);
    assert_int_equal(r->mode, TF_MODE_NON_OVERLAPPING);
    /* every whole lobe is pi / wd long (textbook series RLC response) to a fraction of
     * the 1/20-period sample step (the chain model pins them within 0.01 sample) */
    size_t whole = 0, fine = 0;
    for (size_t j = 0; j < r->nlobes; j++) {
        const tf_lobe *l = &r->lobes[j];
        if (l->partial)
            continue;
        whole++;
        if (getenv("SEG_DEBUG"))
            fprintf(stderr, "lobe %zu %s err %g samples\n", j, tf_device_name(l->device),
                    ((l->end_s - l->start_s) - M_PI / w.wd) / w.cap->dt_s);
        double e = fabs((l->end_s - l->start_s) - M_PI / w.wd);
        assert_true(e < 0.5 * w.cap->dt_s);
        fine += e < 0.05 * w.cap->dt_s;
    }
    assert_true(whole >= 8);
    /* a burst whose chain fit is refused keeps its rough line-through-samples bounds */
    assert_true(fine >= whole * 9 / 10);
    tf_segment_free(r);
    segw_free(&w);
}

/* ---- captures written by numpy (tests/support/segment_numpy.py) ---------------- */

typedef struct np_case {
    double fd, q, spp;
    int ncyc;
    double noise, offset;
    const char *unit;
    double sign, phase_s;
} np_case;

static tf_capture *np_capture(const np_case *c, const char *name)
{
    const char *csv = tf_test_tmpfile(name);
    int st = tf_test_system("/usr/bin/python3 '%s' '%s' %.17g %.17g %.17g %d %.17g %.17g %s %g %.17g",
                            tf_test_src("tests/support/segment_numpy.py"), csv, c->fd, c->q,
                            c->spp, c->ncyc, c->noise, c->offset, c->unit, c->sign, c->phase_s);
    assert_int_equal(st, 0);
    tf_import_options io;
    tf_import_options_init(&io);
    tf_capture *cap = NULL;
    tf_error e;
    assert_int_equal(tf_import_csv(csv, &io, &cap, &e), TF_OK);
    return cap;
}

/* Every whole lobe pi / wd long (source: the damped sine numpy wrote) within tol
 * samples; returns the number of whole lobes. */
static size_t np_check_lobes(const tf_segment_result *r, const np_case *c, double dt, double tol)
{
    size_t whole = 0;
    for (size_t j = 0; j < r->nlobes; j++) {
        const tf_lobe *l = &r->lobes[j];
        if (l->partial)
            continue;
        whole++;
        double e = fabs((l->end_s - l->start_s) - 0.5 / c->fd) / dt;
        if (e > tol)
            print_message("lobe %zu: %.3g samples off\n", j, e);
        assert_true(e <= tol);
    }
    return whole;
}

static tf_segment_result *np_segment(const tf_capture *cap)
{
    tf_roles roles;
    tf_error e;
    assert_int_equal(tf_roles_resolve(cap, NULL, NULL, &roles, &e), TF_OK);
    tf_segment_result *r = NULL;
    tf_status st = tf_segment_run(cap, &roles, NULL, &r, &e);
    if (st != TF_OK)
        print_message("segment: %s\n", e.msg);
    assert_int_equal(st, TF_OK);
    return r;
}

static void test_segment_numpy_sampling_range(void **state)
{
    (void)state;
    if (!tf_test_have("/usr/bin/python3"))
        skip();
    /* 20, 200 and 2000 samples a period, fd 500 Hz to 50 kHz, Q 3 to 30; noiseless, so
     * the boundaries must be exact to a small fraction of a sample */
    static const np_case cases[] = {
        {10e3, 8, 20, 8, 0, 0, "A", 1, 0},    {500, 3, 200, 4, 0, 0, "A", 1, 0},
        {50e3, 30, 200, 8, 0, 0, "A", 1, 0},  {10e3, 8, 2000, 3, 0, 0, "A", 1, 0},
        {10e3, 8, 20, 8, 0, 0, "mA", -1, 0},  {10e3, 8, 20, 8, 0, 0, "kA", 1, 0},
    };
    for (size_t k = 0; k < sizeof cases / sizeof cases[0]; k++) {
        tf_capture *cap = np_capture(&cases[k], "np_range.csv");
        tf_segment_result *r = np_segment(cap);
        print_message("case %zu: %zu lobes, band %g A\n", k, r->nlobes, r->band_a);
        assert_int_equal(r->topology, TF_TOPO_HALF_BRIDGE);
        assert_int_equal(r->mode, TF_MODE_NON_OVERLAPPING);
        assert_true(np_check_lobes(r, &cases[k], cap->dt_s, 0.05) >= 4 * (size_t)cases[k].ncyc - 2);
        /* source: the generator's firing rate, 0.4 fd per thyristor pair */
        assert_true(fabs(r->output_frequency_hz.median - 0.4 * cases[k].fd) < 1e-3 * cases[k].fd);
        tf_segment_free(r);
        tf_capture_destroy(cap);
    }
}

static void test_segment_numpy_noise_and_offset(void **state)
{
    (void)state;
    if (!tf_test_have("/usr/bin/python3"))
        skip();
    /* 2 A of Gaussian noise on 100 A at 20 samples a period: the band comes from the
     * dead zones (reference: numpy's sigma) and the lobes stay within a sample */
    np_case c = {10e3, 8, 20, 30, 2.0, 0, "A", 1, 0};
    tf_capture *cap = np_capture(&c, "np_noise.csv");
    tf_segment_result *r = np_segment(cap);
    assert_true(fabs(r->noise_sigma_a - 2.0) < 0.4);
    assert_true(np_check_lobes(r, &c, cap->dt_s, 1.0) >= 100);
    tf_segment_free(r);
    tf_capture_destroy(cap);

    /* 5 A of noise on 100 A (8 bands exceed the peak): the pattern is still read from
     * the lobes of at least half the largest, a half-bridge */
    np_case h = {10e3, 8, 200, 20, 5.0, 0, "A", 1, 0};
    cap = np_capture(&h, "np_heavy.csv");
    r = np_segment(cap);
    assert_int_equal(r->topology, TF_TOPO_HALF_BRIDGE);
    assert_non_null(strstr(r->topology_evidence, "same sign"));
    assert_int_equal(r->mode, TF_MODE_NON_OVERLAPPING);
    assert_true(fabs(r->noise_sigma_a - 5.0) < 0.5); /* reference: numpy's sigma */
    tf_segment_free(r);
    tf_capture_destroy(cap);

    /* a 3 A probe offset on a noiseless record: the rests stay inside the band (no
     * phantom lobes from the dead zones) and the offset is reported with its size */
    np_case o = {10e3, 8, 200, 8, 0, 3.0, "A", 1, 0};
    cap = np_capture(&o, "np_offset.csv");
    r = np_segment(cap);
    assert_int_equal(r->nlobes, 32);
    int found = 0;
    for (size_t a = 0; a < r->nanomalies; a++)
        found |= strcmp(r->anomalies[a].kind, "offset") == 0 &&
                 strstr(r->anomalies[a].text, "3 A") != NULL;
    assert_true(found);
    tf_segment_free(r);
    tf_capture_destroy(cap);

    /* three firing cycles, the record starting 30 us into a lobe */
    np_case m = {10e3, 8, 200, 3, 0, 0, "A", 1, -30e-6};
    cap = np_capture(&m, "np_mid.csv");
    r = np_segment(cap);
    assert_true(r->nlobes >= 10);
    assert_true(r->lobes[0].partial);
    assert_true(np_check_lobes(r, &m, cap->dt_s, 0.05) >= 9);
    tf_segment_free(r);
    tf_capture_destroy(cap);
}

/* Thousands of bursts at 40 dB: no noisy mid-burst crossing may read as a dead zone
 * (a diode lobe taken for the next firing). Source: the generator's firing list. */
static void test_segment_no_false_firings(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.snr_db = 40;
    c.range = 200;
    c.bits = 12;
    c.duration_s = 0.5;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    size_t thy = 0;
    for (size_t j = 0; j < r->nlobes; j++)
        thy += tf_device_is_thyristor(r->lobes[j].device);
    print_message("%zu firings, %zu thyristor lobes, %zu cycles\n", w.nfire, thy, r->ncycles);
    assert_int_equal(thy, w.nfire);
    assert_int_equal(r->ncycles, w.nfire);
    tf_segment_free(r);
    segw_free(&w);
}

/* A current that never returns to zero (a constant 5 A: a DC probe offset, not an
 * inverter) has no lobe pattern: the evidence says so, no cycle is invented. */
static void test_segment_no_pattern(void **state)
{
    (void)state;
    tf_capture *cap = tf_capture_create();
    tf_error e;
    assert_int_equal(tf_capture_alloc(cap, 1, 2000, &e), TF_OK);
    cap->dt_s = 1e-6;
    snprintf(cap->ch[0].name, sizeof cap->ch[0].name, "i");
    snprintf(cap->ch[0].unit, sizeof cap->ch[0].unit, "A");
    for (size_t k = 0; k < cap->n; k++)
        cap->ch[0].samples[k] = 5.0f;
    tf_segment_result *r = np_segment(cap);
    assert_non_null(strstr(r->topology_evidence, "nothing shows the topology"));
    assert_int_equal(r->ncycles, 0);
    assert_int_equal(r->nbursts, 0);
    tf_segment_free(r);
    tf_capture_destroy(cap);
}

/* min_faint: lobes below 8 bands (the faint tail) the record must hold */
static void ring_down_case(double R, int bits, double range, double duration_s,
                           size_t min_shown, size_t min_faint)
{
    segw_cfg c;
    segw_defaults(&c);
    c.topo = TF_TOPO_RING_DOWN;
    c.E = 400;
    c.R = R;
    c.duration_s = duration_s;
    c.snr_db = 40;
    c.bits = bits;
    c.range = range;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    if (r->topology != TF_TOPO_RING_DOWN)
        fprintf(stderr, "ring-down R %g: %s (%s)\n", R, tf_topology_name(r->topology),
                r->topology_evidence);
    assert_int_equal(r->topology, TF_TOPO_RING_DOWN);
    /* alternating lobes of one free oscillation, each pi / wd long (textbook series
     * RLC response), every device T1 or D1 */
    size_t good = 0;
    for (size_t j = 0; j + 1 < r->nlobes; j++) {
        const tf_lobe *l = &r->lobes[j];
        assert_int_equal(l->device, l->sign == r->lobes[0].sign ? TF_DEV_T1 : TF_DEV_D1);
        if (fabs(l->peak_a) > 8 * r->band_a && !l->partial) {
            assert_true(fabs((l->end_s - l->start_s) - M_PI / w.wd) < 0.5 * w.cap->dt_s);
            good++;
        }
    }
    assert_true(good >= 5);
    /* every lobe the capture can show (true peak at least two bands, the scan's floor
     * for a lobe, docs/segmenter.md) is found, attributed and within 0.5 sample
     * (issue 4), the faint tail included */
    double dt = w.cap->dt_s, dur = (double)w.cap->n * dt, worst = 0;
    size_t shown = 0, faint = 0;
    for (size_t v = 0; v < w.niv; v++) {
        const segw_interval *iv = &w.iv[v];
        if (iv->t0 < 2e-6 || iv->t1 > dur - 2e-6 || iv->peak < 2 * r->band_a)
            continue;
        const tf_lobe *l = NULL;
        for (size_t j = 0; j < r->nlobes && !l; j++)
            if (fabs(r->lobes[j].start_s - iv->t0) < 0.25 * (iv->t1 - iv->t0) &&
                fabs(r->lobes[j].end_s - iv->t1) < 0.25 * (iv->t1 - iv->t0))
                l = &r->lobes[j];
        if (!l)
            fprintf(stderr, "ring-down lobe %.9f..%.9f (peak %.3g A, band %.3g A) not found\n",
                    iv->t0, iv->t1, iv->peak, r->band_a);
        assert_non_null(l);
        /* the generator names a ring-down's lobes by sign, the segmenter by the first
         * lobe's direction (the loop above checks that): the sign must follow the truth */
        assert_int_equal(l->device == TF_DEV_T1, iv->dev == w.iv[0].dev);
        double e = fmax(fabs(l->start_s - iv->t0), fabs(l->end_s - iv->t1)) / dt;
        if (e > 0.5)
            fprintf(stderr, "ring-down lobe %.9f (peak %.3g A): %+.3f / %+.3f samples\n", iv->t0,
                    iv->peak, (l->start_s - iv->t0) / dt, (l->end_s - iv->t1) / dt);
        assert_true(e <= 0.5);
        worst = fmax(worst, e);
        shown++;
        faint += iv->peak < 8 * r->band_a;
    }
    if (getenv("SEG_ERR"))
        fprintf(stderr, "ring-down: %zu lobes shown (%zu below 8 bands), largest error %.3f "
                "sample\n", shown, faint, worst);
    assert_true(shown >= min_shown && faint >= min_faint);
    assert_int_equal(r->nbursts, 1);
    tf_segment_free(r);
    segw_free(&w);
}

static void test_segment_ring_down(void **state)
{
    (void)state;
    ring_down_case(0.15, 0, 0, 1.5e-3, 19, 0);
    /* a faster decay into 8-bit quantisation over +/-500 A: the tail fades out */
    ring_down_case(0.35, 8, 500, 1.5e-3, 12, 2);
    /* Q about 40: more lobes than one chain holds (64), the last ones faint */
    ring_down_case(0.05, 8, 500, 6e-3, 70, 20);
}

static void test_segment_clipped_current(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.snr_db = 40;
    c.range = 120; /* the peaks (about 150 A) are cut */
    c.bits = 10;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    assert_true(count_anomalies(r, "clipped") >= 4);
    size_t clipped = 0;
    for (size_t j = 0; j < r->nlobes; j++)
        clipped += r->lobes[j].clipped;
    assert_true(clipped >= 4);
    /* the timing does not depend on the tops */
    expect_all(&w, r, 0.5 * w.cap->dt_s);
    check_turnoff(&w, r, 2e-6);
    tf_segment_free(r);
    segw_free(&w);
}

static void test_segment_unclipped_quantised_peaks_not_clipped(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.range = 200;
    c.bits = 8; /* flat quantised tops, but nothing at the range */
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    assert_int_equal(count_anomalies(r, "clipped"), 0);
    tf_segment_free(r);
    segw_free(&w);
}

static void test_segment_commutation_failure(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.noise = 1.0;
    c.tq_s = 200e-6; /* longer than the diode interval: the thyristor re-conducts */
    c.fire_step_s = 400e-6;
    c.duration_s = 2e-3;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    size_t refires = 0;
    for (size_t v = 0; v < w.niv; v++)
        refires += w.iv[v].refire;
    assert_true(refires >= 2);
    tf_segment_result *r = segment(&w, TF_TOPO_HALF_BRIDGE);
    assert_true(count_anomalies(r, "commutation-failure") >= refires - 1);
    tf_segment_free(r);
    segw_free(&w);
}

static void test_segment_missing_firing(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.noise = 1.0;
    c.skip_firing = 7;
    c.duration_s = 3e-3;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_HALF_BRIDGE);
    assert_true(count_anomalies(r, "missing-firing") >= 1);
    double want = c.t_first_s + 7 * c.fire_step_s;
    int near = 0;
    for (size_t a = 0; a < r->nanomalies; a++)
        if (strcmp(r->anomalies[a].kind, "missing-firing") == 0 &&
            fabs(r->anomalies[a].time_s - want) < c.fire_step_s)
            near = 1;
    assert_true(near);
    tf_segment_free(r);
    segw_free(&w);
}

/* A probe offset smaller than the band: the timing holds and the rest level is reported. */
static void test_segment_offset_reported(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.snr_db = 40;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    float *x = w.cap->ch[0].samples;
    double off = 2.0 * w.noise; /* half of the 4-sigma band */
    for (size_t k = 0; k < w.cap->n; k++)
        x[k] += (float)off;
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    assert_int_equal(count_anomalies(r, "offset"), 1);
    for (size_t a = 0; a < r->nanomalies; a++)
        if (strcmp(r->anomalies[a].kind, "offset") == 0)
            assert_non_null(strstr(r->anomalies[a].text, "--offset"));
    assert_int_equal(r->mode, TF_MODE_NON_OVERLAPPING);
    tf_segment_free(r);
    /* and none without the offset */
    for (size_t k = 0; k < w.cap->n; k++)
        x[k] -= (float)off;
    r = segment(&w, TF_TOPO_UNKNOWN);
    assert_int_equal(count_anomalies(r, "offset"), 0);
    tf_segment_free(r);
    segw_free(&w);
}

/* A record long enough for the two-thread scan and burst fits (>= 2e6 samples): every
 * interval still found, attributed and placed within 0.5 sample. */
static void test_segment_long_record_threads(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.snr_db = 45;
    c.duration_s = 0.23; /* 2.3e6 samples */
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    assert_int_equal(r->mode, TF_MODE_NON_OVERLAPPING);
    match_stats m = match(&w, r, 2e-6);
    assert_true(m.truth > 2500);
    assert_int_equal(m.found, m.truth);
    assert_int_equal(m.attributed, m.truth);
    assert_true(m.max_err_s <= 0.5 * w.cap->dt_s);
    assert_int_equal(r->nanomalies, 0);
    tf_segment_free(r);
    segw_free(&w);
}

static void test_segment_errors(void **state)
{
    (void)state;
    tf_capture *cap = tf_capture_create();
    assert_non_null(cap);
    assert_int_equal(tf_capture_alloc(cap, 1, 1000, NULL), TF_OK);
    cap->dt_s = 1e-7;
    strcpy(cap->ch[0].name, "i");
    for (size_t k = 0; k < cap->n; k++)
        cap->ch[0].samples[k] = 0;
    tf_roles roles = roles_for(cap);
    tf_segment_result *r = (tf_segment_result *)1;
    tf_error err;
    tf_error_clear(&err);
    assert_int_equal(tf_segment_run(cap, &roles, NULL, &r, &err), TF_ERR_DATA);
    assert_null(r);
    assert_non_null(strstr(err.msg, "expected"));
    roles.current = -1;
    assert_int_equal(tf_segment_run(cap, &roles, NULL, &r, &err), TF_ERR_USAGE);
    tf_segment_free(NULL);
    tf_capture_destroy(cap);
}

static void test_segment_json_keys(void **state)
{
    (void)state;
    segw_cfg c;
    segw_defaults(&c);
    c.noise = 1.0;
    segw_out w;
    assert_int_equal(segw_make(&c, &w), 0);
    tf_segment_result *r = segment(&w, TF_TOPO_UNKNOWN);
    json_t *j = tf_segment_to_json(r);
    assert_non_null(j);
    assert_string_equal(json_string_value(json_object_get(j, "mode")), "non-overlapping");
    assert_string_equal(json_string_value(json_object_get(j, "topology")), "half-bridge");
    json_t *lobes = json_object_get(j, "lobes"), *cycles = json_object_get(j, "cycles");
    assert_int_equal(json_array_size(lobes), r->nlobes);
    const char *lk[] = {"start_s", "end_s", "sign", "device", "peak_a"};
    for (int k = 0; k < 5; k++)
        assert_non_null(json_object_get(json_array_get(lobes, 1), lk[k]));
    const char *ck[] = {"start_s", "period_s", "frequency_hz", "thyristor_s", "diode_s",
                        "turnoff_available_s", "dead_s", "overlap_s"};
    for (int k = 0; k < 8; k++)
        assert_non_null(json_object_get(json_array_get(cycles, 0), ck[k]));
    json_t *t = json_object_get(j, "timing");
    const char *tk[] = {"output_frequency_hz", "diode_s", "turnoff_available_s"};
    for (int k = 0; k < 3; k++) {
        json_t *s = json_object_get(t, tk[k]);
        assert_true(json_is_real(json_object_get(s, "min")));
        assert_true(json_is_real(json_object_get(s, "median")));
        assert_true(json_is_real(json_object_get(s, "max")));
    }
    assert_true(json_is_array(json_object_get(j, "anomalies")));
    json_decref(j);
    tf_segment_free(r);
    segw_free(&w);
}


/* ---- simulator captures (tankfit's own engine, include/tankfit/synth.h) ------------ */

/* capture: the current's vertical range ("" for 150 A) */
static const char *sim_design(const char *topology, const char *freq, const char *tq,
                              const char *extra, const char *capture)
{
    static char text[4096];
    snprintf(text, sizeof text,
             "[inverter]\ntopology = %s\ncapacitor = series\ndc_link = 540 V\n%s%s\n%s\n"
             "[tank]\ncapacitance = 2.2 uF\ninductance = 36 uH\nresistance = 0.45 ohm\n"
             "[switch]\nturnoff_time = %s\nthyristor_drop = 1.6 V\ndiode_drop = 1.1 V\n"
             "[capture]\nsample_rate = 10 MS/s\nduration = 3 ms\nseed = 5\nadc_bits = 8\n"
             "i_load.noise = 0.4 A\ni_load.range = %s\nv_out.range = 800 V\n"
             "v_out.skew = 50 ns\nv_c.range = 1000 V\nv_ak1.range = 1000 V\n",
             topology, freq[0] ? "firing_frequency = " : "", freq, extra, tq,
             capture[0] ? capture : "150 A");
    return text;
}

typedef struct sim_case {
    tf_capture *cap;
    json_t *truth;
    tf_segment_result *r;
} sim_case;

static void sim_run(sim_case *c, const char *text, int use_gates)
{
    tf_design *d = malloc(sizeof *d);
    assert_non_null(d);
    tf_design_init(d);
    tf_error err;
    tf_error_clear(&err);
    if (tf_design_parse(text, strlen(text), "test.ini", d, &err) != TF_OK)
        fprintf(stderr, "design: %s\n", err.msg);
    assert_int_equal(tf_design_parse(text, strlen(text), "test.ini", d, &err), TF_OK);
    if (tf_synth_to_capture(d, 0, &c->cap, &c->truth, &err) != TF_OK)
        fprintf(stderr, "synth: %s\n", err.msg);
    assert_non_null(c->cap);
    tf_roles roles;
    assert_int_equal(tf_roles_resolve(c->cap, NULL, d, &roles, &err), TF_OK);
    if (!use_gates)
        for (int g = 0; g < 4; g++)
            roles.gate[g] = -1;
    tf_segment_options o;
    tf_segment_options_init(&o); /* topology inferred, not taken from the design */
    assert_int_equal(tf_segment_run(c->cap, &roles, &o, &c->r, &err), TF_OK);
    free(d);
}

static void sim_free(sim_case *c)
{
    tf_segment_free(c->r);
    json_decref(c->truth);
    tf_capture_destroy(c->cap);
}

/* Every simulated interval away from the record's edges that the capture can show (its
 * true peak at least two of the segmenter's bands, the scan's floor for a lobe:
 * docs/segmenter.md) is a lobe with the right device; every boundary within 0.5 sample,
 * at a zero and at a firing inside a same-sign stretch alike (measured at firings on the
 * overlapping half and full bridges at 9-11 kHz: 0.20-0.42 sample); turn-off time
 * available within 1 sample + 0.5 % (issue 4). */
static void sim_check(const sim_case *c, size_t min_count, int check_turnoff)
{
    const double dt = c->cap->dt_s, end = (double)c->cap->n * dt;
    const tf_segment_result *r = c->r;
    json_t *iv = json_object_get(c->truth, "intervals");
    size_t checked = 0, idx, nfire = 0;
    double worst[2] = {0, 0};
    json_t *v;
    json_array_foreach(iv, idx, v) {
        double t0 = json_real_value(json_object_get(v, "start_s"));
        double t1 = json_real_value(json_object_get(v, "end_s"));
        double pk = json_real_value(json_object_get(v, "peak_a"));
        const char *dev = json_string_value(json_object_get(v, "device"));
        if (t0 < 2e-6 || t1 > end - 2e-6 || fabs(pk) < 2 * r->band_a)
            continue;
        const tf_lobe *l = NULL;
        for (size_t j = 0; j < r->nlobes && !l; j++)
            if (fabs(r->lobes[j].start_s - t0) < 0.25 * (t1 - t0) &&
                fabs(r->lobes[j].end_s - t1) < 0.25 * (t1 - t0))
                l = &r->lobes[j];
        if (!l)
            fprintf(stderr, "interval %s %.9f..%.9f not found\n", dev, t0, t1);
        assert_non_null(l);
        assert_string_equal(tf_device_name(l->device), dev);
        size_t li = (size_t)(l - r->lobes);
        int fs = li > 0 && r->lobes[li - 1].end_by_firing, fe = l->end_by_firing;
        double es = fabs(l->start_s - t0), ee = fabs(l->end_s - t1);
        if (es > 0.5 * dt || ee > 0.5 * dt)
            fprintf(stderr, "%s at %.9f: start err %.3f, end err %.3f samples\n", dev, t0,
                    (l->start_s - t0) / dt, (l->end_s - t1) / dt);
        assert_true(es <= 0.5 * dt);
        assert_true(ee <= 0.5 * dt);
        worst[0] = fmax(worst[0], fmax(fs ? 0 : es, fe ? 0 : ee) / dt);
        worst[1] = fmax(worst[1], fmax(fs ? es : 0, fe ? ee : 0) / dt);
        nfire += fs + fe;
        checked++;
    }
    if (getenv("SEG_ERR"))
        fprintf(stderr, "sim: %zu lobes checked, largest error %.3f sample at zeros, %.3f at "
                "%zu firing splits\n", checked, worst[0], worst[1], nfire);
    assert_true(checked >= min_count);
    if (!check_turnoff)
        return;
    size_t nto = 0;
    json_array_foreach(json_object_get(c->truth, "turnoff"), idx, v) {
        json_t *to = json_object_get(v, "t_off_s");
        double ts = json_real_value(json_object_get(v, "start_s"));
        if (!json_is_number(to) || ts < 2e-6)
            continue;
        double want = json_number_value(to);
        for (size_t k = 0; k < r->ncycles; k++)
            if (fabs(r->cycles[k].start_s - ts) < 2 * dt && isfinite(r->cycles[k].turnoff_available_s)) {
                double e = fabs(r->cycles[k].turnoff_available_s - want);
                if (e > dt + 0.005 * want)
                    fprintf(stderr, "t_off at %.9f: %.9g vs %.9g\n", ts,
                            r->cycles[k].turnoff_available_s, want);
                assert_true(e <= dt + 0.005 * want); /* issue 4: 1 sample + 0.5 % */
                nto++;
            }
    }
    assert_true(nto >= 5);
}


static void test_segment_sim_half_bridge_current_only(void **state)
{
    (void)state;
    sim_case c = {0};
    sim_run(&c, sim_design("half-bridge", "6 kHz", "20 us", "", ""), 0);
    assert_int_equal(c.r->topology, TF_TOPO_HALF_BRIDGE);
    assert_string_equal(tf_mode_name(c.r->mode),
                        json_string_value(json_object_get(c.truth, "mode")));
    sim_check(&c, 8, 1);
    assert_int_equal(c.r->nanomalies, 0);
    sim_free(&c);
}

static void test_segment_sim_half_bridge_overlapping_gates(void **state)
{
    (void)state;
    sim_case c = {0};
    sim_run(&c, sim_design("half-bridge", "10 kHz", "10 us", "", ""), 1);
    assert_string_equal(json_string_value(json_object_get(c.truth, "mode")), "overlapping");
    assert_int_equal(c.r->mode, TF_MODE_OVERLAPPING);
    sim_check(&c, 8, 1);
    /* the switch voltage here is 8-bit over +/-1 kV (7.8 V steps): it cannot show a
     * reverse bias of one diode drop, so no reverse-bias time is claimed */
    assert_int_equal(c.r->reverse_bias_s.count, 0);
    assert_true(c.r->reverse_bias_unresolved >= 5);
    sim_free(&c);
}

/* A firing a few samples before the diode's natural zero (9 kHz: an overlap of about
 * 0.2 us, the current at the firing within the band): the current only touches zero,
 * yet the diode interval ends at the firing, found as the meeting point of the two
 * pieces, with and without the gates (issue 4: 0.5 sample, turn-off time within
 * 1 sample + 0.5 %). At 9.1 kHz the splits hide in same-sign stretches and the lobes
 * shrink after the start-up transient: a bridge, not a ring-down. */
static void test_segment_sim_overlap_near_zero(void **state)
{
    (void)state;
    /* 9.2 kHz: the record's end cuts the last stretch after its firing (the thyristor
     * piece's zero lies past the end): split at the gate edge, or from the current alone
     * with that zero searched */
    const char *freq[] = {"9 kHz", "9.1 kHz", "9.2 kHz"};
    for (int f = 0; f < 3; f++)
        for (int g = 0; g < 2; g++) {
            sim_case c = {0};
            sim_run(&c, sim_design("half-bridge", freq[f], "10 us", "", ""), g);
            assert_string_equal(json_string_value(json_object_get(c.truth, "mode")),
                                "overlapping");
            assert_int_equal(c.r->topology, TF_TOPO_HALF_BRIDGE);
            assert_int_equal(c.r->mode, TF_MODE_OVERLAPPING);
            sim_check(&c, 8, 1);
            sim_free(&c);
        }
}

static void test_segment_sim_full_bridge_clipped(void **state)
{
    (void)state;
    sim_case c = {0};
    sim_run(&c, sim_design("full-bridge", "6 kHz", "20 us", "", ""), 1);
    assert_int_equal(c.r->topology, TF_TOPO_FULL_BRIDGE);
    assert_int_equal(c.r->mode, TF_MODE_NON_OVERLAPPING);
    /* the peaks (about 160 A) pass the 150 A range: clipped stretches found and marked */
    assert_true(json_real_value(json_object_get(c.truth, "peak_current_a")) > 150);
    assert_true(count_anomalies(c.r, "clipped") >= 1);
    size_t marked = 0;
    for (size_t j = 0; j < c.r->nlobes; j++)
        marked += c.r->lobes[j].clipped;
    assert_true(marked >= 1);
    sim_check(&c, 8, 1);
    sim_free(&c);
}

static void test_segment_sim_single_switch(void **state)
{
    (void)state;
    sim_case c = {0};
    sim_run(&c, sim_design("single", "6 kHz", "20 us",
                           "reset_inductance = 2 mH\nreset_resistance = 0.8 ohm", ""), 0);
    assert_int_equal(c.r->topology, TF_TOPO_SINGLE);
    assert_int_equal(c.r->mode, TF_MODE_NON_OVERLAPPING);
    sim_check(&c, 8, 1);
    sim_free(&c);
}

static void test_segment_sim_ring_down(void **state)
{
    (void)state;
    sim_case c = {0};
    sim_run(&c, sim_design("ring-down", "", "20 us", "precharge = 300 V",
                           "400 A"), 0);
    assert_int_equal(c.r->topology, TF_TOPO_RING_DOWN);
    /* the 8-bit step is about 3 A here and sets the band: every lobe down to two steps,
     * the tail of a tank with Q about 9 included (11 of its 17 lobes past the first,
     * which starts with the record; the last four stay within a step of zero) */
    sim_check(&c, 11, 0);
    sim_free(&c);
}

static void test_segment_sim_commutation_failure(void **state)
{
    (void)state;
    sim_case c = {0};
    /* t_q of 40 us against about 28 us of diode interval: T1 re-conducts */
    sim_run(&c, sim_design("half-bridge", "6 kHz", "40 us", "", ""), 1);
    json_t *f = json_object_get(c.truth, "commutation_failures");
    assert_true(json_array_size(f) >= 1);
    double first = json_real_value(json_object_get(json_array_get(f, 0), "t_s"));
    int found = 0;
    for (size_t a = 0; a < c.r->nanomalies; a++)
        if (strcmp(c.r->anomalies[a].kind, "commutation-failure") == 0 &&
            fabs(c.r->anomalies[a].time_s - first) < 30e-6)
            found = 1;
    assert_true(found);
    sim_free(&c);
}

/* An inverted current probe with gate channels: the devices follow the gates. */
static void test_segment_sim_inverted_probe_gates(void **state)
{
    (void)state;
    sim_case c = {0};
    sim_run(&c, sim_design("half-bridge", "6 kHz", "20 us", "", ""), 1);
    tf_roles roles;
    tf_error err;
    assert_int_equal(tf_roles_resolve(c.cap, NULL, NULL, &roles, &err), TF_OK);
    float *x = c.cap->ch[roles.current].samples;
    for (size_t k = 0; k < c.cap->n; k++)
        x[k] = -x[k];
    tf_segment_free(c.r);
    c.r = NULL;
    assert_int_equal(tf_segment_run(c.cap, &roles, NULL, &c.r, &err), TF_OK);
    assert_non_null(strstr(c.r->topology_evidence, "inverted"));
    assert_int_equal(c.r->nanomalies, 0);
    /* the truth's devices, with every lobe's sign flipped */
    json_t *iv = json_object_get(c.truth, "intervals");
    size_t idx, checked = 0;
    json_t *v;
    json_array_foreach(iv, idx, v) {
        double t0 = json_real_value(json_object_get(v, "start_s"));
        for (size_t j = 0; j < c.r->nlobes; j++)
            if (fabs(c.r->lobes[j].start_s - t0) < 2 * c.cap->dt_s && t0 > 1e-6) {
                assert_string_equal(tf_device_name(c.r->lobes[j].device),
                                    json_string_value(json_object_get(v, "device")));
                checked++;
            }
    }
    assert_true(checked >= 20);
    sim_free(&c);
}

/* With a stray inductance in the thyristor-diode loop the switch voltage turns positive
 * before the diode stops (DOMAIN.md section 3): the reverse-bias time from the switch
 * voltage must match the simulator's and be shorter than the turn-off time available. */
static void test_segment_sim_switch_voltage_reverse_bias(void **state)
{
    (void)state;
    sim_case c = {0};
    sim_run(&c, sim_design("half-bridge", "6 kHz", "20 us", "", ""), 0);
    sim_free(&c);
    char text[4096];
    snprintf(text, sizeof text, "%s", sim_design("half-bridge", "6 kHz", "20 us", "", ""));
    char *sw = strstr(text, "diode_drop = 1.1 V\n");
    assert_non_null(sw);
    memmove(sw + 19 + 26, sw + 19, strlen(sw + 19) + 1);
    memcpy(sw + 19, "stray_inductance = 300 nH\n", 26);
    strcat(text, "v_ak1.bits = 14\n");
    sim_run(&c, text, 0);
    size_t n = 0, idx;
    json_t *v;
    json_array_foreach(json_object_get(c.truth, "turnoff"), idx, v) {
        json_t *tr = json_object_get(v, "t_reverse_s");
        double ts = json_real_value(json_object_get(v, "start_s"));
        if (!json_is_number(tr) || ts < 2e-6)
            continue;
        for (size_t k = 0; k < c.r->ncycles; k++) {
            const tf_cycle *cy = &c.r->cycles[k];
            if (fabs(cy->start_s - ts) > 2 * c.cap->dt_s || !isfinite(cy->reverse_bias_s))
                continue;
            double want = json_number_value(tr);
            /* source: the simulator's switch-voltage truth; tolerance of issue 4 */
            assert_true(fabs(cy->reverse_bias_s - want) <= c.cap->dt_s + 0.005 * want);
            assert_true(cy->reverse_bias_s < 0.9 * cy->turnoff_available_s);
            n++;
        }
    }
    assert_true(n >= 5);
    assert_true(c.r->reverse_bias_s.count >= 5);
    sim_free(&c);
}

/* Lobes of a noise-free current sampled finely (an ngspice run on a fine grid): maximal
 * runs of one sign beyond +/-lo. Each boundary comes from a least-squares line through
 * the run's samples between lo and hi at that end, extrapolated to zero: only samples
 * that lie inside the lobe are used, so a dead zone (current exactly 0) next to the
 * boundary does not pull the line. Runs of fewer than 20 samples are skipped. */
typedef struct ref_lobe {
    double t0, t1;
    int sign;
} ref_lobe;

static double ref_zero(const float *x, size_t from, size_t to, int step, double t0, double dt,
                       double hi)
{
    /* samples from index `from` walking by `step` while |x| < hi, at most up to `to` */
    double s1 = 0, st = 0, sx = 0, stt = 0, stx = 0;
    for (size_t k = from;; k = (size_t)((long)k + step)) {
        double v = x[k];
        if (fabs(v) >= hi && s1 >= 3)
            break;
        double t = t0 + (double)k * dt;
        s1 += 1;
        st += t;
        sx += v;
        stt += t * t;
        stx += t * v;
        if (k == to)
            break;
    }
    double tm = st / s1, xm = sx / s1;
    double slope = (stx - s1 * tm * xm) / (stt - s1 * tm * tm);
    return tm - xm / slope;
}

static size_t ref_lobes(const float *x, size_t n, double t0, double dt, double lo, double hi,
                        ref_lobe *out, size_t max)
{
    size_t count = 0, k = 0;
    while (k < n) {
        if (fabs((double)x[k]) <= lo) {
            k++;
            continue;
        }
        int s = x[k] > 0 ? 1 : -1;
        size_t a = k;
        while (k < n && s * (double)x[k] > lo)
            k++;
        size_t b = k - 1;
        if (b - a < 20 || a == 0 || k == n)
            continue;
        if (count < max) {
            out[count].t0 = ref_zero(x, a, b, 1, t0, dt, hi);
            out[count].t1 = ref_zero(x, b, a, -1, t0, dt, hi);
            out[count].sign = s;
        }
        count++;
    }
    return count;
}

/* Every `factor`-th sample of cap from the one at a whole multiple of factor x dt: a
 * capture on the coarse grid (linearize's values there, as a coarse run gives them). */
static tf_capture *decimate(const tf_capture *cap, size_t factor)
{
    long long m = llround(cap->t0_s / cap->dt_s);
    size_t k0 = (size_t)((((long long)factor - m % (long long)factor)) % (long long)factor);
    size_t n = (cap->n - k0 + factor - 1) / factor;
    tf_capture *c = tf_capture_create();
    tf_error err;
    assert_non_null(c);
    assert_int_equal(tf_capture_alloc(c, cap->nchan, n, &err), TF_OK);
    for (size_t ch = 0; ch < cap->nchan; ch++) {
        snprintf(c->ch[ch].name, sizeof c->ch[ch].name, "%s", cap->ch[ch].name);
        snprintf(c->ch[ch].unit, sizeof c->ch[ch].unit, "%s", cap->ch[ch].unit);
        for (size_t k = 0; k < n; k++)
            c->ch[ch].samples[k] = cap->ch[ch].samples[k0 + k * factor];
    }
    c->t0_s = cap->t0_s + (double)k0 * cap->dt_s;
    c->dt_s = cap->dt_s * (double)factor;
    return c;
}

/* ngspice simulates the same half-bridge from its netlist (an independent circuit
 * simulator) on a grid ten times finer than the capture's: the lobes the segmenter finds
 * on every tenth sample must sit on ngspice's own current zeros, taken from the fine
 * data, within 0.5 sample, and the turn-off time available must match them within
 * 1 sample + 0.5 % (issue 4). A zero taken from the coarse samples alone is biased where
 * a lobe meets a dead zone: the sample on the dead side is exactly 0 (the switch closes,
 * or the diode blocks, partway through the interval), so the slope through the two
 * bracketing samples is too small (up to 0.67 sample off at a firing). */
static void test_segment_ngspice_reference(void **state)
{
    (void)state;
    if (!tf_spice_available()) {
        skip();
        return;
    }
    const char *text = sim_design("half-bridge", "6 kHz", "20 us", "", "");
    tf_design *d = malloc(sizeof *d);
    assert_non_null(d);
    tf_error err;
    assert_int_equal(tf_design_parse(text, strlen(text), "spice.ini", d, &err), TF_OK);
    d->duration_s = 1.2e-3;
    const size_t factor = 10;
    tf_spice_options so;
    tf_spice_options_init(&so);
    so.name = "segment_stage";
    so.t_step_s = 1.0 / (d->sample_rate_hz * (double)factor);
    so.max_step_s = 50e-9; /* keeps ngspice to a few seconds */
    tf_capture *fine = NULL;
    char msg[512];
    if (tf_spice_run(d, &so, &fine, msg, sizeof msg) != 0) {
        print_message("ngspice: %s\n", msg);
        fail();
    }
    int ci = tf_capture_find(fine, "i_load");
    assert_true(ci >= 0);
    tf_capture *cap = decimate(fine, factor);
    assert_true(fabs(cap->dt_s - 1.0 / d->sample_rate_hz) < 1e-6 * cap->dt_s);
    tf_roles roles = roles_for(cap);
    for (int g = 0; g < 4; g++)
        roles.gate[g] = -1;
    roles.current = ci;
    tf_segment_result *r = NULL;
    assert_int_equal(tf_segment_run(cap, &roles, NULL, &r, &err), TF_OK);
    assert_int_equal(r->topology, TF_TOPO_HALF_BRIDGE);
    assert_int_equal(r->mode, TF_MODE_NON_OVERLAPPING);
    /* reference: ngspice current zeros, from line fits through the fine samples between
     * 0.2 % and 2 % of the peak (about 0.2 to 2 coarse samples from the zero) */
    const float *x = fine->ch[ci].samples;
    double dt = cap->dt_s, peak = 0;
    for (size_t k = 0; k < fine->n; k++)
        peak = fmax(peak, fabs((double)x[k]));
    ref_lobe ref[64];
    size_t nref = ref_lobes(x, fine->n, fine->t0_s, fine->dt_s, 2e-3 * peak, 2e-2 * peak, ref, 64);
    assert_true(nref > 10 && nref <= 64);
    size_t checked = 0, nto = 0;
    double worst = 0;
    for (size_t i = 0; i < nref; i++) {
        const ref_lobe *z = &ref[i];
        if (z->t0 < 5e-6 || z->t1 > cap->t0_s + (double)cap->n * dt - 5e-6)
            continue;
        const tf_lobe *l = NULL;
        for (size_t j = 0; j < r->nlobes && !l; j++)
            if (fabs(r->lobes[j].start_s - z->t0) < 5e-6)
                l = &r->lobes[j];
        assert_non_null(l);
        assert_int_equal(l->sign, z->sign);
        print_message("lobe at %.9f: %+.3f / %+.3f samples against ngspice\n", z->t0,
                      (l->start_s - z->t0) / dt, (l->end_s - z->t1) / dt);
        worst = fmax(worst, fmax(fabs(l->start_s - z->t0), fabs(l->end_s - z->t1)) / dt);
        /* reference: ngspice; issue 4: crossing times within 0.5 sample period */
        assert_true(fabs(l->start_s - z->t0) <= 0.5 * dt);
        assert_true(fabs(l->end_s - z->t1) <= 0.5 * dt);
        /* a diode lobe's duration is the turn-off time available to the thyristor before */
        if (!tf_device_is_thyristor(l->device)) {
            int found = 0;
            for (size_t c = 0; c < r->ncycles; c++)
                if (r->cycles[c].lobe_diode == (size_t)(l - r->lobes)) {
                    double want = z->t1 - z->t0;
                    /* reference: ngspice; issue 4: 1 sample + 0.5 % */
                    assert_true(fabs(r->cycles[c].turnoff_available_s - want) <= dt + 0.005 * want);
                    found = 1;
                    nto++;
                }
            assert_true(found);
        }
        checked++;
    }
    print_message("ngspice: %zu lobes checked (of %zu), %zu turn-off times, largest boundary "
                  "error %.3f sample\n", checked, nref, nto, worst);
    assert_true(checked >= 20);
    assert_true(nto >= 10);
    tf_segment_free(r);
    tf_capture_destroy(cap);
    tf_capture_destroy(fine);
    free(d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_segment_textbook_diode_interval),
        cmocka_unit_test(test_segment_noisy_half_bridge),
        cmocka_unit_test(test_segment_chain_fit_converges),
        cmocka_unit_test(test_segment_dead_zone_bias_removed),
        cmocka_unit_test(test_segment_single_switch),
        cmocka_unit_test(test_segment_full_bridge_gates),
        cmocka_unit_test(test_segment_continuous),
        cmocka_unit_test(test_segment_overlapping_current_only),
        cmocka_unit_test(test_segment_overlapping_gates),
        cmocka_unit_test(test_segment_coarse_sampling),
        cmocka_unit_test(test_segment_numpy_sampling_range),
        cmocka_unit_test(test_segment_numpy_noise_and_offset),
        cmocka_unit_test(test_segment_no_false_firings),
        cmocka_unit_test(test_segment_no_pattern),
        cmocka_unit_test(test_segment_ring_down),
        cmocka_unit_test(test_segment_clipped_current),
        cmocka_unit_test(test_segment_unclipped_quantised_peaks_not_clipped),
        cmocka_unit_test(test_segment_commutation_failure),
        cmocka_unit_test(test_segment_missing_firing),
        cmocka_unit_test(test_segment_offset_reported),
        cmocka_unit_test(test_segment_long_record_threads),
        cmocka_unit_test(test_segment_errors),
        cmocka_unit_test(test_segment_json_keys),
        cmocka_unit_test(test_segment_sim_half_bridge_current_only),
        cmocka_unit_test(test_segment_sim_half_bridge_overlapping_gates),
        cmocka_unit_test(test_segment_sim_overlap_near_zero),
        cmocka_unit_test(test_segment_sim_full_bridge_clipped),
        cmocka_unit_test(test_segment_sim_single_switch),
        cmocka_unit_test(test_segment_sim_ring_down),
        cmocka_unit_test(test_segment_sim_commutation_failure),
        cmocka_unit_test(test_segment_sim_switch_voltage_reverse_bias),
        cmocka_unit_test(test_segment_sim_inverted_probe_gates),
        cmocka_unit_test(test_segment_ngspice_reference),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
