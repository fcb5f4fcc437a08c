/* Spectrum and power: synchronous harmonics, THD, phases, power and skew, against
 * closed-form Fourier series, AC power theory and numpy.fft. */
#include "tf_test.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sndfile.h>
#include <tankfit/tankfit.h>

#include "spectrum_internal.h"

/* ---- helpers --------------------------------------------------------------------- */

/* A sum of harmonics: x(t) = dc + sum_h amp[h] cos(2 pi h f t + ph[h]). */
typedef struct harmonic_signal {
    double f, dc;
    int H;
    double amp[32], ph[32];
} harmonic_signal;

static double hs_value(const harmonic_signal *s, double t)
{
    double v = s->dc;
    for (int h = 1; h <= s->H; h++)
        v += s->amp[h] * cos(2.0 * M_PI * h * s->f * t + s->ph[h]);
    return v;
}

static tf_capture *new_capture(size_t nchan, size_t n, double dt, double t0)
{
    tf_capture *cap = tf_capture_create();
    assert_non_null(cap);
    tf_error err;
    assert_int_equal(tf_capture_alloc(cap, nchan, n, &err), TF_OK);
    cap->dt_s = dt;
    cap->t0_s = t0;
    return cap;
}

/* Channel c of cap holds s sampled at t0 + k dt - delay (a probe delay). */
static void fill_signal(tf_capture *cap, size_t c, const harmonic_signal *s, double delay,
                        const char *name, const char *unit)
{
    for (size_t k = 0; k < cap->n; k++)
        cap->ch[c].samples[k] = (float)hs_value(s, tf_capture_time(cap, k) - delay);
    snprintf(cap->ch[c].name, sizeof cap->ch[c].name, "%s", name);
    snprintf(cap->ch[c].unit, sizeof cap->ch[c].unit, "%s", unit);
}

static tf_roles roles_of(int current, int voltage, int cap_voltage)
{
    tf_roles r;
    memset(&r, 0, sizeof r);
    r.current = current;
    r.voltage = voltage;
    r.cap_voltage = cap_voltage;
    r.switch_voltage = -1;
    for (int g = 0; g < 4; g++)
        r.gate[g] = -1;
    return r;
}

static tf_spectrum_result *run(const tf_capture *cap, const tf_roles *roles,
                               const tf_segment_result *seg, const tf_spectrum_options *o)
{
    tf_spectrum_result *r = NULL;
    tf_error err;
    tf_error_clear(&err);
    tf_status st = tf_spectrum_run(cap, roles, seg, o, &r, &err);
    if (st != TF_OK)
        fail_msg("tf_spectrum_run: %s", err.msg);
    assert_non_null(r);
    return r;
}

static double wrap_rad(double a)
{
    return atan2(sin(a), cos(a));
}

/* ---- 7-smooth lengths ------------------------------------------------------------ */

static void test_spectrum_smooth_lengths(void **state)
{
    (void)state;
    /* source: prime factorisation (421 is prime; 432 = 2^4 3^3, 420 = 2^2 3 5 7,
     * 1008 = 2^4 3^2 7, 1666 = 2 7^2 17, 1680 = 2^4 3 5 7) */
    assert_int_equal(tf_spectrum_smooth_up(421), 432);
    assert_int_equal(tf_spectrum_smooth_down(421), 420);
    assert_int_equal(tf_spectrum_smooth_up(1001), 1008);
    assert_int_equal(tf_spectrum_smooth_up(1667), 1680);
    assert_int_equal(tf_spectrum_smooth_up(1000), 1000);
    assert_int_equal(tf_spectrum_smooth_down(1), 1);
    assert_int_equal(tf_spectrum_smooth_up(11), 12);
}

/* ---- interpolation error --------------------------------------------------------- */

static void test_spectrum_cubic_error(void **state)
{
    (void)state;
    /* source: Lagrange interpolation remainder, |f - p| <= max|f''''| / 4! *
     * max|prod (x - x_k)| = A w^4 0.5625 / 24 at the middle of the stencil, i.e.
     * 36.5 A / P^4 for P samples per period (textbook numerical analysis) */
    static const double periods[] = {20.0, 50.0, 166.7};
    for (int q = 0; q < 3; q++) {
        const double P = periods[q], w = 2.0 * M_PI / P;
        const size_t n = 2000;
        float *x = malloc(n * sizeof *x);
        for (size_t k = 0; k < n; k++)
            x[k] = (float)sin(w * (double)k + 0.3);
        double worst = 0.0;
        for (double pos = 10.0; pos < (double)n - 10.0; pos += 0.37)
            worst = fmax(worst, fabs(tf_sp_interp(x, n, pos) - sin(w * pos + 0.3)));
        const double bound = 0.5625 / 24.0 * pow(w, 4) + 1.2e-7; /* + float32 rounding */
        assert_true(worst <= bound);
        /* and the bound is not loose by orders of magnitude where it dominates */
        if (P < 60.0)
            assert_true(worst > 0.3 * bound);
        assert_true(tf_sp_interp(x, n, 7.0) == x[7]); /* exact at samples */
        free(x);
    }
}

/* ---- square wave ------------------------------------------------------------------ */

/* Square wave +V on the first half period, -V on the second, sampled at the
 * middle of each of S0 intervals per period: no sample sits on an edge. */
static tf_capture *square_capture(double V, double f, size_t S0, size_t M)
{
    const double dt = 1.0 / (f * (double)S0);
    tf_capture *cap = new_capture(1, S0 * M, dt, 0.5 * dt);
    for (size_t k = 0; k < cap->n; k++)
        cap->ch[0].samples[k] = (float)((k % S0) < S0 / 2 ? V : -V);
    snprintf(cap->ch[0].name, sizeof cap->ch[0].name, "v_out");
    snprintf(cap->ch[0].unit, sizeof cap->ch[0].unit, "V");
    return cap;
}

static void test_spectrum_square_sampled_dft(void **state)
{
    (void)state;
    const double V = 300.0, f = 10e3;
    const size_t S0 = 1000, M = 5;
    tf_capture *cap = square_capture(V, f, S0, M);
    tf_roles roles = roles_of(-1, 0, -1);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = f;
    tf_spectrum_result *r = run(cap, &roles, NULL, &o);
    assert_int_equal(r->periods, M);
    assert_int_equal(r->samples_per_period, S0);
    assert_int_equal(r->harmonics, 40);
    const tf_channel_spectrum *c = &r->ch[0];
    for (int h = 1; h <= 40; h++) {
        const double a = c->harm[h - 1].amplitude;
        if (h % 2) {
            /* source: DFT of the sampled sequence by the geometric series,
             * |X_h| = 2 V / sin(pi h / S0), amplitude 2 |X_h| / S0 (exact for what
             * is sampled; differs from 4V/(h pi) by about (pi h / S0)^2 / 6) */
            const double exact = 4.0 * V / ((double)S0 * sin(M_PI * h / (double)S0));
            assert_true(tf_test_reldiff(a, exact) < 1e-9);
            /* half-wave symmetry: phase (h - 1) 90 deg against the fundamental */
            const double want = wrap_rad((h - 1) * M_PI / 2.0) * 180.0 / M_PI;
            assert_true(fabs(wrap_rad((c->harm[h - 1].phase_deg - want) * M_PI / 180.0)) < 1e-7);
        } else {
            assert_true(a < 1e-9); /* source: half-wave symmetry removes even harmonics */
        }
    }
    assert_true(fabs(c->dc) < 1e-9);
    assert_true(tf_test_reldiff(c->rms, V) < 1e-12);
    assert_true(tf_test_reldiff(c->crest_factor, 1.0) < 1e-12);
    assert_true(c->aperiodic_rms < 1e-6 * V);
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

static void test_spectrum_square_fourier_series(void **state)
{
    (void)state;
    /* 1e5 samples per period: the sampled sequence's harmonics differ from the
     * continuous series by (pi h / S)^2 / 6 <= 2.7e-7 for h <= 40 */
    const double V = 1.0, f = 1e3;
    const size_t S0 = 100000, M = 3;
    tf_capture *cap = square_capture(V, f, S0, M);
    tf_roles roles = roles_of(-1, 0, -1);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = f;
    tf_spectrum_result *r = run(cap, &roles, NULL, &o);
    const tf_channel_spectrum *c = &r->ch[0];
    double series = 0.0;
    for (int h = 1; h <= 40; h++) {
        const double a = c->harm[h - 1].amplitude;
        if (h % 2) {
            /* source: textbook Fourier series of a square wave, b_h = 4 V / (h pi) */
            assert_true(tf_test_reldiff(a, 4.0 * V / (h * M_PI)) < 1e-6);
            assert_true(tf_test_reldiff(c->harm[h - 1].rms, 4.0 * V / (h * M_PI) / M_SQRT2) < 1e-6);
            if (h > 1)
                series += 1.0 / ((double)h * h);
        } else {
            assert_true(a < 1e-9);
        }
    }
    /* THD over H = 40: the truncated series sqrt(sum_{odd 3..39} 1/h^2) */
    assert_true(tf_test_reldiff(c->thd, sqrt(series)) < 1e-6);
    const double thd40 = c->thd;
    tf_spectrum_free(r);

    /* more harmonics approach sqrt(pi^2/8 - 1) = 48.34 % (source: textbook Fourier
     * series, Parseval); the tail beyond H = 2000 is about 1/(2 H) in THD^2 */
    o.harmonics = 2000;
    r = run(cap, &roles, NULL, &o);
    const double limit = sqrt(M_PI * M_PI / 8.0 - 1.0);
    assert_true(fabs(limit - 0.4834) < 1e-4);
    assert_true(r->ch[0].thd > thd40);
    assert_true(r->ch[0].thd < limit);
    assert_true(limit - r->ch[0].thd < 4e-4);
    double s2000 = 0.0;
    for (int h = 3; h <= 2000; h += 2)
        s2000 += 1.0 / ((double)h * h);
    assert_true(tf_test_reldiff(r->ch[0].thd, sqrt(s2000)) < 1e-4);
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

/* ---- quasi-square wave ------------------------------------------------------------ */

static void check_quasi_square(double theta_deg, size_t S0)
{
    const double V = 200.0, f = 1e3, dt = 1.0 / (f * (double)S0);
    const size_t M = 2, L = (size_t)llround(theta_deg / 360.0 * (double)S0);
    assert_true(fabs((double)L - theta_deg / 360.0 * (double)S0) < 1e-9); /* whole samples */
    tf_capture *cap = new_capture(1, S0 * M, dt, 0.5 * dt);
    const size_t a = S0 / 4 - L / 2, b = S0 / 4 + L / 2;
    for (size_t k = 0; k < cap->n; k++) {
        const size_t s = k % S0;
        double v = 0.0;
        if (s >= a && s < b)
            v = V;
        else if (s >= a + S0 / 2 && s < b + S0 / 2)
            v = -V;
        cap->ch[0].samples[k] = (float)v;
    }
    tf_roles roles = roles_of(-1, 0, -1);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = f;
    tf_spectrum_result *r = run(cap, &roles, NULL, &o);
    const double th = theta_deg * M_PI / 180.0;
    for (int h = 1; h <= 40; h++) {
        const double a_h = r->ch[0].harm[h - 1].amplitude;
        /* source: textbook Fourier series of the quasi-square wave,
         * b_h = (4 V / (h pi)) sin(h theta / 2) for odd h, 0 for even h */
        const double want = (h % 2) ? fabs(4.0 * V / (h * M_PI) * sin(h * th / 2.0)) : 0.0;
        if (want > 1e-6 * V)
            assert_true(tf_test_reldiff(a_h, want) < 1e-6);
        else
            assert_true(a_h < 1e-9 * V);
    }
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

static void test_spectrum_quasi_square(void **state)
{
    (void)state;
    check_quasi_square(120.0, 96000); /* triplen harmonics vanish at 120 deg */
    check_quasi_square(144.0, 96000); /* h = 5, 15, 25, 35 vanish at 144 deg */
}

/* ---- non-integer samples per period, numpy reference ------------------------------ */

static harmonic_signal test_voltage(double f, int H)
{
    harmonic_signal s = {.f = f, .dc = 1.5, .H = H};
    for (int h = 1; h <= H; h++) {
        s.amp[h] = (h % 2 ? 300.0 : 20.0) / h;
        s.ph[h] = 0.3 * h + 0.1;
    }
    return s;
}

static harmonic_signal test_current(double f, int H)
{
    harmonic_signal s = {.f = f, .dc = -0.25, .H = H};
    for (int h = 1; h <= H; h++) {
        s.amp[h] = 80.0 / ((double)h * h);
        s.ph[h] = -0.7 * h + 0.05 * h * h;
    }
    return s;
}

/* 6 kHz at 10 MS/s: 1666.67 samples per period; t0 a fraction of a sample off. */
static tf_capture *two_channel_capture(double f, int H, size_t periods, double v_delay)
{
    const double dt = 1e-7;
    const size_t n = (size_t)(periods / f / dt) + 57;
    tf_capture *cap = new_capture(2, n, dt, 0.37 * dt + 3.1e-6);
    harmonic_signal i = test_current(f, H), v = test_voltage(f, H);
    fill_signal(cap, 0, &i, 0.0, "i_load", "A");
    fill_signal(cap, 1, &v, v_delay, "v_out", "V");
    return cap;
}

static void test_spectrum_fractional_period(void **state)
{
    (void)state;
    const double f = 6e3;
    tf_capture *cap = two_channel_capture(f, 15, 20, 0.0);
    tf_roles roles = roles_of(0, 1, -1);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = f;
    o.harmonics = 20;
    tf_spectrum_result *r = run(cap, &roles, NULL, &o);
    assert_int_equal(r->periods, 20);
    assert_int_equal(r->samples_per_period, 1680);
    harmonic_signal sig[2] = {test_current(f, 15), test_voltage(f, 15)};
    assert_int_equal(r->nch, 2);
    for (int c = 0; c < 2; c++) {
        const tf_channel_spectrum *cs = &r->ch[c];
        const harmonic_signal *s = &sig[c];
        assert_string_equal(cs->role, c == 0 ? "current" : "voltage");
        /* source: the signal's own definition (exact harmonics); cubic
         * resampling error bound 36.5 (h / P)^4 < 1e-6 for h <= 15 */
        for (int h = 1; h <= 20; h++) {
            const double want = h <= 15 ? s->amp[h] : 0.0;
            const double got = cs->harm[h - 1].amplitude;
            if (h <= 15) {
                assert_true(tf_test_reldiff(got, want) < 1e-4);
                const double ph = wrap_rad(s->ph[h] - h * sig[1].ph[1]);
                assert_true(fabs(wrap_rad(cs->harm[h - 1].phase_deg * M_PI / 180.0 - ph)) < 1e-4);
            } else {
                assert_true(got < 1e-4 * s->amp[1]);
            }
        }
        assert_true(fabs(cs->dc - s->dc) < 1e-4 * s->amp[1]);
    }
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

static void test_spectrum_numpy_reference(void **state)
{
    (void)state;
    if (!tf_test_have("/usr/bin/python3") ||
        tf_test_system("/usr/bin/python3 -c 'import numpy' 2>/dev/null") != 0) {
        skip();
        return;
    }
    const double f = 6e3;
    tf_capture *cap = two_channel_capture(f, 15, 12, 0.0);
    tf_roles roles = roles_of(0, 1, -1);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = f;
    o.harmonics = 25;
    o.skew_s = 37e-9; /* the voltage is read shifted: numpy sees the same window */
    tf_spectrum_result *r = run(cap, &roles, NULL, &o);
    const size_t N = r->periods * r->samples_per_period;
    double *win[2];
    const char *path = tf_test_tmpfile("spectrum_window.txt");
    FILE *fp = fopen(path, "w");
    assert_non_null(fp);
    fprintf(fp, "%zu %d\n", r->periods, r->harmonics);
    for (int c = 0; c < 2; c++) {
        win[c] = malloc(N * sizeof(double));
        const double pos0 = (r->window_start_s + r->ch[c].shift_s - cap->t0_s) / cap->dt_s;
        tf_sp_resample(cap->ch[r->ch[c].channel].samples, cap->n, pos0,
                       r->resample_step_s / cap->dt_s, N, win[c]);
    }
    for (size_t j = 0; j < N; j++)
        fprintf(fp, "%.17g %.17g\n", win[0][j], win[1][j]);
    assert_int_equal(fclose(fp), 0);
    free(win[0]);
    free(win[1]);
    /* reference: numpy.fft.rfft (Debian python3-numpy) of the whole resampled
     * window; harmonic h is bin M h; phases against the voltage's fundamental */
    const char *script = tf_test_tmpfile("spectrum_ref.py");
    const char *outp = tf_test_tmpfile("spectrum_ref.txt");
    assert_int_equal(tf_test_write(script,
        "import sys, numpy as np\n"
        "f = open(sys.argv[1]); M, H = map(int, f.readline().split())\n"
        "d = np.loadtxt(f); N = d.shape[0]\n"
        "X = [np.fft.rfft(d[:, c]) for c in range(2)]\n"
        "ref = np.angle(X[1][M])\n"
        "with open(sys.argv[2], 'w') as o:\n"
        "    for c in range(2):\n"
        "        o.write('%.17g %.17g\\n' % (X[c][0].real / N, 0.0))\n"
        "        for h in range(1, H + 1):\n"
        "            z = X[c][M * h]\n"
        "            ph = np.angle(z) - h * ref\n"
        "            ph = np.arctan2(np.sin(ph), np.cos(ph))\n"
        "            o.write('%.17g %.17g\\n' % (2 * abs(z) / N, ph))\n"), 0);
    assert_int_equal(tf_test_system("/usr/bin/python3 '%s' '%s' '%s'", script, path, outp), 0);
    FILE *in = fopen(outp, "r");
    assert_non_null(in);
    for (int c = 0; c < 2; c++) {
        const tf_channel_spectrum *cs = &r->ch[c];
        double a, ph;
        assert_int_equal(fscanf(in, "%lf %lf", &a, &ph), 2);
        assert_true(fabs(cs->dc - a) <= 1e-9 * fabs(a) + 1e-12 * cs->harm[0].amplitude);
        for (int h = 1; h <= r->harmonics; h++) {
            assert_int_equal(fscanf(in, "%lf %lf", &a, &ph), 2);
            const tf_harmonic *hm = &cs->harm[h - 1];
            if (a > 1e-6 * cs->harm[0].amplitude) {
                assert_true(tf_test_reldiff(hm->amplitude, a) < 1e-9);
                const double d = wrap_rad(hm->phase_deg * M_PI / 180.0 - ph);
                assert_true(fabs(d) < 1e-9 * fmax(1.0, fabs(ph)));
            } else { /* harmonics 16..25 hold only interpolation error */
                assert_true(fabs(hm->amplitude - a) < 1e-9 * cs->harm[0].amplitude);
            }
        }
    }
    fclose(in);
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

/* ---- sox reference for DC, RMS and crest factor ------------------------------------ */

static double sox_stat(const char *text, const char *key)
{
    const char *p = strstr(text, key);
    assert_non_null(p);
    return strtod(p + strlen(key), NULL);
}

static void test_spectrum_sox_stats(void **state)
{
    (void)state;
    if (!tf_test_have("sox")) {
        skip();
        return;
    }
    /* 20 whole periods of 1 kHz at 48 kS/s, so sox's whole-file statistics
     * cover exactly the analysed window */
    const double fs = 48e3, f = 1e3;
    tf_capture *cap = new_capture(1, 960, 1.0 / fs, 0.0);
    harmonic_signal sg = {.f = f, .dc = 0.05, .H = 3};
    sg.amp[1] = 0.3;
    sg.ph[1] = 0.2;
    sg.amp[3] = 0.1;
    sg.ph[3] = -1.0;
    fill_signal(cap, 0, &sg, 0.0, "v", "FS");
    const char *wav = tf_test_tmpfile("spectrum_sox.wav");
    SF_INFO info = {.samplerate = 48000, .channels = 1, .format = SF_FORMAT_WAV | SF_FORMAT_FLOAT};
    SNDFILE *sf = sf_open(wav, SFM_WRITE, &info);
    assert_non_null(sf);
    assert_int_equal(sf_write_float(sf, cap->ch[0].samples, (sf_count_t)cap->n), (sf_count_t)cap->n);
    assert_int_equal(sf_close(sf), 0);
    const char *out = tf_test_tmpfile("spectrum_sox.txt");
    assert_int_equal(tf_test_system("sox '%s' -n stats 2> '%s'", wav, out), 0);
    char *text = tf_test_slurp(out, NULL);
    assert_non_null(text);
    tf_roles roles = roles_of(-1, 0, -1);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = f;
    tf_spectrum_result *r = run(cap, &roles, NULL, &o);
    assert_int_equal(r->periods, 20);
    /* reference: sox stats (Debian sox), printed to 6 decimals, 0.01 dB and
     * 0.01 for the crest factor */
    assert_true(fabs(r->ch[0].dc - sox_stat(text, "DC offset")) < 1e-6);
    const double rms_db = 20.0 * log10(r->ch[0].rms);
    assert_true(fabs(rms_db - sox_stat(text, "RMS lev dB")) <= 0.0051);
    assert_true(fabs(r->ch[0].crest_factor - sox_stat(text, "Crest factor")) <= 0.0051);
    free(text);
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

/* ---- fundamental estimate -------------------------------------------------------- */

static void test_spectrum_estimated_fundamental(void **state)
{
    (void)state;
    const double f = 6e3;
    tf_capture *cap = two_channel_capture(f, 7, 20, 0.0);
    tf_roles roles = roles_of(0, 1, -1);
    tf_spectrum_result *r = run(cap, &roles, NULL, NULL);
    assert_string_equal(r->fundamental_source, "estimated");
    /* source: the signal's definition; a noiseless periodic signal whose
     * harmonics the fit models fully gives the frequency to rounding */
    assert_true(tf_test_reldiff(r->fundamental_hz, f) < 1e-9);
    harmonic_signal v = test_voltage(f, 7);
    for (int h = 1; h <= 7; h++)
        assert_true(tf_test_reldiff(r->ch[1].harm[h - 1].amplitude, v.amp[h]) < 1e-4);
    tf_spectrum_free(r);

    /* the largest peak is the 5th harmonic: the estimator must still find f */
    harmonic_signal s = {.f = 2.5e3, .dc = 0.0, .H = 6};
    s.amp[1] = 0.3;
    s.amp[5] = 1.0;
    s.amp[6] = 0.5;
    for (size_t k = 0; k < cap->n; k++)
        cap->ch[0].samples[k] = (float)hs_value(&s, tf_capture_time(cap, k));
    tf_roles cur = roles_of(0, -1, -1);
    r = run(cap, &cur, NULL, NULL);
    assert_true(tf_test_reldiff(r->fundamental_hz, 2.5e3) < 1e-9);
    assert_true(tf_test_reldiff(r->ch[0].harm[4].amplitude, 1.0) < 1e-4);
    tf_spectrum_free(r);

    /* a constant channel has no fundamental: a data error, not a guess */
    for (size_t k = 0; k < cap->n; k++)
        cap->ch[0].samples[k] = 2.0f;
    tf_spectrum_result *bad = NULL;
    tf_error err;
    assert_int_equal(tf_spectrum_run(cap, &cur, NULL, NULL, &bad, &err), TF_ERR_DATA);
    assert_null(bad);
    assert_non_null(strstr(err.msg, "i_load"));
    tf_capture_destroy(cap);
}

static void test_spectrum_segmenter_fundamental(void **state)
{
    (void)state;
    const double f = 6e3;
    tf_capture *cap = two_channel_capture(f, 5, 10, 0.0);
    tf_roles roles = roles_of(0, 1, -1);
    tf_cycle cycles[8];
    memset(cycles, 0, sizeof cycles);
    for (int k = 0; k < 8; k++) {
        cycles[k].start_s = cap->t0_s + k / f;
        cycles[k].period_s = k < 7 ? 1.0 / f : NAN;
    }
    tf_segment_result seg;
    memset(&seg, 0, sizeof seg);
    seg.cycles = cycles;
    seg.ncycles = 8;
    tf_spectrum_result *r = run(cap, &roles, &seg, NULL);
    assert_string_equal(r->fundamental_source, "segmenter");
    assert_true(tf_test_reldiff(r->fundamental_hz, f) < 1e-12);
    tf_spectrum_free(r);
    /* a missing firing doubles one period: it must not bias the fundamental */
    cycles[3].period_s = 2.0 / f;
    r = run(cap, &roles, &seg, NULL);
    assert_true(tf_test_reldiff(r->fundamental_hz, f) < 1e-12);
    cycles[3].period_s = 1.0 / f;
    /* energy of each cycle = P / f for a stationary signal; rectangle rule over
     * 1667 samples, ends rounded to whole samples (source: AC power theory) */
    assert_int_equal(r->power.cycles, 7);
    assert_true(tf_test_reldiff(r->power.cycle_energy_median_j, r->power.mean_w / f) < 2e-3);
    assert_true(tf_test_reldiff(r->power.energy_per_cycle_j, r->power.mean_w / f) < 1e-12);
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

/* ---- Hann window ------------------------------------------------------------------- */

static void test_spectrum_hann_window(void **state)
{
    (void)state;
    const double f = 6e3;
    tf_capture *cap = two_channel_capture(f, 9, 30, 0.0);
    tf_roles roles = roles_of(0, 1, -1);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.window = 1;
    o.harmonics = 9;
    o.fundamental_hz = f * (1.0 + 2e-4); /* a slightly wrong fundamental */
    tf_spectrum_result *r = run(cap, &roles, NULL, &o);
    assert_int_equal(r->window, 1);
    harmonic_signal v = test_voltage(f, 9);
    for (int h = 1; h <= 9; h++) {
        /* source: the signal's definition; two-bin ratio interpolation of the Hann
         * window (Grandke 1983) is exact for one tone, neighbours leak ~1e-5 */
        assert_true(tf_test_reldiff(r->ch[1].harm[h - 1].amplitude, v.amp[h]) < 1e-3);
        assert_true(tf_test_reldiff(r->ch[1].harm[h - 1].frequency_hz, h * f) < 1e-5);
        const double ph = wrap_rad(v.ph[h] - h * v.ph[1]);
        assert_true(fabs(wrap_rad(r->ch[1].harm[h - 1].phase_deg * M_PI / 180.0 - ph)) < 1e-2);
    }
    tf_spectrum_free(r);
    tf_capture_destroy(cap);

    /* a voltage probe 400 ns late, corrected: the current's phases against the
     * voltage's fundamental are those of the signals' definitions */
    cap = two_channel_capture(f, 9, 30, 400e-9);
    o.skew_s = 400e-9; /* uncorrected, phases would be off by 0.015 h rad */
    r = run(cap, &roles, NULL, &o);
    harmonic_signal i = test_current(f, 9);
    for (int h = 1; h <= 5; h++) {
        const double ph = wrap_rad(i.ph[h] - h * v.ph[1]);
        assert_true(fabs(wrap_rad(r->ch[0].harm[h - 1].phase_deg * M_PI / 180.0 - ph)) < 1e-2);
    }
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

/* ---- power -------------------------------------------------------------------------- */

static void test_spectrum_power_and_skew(void **state)
{
    (void)state;
    const double f = 6e3, skew = 50e-9;
    harmonic_signal v = {.f = f, .dc = 4.0, .H = 5}, i = {.f = f, .dc = 0.5, .H = 5};
    v.amp[1] = 320.0; v.ph[1] = 0.2;
    v.amp[3] = 90.0;  v.ph[3] = 1.1;
    v.amp[5] = 30.0;  v.ph[5] = -0.4;
    i.amp[1] = 150.0; i.ph[1] = 0.2 - 76.0 * M_PI / 180.0; /* lags 76 deg */
    i.amp[3] = 20.0;  i.ph[3] = 0.3;
    i.amp[5] = 4.0;   i.ph[5] = 2.0;
    const double dt = 1e-7;
    tf_capture *cap = new_capture(2, 40000, dt, 0.21 * dt);
    fill_signal(cap, 0, &i, 0.0, "i_load", "A");
    fill_signal(cap, 1, &v, skew, "v_out", "V"); /* the probe shows v(t - skew) */
    tf_roles roles = roles_of(0, 1, -1);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = f;
    o.skew_s = skew;
    tf_spectrum_result *r = run(cap, &roles, NULL, &o);
    assert_true(r->power.valid);
    /* source: AC power theory (orthogonality of harmonics over whole periods):
     * P = V0 I0 + sum_h V_h I_h / 2 cos(phi_vh - phi_ih), V_rms^2 = V0^2 + sum V_h^2 / 2 */
    double P = v.dc * i.dc, V2 = v.dc * v.dc, I2 = i.dc * i.dc, Pskewed = v.dc * i.dc;
    for (int h = 1; h <= 5; h++) {
        const double ph = 0.5 * v.amp[h] * i.amp[h] * cos(v.ph[h] - i.ph[h]);
        P += ph;
        Pskewed += 0.5 * v.amp[h] * i.amp[h] * cos(v.ph[h] - i.ph[h] - 2 * M_PI * h * f * skew);
        V2 += 0.5 * v.amp[h] * v.amp[h];
        I2 += 0.5 * i.amp[h] * i.amp[h];
        if (v.amp[h] > 0.0)
            assert_true(fabs(r->power.harm[h - 1].mean_w - ph) < 1e-5 * fabs(P));
    }
    assert_true(tf_test_reldiff(r->power.mean_w, P) < 1e-5);
    assert_true(tf_test_reldiff(r->power.v_rms, sqrt(V2)) < 1e-5);
    assert_true(tf_test_reldiff(r->power.i_rms, sqrt(I2)) < 1e-5);
    assert_true(tf_test_reldiff(r->power.apparent_va, sqrt(V2 * I2)) < 1e-5);
    assert_true(tf_test_reldiff(r->power.power_factor, P / sqrt(V2 * I2)) < 1e-5);
    /* displacement factor: cosine of the fundamental phase difference */
    assert_true(fabs(r->power.displacement_factor - cos(76.0 * M_PI / 180.0)) < 1e-5);
    assert_true(tf_test_reldiff(r->power.dc_w, v.dc * i.dc) < 1e-4);
    assert_true(tf_test_reldiff(r->power.energy_per_cycle_j, P / f) < 1e-5);
    /* the current's fundamental lags the voltage's by 76 degrees */
    assert_true(fabs(r->ch[0].harm[0].phase_deg + 76.0) < 1e-3);
    tf_spectrum_free(r);

    /* without the correction the power is off by what the delay predicts, and by
     * more than the 0.5 % the acceptance test allows */
    o.skew_s = 0.0;
    r = run(cap, &roles, NULL, &o);
    assert_true(tf_test_reldiff(r->power.mean_w, Pskewed) < 1e-5);
    print_message("skew 50 ns: uncorrected P off by %.2e relative\n",
                  tf_test_reldiff(r->power.mean_w, P));
    assert_true(tf_test_reldiff(r->power.mean_w, P) > 5e-3);
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

/* ---- simulator captures ------------------------------------------------------------- */

/* An invented half-bridge stage fired at 11 kHz, above half its damped resonant
 * frequency (about 17.9 kHz): overlapping, so the bridge voltage steps while
 * current flows and a probe skew shifts power. */
static const char sim_design[] =
    "[inverter]\n"
    "topology = half-bridge\n"
    "capacitor = series\n"
    "dc_link = 540 V\n"
    "firing_frequency = 11 kHz\n"
    "[tank]\n"
    "capacitance = 2.2 uF\n"
    "inductance = 36 uH\n"
    "resistance = 0.45 ohm\n"
    "[switch]\n"
    "thyristor_drop = 1.6 V\n"
    "diode_drop = 1.1 V\n"
    "[capture]\n"
    "sample_rate = 10 MS/s\n";

static tf_capture *simulate(const char *extra, json_t **truth, tf_design **dout)
{
    char text[2048];
    snprintf(text, sizeof text, "%s%s", sim_design, extra);
    tf_design *d = malloc(sizeof *d);
    assert_non_null(d);
    tf_error err;
    if (tf_design_parse(text, strlen(text), "sim-test", d, &err) != TF_OK)
        fail_msg("design: %s", err.msg);
    tf_capture *cap = NULL;
    if (tf_synth_to_capture(d, 0, &cap, truth, &err) != TF_OK)
        fail_msg("simulator: %s", err.msg);
    *dout = d;
    return cap;
}

static double jget(json_t *t, const char *a, const char *b)
{
    json_t *v = json_object_get(json_object_get(t, a), b);
    assert_true(json_is_number(v));
    return json_number_value(v);
}

static void check_power_vs_truth(const tf_spectrum_result *r, json_t *truth, double tol)
{
    /* reference: the simulator's truth, exact integrals of the closed-form
     * waveform over the same whole periods (docs/simulator.md) */
    assert_int_equal(r->periods, (size_t)json_integer_value(
                                     json_object_get(json_object_get(truth, "power"), "periods")));
    print_message("vs truth: P %.2e, I_rms %.2e, V_rms %.2e relative\n",
                  tf_test_reldiff(r->power.mean_w, jget(truth, "power", "mean_w")),
                  tf_test_reldiff(r->power.i_rms, jget(truth, "rms", "i_load")),
                  tf_test_reldiff(r->power.v_rms, jget(truth, "rms", "v_out")));
    assert_true(tf_test_reldiff(r->power.mean_w, jget(truth, "power", "mean_w")) < tol);
    assert_true(tf_test_reldiff(r->power.i_rms, jget(truth, "rms", "i_load")) < tol);
    assert_true(tf_test_reldiff(r->power.v_rms, jget(truth, "rms", "v_out")) < tol);
    json_t *amp = json_object_get(json_object_get(json_object_get(truth, "harmonics"), "i_load"),
                                  "amplitude");
    for (int h = 1; h <= 9; h += 2)
        assert_true(tf_test_reldiff(r->ch[0].harm[h - 1].amplitude,
                                    json_number_value(json_array_get(amp, (size_t)h - 1))) < tol);
}

static void test_spectrum_simulator_power(void **state)
{
    (void)state;
    /* 2 ms = 22 whole periods, so the truth's RMS (over the capture) and power
     * (over whole periods) cover the same time; 12-bit scope with noise */
    json_t *truth = NULL;
    tf_design *d = NULL;
    tf_capture *cap = simulate("duration = 2 ms\nadc_bits = 12\n"
                               "i_load.noise = 0.5 A\ni_load.range = 400 A\n"
                               "v_out.noise = 1 V\nv_out.range = 800 V\nv_c.range = 2 kV\n"
                               "v_ak1.range = 2 kV\n",
                               &truth, &d);
    tf_roles roles = roles_of(tf_capture_find(cap, "i_load"), tf_capture_find(cap, "v_out"),
                              tf_capture_find(cap, "v_c"));
    assert_true(roles.current >= 0 && roles.voltage >= 0);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = d->firing_frequency_hz;
    tf_spectrum_result *r = run(cap, &roles, NULL, &o);
    check_power_vs_truth(r, truth, 5e-3);
    tf_spectrum_free(r);

    /* the same with the fundamental from the segmenter's firing cycles */
    tf_segment_options so;
    tf_segment_options_init(&so);
    tf_segment_result *seg = NULL;
    tf_error err;
    if (tf_segment_run(cap, &roles, &so, &seg, &err) == TF_OK && seg->ncycles > 1) {
        r = run(cap, &roles, seg, NULL);
        assert_string_equal(r->fundamental_source, "segmenter");
        check_power_vs_truth(r, truth, 5e-3);
        tf_spectrum_free(r);
    } else {
        print_message("segmenter not usable here (%s): fundamental-from-cycles case not run\n",
                      err.msg);
    }
    tf_segment_free(seg);
    json_decref(truth);
    free(d);
    tf_capture_destroy(cap);
}

static void test_spectrum_simulator_skew(void **state)
{
    (void)state;
    /* the voltage probe lags 50 ns; 2.05 ms so that 22 whole periods of the
     * corrected voltage (read 50 ns later) are still inside the record */
    json_t *truth = NULL;
    tf_design *d = NULL;
    tf_capture *cap = simulate("duration = 2.05 ms\nv_out.skew = 50 ns\n", &truth, &d);
    tf_roles roles = roles_of(tf_capture_find(cap, "i_load"), tf_capture_find(cap, "v_out"), -1);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = d->firing_frequency_hz;
    o.skew_s = 50e-9;
    tf_spectrum_result *r = run(cap, &roles, NULL, &o);
    const double P = jget(truth, "power", "mean_w");
    /* reference: simulator truth; corrected, within 0.5 % */
    assert_int_equal(r->periods, 22);
    assert_true(tf_test_reldiff(r->power.mean_w, P) < 5e-3);
    tf_spectrum_free(r);
    /* uncorrected, the same capture is off by more than 0.5 % */
    o.skew_s = 0.0;
    r = run(cap, &roles, NULL, &o);
    print_message("skew 50 ns: uncorrected P off by %.2e relative\n",
                  tf_test_reldiff(r->power.mean_w, P));
    assert_true(tf_test_reldiff(r->power.mean_w, P) > 5e-3);
    tf_spectrum_free(r);
    json_decref(truth);
    free(d);
    tf_capture_destroy(cap);
}

/* ---- threads ------------------------------------------------------------------------ */

/* Every figure of two results, bit for bit. */
static void assert_same_bits(const tf_spectrum_result *a, const tf_spectrum_result *b)
{
    assert_int_equal(a->nch, b->nch);
    assert_int_equal(a->periods, b->periods);
    for (size_t c = 0; c < a->nch; c++) {
        const tf_channel_spectrum *x = &a->ch[c], *y = &b->ch[c];
        assert_int_equal(x->nharm, y->nharm);
        assert_memory_equal(x->harm, y->harm, x->nharm * sizeof *x->harm);
        const double fx[] = {x->dc, x->rms, x->peak, x->thd, x->aperiodic_rms};
        const double fy[] = {y->dc, y->rms, y->peak, y->thd, y->aperiodic_rms};
        assert_memory_equal(fx, fy, sizeof fx);
    }
    const tf_power *p = &a->power, *q = &b->power;
    const double fp[] = {p->mean_w, p->v_rms, p->i_rms, p->power_factor, p->cycle_energy_min_j,
                         p->cycle_energy_median_j, p->cycle_energy_max_j};
    const double fq[] = {q->mean_w, q->v_rms, q->i_rms, q->power_factor, q->cycle_energy_min_j,
                         q->cycle_energy_median_j, q->cycle_energy_max_j};
    assert_memory_equal(fp, fq, sizeof fp);
    assert_int_equal(p->cycles, q->cycles);
    assert_memory_equal(p->harm, q->harm, p->nharm * sizeof *p->harm);
}

static void test_spectrum_threads_agree(void **state)
{
    (void)state;
    /* 640 periods of 6 kHz at 10 MS/s: over 2^20 resampled points, so the pass is
     * split into blocks and between threads; the blocks do not depend on the thread
     * count, so every count gives the same bits (tankfit verify demands it) */
    const double f = 6e3;
    tf_capture *cap = two_channel_capture(f, 9, 640, 0.0);
    tf_roles roles = roles_of(0, 1, -1);
    tf_cycle cycles[600];
    memset(cycles, 0, sizeof cycles);
    for (int k = 0; k < 600; k++) {
        cycles[k].start_s = cap->t0_s + 4e-6 + k / f;
        cycles[k].period_s = 1.0 / f;
    }
    tf_segment_result seg;
    memset(&seg, 0, sizeof seg);
    seg.cycles = cycles;
    seg.ncycles = 600;
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = f;
    o.skew_s = 20e-9;
    o.threads = 1;
    tf_spectrum_result *a = run(cap, &roles, &seg, &o);
    assert_true(a->periods * a->samples_per_period >= ((size_t)1 << 20));
    assert_int_equal(a->power.cycles, 600);
    const int counts[] = {2, 3, 8, 0};
    for (size_t t = 0; t < sizeof counts / sizeof counts[0]; t++) {
        o.threads = counts[t];
        tf_spectrum_result *b = run(cap, &roles, &seg, &o);
        assert_same_bits(a, b);
        tf_spectrum_free(b);
    }
    harmonic_signal v = test_voltage(f, 9);
    assert_true(tf_test_reldiff(a->ch[1].harm[0].amplitude, v.amp[1]) < 1e-6);
    tf_spectrum_free(a);
    tf_capture_destroy(cap);
}

/* Energy per firing cycle with a probe skew of a fraction of a sample, either sign:
 * cycles of exactly 1600 samples (6.25 kHz at 10 MS/s), one starting a sample into the
 * record and one ending at its last usable sample, where the interpolation stencil
 * reaches the ends of the record. */
static void check_cycle_energies(double skew)
{
    const double f = 6250.0, dt = 1e-7;
    const size_t n = 40000;
    harmonic_signal v = {.f = f, .dc = 4.0, .H = 5}, i = {.f = f, .dc = 0.5, .H = 5};
    v.amp[1] = 320.0; v.ph[1] = 0.2;
    v.amp[3] = 90.0;  v.ph[3] = 1.1;
    v.amp[5] = 30.0;  v.ph[5] = -0.4;
    i.amp[1] = 150.0; i.ph[1] = 0.2 - 76.0 * M_PI / 180.0;
    i.amp[3] = 20.0;  i.ph[3] = 0.3;
    i.amp[5] = 4.0;   i.ph[5] = 2.0;
    tf_capture *cap = new_capture(2, n, dt, 0.0);
    fill_signal(cap, 0, &i, 0.0, "i_load", "A");
    fill_signal(cap, 1, &v, skew, "v_out", "V"); /* the probe shows v(t - skew) */
    tf_cycle cycles[24];
    memset(cycles, 0, sizeof cycles);
    for (int k = 0; k < 24; k++) {
        /* the first cycle starts as early as the skew allows (v read at t + skew) */
        const size_t lead = skew < -dt ? 2 : 1;
        const size_t first = k == 0 ? lead : k == 23 ? n - 2 - 1600 : (size_t)k * 1600 + 3;
        cycles[k].start_s = (double)first * dt;
        cycles[k].period_s = 1600 * dt;
    }
    tf_segment_result seg;
    memset(&seg, 0, sizeof seg);
    seg.cycles = cycles;
    seg.ncycles = 24;
    tf_roles roles = roles_of(0, 1, -1);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = f;
    o.skew_s = skew;
    /* source: AC power theory, as in test_spectrum_power_and_skew; the rectangle rule
     * over a whole period of a band-limited periodic signal is exact (trigonometric
     * sums), so each cycle's energy is P / f up to the cubic interpolation */
    double P = v.dc * i.dc, Pskewed = v.dc * i.dc;
    for (int h = 1; h <= 5; h++) {
        P += 0.5 * v.amp[h] * i.amp[h] * cos(v.ph[h] - i.ph[h]);
        Pskewed += 0.5 * v.amp[h] * i.amp[h] * cos(v.ph[h] - i.ph[h] - 2 * M_PI * h * f * skew);
    }
    tf_spectrum_result *r = run(cap, &roles, &seg, &o);
    assert_int_equal(r->power.cycles, 24);
    assert_true(tf_test_reldiff(r->power.cycle_energy_min_j, P / f) < 1e-6);
    assert_true(tf_test_reldiff(r->power.cycle_energy_max_j, P / f) < 1e-6);
    tf_spectrum_free(r);
    /* uncorrected, every cycle shows the skewed power, well apart from P */
    o.skew_s = 0.0;
    r = run(cap, &roles, &seg, &o);
    assert_true(tf_test_reldiff(r->power.cycle_energy_median_j, Pskewed / f) < 1e-6);
    assert_true(tf_test_reldiff(r->power.cycle_energy_median_j, P / f) > 1e-3);
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

static void test_spectrum_cycle_energies_skew(void **state)
{
    (void)state;
    check_cycle_energies(37e-9);
    check_cycle_energies(-37e-9);
    check_cycle_energies(-120e-9); /* more than a sample */
}

/* ---- JSON --------------------------------------------------------------------------- */

static void test_spectrum_json_keys(void **state)
{
    (void)state;
    tf_capture *cap = two_channel_capture(6e3, 5, 10, 0.0);
    tf_roles roles = roles_of(0, 1, -1);
    tf_spectrum_result *r = run(cap, &roles, NULL, NULL);
    json_t *o = json_object();
    tf_spectrum_to_json(r, o);
    json_t *s = json_object_get(o, "spectrum"), *p = json_object_get(o, "power");
    assert_non_null(s);
    assert_true(json_is_object(p));
    assert_true(json_real_value(json_object_get(s, "fundamental_hz")) == r->fundamental_hz);
    assert_int_equal(json_integer_value(json_object_get(s, "periods")), (json_int_t)r->periods);
    assert_int_equal(json_integer_value(json_object_get(s, "harmonics_h")), r->harmonics);
    json_t *cur = json_object_get(json_object_get(s, "channels"), "current");
    assert_non_null(cur);
    json_t *h0 = json_array_get(json_object_get(cur, "harmonics"), 0);
    assert_int_equal(json_integer_value(json_object_get(h0, "n")), 1);
    assert_true(json_real_value(json_object_get(h0, "amplitude")) == r->ch[0].harm[0].amplitude);
    assert_true(json_real_value(json_object_get(h0, "rms")) == r->ch[0].harm[0].rms);
    assert_non_null(json_object_get(h0, "phase_deg"));
    assert_true(json_real_value(json_object_get(cur, "thd_percent")) == 100.0 * r->ch[0].thd);
    static const char *const ckeys[] = {"dc", "rms", "crest_factor", "aperiodic_rms", "peak"};
    for (int k = 0; k < 5; k++)
        assert_true(json_is_real(json_object_get(cur, ckeys[k])));
    static const char *const pkeys[] = {"mean_w", "v_rms", "i_rms", "apparent_va",
                                        "power_factor", "displacement_factor",
                                        "energy_per_cycle_j", "dc_w"};
    for (int k = 0; k < 8; k++)
        assert_true(json_is_real(json_object_get(p, pkeys[k])));
    assert_true(json_real_value(json_object_get(p, "mean_w")) == r->power.mean_w);
    json_decref(o);
    tf_spectrum_free(r);

    /* no voltage: power is null */
    tf_roles only_i = roles_of(0, -1, -1);
    r = run(cap, &only_i, NULL, NULL);
    o = json_object();
    tf_spectrum_to_json(r, o);
    assert_true(json_is_null(json_object_get(o, "power")));
    json_decref(o);
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

/* ---- clipping ----------------------------------------------------------------------- */

static void test_spectrum_clipped_flag(void **state)
{
    (void)state;
    tf_capture *cap = two_channel_capture(6e3, 3, 10, 0.0);
    tf_roles roles = roles_of(0, 1, -1);
    tf_spectrum_result *r = run(cap, &roles, NULL, NULL);
    assert_int_equal(r->ch[0].clipped_samples, 0);
    assert_int_equal(r->ch[1].clipped_samples, 0);
    tf_spectrum_free(r);
    /* the current probe's range cuts the peaks: long runs at the extreme code
     * (common practice: a run at the range limit much longer than its
     * neighbours is clipping; the rule of tf_stats_compute) */
    float lim = 0.0f;
    for (size_t k = 0; k < cap->n; k++)
        lim = fmaxf(lim, fabsf(cap->ch[0].samples[k]));
    lim *= 0.8f;
    for (size_t k = 0; k < cap->n; k++)
        cap->ch[0].samples[k] = fminf(lim, fmaxf(-lim, cap->ch[0].samples[k]));
    r = run(cap, &roles, NULL, NULL);
    assert_true(r->ch[0].clipped_samples > 100);
    assert_int_equal(r->ch[1].clipped_samples, 0);
    json_t *o = json_object();
    tf_spectrum_to_json(r, o);
    json_t *cur = json_object_get(json_object_get(json_object_get(o, "spectrum"), "channels"),
                                  "current");
    assert_int_equal(json_integer_value(json_object_get(cur, "clipped_samples")),
                     (json_int_t)r->ch[0].clipped_samples);
    json_decref(o);
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

/* ---- errors ------------------------------------------------------------------------- */

static void test_spectrum_errors(void **state)
{
    (void)state;
    tf_capture *cap = two_channel_capture(6e3, 3, 3, 0.0);
    tf_roles roles = roles_of(0, 1, -1);
    tf_spectrum_options o;
    tf_spectrum_result *r = NULL;
    tf_error err;

    tf_spectrum_options_init(&o);
    o.harmonics = 0;
    assert_int_equal(tf_spectrum_run(cap, &roles, NULL, &o, &r, &err), TF_ERR_USAGE);
    assert_null(r);
    assert_non_null(strstr(err.msg, "harmonics"));

    tf_spectrum_options_init(&o);
    o.skew_s = 0.5;
    assert_int_equal(tf_spectrum_run(cap, &roles, NULL, &o, &r, &err), TF_ERR_USAGE);

    tf_spectrum_options_init(&o);
    o.fundamental_hz = 100.0; /* the capture holds 0.03 periods */
    assert_int_equal(tf_spectrum_run(cap, &roles, NULL, &o, &r, &err), TF_ERR_DATA);
    assert_non_null(strstr(err.msg, "whole period"));

    o.fundamental_hz = 6e6; /* above Nyquist of 10 MS/s */
    assert_int_equal(tf_spectrum_run(cap, &roles, NULL, &o, &r, &err), TF_ERR_DATA);
    assert_non_null(strstr(err.msg, "Nyquist"));

    tf_roles none = roles_of(-1, -1, -1);
    assert_int_equal(tf_spectrum_run(cap, &none, NULL, NULL, &r, &err), TF_ERR_DATA);
    assert_null(r);

    /* the smallest capture: 8 samples, one period of a cosine (source: the DFT
     * of cos(2 pi k / 8) has amplitude 1 at bin 1) */
    tf_capture *tiny = new_capture(1, 8, 1.0, 0.0);
    for (size_t k = 0; k < 8; k++)
        tiny->ch[0].samples[k] = (float)cos(2.0 * M_PI * (double)k / 8.0);
    tf_roles r0 = roles_of(0, -1, -1);
    tf_spectrum_options_init(&o);
    o.fundamental_hz = 0.125;
    r = run(tiny, &r0, NULL, &o);
    assert_int_equal(r->periods, 1);
    assert_int_equal(r->samples_per_period, 8);
    assert_int_equal(r->harmonics, 3);
    assert_true(fabs(r->ch[0].harm[0].amplitude - 1.0) < 1e-7);
    assert_true(r->ch[0].harm[1].amplitude < 1e-7);
    tf_spectrum_free(r);
    /* too short to estimate a fundamental from: a data error */
    assert_int_equal(tf_spectrum_run(tiny, &r0, NULL, NULL, &r, &err), TF_ERR_DATA);
    assert_null(r);
    tf_capture_destroy(tiny);

    /* H is capped by Nyquist and says so: 1 MHz at 10 MS/s allows h <= 4 */
    tf_spectrum_options_init(&o);
    o.fundamental_hz = 1e6;
    r = run(cap, &roles, NULL, &o);
    assert_int_equal(r->harmonics, 4);
    assert_true(r->harmonics_capped);
    tf_spectrum_free(r);
    tf_capture_destroy(cap);
}

/* A half-bridge current written by numpy at 20 samples per resonant period (50 per
 * output period), fundamental from the segmenter: h1, h3, h5 and the RMS against
 * numpy.fft over the same whole periods. */
static void test_spectrum_numpy_coarse_capture(void **state)
{
    (void)state;
    if (!tf_test_have("/usr/bin/python3") ||
        tf_test_system("/usr/bin/python3 -c 'import numpy' 2>/dev/null") != 0) {
        print_message("skipped: /usr/bin/python3 with numpy missing\n");
        skip();
    }
    const char *csv = tf_test_tmpfile("spec_coarse.csv");
    assert_int_equal(tf_test_system("/usr/bin/python3 '%s' '%s' 10000 8 20 12 0 0 A 1 0",
                                    tf_test_src("tests/support/segment_numpy.py"), csv),
                     0);
    const char *ref = tf_test_tmpfile("spec_coarse.ref");
    /* reference: numpy.fft over the 12 whole output periods (50 samples each) */
    assert_int_equal(
        tf_test_system("/usr/bin/python3 -c \"import numpy as np;"
                       "i=np.loadtxt('%s',delimiter=',',skiprows=1)[:,1][:600];"
                       "X=np.abs(np.fft.rfft(i))/600*np.sqrt(2);"
                       "open('%s','w').write('%%.9g %%.9g %%.9g %%.9g' %% "
                       "(X[12],X[36],X[60],np.sqrt(np.mean(i*i))))\"",
                       csv, ref),
        0);
    double h1, h3, h5, rms;
    FILE *f = fopen(ref, "r");
    assert_non_null(f);
    assert_int_equal(fscanf(f, "%lf %lf %lf %lf", &h1, &h3, &h5, &rms), 4);
    fclose(f);
    tf_import_options io;
    tf_import_options_init(&io);
    tf_capture *cap = NULL;
    tf_error e;
    assert_int_equal(tf_import_csv(csv, &io, &cap, &e), TF_OK);
    tf_roles roles;
    assert_int_equal(tf_roles_resolve(cap, NULL, NULL, &roles, &e), TF_OK);
    tf_segment_result *seg = NULL;
    assert_int_equal(tf_segment_run(cap, &roles, NULL, &seg, &e), TF_OK);
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    tf_spectrum_result *r = run(cap, &roles, seg, &o);
    assert_true(r->nch >= 1);
    const tf_channel_spectrum *c = &r->ch[0];
    print_message("h1 %g (%g), h3 %g (%g), h5 %g (%g), rms %g (%g)\n", c->harm[0].rms, h1,
                  c->harm[2].rms, h3, c->harm[4].rms, h5, c->rms, rms);
    assert_true(tf_test_reldiff(c->harm[0].rms, h1) < 1e-4);
    assert_true(tf_test_reldiff(c->harm[2].rms, h3) < 1e-4);
    assert_true(tf_test_reldiff(c->harm[4].rms, h5) < 1e-3);
    assert_true(tf_test_reldiff(c->rms, rms) < 1e-4);
    tf_spectrum_free(r);
    tf_segment_free(seg);
    tf_capture_destroy(cap);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_spectrum_numpy_coarse_capture),
        cmocka_unit_test(test_spectrum_smooth_lengths),
        cmocka_unit_test(test_spectrum_cubic_error),
        cmocka_unit_test(test_spectrum_square_sampled_dft),
        cmocka_unit_test(test_spectrum_square_fourier_series),
        cmocka_unit_test(test_spectrum_quasi_square),
        cmocka_unit_test(test_spectrum_fractional_period),
        cmocka_unit_test(test_spectrum_numpy_reference),
        cmocka_unit_test(test_spectrum_sox_stats),
        cmocka_unit_test(test_spectrum_estimated_fundamental),
        cmocka_unit_test(test_spectrum_segmenter_fundamental),
        cmocka_unit_test(test_spectrum_hann_window),
        cmocka_unit_test(test_spectrum_power_and_skew),
        cmocka_unit_test(test_spectrum_simulator_power),
        cmocka_unit_test(test_spectrum_simulator_skew),
        cmocka_unit_test(test_spectrum_threads_agree),
        cmocka_unit_test(test_spectrum_cycle_energies_skew),
        cmocka_unit_test(test_spectrum_json_keys),
        cmocka_unit_test(test_spectrum_clipped_flag),
        cmocka_unit_test(test_spectrum_errors),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
