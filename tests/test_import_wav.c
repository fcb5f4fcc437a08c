/* WAV importer: SoX-written captures (known rate, frequency, amplitude), sidecar, bad files. */
#include "tf_test.h"

#include <math.h>
#include <sndfile.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>
#include <tankfit/capture.h>
#include <tankfit/import.h>

#include "wav_sidecar.h"

#ifndef M_PI
#define M_PI 3.14159265358979323846
#endif

/* Write a capture with SoX (Debian sox). tests/run installs it: missing is a failure. */
static const char *sox(const char *name, const char *args)
{
    assert_true(tf_test_have("sox"));
    const char *path = tf_test_tmpfile(name);
    /* args: output format options, then effects starting at "synth" */
    const char *fx = strstr(args, "synth");
    assert_non_null(fx);
    assert_int_equal(tf_test_system("sox -D -n %.*s '%s' %s 2>/dev/null", (int)(fx - args), args,
                                    path, fx), 0);
    return path;
}

static tf_capture *load(const char *path, const tf_import_options *opt)
{
    tf_capture *cap = NULL;
    tf_error err;
    tf_error_clear(&err);
    tf_status st = tf_import_wav(path, opt, &cap, &err);
    if (st != TF_OK)
        fprintf(stderr, "import failed: %s\n", err.msg);
    assert_int_equal(st, TF_OK);
    assert_non_null(cap);
    return cap;
}

/* Import expecting failure: returns the message (static). */
static const char *load_fail(const char *path, const tf_import_options *opt, tf_status want)
{
    static tf_error err;
    tf_capture *cap = (tf_capture *)1;
    tf_error_clear(&err);
    assert_int_equal(tf_import_wav(path, opt, &cap, &err), want);
    assert_int_equal(err.code, want);
    assert_null(cap);
    return err.msg;
}

static double rms_of(const float *x, size_t n)
{
    double s = 0;
    for (size_t k = 0; k < n; k++)
        s += (double)x[k] * x[k];
    return sqrt(s / (double)n);
}

static int has_warning(const tf_capture *cap, const char *fragment)
{
    for (size_t k = 0; k < cap->nwarn; k++)
        if (strstr(cap->warnings[k], fragment))
            return 1;
    return 0;
}

static void test_import_wav_sox_sine(void **state)
{
    (void)state;
    /* sox: 48 kHz, 2 channels, 1 s of a full-scale 1 kHz sine, 16-bit PCM */
    const char *p = sox("sine.wav", "-r 48000 -c 2 -b 16 -e signed-integer synth 1 sine 1000");
    tf_capture *cap = load(p, NULL);
    assert_int_equal(cap->n, 48000);          /* exact sample count */
    assert_int_equal(cap->nchan, 2);
    assert_true(cap->dt_s == 1.0 / 48000.0);  /* exact rate */
    assert_string_equal(cap->ch[0].name, "ch1");
    assert_string_equal(cap->ch[1].name, "ch2");
    assert_string_equal(cap->ch[0].unit, "FS");
    assert_string_equal(cap->dialect.format, "wav");
    assert_string_equal(cap->dialect.wav_subformat, "PCM_16");
    assert_true(has_warning(cap, "no full-scale value for ch1, ch2"));
    /* RMS of a sine of amplitude A is A / sqrt(2) (textbook); full scale = 1 */
    for (int c = 0; c < 2; c++)
        assert_true(fabs(rms_of(cap->ch[c].samples, cap->n) - 1 / sqrt(2.0)) < 1e-3);
    /* the importer's stats agree with that and see the 16-bit step 2^-15 */
    tf_capture_compute_stats(cap);
    assert_true(fabs(cap->ch[0].stats.rms - 1 / sqrt(2.0)) < 1e-3);
    assert_true(tf_test_reldiff(cap->ch[0].stats.lsb, 1.0 / 32768) < 1e-6);
    tf_capture_destroy(cap);
}

static void test_import_wav_channels_and_full_scale(void **state)
{
    (void)state;
    /* three channels with amplitudes 0.5, 0.25, 0.8 (sox remix gains) */
    const char *p = sox("three.wav", "-r 10000 -c 3 -b 24 synth 0.5 sine 500 sine 250 "
                        "sine 1000 remix 1v0.5 2v0.25 3v0.8");
    tf_import_options o;
    tf_error err;
    tf_import_options_init(&o);
    assert_int_equal(tf_import_options_add(&o, TF_OPT_FULL_SCALE, "ch2=200A", &err), TF_OK);
    assert_int_equal(tf_import_options_add(&o, TF_OPT_FULL_SCALE, "ch3=2kV", &err), TF_OK);
    tf_capture *cap = load(p, &o);
    assert_int_equal(cap->n, 5000);
    assert_string_equal(cap->dialect.wav_subformat, "PCM_24");
    double want[3] = {0.5 / sqrt(2.0), 200 * 0.25 / sqrt(2.0), 2000 * 0.8 / sqrt(2.0)};
    for (int c = 0; c < 3; c++) /* textbook A / sqrt(2), scaled by the full scale */
        assert_true(fabs(rms_of(cap->ch[c].samples, cap->n) / want[c] - 1) < 1e-3);
    assert_string_equal(cap->ch[1].unit, "A");
    assert_string_equal(cap->ch[2].unit, "V");
    assert_true(cap->ch[1].full_scale == 200 && cap->ch[1].scale == 200);
    assert_true(has_warning(cap, "no full-scale value for ch1 "));
    tf_capture_destroy(cap);

    /* --channels keeps only those, in file order */
    snprintf(o.channels, sizeof o.channels, "ch3, ch2");
    cap = load(p, &o);
    assert_int_equal(cap->nchan, 2);
    assert_string_equal(cap->ch[0].name, "ch2");
    assert_string_equal(cap->ch[1].name, "ch3");
    assert_false(has_warning(cap, "no full-scale"));
    tf_capture_destroy(cap);
    snprintf(o.channels, sizeof o.channels, "ch4");
    assert_non_null(strstr(load_fail(p, &o, TF_ERR_USAGE), "no channel 'ch4'"));
    o.channels[0] = '\0';
    assert_int_equal(tf_import_options_add(&o, TF_OPT_FULL_SCALE, "i_load=5A", &err), TF_OK);
    assert_non_null(strstr(load_fail(p, &o, TF_ERR_USAGE), "--full-scale: no channel 'i_load'"));
}

/* Copy src to dst in another container/encoding with libsndfile. */
static void convert(const char *src, const char *dst, int format)
{
    SF_INFO in = {0}, out;
    SNDFILE *a = sf_open(src, SFM_READ, &in);
    assert_non_null(a);
    out = in;
    out.format = format;
    SNDFILE *b = sf_open(dst, SFM_WRITE, &out);
    assert_non_null(b);
    float buf[4096];
    sf_count_t got;
    sf_command(b, SFC_SET_CLIPPING, NULL, SF_TRUE);
    while ((got = sf_readf_float(a, buf, (sf_count_t)(4096 / in.channels))) > 0)
        assert_int_equal(sf_writef_float(b, buf, got), got);
    sf_close(a);
    sf_close(b);
}

/* Check cap against SoX's own decoding of path to raw 16-bit codes:
 * sample = code / 32768 (libsndfile's normalisation of 16-bit PCM). */
static void same_as_sox_decode(const tf_capture *cap, const char *path)
{
    const char *raw = tf_test_tmpfile("decoded.raw");
    assert_int_equal(tf_test_system("sox -D '%s' -t raw -e signed-integer -b 16 '%s'", path, raw),
                     0);
    size_t len;
    char *bytes = tf_test_slurp(raw, &len);
    assert_non_null(bytes);
    assert_int_equal(len, cap->n * cap->nchan * 2);
    for (size_t k = 0; k < cap->n; k++)
        for (size_t c = 0; c < cap->nchan; c++) {
            const unsigned char *b = (const unsigned char *)bytes + 2 * (k * cap->nchan + c);
            int code = (int16_t)(b[0] | (b[1] << 8)); /* raw is little-endian here */
            assert_true(cap->ch[c].samples[k] * 32768.0f == (float)code);
        }
    free(bytes);
}

static void test_import_wav_containers(void **state)
{
    (void)state;
    /* SoX writes WAV, W64 and FLAC; RF64 is made from the WAV with libsndfile.
     * Each import must hold the codes SoX itself decodes from the file, with
     * the exact rate and count. */
    const char *fx = "-r 96000 -c 2 -b 16 synth 0.25 sine 3000 sine 700 vol 0.7";
    char paths[4][1024];
    snprintf(paths[0], sizeof paths[0], "%s", sox("c.wav", fx));
    snprintf(paths[1], sizeof paths[1], "%s", sox("c.w64", fx));
    snprintf(paths[2], sizeof paths[2], "%s", sox("c.flac", fx));
    snprintf(paths[3], sizeof paths[3], "%s", tf_test_tmpfile("c.rf64"));
    convert(paths[0], paths[3], SF_FORMAT_RF64 | SF_FORMAT_PCM_16);
    const char *fmt[4] = {"wav", "w64", "flac", "rf64"};
    for (int k = 0; k < 4; k++) {
        tf_capture *cap = load(paths[k], NULL);
        assert_string_equal(cap->dialect.format, fmt[k]);
        assert_int_equal(cap->n, 24000);
        assert_true(cap->dt_s == 1.0 / 96000);
        /* amplitude 0.7: RMS 0.7 / sqrt(2) (textbook) */
        assert_true(fabs(rms_of(cap->ch[0].samples, cap->n) - 0.7 / sqrt(2.0)) < 1e-3);
        same_as_sox_decode(cap, paths[k]);
        tf_capture_destroy(cap);
    }
    /* 32-bit float WAV from SoX */
    const char *fl = sox("f.wav", "-r 20000 -c 1 -e floating-point -b 32 synth 0.5 sine 100 "
                         "vol 0.3");
    tf_capture *cap = load(fl, NULL);
    assert_string_equal(cap->dialect.wav_subformat, "FLOAT");
    assert_int_equal(cap->n, 10000);
    assert_true(fabs(rms_of(cap->ch[0].samples, cap->n) - 0.3 / sqrt(2.0)) < 1e-3);
    tf_capture_destroy(cap);
}

static void test_import_wav_sidecar(void **state)
{
    (void)state;
    const char *p = sox("side.wav", "-r 50000 -c 3 -b 16 synth 0.2 sine 1000 sine 1000 "
                        "sine 1000 remix 1v0.5 2v0.5 3v0.5");
    char side[1100];
    snprintf(side, sizeof side, "%s.tfscale", p);
    assert_int_equal(tf_test_write(side,
        "# bench capture, invented values\n"
        "v_out  V  500           # bridge output\n"
        "i_load A  100   -12ns\n"
        "\n"
        "v_cap  V  2k    3.5e-9\n"
        "t0 = -20us\n"), 0);
    tf_capture *cap = load(p, NULL);
    assert_string_equal(cap->ch[0].name, "v_out");
    assert_string_equal(cap->ch[1].name, "i_load");
    assert_string_equal(cap->ch[2].unit, "V");
    assert_true(cap->ch[2].full_scale == 2000);
    assert_true(cap->ch[1].skew_known && fabs(cap->ch[1].skew_s + 12e-9) < 1e-20);
    assert_true(cap->ch[2].skew_known && fabs(cap->ch[2].skew_s - 3.5e-9) < 1e-20);
    assert_false(cap->ch[0].skew_known);
    assert_true(fabs(cap->t0_s + 20e-6) < 1e-18);
    assert_int_equal(cap->nwarn, 0);
    /* amplitude 0.5 of full scale 100 A: RMS 50 / sqrt(2) A (textbook) */
    assert_true(fabs(rms_of(cap->ch[1].samples, cap->n) / (50 / sqrt(2.0)) - 1) < 1e-3);
    tf_capture_destroy(cap);

    /* options win over the sidecar and may use the default name */
    tf_import_options o;
    tf_error err;
    tf_import_options_init(&o);
    assert_int_equal(tf_import_options_add(&o, TF_OPT_FULL_SCALE, "ch2=50A", &err), TF_OK);
    assert_int_equal(tf_import_options_add(&o, TF_OPT_RENAME, "v_cap=vc", &err), TF_OK);
    assert_int_equal(tf_import_options_add(&o, TF_OPT_OFFSET, "v_out=1", &err), TF_OK);
    cap = load(p, &o);
    assert_true(cap->ch[1].full_scale == 50);
    assert_true(fabs(rms_of(cap->ch[1].samples, cap->n) / (25 / sqrt(2.0)) - 1) < 1e-3);
    assert_string_equal(cap->ch[2].name, "vc");
    assert_true(cap->ch[0].offset == 1);
    tf_capture_destroy(cap);

    /* a sidecar error names the sidecar, line and column */
    assert_int_equal(tf_test_write(side, "v_out V 500\ni_load A zero\n"), 0);
    const char *m = load_fail(p, NULL, TF_ERR_DATA);
    assert_non_null(strstr(m, ".tfscale:2:10: expected a positive full-scale value"));
    assert_non_null(strstr(m, "found 'zero'"));
    /* the simulator's layout "name unit full_scale", unit 1 for a gate */
    assert_int_equal(tf_test_write(side, "# tankfit scale file\ni_load A 250\ng1 1 1\n"), 0);
    cap = load(p, NULL);
    assert_string_equal(cap->ch[1].name, "g1");
    assert_string_equal(cap->ch[1].unit, "");
    assert_true(has_warning(cap, "no full-scale value for ch3 "));
    tf_capture_destroy(cap);
    remove(side);
}

/* Parse sidecar text for a 3-channel capture expecting an error fragment. */
static void side_err(const char *text, const char *fragment)
{
    tf_wav_sidecar sc;
    tf_error err;
    tf_error_clear(&err);
    assert_int_equal(tf_wav_sidecar_parse(text, strlen(text), "x.tfscale", 3, &sc, &err),
                     TF_ERR_DATA);
    if (!strstr(err.msg, fragment))
        fprintf(stderr, "message '%s' lacks '%s'\n", err.msg, fragment);
    assert_non_null(strstr(err.msg, fragment));
    assert_null(sc.ch);
}

static void test_import_wav_sidecar_errors(void **state)
{
    (void)state;
    side_err("a V 1\na V 2\n", "x.tfscale:2:1: expected a new channel name ('a' is already "
             "on line 1), found 'a'");
    side_err("a,b V 1\n", "x.tfscale:1:1: expected a channel name (1 to 63 characters, no "
             "',' or '='), found 'a,b'");
    side_err("x=1 V 1\n", "x.tfscale:1:1: expected a channel name");
    side_err("  a\n", "x.tfscale:1:4: expected a unit after the name");
    side_err("a V\n", "x.tfscale:1:4: expected a full-scale value after the unit");
    side_err("a V 0\n", "x.tfscale:1:5: expected a positive full-scale value");
    side_err("a V -5\n", "found '-5'");
    side_err("a V 1e999\n", "found '1e999'");
    side_err("a V 500A\n", "x.tfscale:1:5: expected a full-scale value in the channel's unit "
             "'V', found '500A'");
    side_err("a VERYLONGUNITNAME1 5\n", "x.tfscale:1:3: expected a unit of at most 15");
    side_err("a V 5 12nV\n", "x.tfscale:1:7: expected a probe skew in seconds");
    side_err("a V 5 1ns extra\n", "x.tfscale:1:11: expected end of line after the skew");
    side_err("a V 5 1ns x y\n", "x.tfscale:1:11: expected end of line after the skew");
    side_err("a V 1\nb V 1\nc V 1\nd V 1\n", "x.tfscale:4:1: expected at most 3 channel "
             "lines (the capture has 3 channels)");
    side_err("t0 =\n", "x.tfscale:1:5: expected a time after 't0 ='");
    side_err("t0 = 5V\n", "x.tfscale:1:6: expected a time after 't0 ='");
    side_err("t0 = 1us 2\n", "x.tfscale:1:10: expected end of line after the t0 value");
    side_err("t0 = 1us\nt0 = 2us\n", "x.tfscale:2:1: expected one t0 line only");
    side_err("rate = 5\n", "x.tfscale:1:1: expected a setting name ('t0') before '='");
    side_err("a V\x01 1\n", "x.tfscale:1:4: expected printable text");
    char longline[1200];
    memset(longline, 'a', sizeof longline - 1);
    longline[sizeof longline - 1] = '\0';
    side_err(longline, "x.tfscale:1:1001: expected a line of at most 1000 characters");
    /* accepted: BOM, CRLF, comments, tabs, "-" for an unscaled channel */
    const char *ok = "\xEF\xBB\xBF# c\r\na\tV\t500\t# x\r\nb - -\r\n\r\nc A 5A 0s\r\n";
    tf_wav_sidecar sc;
    tf_error err;
    assert_int_equal(tf_wav_sidecar_parse(ok, strlen(ok), "x", 3, &sc, &err), TF_OK);
    assert_int_equal(sc.n, 3);
    assert_true(sc.ch[0].full_scale == 500 && sc.ch[1].full_scale == 0);
    assert_string_equal(sc.ch[1].unit, "");
    assert_true(sc.ch[2].full_scale == 5 && sc.ch[2].skew_known && sc.ch[2].skew_s == 0);
    tf_wav_sidecar_free(&sc);
    tf_wav_sidecar_free(NULL);
}

static void write_bytes(const char *path, const void *data, size_t n)
{
    FILE *f = fopen(path, "wb");
    assert_non_null(f);
    assert_int_equal(fwrite(data, 1, n, f), n);
    fclose(f);
}

static void put16(unsigned char *p, unsigned v) { p[0] = v & 255; p[1] = (v >> 8) & 255; }
static void put32(unsigned char *p, unsigned long v)
{
    for (int k = 0; k < 4; k++)
        p[k] = (v >> (8 * k)) & 255;
}

/* A canonical 44-byte PCM WAV header (RIFF layout of the WAVE format). */
static void wav_header(unsigned char *h, unsigned channels, unsigned rate, unsigned long data)
{
    memcpy(h, "RIFF", 4);
    put32(h + 4, 36 + data);
    memcpy(h + 8, "WAVEfmt ", 8);
    put32(h + 16, 16);
    put16(h + 20, 1);
    put16(h + 22, channels);
    put32(h + 24, rate);
    put32(h + 28, rate * channels * 2);
    put16(h + 32, channels * 2);
    put16(h + 34, 16);
    memcpy(h + 36, "data", 4);
    put32(h + 40, data);
}

static void test_import_wav_bad_files(void **state)
{
    (void)state;
    unsigned char buf[44 + 400];
    memset(buf, 0, sizeof buf);
    /* zero channels */
    const char *zero = tf_test_tmpfile("zero.wav");
    wav_header(buf, 0, 48000, 400);
    write_bytes(zero, buf, sizeof buf);
    const char *m = load_fail(zero, NULL, TF_ERR_DATA);
    assert_non_null(strstr(m, "zero.wav: expected a sound file libsndfile can read"));
    assert_non_null(strstr(m, "hannel")); /* libsndfile names the channel count */
    /* truncated: the data chunk claims 4000 bytes, 400 are present */
    const char *cut = tf_test_tmpfile("cut.wav");
    wav_header(buf, 2, 48000, 4000);
    write_bytes(cut, buf, sizeof buf);
    m = load_fail(cut, NULL, TF_ERR_DATA);
    assert_non_null(strstr(m, "cut.wav: truncated: the data chunk declares 4000 bytes"));
    /* a SoX file cut in the middle of its data */
    const char *whole = sox("whole.wav", "-r 8000 -c 1 -b 16 synth 0.5 sine 100");
    size_t len;
    char *bytes = tf_test_slurp(whole, &len);
    assert_non_null(bytes);
    const char *half = tf_test_tmpfile("half.wav");
    write_bytes(half, bytes, len / 2 + 1);
    free(bytes);
    assert_non_null(strstr(load_fail(half, NULL, TF_ERR_DATA), "truncated"));
    /* W64 (SoX) and RF64 (libsndfile) cut in the middle: libsndfile shortens
     * them quietly, the importer must refuse them */
    const char *w64 = sox("whole.w64", "-r 8000 -c 1 -b 16 synth 0.5 sine 100");
    const char *rf64 = tf_test_tmpfile("whole.rf64");
    convert(whole, rf64, SF_FORMAT_RF64 | SF_FORMAT_PCM_16);
    const char *src[2] = {w64, rf64}, *dst[2] = {"half.w64", "half.rf64"};
    for (int k = 0; k < 2; k++) {
        bytes = tf_test_slurp(src[k], &len);
        assert_non_null(bytes);
        const char *p = tf_test_tmpfile(dst[k]);
        write_bytes(p, bytes, len / 2);
        free(bytes);
        m = load_fail(p, NULL, TF_ERR_DATA);
        assert_non_null(strstr(m, "truncated: the data chunk declares 8"));
        tf_capture *cap = load(src[k], NULL); /* the whole files are fine */
        assert_int_equal(cap->n, 4000);
        tf_capture_destroy(cap);
    }
    /* no frames at all */
    const char *empty = tf_test_tmpfile("empty.wav");
    wav_header(buf, 1, 8000, 0);
    write_bytes(empty, buf, 44);
    assert_non_null(strstr(load_fail(empty, NULL, TF_ERR_DATA), "expected sample frames, "
                           "found none"));
    /* not a sound file */
    const char *junk = tf_test_tmpfile("junk.wav");
    write_bytes(junk, "RIFF1234WAVEjunkjunkjunk", 24);
    assert_non_null(strstr(load_fail(junk, NULL, TF_ERR_DATA), "junk.wav: expected a sound "
                           "file"));
    /* cannot be opened */
    assert_non_null(strstr(load_fail(tf_test_tmpfile("missing.wav"), NULL, TF_ERR_NOINPUT),
                           "missing.wav: cannot open: No such file"));
    assert_non_null(strstr(load_fail(tf_test_tmpdir(), NULL, TF_ERR_NOINPUT),
                           "not a regular file"));
    /* a sidecar that exists but cannot be read (a directory) */
    const char *ok = sox("ok.wav", "-r 8000 -c 1 -b 16 synth 0.1 sine 100");
    char side[1100];
    snprintf(side, sizeof side, "%s.tfscale", ok);
    assert_int_equal(mkdir(side, 0700), 0);
    m = load_fail(ok, NULL, TF_ERR_NOINPUT);
    assert_non_null(strstr(m, ".tfscale: cannot"));
    rmdir(side);
}

static void test_import_wav_non_finite(void **state)
{
    (void)state;
    const char *p = tf_test_tmpfile("nan.wav");
    SF_INFO info = {0};
    info.samplerate = 1000;
    info.channels = 2;
    info.format = SF_FORMAT_WAV | SF_FORMAT_FLOAT;
    SNDFILE *sf = sf_open(p, SFM_WRITE, &info);
    assert_non_null(sf);
    float v[200];
    for (int k = 0; k < 100; k++) {
        v[2 * k] = (float)k / 100;
        v[2 * k + 1] = 0.5f;
    }
    v[2 * 40] = NAN;
    v[2 * 41] = INFINITY;
    v[2 * 99 + 1] = NAN; /* last sample of ch2 */
    assert_int_equal(sf_writef_float(sf, v, 100), 100);
    sf_close(sf);
    assert_non_null(strstr(load_fail(p, NULL, TF_ERR_DATA), "frame 41: expected finite samples"));
    tf_import_options o;
    tf_import_options_init(&o);
    o.gaps_interpolate = 1;
    tf_capture *cap = load(p, &o);
    /* linear interpolation between 0.39 and 0.42 */
    assert_true(fabs(cap->ch[0].samples[40] - 0.40f) < 1e-6);
    assert_true(fabs(cap->ch[0].samples[41] - 0.41f) < 1e-6);
    assert_true(cap->ch[1].samples[99] == 0.5f);
    assert_int_equal(cap->ch[0].gaps_filled, 2);
    assert_int_equal(cap->ch[1].gaps_filled, 1);
    assert_true(has_warning(cap, "3 non-finite samples filled"));
    tf_capture_destroy(cap);
}

static void test_import_wav_dispatch_and_rate(void **state)
{
    (void)state;
    const char *p = sox("d.flac", "-r 44100 -c 1 -b 16 synth 0.1 sine 440");
    tf_import_options o;
    tf_import_options_init(&o);
    o.sample_rate_hz = 10e6; /* the scope exported at a nominal audio rate */
    tf_capture *cap = NULL;
    tf_error err;
    assert_int_equal(tf_import_file(p, &o, &cap, &err), TF_OK);
    assert_string_equal(cap->dialect.format, "flac");
    assert_int_equal(cap->n, 4410);
    assert_true(cap->dt_s == 1e-7);
    tf_capture_destroy(cap);
}

static void test_import_wav_two_threads(void **state)
{
    (void)state;
    /* 1.2 million frames are read in two halves by two handles: the result
     * must equal the one-thread read and SoX's rate and count */
    const char *p = sox("long.wav", "-r 1000000 -c 2 -b 16 synth 1.2 sine 5000 "
                        "sine 7000 vol 0.6");
    tf_import_options one;
    tf_import_options_init(&one);
    one.threads = 1;
    tf_capture *a = load(p, NULL), *b = load(p, &one);
    assert_int_equal(a->n, 1200000);
    assert_int_equal(b->n, 1200000);
    for (int c = 0; c < 2; c++)
        assert_memory_equal(a->ch[c].samples, b->ch[c].samples, a->n * sizeof(float));
    /* 5 kHz at 1 MHz: 6000 whole periods, RMS 0.6 / sqrt(2) (textbook) */
    assert_true(fabs(rms_of(a->ch[0].samples, a->n) - 0.6 / sqrt(2.0)) < 1e-3);
    tf_capture_destroy(a);
    tf_capture_destroy(b);
    /* a NaN in the second half is reported at its frame */
    const char *f = tf_test_tmpfile("long_nan.wav");
    SF_INFO info = {0};
    info.samplerate = 1000000;
    info.channels = 1;
    info.format = SF_FORMAT_WAV | SF_FORMAT_FLOAT;
    SNDFILE *sf = sf_open(f, SFM_WRITE, &info);
    assert_non_null(sf);
    float *v = calloc(1100000, sizeof *v);
    assert_non_null(v);
    v[1000000] = NAN;
    assert_int_equal(sf_writef_float(sf, v, 1100000), 1100000);
    sf_close(sf);
    free(v);
    assert_non_null(strstr(load_fail(f, NULL, TF_ERR_DATA), "frame 1000001: expected finite"));
}

static void test_import_wav_fixtures_regenerate(void **state)
{
    (void)state;
    /* the stored golden-case fixtures are what SoX and the script beside them
     * write: regenerate them and compare byte for byte */
    assert_true(tf_test_have("sox"));
    const char *out = tf_test_tmpfile("fixtures");
    assert_int_equal(tf_test_system("sh '%s' '%s' >/dev/null", tf_test_src("tests/cli/wav_fixtures.sh"),
                                    out), 0);
    const char *files[] = {"cli/wav_sine.wav", "cli/wav_scaled.wav", "cli/wav_scaled.wav.tfscale",
                           "cli/wav_clipped.wav", "bad/wav_truncated.wav",
                           "bad/wav_zero_channels.wav", "bad/wav_bad_sidecar.wav",
                           "bad/wav_bad_sidecar.wav.tfscale"};
    for (size_t k = 0; k < sizeof files / sizeof files[0]; k++) {
        char stored[512], fresh[1200];
        snprintf(stored, sizeof stored, "tests/%s", files[k]);
        snprintf(fresh, sizeof fresh, "%s/%s", out, files[k]);
        size_t la, lb;
        char *a = tf_test_slurp(tf_test_src(stored), &la), *b = tf_test_slurp(fresh, &lb);
        assert_non_null(a);
        assert_non_null(b);
        assert_int_equal(la, lb);
        assert_memory_equal(a, b, la);
        free(a);
        free(b);
    }
}

static void progress_cb(void *ctx, double fraction)
{
    double *last = ctx;
    assert_true(fraction > last[0] && fraction <= 1.0); /* increasing, never past 1 */
    last[0] = fraction;
    last[1] += 1;
}

static void test_import_wav_more_formats(void **state)
{
    (void)state;
    /* 8-bit unsigned PCM, AIFF (big-endian "FORM") and W64 ("riff") through
     * tf_import_file's dispatch; RMS of a sine A / sqrt(2) (textbook), to the
     * coarser 8-bit step */
    struct { const char *name, *args, *format, *sub; double amp, tol; } f[] = {
        {"u8.wav", "-r 8000 -c 1 -b 8 -e unsigned-integer synth 1 sine 100 vol 0.5", "wav",
         "PCM_U8", 0.5, 5e-3},
        {"s.aiff", "-r 8000 -c 2 -b 16 synth 1 sine 100 vol 0.25", "aiff", "PCM_16", 0.25, 1e-3},
        {"s.w64", "-r 8000 -c 1 -b 24 synth 1 sine 100 vol 0.9", "w64", "PCM_24", 0.9, 1e-3},
    };
    for (int k = 0; k < 3; k++) {
        const char *p = sox(f[k].name, f[k].args);
        tf_capture *cap = NULL;
        tf_error err;
        double last[2] = {0, 0};
        tf_import_options o;
        tf_import_options_init(&o);
        o.progress = progress_cb;
        o.progress_ctx = last;
        assert_int_equal(tf_import_file(p, &o, &cap, &err), TF_OK);
        assert_string_equal(cap->dialect.format, f[k].format);
        assert_string_equal(cap->dialect.wav_subformat, f[k].sub);
        assert_int_equal(cap->n, 8000);
        assert_true(fabs(rms_of(cap->ch[0].samples, cap->n) - f[k].amp / sqrt(2.0)) < f[k].tol);
        assert_true(last[0] == 1.0 && last[1] >= 1); /* progress reached the end */
        tf_capture_destroy(cap);
    }
    /* quiet_progress silences the callback */
    double last[2] = {0, 0};
    tf_import_options o;
    tf_import_options_init(&o);
    o.progress = progress_cb;
    o.progress_ctx = last;
    o.quiet_progress = 1;
    tf_capture *cap = load(tf_test_tmpfile("s.w64"), &o);
    assert_true(last[1] == 0);
    tf_capture_destroy(cap);
}

/* ---- outside references: sound files written by scipy.io.wavfile, Python's wave
 * module and sox in every container and sample format they offer
 * (tests/support/import_wav_robust.py names the writer of each case) ---- */

static int wav_robust_case(const char *name)
{
    char fname[128], ename[128], path[512], exppath[512];
    snprintf(fname, sizeof fname, "robust-%s.snd", name);
    snprintf(ename, sizeof ename, "robust-%s.exp", name);
    snprintf(path, sizeof path, "%s", tf_test_tmpfile(fname));
    snprintf(exppath, sizeof exppath, "%s", tf_test_tmpfile(ename));
    if (tf_test_system("/usr/bin/python3 '%s' %s '%s' '%s'",
                       tf_test_src("tests/support/import_wav_robust.py"), name, path,
                       exppath) != 0)
        return print_error("%s: the generator failed\n", name), 1;
    FILE *e = fopen(exppath, "r");
    if (!e)
        return print_error("%s: no expectation\n", name), 1;
    char kind[16] = "", fmt[16] = "", sub[16] = "";
    int bad = 0;
    tf_capture *cap = NULL;
    tf_error err;
    tf_error_clear(&err);
    if (fscanf(e, "%15s", kind) != 1) {
        fclose(e);
        return print_error("%s: empty expectation\n", name), 1;
    }
    if (strcmp(kind, "error") == 0) {
        char text[128];
        bad = fscanf(e, " %127[^\n]", text) != 1;
        tf_status st = tf_import_file(path, NULL, &cap, &err);
        if (bad || st != TF_ERR_DATA || strncmp(err.msg, path, strlen(path)) != 0 ||
            !strstr(err.msg, text)) {
            print_error("%s: expected a data error with '%s', got %d '%s'\n", name, text,
                        (int)st, err.msg);
            bad = 1;
        }
        if (cap)
            tf_capture_destroy(cap), bad = 1;
        fclose(e);
        return bad;
    }
    size_t n, nchan;
    double rate, rel, absol;
    if (fscanf(e, "%zu %zu %lf %15s %15s %lf %lf", &n, &nchan, &rate, fmt, sub, &rel, &absol) !=
        7) {
        fclose(e);
        return print_error("%s: bad expectation\n", name), 1;
    }
    /* through the dispatcher, as the commands read files */
    tf_status st = tf_import_file(path, NULL, &cap, &err);
    if (st != TF_OK) {
        fclose(e);
        return print_error("%s: unexpected error %d: %s\n", name, (int)st, err.msg), 1;
    }
    if (cap->n != n || cap->nchan != nchan || fabs(cap->dt_s * rate - 1) > 1e-12 ||
        cap->t0_s != 0 || strcmp(cap->dialect.format, fmt) != 0 ||
        strcmp(cap->dialect.wav_subformat, sub) != 0) {
        print_error("%s: %zu x %zu at %.9g Hz, %s %s; expected %zu x %zu at %.9g Hz, %s %s\n",
                    name, cap->n, cap->nchan, 1 / cap->dt_s, cap->dialect.format,
                    cap->dialect.wav_subformat, n, nchan, rate, fmt, sub);
        bad = 1;
    }
    for (size_t c = 0; c < cap->nchan && !bad; c++) {
        char want[32];
        snprintf(want, sizeof want, "ch%zu", c + 1);
        if (strcmp(cap->ch[c].name, want) != 0 || strcmp(cap->ch[c].unit, "FS") != 0) {
            print_error("%s: channel %zu is '%s' [%s]\n", name, c, cap->ch[c].name,
                        cap->ch[c].unit);
            bad = 1;
        }
    }
    /* reference: the writer's own codes (or sox's decoding of its file) as doubles;
     * the capture holds float32, so within half a float ulp of the value (the
     * generator widens this for sox's float files, see there) */
    for (size_t k = 0; k < n && !bad; k++)
        for (size_t c = 0; c < nchan && !bad; c++) {
            char hex[64];
            if (fscanf(e, "%63s", hex) != 1) {
                bad = 1;
                break;
            }
            double want = strtod(hex, NULL), got = cap->ch[c].samples[k];
            if (fabs(got - want) > rel * fabs(want) + absol) {
                print_error("%s: frame %zu channel %zu: %.9g, expected %.9g\n", name, k, c, got,
                            want);
                bad = 1;
            }
        }
    fclose(e);
    tf_capture_destroy(cap);
    return bad;
}

static void test_import_wav_independent_tools(void **state)
{
    (void)state;
    assert_true(tf_test_have("sox"));
    /* tests/run installs python3 (tests/install-deps): its absence is a broken set-up */
    assert_true(tf_test_have("/usr/bin/python3"));
    int failed;
    int ran = tf_test_run_listed("tests/support/import_wav_robust.py", wav_robust_case, &failed);
    print_message("%d sound files from independent tools, %d failed\n", ran, failed);
    assert_true(ran >= 20);
    assert_int_equal(failed, 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_import_wav_sox_sine),
        cmocka_unit_test(test_import_wav_channels_and_full_scale),
        cmocka_unit_test(test_import_wav_containers),
        cmocka_unit_test(test_import_wav_sidecar),
        cmocka_unit_test(test_import_wav_sidecar_errors),
        cmocka_unit_test(test_import_wav_bad_files),
        cmocka_unit_test(test_import_wav_non_finite),
        cmocka_unit_test(test_import_wav_dispatch_and_rate),
        cmocka_unit_test(test_import_wav_more_formats),
        cmocka_unit_test(test_import_wav_two_threads),
        cmocka_unit_test(test_import_wav_fixtures_regenerate),
        cmocka_unit_test(test_import_wav_independent_tools),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
