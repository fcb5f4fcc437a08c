/* Simulator output: number printer, seeded noise, scope model, atomic files, CSV/WAV writers. */
#include "tf_test.h"

#include <dirent.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <tankfit/tankfit.h>

#include "synth_write.h"

#define PY "/usr/bin/python3"

/* ---- number printer ---------------------------------------------------------------- */

static void test_synth_output_format_matches_printf(void **state)
{
    (void)state;
    tf_sw_rng r;
    tf_sw_rng_seed(&r, 42, 0);
    size_t total = 0, differ = 0;
    /* exact decimal ties in binary: 0.125 -> "1.2e-01" (even), 0.375 -> "3.8e-01" */
    char t[32];
    t[tf_sw_format_sci(t, 0.125, 2)] = 0;
    assert_string_equal(t, "1.2e-01");
    t[tf_sw_format_sci(t, 0.375, 2)] = 0;
    assert_string_equal(t, "3.8e-01");
    t[tf_sw_format_sci(t, -2.5, 1)] = 0;
    assert_string_equal(t, "-2e+00");
    for (int digits = 1; digits <= 15; digits++) {
        for (int k = 0; k < 20000; k++) {
            /* magnitudes 1e-30 .. 1e30, both signs, plus round numbers */
            double e = -30 + 60 * tf_sw_rng_uniform(&r);
            double v = pow(10, e) * (tf_sw_rng_uniform(&r) < 0.5 ? -1 : 1);
            if (k % 7 == 0)
                v = floor(v * 1e3) / 1e3;
            char mine[32], ref[64];
            size_t n = tf_sw_format_sci(mine, v, digits);
            mine[n] = '\0';
            snprintf(ref, sizeof ref, "%.*e", digits - 1, v); /* reference: C library printf */
            total++;
            differ += strcmp(mine, ref) != 0;
        }
    }
    /* every digit as printf prints it (correctly rounded, ties to even) */
    assert_int_equal(differ, 0);
    assert_true(total == 15 * 20000);
    /* next to every power of ten, where a rounding carry moves the exponent */
    for (int k = -300; k <= 300; k++) {
        char s[16];
        snprintf(s, sizeof s, "1e%d", k);
        double p = strtod(s, NULL);
        double vs[5] = {p, nextafter(p, 0), nextafter(p, INFINITY), p * 0.99999999999999,
                        p * (1 - 0.5e-15)};
        for (int i = 0; i < 5; i++)
            for (int digits = 1; digits <= 15; digits++) {
                char mine[32], ref[64];
                mine[tf_sw_format_sci(mine, vs[i], digits)] = '\0';
                snprintf(ref, sizeof ref, "%.*e", digits - 1, vs[i]); /* reference: printf */
                if (strcmp(mine, ref) != 0)
                    fail_msg("%.17g with %d digits: '%s', printf '%s'", vs[i], digits, mine, ref);
            }
    }
    char b[32];
    size_t n = tf_sw_format_sci(b, 0.0, 6);
    b[n] = 0;
    assert_string_equal(b, "0.00000e+00");
    n = tf_sw_format_sci(b, 9.9999996, 6);
    b[n] = 0;
    assert_string_equal(b, "1.00000e+01");
    n = tf_sw_format_sci(b, -1.5e-300, 3);
    b[n] = 0;
    assert_string_equal(b, "-1.50e-300");
}

/* ---- seeded noise ------------------------------------------------------------------ */

static void test_synth_output_rng_normal_distribution(void **state)
{
    (void)state;
    tf_sw_rng r;
    tf_sw_rng_seed(&r, 7, 3);
    const int n = 20000;
    const char *path = tf_test_tmpfile("normal.txt");
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    double sum = 0, sum2 = 0;
    for (int k = 0; k < n; k++) {
        double x = tf_sw_rng_normal(&r);
        sum += x;
        sum2 += x * x;
        fprintf(f, "%.17g\n", x);
    }
    fclose(f);
    /* source: standard normal N(0,1); mean within 5 standard errors, variance within 5 % */
    assert_true(fabs(sum / n) < 5.0 / sqrt(n));
    assert_true(fabs(sum2 / n - 1) < 0.05);
    /* reference: scipy.stats.kstest against the standard normal CDF (p > 0.001) */
    assert_int_equal(tf_test_system(PY " -c \"import sys, numpy, scipy.stats as s; "
                                    "x = numpy.loadtxt('%s'); p = s.kstest(x, 'norm').pvalue; "
                                    "print('KS p', p); sys.exit(0 if p > 1e-3 else 1)\"",
                                    path),
                     0);
}

static void test_synth_output_rng_repeats(void **state)
{
    (void)state;
    tf_sw_rng a, b, c;
    tf_sw_rng_seed(&a, 1, 0);
    tf_sw_rng_seed(&b, 1, 0);
    tf_sw_rng_seed(&c, 1, 1);
    int same_c = 0;
    for (int k = 0; k < 1000; k++) {
        uint64_t x = tf_sw_rng_next(&a), y = tf_sw_rng_next(&b), z = tf_sw_rng_next(&c);
        assert_true(x == y);
        same_c += x == z;
    }
    assert_true(same_c < 2); /* another stream is another sequence */
}

/* ---- scope model ------------------------------------------------------------------- */

static void test_synth_output_quantise_and_clip(void **state)
{
    (void)state;
    tf_capture_channel_cfg cfg = {1, 0.0, 100.0, 0.0, 8};
    tf_sw_scope sc;
    tf_error err;
    assert_int_equal(tf_sw_scope_init(&sc, &cfg, "i_load", 1, 0, 0, &err), TF_OK);
    enum { N = 4001 };
    static float x[N], orig[N];
    for (int k = 0; k < N; k++)
        orig[k] = x[k] = (float)(-150.0 + 300.0 * k / (N - 1));
    tf_sw_scope_apply(&sc, x, N);
    /* source: ideal mid-tread uniform quantiser with 2^bits codes over +/- range,
     * saturating at the end codes (IEEE Std 1241 ideal ADC transfer) */
    double lsb = 200.0 / 256;
    for (int k = 0; k < N; k++) {
        double q = x[k] / lsb;
        assert_true(fabs(q - floor(q + 0.5)) < 1e-4);
        assert_true(q >= -128 - 1e-9 && q <= 127 + 1e-9);
        if (fabs(orig[k]) < 99)
            assert_true(fabs(x[k] - orig[k]) <= lsb / 2 + 1e-4);
        if (orig[k] > 100)
            assert_true(fabs(q - 127) < 1e-6);
        if (orig[k] < -100)
            assert_true(fabs(q + 128) < 1e-6);
        assert_int_equal(tf_sw_scope_code(&sc, x[k]), (long)floor(q + 0.5));
    }
    /* clipping alone (no bits) */
    tf_capture_channel_cfg clip = {1, 0.0, 50.0, 0.0, 0};
    assert_int_equal(tf_sw_scope_init(&sc, &clip, "v_out", 1, 1, 0, &err), TF_OK);
    memcpy(x, orig, sizeof x);
    tf_sw_scope_apply(&sc, x, N);
    for (int k = 0; k < N; k++)
        assert_true(x[k] == (orig[k] > 50 ? 50.0f : orig[k] < -50 ? -50.0f : orig[k]));
    /* bits without a range are refused, naming the key */
    tf_capture_channel_cfg bad = {1, 0.0, 0.0, 0.0, 10};
    assert_int_equal(tf_sw_scope_init(&sc, &bad, "v_c", 1, 2, 0, &err), TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "v_c.range"));
    tf_capture_channel_cfg neg = {1, -1.0, 0.0, 0.0, 0};
    assert_int_equal(tf_sw_scope_init(&sc, &neg, "v_c", 1, 2, 0, &err), TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "v_c.noise"));
}

static void test_synth_output_noise_sigma(void **state)
{
    (void)state;
    tf_capture_channel_cfg cfg = {1, 0.25, 0.0, 0.0, 0};
    tf_sw_scope sc;
    tf_error err;
    assert_int_equal(tf_sw_scope_init(&sc, &cfg, "i_load", 5, 0, 0, &err), TF_OK);
    enum { N = 50000 };
    static float x[N];
    for (int k = 0; k < N; k++)
        x[k] = 3.0f;
    tf_sw_scope_apply(&sc, x, N);
    double s = 0, s2 = 0;
    for (int k = 0; k < N; k++) {
        s += x[k] - 3.0;
        s2 += (x[k] - 3.0) * (x[k] - 3.0);
    }
    /* source: sample variance of N(0, sigma^2); relative standard error sqrt(2/N) ~ 0.6 % */
    assert_true(fabs(sqrt(s2 / N) / 0.25 - 1) < 0.02);
    assert_true(fabs(s / N) < 5 * 0.25 / sqrt(N));
    /* noiseless: untouched */
    assert_int_equal(tf_sw_scope_init(&sc, &cfg, "i_load", 5, 0, 1, &err), TF_OK);
    x[0] = 1.25f;
    tf_sw_scope_apply(&sc, x, 1);
    assert_true(x[0] == 1.25f);
}

/* ---- atomic files ------------------------------------------------------------------ */

static int temp_leftovers(const char *dir, const char *base)
{
    DIR *d = opendir(dir);
    int n = 0;
    char prefix[256];
    snprintf(prefix, sizeof prefix, ".%s.", base);
    for (struct dirent *e; d && (e = readdir(d));)
        n += strncmp(e->d_name, prefix, strlen(prefix)) == 0;
    if (d)
        closedir(d);
    return n;
}

static void test_synth_output_atomic_files(void **state)
{
    (void)state;
    tf_error err;
    tf_sw_file f;
    const char *path = tf_test_tmpfile("atomic.txt");
    assert_int_equal(tf_test_write(path, "user data\n"), 0);
    /* an existing file is refused and left alone */
    assert_int_equal(tf_sw_file_open(&f, path, 0, &err), TF_ERR_CANTCREAT);
    assert_non_null(strstr(err.msg, "--force"));
    char *text = tf_test_slurp(path, NULL);
    assert_string_equal(text, "user data\n");
    free(text);
    /* with overwrite it is replaced only at commit */
    assert_int_equal(tf_sw_file_open(&f, path, 1, &err), TF_OK);
    assert_int_equal(tf_sw_file_write(&f, "new\n", 4, &err), TF_OK);
    text = tf_test_slurp(path, NULL);
    assert_string_equal(text, "user data\n");
    free(text);
    assert_int_equal(tf_sw_file_commit(&f, &err), TF_OK);
    text = tf_test_slurp(path, NULL);
    assert_string_equal(text, "new\n");
    free(text);
    /* abort leaves nothing behind */
    const char *fresh = tf_test_tmpfile("fresh.txt");
    assert_int_equal(tf_sw_file_open(&f, fresh, 0, &err), TF_OK);
    assert_int_equal(tf_sw_file_write(&f, "x", 1, &err), TF_OK);
    tf_sw_file_abort(&f);
    assert_null(tf_test_slurp(fresh, NULL));
    assert_int_equal(temp_leftovers(tf_test_tmpdir(), "fresh.txt"), 0);
    assert_int_equal(temp_leftovers(tf_test_tmpdir(), "atomic.txt"), 0);
    /* a file appearing meanwhile is not replaced without overwrite */
    assert_int_equal(tf_sw_file_open(&f, fresh, 0, &err), TF_OK);
    assert_int_equal(tf_test_write(fresh, "theirs\n"), 0);
    assert_int_equal(tf_sw_file_commit(&f, &err), TF_ERR_CANTCREAT);
    text = tf_test_slurp(fresh, NULL);
    assert_string_equal(text, "theirs\n");
    free(text);
    assert_int_equal(temp_leftovers(tf_test_tmpdir(), "fresh.txt"), 0);
    /* a missing directory */
    assert_int_equal(tf_sw_file_open(&f, tf_test_tmpfile("no/such/dir.csv"), 0, &err),
                     TF_ERR_CANTCREAT);
}

/* ---- writers ----------------------------------------------------------------------- */

/* textbook series RLC response: i(t) = E / (wd L) exp(-alpha t) sin(wd t) */
static void damped(float *i, float *v, size_t k0, size_t n, double t0, double dt)
{
    const double E = 300, L = 36e-6, C = 2.2e-6, R = 0.45;
    double alpha = R / (2 * L), w0 = 1 / sqrt(L * C), wd = sqrt(w0 * w0 - alpha * alpha);
    for (size_t k = 0; k < n; k++) {
        double t = t0 + (double)(k0 + k) * dt;
        i[k] = (float)(E / (wd * L) * exp(-alpha * t) * sin(wd * t));
        v[k] = (float)(E * exp(-alpha * t) * cos(wd * t));
    }
}

static tf_sw_layout layout2(void)
{
    tf_sw_layout lay;
    memset(&lay, 0, sizeof lay);
    lay.nchan = 3;
    lay.name[0] = "i_load";
    lay.unit[0] = "A";
    lay.name[1] = "v_c";
    lay.unit[1] = "V";
    lay.name[2] = "g1";
    lay.unit[2] = "";
    lay.t0_s = -1e-5;
    lay.dt_s = 1e-7;
    lay.time_digits = 9;
    lay.value_digits = 6;
    return lay;
}

enum { NW = 30000, BLK = 4096 };

static void test_synth_output_csv_roundtrip(void **state)
{
    (void)state;
    tf_error err;
    tf_sw_file f;
    tf_sw_layout lay = layout2();
    const char *path = tf_test_tmpfile("w.csv");
    assert_int_equal(tf_sw_file_open(&f, path, 0, &err), TF_OK);
    tf_sw_csv *w = tf_sw_csv_create(&f, &lay, &err);
    assert_non_null(w);
    static float i[BLK], v[BLK], g[BLK];
    for (size_t k0 = 0; k0 < NW; k0 += BLK) {
        size_t m = NW - k0 < BLK ? NW - k0 : BLK;
        damped(i, v, k0, m, lay.t0_s, lay.dt_s);
        for (size_t k = 0; k < m; k++)
            g[k] = (k0 + k) % 1000 < 100;
        const float *ch[3] = {i, v, g};
        assert_int_equal(tf_sw_csv_write(w, k0, ch, m, &err), TF_OK);
    }
    assert_int_equal(tf_sw_csv_finish(w, &err), TF_OK);
    assert_int_equal(tf_sw_file_commit(&f, &err), TF_OK);
    char *text = tf_test_slurp(path, NULL);
    assert_non_null(text);
    assert_memory_equal(text, "time (s),i_load (A),v_c (V),g1\n-1.00000000e-05,", 47);
    free(text);
    /* reference: Python's csv module and the closed form evaluated by numpy: values
     * agree within the 6 printed digits, times within the 9 printed digits */
    int rc = tf_test_system(
        PY " -c \"\nimport csv, sys, numpy as np\n"
        "rows = list(csv.reader(open('%s')))\n"
        "assert rows[0] == ['time (s)', 'i_load (A)', 'v_c (V)', 'g1'], rows[0]\n"
        "a = np.array(rows[1:], dtype=float)\n"
        "assert a.shape == (%d, 4), a.shape\n"
        "t = -1e-5 + np.arange(a.shape[0]) * 1e-7\n"
        "E, L, C, R = 300, 36e-6, 2.2e-6, 0.45\n"
        "al = R / (2 * L); wd = np.sqrt(1 / (L * C) - al * al)\n"
        "i = E / (wd * L) * np.exp(-al * t) * np.sin(wd * t)\n"
        "v = E * np.exp(-al * t) * np.cos(wd * t)\n"
        "ok = np.all(np.abs(a[:, 0] - t) <= 6e-9 * np.abs(t) + 1e-20)\n"
        "ok &= np.all(np.abs(a[:, 1] - i) <= 6e-6 * np.abs(i) + 1e-5)\n"
        "ok &= np.all(np.abs(a[:, 2] - v) <= 6e-6 * np.abs(v) + 1e-4)\n"
        "ok &= np.all(a[:, 3] == (np.arange(a.shape[0]) %% 1000 < 100))\n"
        "print('csv round trip', ok); sys.exit(0 if ok else 1)\n\"",
        path, NW);
    assert_int_equal(rc, 0);
}

static void write_wav(const char *path, int pcm16, const tf_sw_scope *sc)
{
    tf_error err;
    tf_sw_file f;
    tf_sw_layout lay = layout2();
    lay.dt_s = 1e-6; /* 1 MHz */
    lay.pcm16 = pcm16;
    lay.full_scale[0] = pcm16 ? 100.0 : 1.0;
    lay.bits[0] = 10;
    lay.full_scale[1] = pcm16 ? 400.0 : 1.0;
    lay.bits[1] = 12;
    lay.full_scale[2] = pcm16 ? 2.0 : 1.0;
    lay.bits[2] = 16;
    assert_int_equal(tf_sw_file_open(&f, path, 1, &err), TF_OK);
    tf_sw_wav *w = tf_sw_wav_create(&f, &lay, &err);
    assert_non_null(w);
    static float i[BLK], v[BLK], g[BLK];
    for (size_t k0 = 0; k0 < NW; k0 += BLK) {
        size_t m = NW - k0 < BLK ? NW - k0 : BLK;
        damped(i, v, k0, m, 0, lay.dt_s);
        for (size_t k = 0; k < m; k++)
            g[k] = (k0 + k) % 1000 < 100;
        if (sc) {
            tf_sw_scope a = sc[0], b = sc[1];
            tf_sw_scope_apply(&a, i, m);
            tf_sw_scope_apply(&b, v, m);
        }
        const float *ch[3] = {i, v, g};
        assert_int_equal(tf_sw_wav_write(w, ch, m, &err), TF_OK);
    }
    assert_int_equal(tf_sw_wav_finish(w, &err), TF_OK);
    assert_int_equal(tf_sw_file_commit(&f, &err), TF_OK);
    char *side = tf_sw_sidecar_text(&lay);
    char sp[1100];
    snprintf(sp, sizeof sp, "%s.tfscale", path);
    assert_int_equal(tf_test_write(sp, side), 0);
    free(side);
}

static void test_synth_output_wav_pcm16_codes(void **state)
{
    (void)state;
    tf_error err;
    tf_sw_scope sc[2];
    tf_capture_channel_cfg ci = {1, 0.0, 100.0, 0.0, 10}, cv = {1, 0.0, 400.0, 0.0, 12};
    assert_int_equal(tf_sw_scope_init(&sc[0], &ci, "i_load", 1, 0, 0, &err), TF_OK);
    assert_int_equal(tf_sw_scope_init(&sc[1], &cv, "v_c", 1, 2, 0, &err), TF_OK);
    const char *path = tf_test_tmpfile("p16.wav");
    write_wav(path, 1, sc);
    /* reference: scipy.io.wavfile reads the 16-bit codes; each is the 10- or 12-bit ADC
     * code times 2^(16 - bits), and code / 32768 x full scale is the quantised closed form */
    int rc = tf_test_system(
        PY " -c \"\nimport sys, numpy as np, scipy.io.wavfile as w\n"
        "rate, a = w.read('%s')\n"
        "assert rate == 1000000 and a.dtype == np.int16 and a.shape == (%d, 3), (rate, a.shape)\n"
        "t = np.arange(a.shape[0]) * 1e-6\n"
        "E, L, C, R = 300, 36e-6, 2.2e-6, 0.45\n"
        "al = R / (2 * L); wd = np.sqrt(1 / (L * C) - al * al)\n"
        "i = E / (wd * L) * np.exp(-al * t) * np.sin(wd * t)\n"
        "v = E * np.exp(-al * t) * np.cos(wd * t)\n"
        "ok = np.all(a[:, 0] %% 64 == 0) and np.all(a[:, 1] %% 16 == 0)\n"
        "qi = np.clip(np.floor(i / (200 / 1024) + 0.5), -512, 511) * 64\n"
        "qv = np.clip(np.floor(v / (800 / 4096) + 0.5), -2048, 2047) * 16\n"
        "ok &= np.max(np.abs(a[:, 0] - qi)) <= 64 and np.mean(a[:, 0] == qi) > 0.99\n"
        "ok &= np.max(np.abs(a[:, 1] - qv)) <= 16 and np.mean(a[:, 1] == qv) > 0.99\n"
        "ok &= np.all(a[:, 2] == np.where(np.arange(a.shape[0]) %% 1000 < 100, 16384, 0))\n"
        "print('pcm16', ok); sys.exit(0 if ok else 1)\n\"",
        path, NW);
    assert_int_equal(rc, 0);
    /* reference: sox reports the encoding and channel count */
    assert_int_equal(tf_test_system("sox --i '%s' | grep -q 'Channels *: 3' && sox --i '%s' | "
                                    "grep -q '16-bit Signed Integer PCM'", path, path), 0);
    char sp[1100];
    snprintf(sp, sizeof sp, "%s.tfscale", path);
    char *side = tf_test_slurp(sp, NULL);
    assert_non_null(strstr(side, "\ni_load A 100\nv_c V 400\ng1 1 2\n"));
    free(side);
}

static void test_synth_output_wav_float_repeats(void **state)
{
    (void)state;
    const char *a = tf_test_tmpfile("f1.wav"), *b = tf_test_tmpfile("f2.wav");
    write_wav(a, 0, NULL);
    write_wav(b, 0, NULL);
    size_t na, nb;
    char *da = tf_test_slurp(a, &na), *db = tf_test_slurp(b, &nb);
    assert_true(na == nb);
    assert_memory_equal(da, db, na);
    /* no PEAK chunk (its time stamp would make runs differ) */
    for (size_t k = 0; k + 4 <= na && k < 200; k++) /* the header chunks */
        assert_false(memcmp(da + k, "PEAK", 4) == 0);
    free(da);
    free(db);
    /* reference: scipy.io.wavfile reads float32 equal to the closed form */
    int rc = tf_test_system(
        PY " -c \"\nimport sys, numpy as np, scipy.io.wavfile as w\n"
        "rate, a = w.read('%s')\n"
        "assert rate == 1000000 and a.dtype == np.float32, (rate, a.dtype)\n"
        "t = np.arange(a.shape[0]) * 1e-6\n"
        "E, L, C, R = 300, 36e-6, 2.2e-6, 0.45\n"
        "al = R / (2 * L); wd = np.sqrt(1 / (L * C) - al * al)\n"
        "i = E / (wd * L) * np.exp(-al * t) * np.sin(wd * t)\n"
        "ok = np.max(np.abs(a[:, 0] - i)) <= 1e-6 * np.max(np.abs(i))\n"
        "print('float', ok); sys.exit(0 if ok else 1)\n\"",
        a);
    assert_int_equal(rc, 0);
}

static void test_synth_output_wav_rate_must_be_whole(void **state)
{
    (void)state;
    tf_error err;
    tf_sw_file f;
    tf_sw_layout lay = layout2();
    lay.dt_s = 1.0 / 1234567.5;
    lay.full_scale[0] = lay.full_scale[1] = lay.full_scale[2] = 1;
    const char *path = tf_test_tmpfile("rate.wav");
    assert_int_equal(tf_sw_file_open(&f, path, 0, &err), TF_OK);
    assert_null(tf_sw_wav_create(&f, &lay, &err));
    assert_int_equal(err.code, TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "sample_rate"));
    tf_sw_file_abort(&f);
    assert_null(tf_test_slurp(path, NULL));
}

/* ---- plan -------------------------------------------------------------------------- */

static tf_design *base_design(tf_topology topo)
{
    tf_design *d = malloc(sizeof *d);
    tf_design_init(d);
    d->topology = topo;
    d->sample_rate_hz = 1e6;
    d->duration_s = 1e-3;
    d->start_s = 0;
    d->seed = 1;
    for (int c = 0; c < TF_SYN_NCHAN; c++) {
        memset(&d->chan[c], 0, sizeof d->chan[c]);
        d->chan[c].skew_s = 0;
    }
    d->time_digits = 9;
    d->value_digits = 6;
    return d;
}

static void test_synth_output_plan_channels(void **state)
{
    (void)state;
    tf_error err;
    tf_sw_plan p;
    tf_design *d = base_design(TF_TOPO_HALF_BRIDGE);
    assert_int_equal(tf_sw_plan_make(d, 0, 0, &p, &err), TF_OK);
    assert_int_equal(p.nchan, 6);
    assert_int_equal(p.n, 1000);
    assert_string_equal(p.lay.name[5], "g2");
    d->topology = TF_TOPO_FULL_BRIDGE;
    assert_int_equal(tf_sw_plan_make(d, 0, 0, &p, &err), TF_OK);
    assert_int_equal(p.nchan, 8);
    d->topology = TF_TOPO_SINGLE;
    d->chan[TF_SYN_I_LOAD].enabled = 1;
    d->chan[TF_SYN_G1].enabled = 1;
    assert_int_equal(tf_sw_plan_make(d, 0, 0, &p, &err), TF_OK);
    assert_int_equal(p.nchan, 2);
    d->chan[TF_SYN_G3].enabled = 1; /* a single stage has no g3: skipped */
    assert_int_equal(tf_sw_plan_make(d, 0, 0, &p, &err), TF_OK);
    assert_int_equal(p.nchan, 2);
    d->chan[TF_SYN_G3].enabled = 0;
    d->topology = TF_TOPO_UNKNOWN;
    assert_int_equal(tf_sw_plan_make(d, 0, 0, &p, &err), TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "topology"));
    d->topology = TF_TOPO_SINGLE;
    d->chan[TF_SYN_I_LOAD].skew_s = 2e-3;
    assert_int_equal(tf_sw_plan_make(d, 0, 0, &p, &err), TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "i_load.skew"));
    d->chan[TF_SYN_I_LOAD].skew_s = 0;
    d->duration_s = 0;
    assert_int_equal(tf_sw_plan_make(d, 0, 0, &p, &err), TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "duration"));
    d->duration_s = 1e-3;
    d->time_digits = 16;
    assert_int_equal(tf_sw_plan_make(d, 0, 0, &p, &err), TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "time_digits"));
    free(d);
}

static void test_synth_output_plan_wav_subformat(void **state)
{
    (void)state;
    tf_error err;
    tf_sw_plan p;
    tf_design *d = base_design(TF_TOPO_HALF_BRIDGE);
    for (int c = 0; c < 4; c++) {
        d->chan[c].range = 500;
        d->chan[c].bits = 12;
    }
    assert_int_equal(tf_sw_plan_make(d, 0, 1, &p, &err), TF_OK);
    assert_int_equal(p.lay.pcm16, 1);
    assert_true(p.lay.full_scale[0] == 500 && p.lay.full_scale[4] == 2);
    /* noiseless output keeps the exact values: FLOAT */
    assert_int_equal(tf_sw_plan_make(d, 1, 1, &p, &err), TF_OK);
    assert_int_equal(p.lay.pcm16, 0);
    d->chan[TF_SYN_V_C].bits = 0;
    assert_int_equal(tf_sw_plan_make(d, 0, 1, &p, &err), TF_OK);
    assert_int_equal(p.lay.pcm16, 0);
    json_t *j = tf_sw_plan_json(&p, d);
    assert_string_equal(json_string_value(json_object_get(j, "wav_subformat")), "FLOAT");
    assert_int_equal(json_array_size(json_object_get(j, "channels")), 6);
    json_decref(j);
    free(d);
}

/* ---- whole runs through the engine --------------------------------------------------- */

/* A 300 V half-bridge (36 uH, 2.2 uF, 0.45 ohm) at 7 kHz, 2 MS/s for 1 ms, with
 * every imperfection set. */
static tf_design *hb_design(void)
{
    tf_design *d = base_design(TF_TOPO_HALF_BRIDGE);
    d->dc_link_v = 300;
    d->firing_frequency_hz = 7000;
    d->capacitance_f = 2.2e-6;
    d->inductance_h = 36e-6;
    d->resistance_ohm = 0.45;
    d->thyristor_drop_v = 1.5;
    d->diode_drop_v = 1.0;
    d->sample_rate_hz = 2e6;
    d->duration_s = 1e-3;
    d->seed = 99;
    for (int c = 0; c < TF_SYN_NCHAN; c++)
        d->chan[c].enabled = c < TF_SYN_G3;
    d->chan[TF_SYN_I_LOAD] = (tf_capture_channel_cfg){1, 0.4, 100.0, 0.0, 12};
    d->chan[TF_SYN_V_OUT] = (tf_capture_channel_cfg){1, 1.0, 400.0, 50e-9, 10};
    d->chan[TF_SYN_V_C] = (tf_capture_channel_cfg){1, 1.0, 600.0, 0.0, 12};
    d->chan[TF_SYN_V_AK1] = (tf_capture_channel_cfg){1, 0.0, 400.0, 0.0, 0};
    return d;
}

/* Every line of a written CSV is what printf("%.*e") gives for the in-memory capture
 * of the same design (reference: C library printf). */
static void check_csv_against_capture(const char *path, const tf_capture *cap, int td, int vd)
{
    size_t len;
    char *text = tf_test_slurp(path, &len);
    assert_non_null(text);
    char *line = strchr(text, '\n');
    assert_non_null(line);
    line++;
    char want[512];
    for (size_t k = 0; k < cap->n; k++) {
        int n = snprintf(want, sizeof want, "%.*e", td - 1, cap->t0_s + (double)k * cap->dt_s);
        for (size_t c = 0; c < cap->nchan; c++)
            n += snprintf(want + n, sizeof want - (size_t)n, ",%.*e", vd - 1,
                          (double)cap->ch[c].samples[k]);
        want[n++] = '\n';
        want[n] = '\0';
        if (strncmp(line, want, (size_t)n) != 0)
            fail_msg("row %zu: got '%.*s', want '%s'", k, n, line, want);
        line += n;
    }
    assert_true(line == text + len);
    free(text);
}

static void test_synth_output_csv_matches_capture(void **state)
{
    (void)state;
    tf_error err;
    tf_design *d = hb_design();
    d->time_digits = 5; /* 1e-3 s at 2 MS/s: neighbouring times print alike */
    d->value_digits = 4;
    d->start_s = -20e-6;
    const char *path = tf_test_tmpfile("run.csv"), *truth = tf_test_tmpfile("run.json");
    assert_int_equal(tf_synth_write(d, path, truth, 0, &err), TF_OK);
    tf_capture *cap;
    json_t *t;
    assert_int_equal(tf_synth_to_capture(d, 0, &cap, &t, &err), TF_OK);
    assert_int_equal(cap->n, 2000);
    assert_int_equal(cap->nchan, 6);
    assert_true(cap->t0_s == -20e-6);
    char *text = tf_test_slurp(path, NULL);
    assert_memory_equal(text, "time (s),i_load (A),v_out (V),v_c (V),v_ak1 (V),g1,g2\n", 54);
    assert_memory_equal(text + 54, "-2.0000e-05,", 12);
    free(text);
    check_csv_against_capture(path, cap, 5, 4);
    /* the truth file is the engine's truth plus the capture description */
    json_error_t je;
    json_t *file = json_load_file(truth, 0, &je);
    assert_non_null(file);
    assert_true(json_equal(file, t));
    json_t *c = json_object_get(file, "capture");
    assert_int_equal(json_integer_value(json_object_get(c, "samples")), 2000);
    assert_int_equal(json_integer_value(json_object_get(c, "seed")), 99);
    json_decref(file);
    json_decref(t);
    tf_capture_destroy(cap);
    free(d);
}

static void test_synth_output_same_design_same_bytes(void **state)
{
    (void)state;
    tf_error err;
    tf_design *d = hb_design();
    const char *a = tf_test_tmpfile("same1.csv"), *b = tf_test_tmpfile("same2.csv"),
               *c = tf_test_tmpfile("seed.csv");
    assert_int_equal(tf_synth_write(d, a, NULL, 0, &err), TF_OK);
    assert_int_equal(tf_synth_write(d, b, NULL, 0, &err), TF_OK);
    d->seed = 100;
    assert_int_equal(tf_synth_write(d, c, NULL, 0, &err), TF_OK);
    size_t na, nb, nc;
    char *x = tf_test_slurp(a, &na), *y = tf_test_slurp(b, &nb), *z = tf_test_slurp(c, &nc);
    assert_true(na == nb);
    assert_memory_equal(x, y, na);
    assert_false(na == nc && memcmp(x, z, na) == 0); /* another seed, other noise */
    free(x);
    free(y);
    free(z);
    free(d);
}

static void test_synth_output_imperfections(void **state)
{
    (void)state;
    tf_error err;
    tf_design *d = hb_design();
    d->duration_s = 2e-3;
    d->chan[TF_SYN_I_LOAD] = (tf_capture_channel_cfg){1, 0.5, 30.0, 1e-6, 12};
    tf_capture *noisy, *clean;
    assert_int_equal(tf_synth_to_capture(d, 0, &noisy, NULL, &err), TF_OK);
    assert_int_equal(tf_synth_to_capture(d, 1, &clean, NULL, &err), TF_OK);
    const float *in = noisy->ch[0].samples, *ic = clean->ch[0].samples;
    double lsb = 60.0 / 4096, s2 = 0, peak = 0;
    size_t used = 0, clipped = 0, above = 0;
    for (size_t k = 2; k < noisy->n; k++) {
        double q = in[k] / lsb;
        assert_true(fabs(q - floor(q + 0.5)) < 1e-3); /* on the 12-bit grid */
        assert_true(in[k] >= -30.0f && in[k] <= 30.0f);
        peak = fmax(peak, fabs(ic[k]));
        /* skew 1 us = 2 samples: the channel shows i(t - 1 us) */
        double ref = ic[k - 2];
        if (fabs(ref) > 33)
            above++;
        if (fabs(in[k]) >= 30 - lsb)
            clipped++;
        if (fabs(ref) < 27) {
            s2 += (in[k] - ref) * (in[k] - ref);
            used++;
        }
    }
    /* source: Gaussian noise of sigma 0.5 A plus uniform quantisation error of
     * variance LSB^2 / 12 (B. Widrow, quantisation noise model); 5 % on sigma */
    double want = sqrt(0.25 + lsb * lsb / 12);
    assert_true(used > 1000);
    assert_true(fabs(sqrt(s2 / (double)used) / want - 1) < 0.05);
    /* clipped at the 30 A range wherever the true current is well beyond it */
    assert_true(peak > 35 && above > 0 && clipped >= above);
    tf_capture_destroy(noisy);
    tf_capture_destroy(clean);
    free(d);
}

static void test_synth_output_wav_through_importer(void **state)
{
    (void)state;
    tf_error err;
    tf_design *d = hb_design();
    d->start_s = 5e-6;
    d->chan[TF_SYN_V_AK1].bits = 12; /* every analogue channel has bits: PCM_16 */
    const char *path = tf_test_tmpfile("run.wav");
    assert_int_equal(tf_synth_write(d, path, NULL, 0, &err), TF_OK);
    tf_capture *cap, *got;
    assert_int_equal(tf_synth_to_capture(d, 0, &cap, NULL, &err), TF_OK);
    tf_import_options o;
    tf_import_options_init(&o);
    o.quiet_progress = 1;
    /* the project's WAV importer reads the sidecar (names, units, full scales, t0) */
    assert_int_equal(tf_import_wav(path, &o, &got, &err), TF_OK);
    assert_int_equal(got->nchan, cap->nchan);
    assert_int_equal(got->n, cap->n);
    assert_true(fabs(got->t0_s - 5e-6) < 1e-15);
    assert_true(fabs(got->dt_s - 0.5e-6) < 1e-18);
    assert_string_equal(got->dialect.wav_subformat, "PCM_16");
    for (size_t c = 0; c < cap->nchan; c++) {
        assert_string_equal(got->ch[c].name, cap->ch[c].name);
        assert_string_equal(got->ch[c].unit, cap->ch[c].unit);
        for (size_t k = 0; k < cap->n; k++)
            if (fabs(got->ch[c].samples[k] - cap->ch[c].samples[k]) >
                1e-6 * fabs(cap->ch[c].samples[k]) + 1e-5)
                fail_msg("%s[%zu]: %g from the WAV, %g simulated", cap->ch[c].name, k,
                         got->ch[c].samples[k], cap->ch[c].samples[k]);
    }
    tf_capture_destroy(got);
    tf_capture_destroy(cap);
    free(d);
}

static void test_synth_output_csv_through_importer(void **state)
{
    (void)state;
    tf_error err;
    tf_design *d = hb_design();
    d->value_digits = 7;
    const char *path = tf_test_tmpfile("import.csv");
    assert_int_equal(tf_synth_write(d, path, NULL, 0, &err), TF_OK);
    tf_capture *cap, *got;
    assert_int_equal(tf_synth_to_capture(d, 0, &cap, NULL, &err), TF_OK);
    tf_import_options o;
    tf_import_options_init(&o);
    o.quiet_progress = 1;
    /* the project's CSV importer finds the time base and units in what synth wrote */
    assert_int_equal(tf_import_csv(path, &o, &got, &err), TF_OK);
    assert_int_equal(got->nchan, cap->nchan);
    assert_int_equal(got->n, cap->n);
    assert_true(fabs(got->dt_s - cap->dt_s) < 1e-6 * cap->dt_s);
    for (size_t c = 0; c < cap->nchan; c++) {
        assert_string_equal(got->ch[c].name, cap->ch[c].name);
        assert_string_equal(got->ch[c].unit, cap->ch[c].unit);
        for (size_t k = 0; k < cap->n; k++)
            assert_true(fabs(got->ch[c].samples[k] - cap->ch[c].samples[k]) <=
                        6e-7 * fabs(cap->ch[c].samples[k]) + 1e-30);
    }
    tf_capture_destroy(got);
    tf_capture_destroy(cap);
    free(d);
}

typedef struct progress_log {
    int calls;
    double last;
    int decreasing;
} progress_log;

static void on_progress(void *ctx, double fraction)
{
    progress_log *p = ctx;
    if (fraction < p->last)
        p->decreasing = 1;
    p->last = fraction;
    p->calls++;
}

static void test_synth_output_format_choice_and_progress(void **state)
{
    (void)state;
    tf_error err;
    tf_design *d = hb_design();
    d->duration_s = 20e-3; /* 40 000 samples: five blocks */
    d->format_wav = 1;
    tf_synth_write_options o;
    tf_synth_write_options_init(&o);
    progress_log log = {0, 0, 0};
    o.progress = on_progress;
    o.progress_ctx = &log;
    /* an extension that says nothing: the design's format (WAV, with its sidecar) */
    const char *path = tf_test_tmpfile("capture.dat");
    assert_int_equal(tf_synth_write_opts(d, path, NULL, &o, &err), TF_OK);
    size_t n;
    char *bytes = tf_test_slurp(path, &n);
    assert_non_null(bytes);
    assert_memory_equal(bytes, "RIFF", 4);
    assert_memory_equal(bytes + 8, "WAVE", 4);
    free(bytes);
    char side[1100];
    snprintf(side, sizeof side, "%s.tfscale", path);
    bytes = tf_test_slurp(side, NULL);
    assert_non_null(bytes);
    free(bytes);
    assert_int_equal(log.calls, 5);
    assert_false(log.decreasing);
    assert_true(log.last == 1.0);
    /* .csv wins over the design's format; a forced format wins over both */
    const char *csv = tf_test_tmpfile("capture.csv");
    assert_int_equal(tf_synth_write(d, csv, NULL, 0, &err), TF_OK);
    bytes = tf_test_slurp(csv, NULL);
    assert_memory_equal(bytes, "time (s),", 9);
    free(bytes);
    o.format = 1;
    o.progress = NULL;
    const char *forced = tf_test_tmpfile("forced.wav");
    assert_int_equal(tf_synth_write_opts(d, forced, NULL, &o, &err), TF_OK);
    bytes = tf_test_slurp(forced, NULL);
    assert_memory_equal(bytes, "time (s),", 9);
    free(bytes);
    free(d);
}

static void test_synth_output_refuses_and_leaves_nothing(void **state)
{
    (void)state;
    tf_error err;
    tf_design *d = hb_design();
    const char *out = tf_test_tmpfile("keep.csv"), *truth = tf_test_tmpfile("keep.json");
    assert_int_equal(tf_test_write(truth, "user's file\n"), 0);
    /* the truth target exists: nothing is written, not even the capture */
    assert_int_equal(tf_synth_write(d, out, truth, 0, &err), TF_ERR_CANTCREAT);
    assert_non_null(strstr(err.msg, "keep.json"));
    assert_null(tf_test_slurp(out, NULL));
    char *text = tf_test_slurp(truth, NULL);
    assert_string_equal(text, "user's file\n");
    free(text);
    /* with overwrite both are written */
    assert_int_equal(tf_synth_write(d, out, truth, 1, &err), TF_OK);
    text = tf_test_slurp(truth, NULL);
    assert_true(text[0] == '{');
    free(text);
    /* an engine error (no inductance) leaves no file and no temporary file */
    d->inductance_h = NAN;
    const char *bad = tf_test_tmpfile("bad.wav");
    assert_int_not_equal(tf_synth_write(d, bad, NULL, 0, &err), TF_OK);
    assert_null(tf_test_slurp(bad, NULL));
    char side[1100];
    snprintf(side, sizeof side, "%s.tfscale", bad);
    assert_null(tf_test_slurp(side, NULL));
    assert_int_equal(temp_leftovers(tf_test_tmpdir(), "bad.wav"), 0);
    assert_int_equal(temp_leftovers(tf_test_tmpdir(), "bad.wav.tfscale"), 0);
    assert_int_equal(temp_leftovers(tf_test_tmpdir(), "keep.csv"), 0);
    free(d);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_synth_output_format_matches_printf),
        cmocka_unit_test(test_synth_output_rng_normal_distribution),
        cmocka_unit_test(test_synth_output_rng_repeats),
        cmocka_unit_test(test_synth_output_quantise_and_clip),
        cmocka_unit_test(test_synth_output_noise_sigma),
        cmocka_unit_test(test_synth_output_atomic_files),
        cmocka_unit_test(test_synth_output_csv_roundtrip),
        cmocka_unit_test(test_synth_output_wav_pcm16_codes),
        cmocka_unit_test(test_synth_output_wav_float_repeats),
        cmocka_unit_test(test_synth_output_wav_rate_must_be_whole),
        cmocka_unit_test(test_synth_output_plan_channels),
        cmocka_unit_test(test_synth_output_plan_wav_subformat),
        cmocka_unit_test(test_synth_output_csv_matches_capture),
        cmocka_unit_test(test_synth_output_same_design_same_bytes),
        cmocka_unit_test(test_synth_output_imperfections),
        cmocka_unit_test(test_synth_output_wav_through_importer),
        cmocka_unit_test(test_synth_output_csv_through_importer),
        cmocka_unit_test(test_synth_output_format_choice_and_progress),
        cmocka_unit_test(test_synth_output_refuses_and_leaves_nothing),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
