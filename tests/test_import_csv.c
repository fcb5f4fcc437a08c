/* Tests of the CSV importer: dialects, time base, options, bad inputs, two-thread parsing. */
#include "tf_test.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <tankfit/import.h>

#include "csv_internal.h"

/* ---- helpers ---- */

static tf_capture *load(const char *path, const tf_import_options *opt)
{
    tf_capture *cap = NULL;
    tf_error err;
    tf_error_clear(&err);
    tf_status st = tf_import_csv(path, opt, &cap, &err);
    if (st != TF_OK)
        fail_msg("%s: unexpected error %d: %s", path, (int)st, err.msg);
    assert_non_null(cap);
    return cap;
}

static tf_capture *load_text(const char *name, const char *text, const tf_import_options *opt)
{
    const char *path = tf_test_tmpfile(name);
    assert_int_equal(tf_test_write(path, text), 0);
    return load(path, opt);
}

/* The import must fail with code and a message containing fragment. */
static void expect_error(const char *path, const tf_import_options *opt, tf_status code,
                         const char *fragment)
{
    tf_capture *cap = (tf_capture *)1;
    tf_error err;
    tf_error_clear(&err);
    tf_status st = tf_import_csv(path, opt, &cap, &err);
    if (st != code || !strstr(err.msg, fragment))
        fail_msg("%s: expected code %d with '%s', got %d: '%s'", path, (int)code, fragment,
                 (int)st, err.msg);
    assert_null(cap);
}

static void expect_text_error(const char *name, const char *text, const tf_import_options *opt,
                              tf_status code, const char *fragment)
{
    const char *path = tf_test_tmpfile(name);
    assert_int_equal(tf_test_write(path, text), 0);
    expect_error(path, opt, code, fragment);
}

static void assert_samples(const tf_channel *ch, const float *want, size_t n)
{
    for (size_t k = 0; k < n; k++)
        if (ch->samples[k] != want[k])
            fail_msg("channel %s sample %zu: %.9g, expected %.9g", ch->name, k,
                     (double)ch->samples[k], (double)want[k]);
}

/* ---- dialects ---- */

static void test_import_csv_comma_header_units(void **state)
{
    (void)state;
    /* expected values: the decimal literals rounded to float (C's own conversion);
     * "v [kV]" scales to volts (SI prefix k = 1e3, SI brochure) */
    tf_capture *cap = load_text("comma.csv",
                                "t [s],v [kV],i_load (A)\n"
                                "0.0e+00,1.5,-2.25\n"
                                "1.0e-06,-0.5,3.125e-03\n"
                                "2.0e-06,2,1E2\n",
                                NULL);
    assert_int_equal(cap->n, 3);
    assert_int_equal(cap->nchan, 2);
    assert_string_equal(cap->ch[0].name, "v");
    assert_string_equal(cap->ch[0].unit, "V");
    assert_true(cap->ch[0].scale == 1000.0);
    assert_string_equal(cap->ch[1].name, "i_load");
    assert_string_equal(cap->ch[1].unit, "A");
    const float v[] = {1500.0f, -500.0f, 2000.0f}, i[] = {-2.25f, 3.125e-3f, 100.0f};
    assert_samples(&cap->ch[0], v, 3);
    assert_samples(&cap->ch[1], i, 3);
    assert_true(fabs(cap->dt_s - 1e-6) < 1e-15);
    assert_true(fabs(cap->t0_s) < 1e-15);
    assert_int_equal(cap->dialect.delimiter, ',');
    assert_int_equal(cap->dialect.decimal, '.');
    assert_int_equal(cap->dialect.header_line, 1);
    assert_int_equal(cap->dialect.time_column, 0);
    assert_string_equal(cap->dialect.line_end, "LF");
    assert_string_equal(cap->dialect.format, "csv");
    tf_capture_destroy(cap);
}

static void test_import_csv_semicolon_decimal_comma_bom_crlf(void **state)
{
    (void)state;
    tf_capture *cap = load_text("semi.csv",
                                "\xef\xbb\xbf"
                                "Record;bench A\r\n"
                                "Sample interval;1,0e-3\r\n"
                                "\r\n"
                                "Zeit [ms];U [V];I [mA]\r\n"
                                "0,000;1,25;-500\r\n"
                                "\r\n"
                                "0,001;-1,5e1;250,5\r\n"
                                "0,002;2,0;0\r\n",
                                NULL);
    assert_int_equal(cap->n, 3);
    assert_int_equal(cap->dialect.delimiter, ';');
    assert_int_equal(cap->dialect.decimal, ',');
    assert_int_equal(cap->dialect.has_bom, 1);
    assert_string_equal(cap->dialect.line_end, "CRLF");
    assert_int_equal(cap->dialect.header_line, 4);
    assert_int_equal(cap->dialect.metadata_lines, 2);
    assert_int_equal(cap->nmeta, 2);
    assert_string_equal(cap->metadata[0], "Record;bench A");
    assert_string_equal(cap->metadata[1], "Sample interval;1,0e-3");
    /* ms and mA scale to s and A (SI prefix m = 1e-3) */
    assert_true(fabs(cap->dt_s - 1e-6) < 1e-18);
    assert_string_equal(cap->ch[1].unit, "A");
    const float u[] = {1.25f, -15.0f, 2.0f};
    const float i[] = {(float)(-500 * 1e-3), (float)(250.5 * 1e-3), 0.0f};
    assert_samples(&cap->ch[0], u, 3);
    assert_samples(&cap->ch[1], i, 3);
    tf_capture_destroy(cap);
}

static void test_import_csv_metadata_key_value(void **state)
{
    (void)state;
    /* key,value metadata with as many fields as the data: the header is the
     * line of names followed by numbers, everything before it is metadata */
    tf_capture *cap = load_text("kv.csv",
                                "Model,invented recorder\nRecord length,3\nSample rate,1e6\n"
                                "t,v\n0,1\n1e-6,2\n2e-6,3\n",
                                NULL);
    assert_int_equal(cap->dialect.header_line, 4);
    assert_int_equal(cap->nmeta, 3);
    assert_string_equal(cap->metadata[1], "Record length,3");
    assert_int_equal(cap->n, 3);
    tf_capture_destroy(cap);
    /* no header: metadata stops at the first row of numbers */
    cap = load_text("kv2.csv", "Sample rate,1e6\n0,1\n1e-6,2\n2e-6,3\n", NULL);
    assert_int_equal(cap->dialect.header_line, 0);
    assert_int_equal(cap->nmeta, 1);
    assert_int_equal(cap->n, 3);
    assert_string_equal(cap->ch[0].name, "col2");
    tf_capture_destroy(cap);
}

static void test_import_csv_tab_cr_no_header(void **state)
{
    (void)state;
    tf_capture *cap = load_text("tab.csv", "0.0\t1\t-1\r1.0\t2\t-2\r2.0\t3\t-3\r", NULL);
    assert_int_equal(cap->n, 3);
    assert_int_equal(cap->dialect.delimiter, '\t');
    assert_string_equal(cap->dialect.line_end, "CR");
    assert_int_equal(cap->dialect.header_line, 0);
    /* no header: names col1, col2, ... by file column; col1 is the time base
     * because it increases strictly */
    assert_int_equal(cap->dialect.time_column, 0);
    assert_int_equal(cap->nchan, 2);
    assert_string_equal(cap->ch[0].name, "col2");
    assert_string_equal(cap->ch[1].name, "col3");
    assert_true(cap->dt_s == 1.0);
    const float b[] = {-1, -2, -3};
    assert_samples(&cap->ch[1], b, 3);
    tf_capture_destroy(cap);
}

static void test_import_csv_space_runs(void **state)
{
    (void)state;
    tf_capture *cap = load_text("space.txt",
                                "# plain text export\n"
                                "  time   v [V]    i [A]\n"
                                "  0.000e+00   1.0    -2.5  \n"
                                "  1.000e-07  -1.0     2.5\n"
                                "\n"
                                "  2.000e-07   0.5e1   0\n",
                                NULL);
    assert_int_equal(cap->dialect.delimiter, ' ');
    assert_int_equal(cap->n, 3);
    assert_int_equal(cap->nchan, 2);
    assert_string_equal(cap->ch[0].name, "v");
    assert_string_equal(cap->ch[0].unit, "V");
    assert_string_equal(cap->ch[1].name, "i");
    const float v[] = {1.0f, -1.0f, 5.0f};
    assert_samples(&cap->ch[0], v, 3);
    assert_int_equal(cap->nmeta, 1);
    assert_true(fabs(cap->dt_s - 1e-7) < 1e-18);
    tf_capture_destroy(cap);
}

static void test_import_csv_quotes_trailing_delimiter_spaces(void **state)
{
    (void)state;
    tf_capture *cap = load_text("quoted.csv",
                                "\"time\", \"v, out\" ,\"i\",\n"
                                "\"0\", \"1.5\" , 2 ,\n"
                                " 1e-3 ,\"2.5\",3,\n"
                                "2e-3,3.5,  4  ,\n",
                                NULL);
    assert_int_equal(cap->n, 3);
    assert_int_equal(cap->nchan, 2);
    assert_string_equal(cap->ch[0].name, "v, out");
    const float v[] = {1.5f, 2.5f, 3.5f}, i[] = {2, 3, 4};
    assert_samples(&cap->ch[0], v, 3);
    assert_samples(&cap->ch[1], i, 3);
    tf_capture_destroy(cap);
}

static void test_import_csv_sample_rate_no_time(void **state)
{
    (void)state;
    tf_import_options opt;
    tf_import_options_init(&opt);
    opt.sample_rate_hz = 2e6;
    /* with a rate given, an increasing first column is a channel, not a guess at time */
    tf_capture *cap = load_text("rate.csv", "a,b\n1,5\n2,4\n3,3\n", &opt);
    assert_int_equal(cap->nchan, 2);
    assert_int_equal(cap->dialect.time_column, -1);
    assert_true(cap->dt_s == 0.5e-6);
    assert_true(cap->t0_s == 0);
    tf_capture_destroy(cap);
    /* a single column is one channel when the rate is known */
    cap = load_text("single.csv", "v\n1\n2\n3\n4\n", &opt);
    assert_int_equal(cap->nchan, 1);
    assert_int_equal(cap->n, 4);
    tf_capture_destroy(cap);
}

/* ---- time base ---- */

static void test_import_csv_time_few_digits(void **state)
{
    (void)state;
    /* t = 1.234567e-3 + k * 1.00003e-6 printed with 6 significant digits
     * (resolution 1e-8, 1 % of a step): each value is off by up to half a unit
     * in the last digit, yet the least-squares fit recovers dt far better than
     * one value's resolution (source: ordinary least squares of a uniform
     * grid, slope error ~ q * sqrt(12 / n^3) for rounding errors of width q) */
    size_t n = 2000;
    char *text = malloc(n * 40 + 64);
    size_t k0 = (size_t)sprintf(text, "time,v\n");
    double t0 = 1.234567e-3, dt = 1.00003e-6;
    for (size_t k = 0; k < n; k++)
        k0 += (size_t)sprintf(text + k0, "%.5e,%zu\n", t0 + (double)k * dt, k % 7);
    tf_capture *cap = load_text("fewdigits.csv", text, NULL);
    free(text);
    assert_int_equal(cap->n, n);
    /* resolution: 6 significant digits of 1.2e-3 .. 3.2e-3 -> 1e-8 */
    assert_true(fabs(cap->dialect.time_resolution_s - 1e-8) < 1e-20);
    assert_true(fabs(cap->dt_s - dt) / dt < 1e-6);
    assert_true(fabs(cap->t0_s - t0) < 1e-8);
    tf_capture_destroy(cap);
}

static void test_import_csv_time_errors(void **state)
{
    (void)state;
    /* a jump of one missing sample names its line */
    expect_error(tf_test_src("tests/bad/nonuniform_time.csv"), NULL, TF_ERR_DATA,
                 "nonuniform_time.csv:7:1: expected a time step of 1e-06 s");
    /* a change of rate half way (each later step 0.6 units of the last digit
     * longer: within the step check) is caught by the residuals of the
     * least-squares line */
    size_t n = 400;
    char *text = malloc(n * 40 + 64);
    size_t k0 = (size_t)sprintf(text, "t,v\n");
    for (size_t k = 0; k < n; k++)
        k0 += (size_t)sprintf(text + k0, "%.6f,1\n",
                              1.0 + (double)k * 1e-3 + (k > 200 ? 0.6e-6 * (double)(k - 200) : 0));
    expect_text_error("drift.csv", text, NULL, TF_ERR_DATA,
                      "expected times on a uniform grid t0 + k*dt");
    free(text);
    /* decreasing time */
    expect_text_error("backwards.csv", "t,v\n0.000,1\n0.001,2\n0.002,3\n0.001,4\n", NULL,
                      TF_ERR_DATA, "backwards.csv:5:1: expected a time later than 0.002 s");
    /* no time column and no rate */
    expect_error(tf_test_src("tests/bad/no_time.csv"), NULL, TF_ERR_DATA,
                 "no_time.csv:1:1: expected a time column");
    expect_error(tf_test_src("tests/bad/no_time.csv"), NULL, TF_ERR_DATA, "--sample-rate");
    /* one data row cannot give a sample period */
    expect_text_error("onerow.csv", "t,v\n0,1\n", NULL, TF_ERR_DATA,
                      "onerow.csv:2:1: expected at least 2 data rows");
}

static void test_import_csv_time_resolution(void **state)
{
    (void)state;
    /* worked examples: one unit in the last printed digit, or in the P-th
     * significant digit when the column shows P (as %g drops trailing zeros) */
    static const struct {
        const char *text;
        int sig;
        double q;
    } cases[] = {
        {"1.2340e-05", 0, 1e-9}, {"12", 0, 1}, {"0.000123", 0, 1e-6}, {"1e-06", 0, 1e-6},
        {"1e-06", 8, 1e-13},     {"-5.0000000e-01", 8, 1e-8}, {"0", 8, 0}, {"0.000", 0, 0},
        {"1,25", 0, 1e-2},       {"123456789", 3, 1}, {"9.99e2", 3, 1},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        char dec = strchr(cases[i].text, ',') ? ',' : '.';
        double v, q;
        tf_num_text nt;
        assert_int_equal(tf_csv_time_value(cases[i].text, strlen(cases[i].text), dec,
                                           cases[i].sig, &v, &q), 0);
        tf_csv_scan_number(cases[i].text, strlen(cases[i].text), dec, &nt);
        double q2 = tf_csv_resolution(&nt, cases[i].sig);
        if (fabs(q - cases[i].q) > 1e-6 * cases[i].q || q2 != q)
            fail_msg("'%s' (P=%d): q %g / %g, expected %g", cases[i].text, cases[i].sig, q, q2,
                     cases[i].q);
    }
    /* the one-pass time parser against strtod (reference: C library strtod,
     * correctly rounded, in the default C locale) and the two-pass resolution */
    unsigned seed = 12345;
    for (int i = 0; i < 100000; i++) {
        char buf[64];
        seed = seed * 1103515245u + 12345u;
        double x = ((double)(seed >> 8) / 16777216.0 - 0.5) * pow(10, (int)(seed % 13) - 9);
        snprintf(buf, sizeof buf, (seed & 64) ? "%.*e" : "%.*f", 1 + (int)((seed >> 3) % 12), x);
        double v, q;
        tf_num_text nt;
        assert_int_equal(tf_csv_time_value(buf, strlen(buf), '.', (int)(seed % 10), &v, &q), 0);
        tf_csv_scan_number(buf, strlen(buf), '.', &nt);
        if (v != strtod(buf, NULL) || q != tf_csv_resolution(&nt, (int)(seed % 10)))
            fail_msg("'%s': %a (strtod %a), q %g (two-pass %g)", buf, v, strtod(buf, NULL), q,
                     tf_csv_resolution(&nt, (int)(seed % 10)));
    }
}

/* ---- bad-input corpus (tests/bad) ---- */

static void test_import_csv_bad_corpus(void **state)
{
    (void)state;
    static const struct {
        const char *file;
        tf_status code;
        const char *fragment;
    } cases[] = {
        {"ragged.csv", TF_ERR_DATA, "ragged.csv:4:3: expected 3 fields as in line 1, found 2"},
        {"nonnumeric.csv", TF_ERR_DATA, "nonnumeric.csv:3:2: expected a number, found '12V'"},
        {"empty.csv", TF_ERR_DATA, "empty.csv:1:1: expected a header or rows of numbers, "
                                   "found an empty file"},
        {"header_only.csv", TF_ERR_DATA,
         "header_only.csv:2:1: expected rows of numbers after line 1, found the end of the file"},
        /* BOM and CRLF must not shift the line count */
        {"bom_crlf.csv", TF_ERR_DATA, "bom_crlf.csv:4:2: expected a number, found 'x'"},
        /* a point in a decimal-comma file */
        {"decimal_comma.csv", TF_ERR_DATA,
         "decimal_comma.csv:4:2: expected a number, found '1.75'"},
        {"nonuniform_time.csv", TF_ERR_DATA, "nonuniform_time.csv:7:1: expected a time step"},
        {"no_time.csv", TF_ERR_DATA, "no_time.csv:1:1: expected a time column"},
        {"one_column.csv", TF_ERR_DATA, "one_column.csv:1:1: expected at least 2 columns"},
        {"gap.csv", TF_ERR_DATA, "gap.csv:3:3: expected a number, found an empty field"},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        char rel[256];
        snprintf(rel, sizeof rel, "tests/bad/%s", cases[i].file);
        expect_error(tf_test_src(rel), NULL, cases[i].code, cases[i].fragment);
    }
    /* UTF-16 (some exports): a clear message instead of "no numbers" */
    const char *u16 = tf_test_tmpfile("utf16.csv");
    FILE *f = fopen(u16, "wb");
    assert_non_null(f);
    fwrite("\xff\xfet\0,\0v\0\n\0", 1, 10, f);
    fclose(f);
    expect_error(u16, NULL, TF_ERR_DATA, "utf16.csv:1:1: expected ASCII or UTF-8 text");
    expect_error(tf_test_src("tests/bad/no-such-file.csv"), NULL, TF_ERR_NOINPUT,
                 "no-such-file.csv: cannot open");
    expect_error(tf_test_src("tests/bad"), NULL, TF_ERR_NOINPUT, "cannot open");
}

static void test_import_csv_bom_crlf_good_twin(void **state)
{
    (void)state;
    /* the corpus file with its bad value fixed imports with the right lines */
    tf_capture *cap = load_text("bom_ok.csv",
                                "\xef\xbb\xbft [s];v [V]\r\n0.000000e+00;1\r\n1.000000e-06;2\r\n"
                                "2.000000e-06;3\r\n3.000000e-06;4\r\n",
                                NULL);
    assert_int_equal(cap->n, 4);
    assert_int_equal(cap->dialect.has_bom, 1);
    assert_string_equal(cap->ch[0].name, "v");
    tf_capture_destroy(cap);
}

static void test_import_csv_gaps(void **state)
{
    (void)state;
    tf_import_options opt;
    tf_import_options_init(&opt);
    opt.gaps_interpolate = 1;
    tf_capture *cap = load(tf_test_src("tests/bad/gap.csv"), &opt);
    /* linear interpolation between the neighbours (v: 1.0, nan, 2.5 is a run of
     * one at line 4; i: 2.0, empty, 3.0) */
    const float v[] = {1.0f, 1.5f, 2.0f, 2.5f}, i[] = {2.0f, 2.5f, 3.0f, 3.5f};
    assert_samples(&cap->ch[0], v, 4);
    assert_samples(&cap->ch[1], i, 4);
    assert_int_equal(cap->ch[0].gaps_filled, 1);
    assert_int_equal(cap->ch[1].gaps_filled, 1);
    assert_int_equal(cap->nwarn, 2);
    assert_non_null(strstr(cap->warnings[0], "linear interpolation"));
    tf_capture_destroy(cap);
    /* a non-finite value without --gaps: line and column */
    expect_text_error("inf.csv", "t,v\n0,1\n1,inf\n2,3\n", NULL, TF_ERR_DATA,
                      "inf.csv:3:2: expected a finite number, found 'inf'");
    /* a channel with no finite value at all */
    expect_text_error("allgap.csv", "t,v,w\n0,1,\n1,2,nan\n2,3,\n", &opt, TF_ERR_DATA,
                      "expected at least one finite value in channel 'w'");
}

static void test_import_csv_huge_line(void **state)
{
    (void)state;
    /* a 3 MiB first line, and a 3 MiB field further down: bounded memory, a
     * clear error (1 MiB limit) */
    size_t big = (size_t)3 << 20;
    char *text = malloc(big + 256);
    memset(text, '7', big);
    text[big] = '\0';
    expect_text_error("huge1.csv", text, NULL, TF_ERR_DATA, "huge1.csv:1:1: expected a line end");
    int k = sprintf(text, "t,v\n0,1\n1,2\n2,");
    memset(text + k, '5', big);
    strcpy(text + k + big, "\n3,4\n");
    expect_text_error("huge2.csv", text, NULL, TF_ERR_DATA,
                      "huge2.csv:4:2: expected fields of at most 1 MiB");
    free(text);
}

/* ---- options ---- */

static void test_import_csv_channel_options(void **state)
{
    (void)state;
    tf_import_options opt;
    tf_import_options_init(&opt);
    snprintf(opt.channels, sizeof opt.channels, "c, a");
    const char *text = "t,a,b,c\n0,1,2,3\n1,4,5,6\n2,7,8,9\n";
    tf_capture *cap = load_text("chan.csv", text, &opt);
    assert_int_equal(cap->nchan, 2);
    assert_string_equal(cap->ch[0].name, "c");
    assert_string_equal(cap->ch[1].name, "a");
    const float c[] = {3, 6, 9};
    assert_samples(&cap->ch[0], c, 3);
    tf_capture_destroy(cap);

    /* columns left out are not parsed: text there is no error */
    snprintf(opt.channels, sizeof opt.channels, "a");
    cap = load_text("chan5.csv", "t,a,b\n0,1,2\n1,2,y\n2,3,z\n", &opt);
    assert_int_equal(cap->nchan, 1);
    tf_capture_destroy(cap);

    tf_error err;
    tf_import_options_init(&opt);
    assert_int_equal(tf_import_options_add(&opt, TF_OPT_SCALE, "b=10A/V", &err), TF_OK);
    assert_int_equal(tf_import_options_add(&opt, TF_OPT_RENAME, "a=v_out", &err), TF_OK);
    cap = load_text("chan2.csv", text, &opt);
    assert_string_equal(cap->ch[0].name, "v_out");
    assert_string_equal(cap->ch[1].unit, "A");
    const float b[] = {20, 50, 80};
    assert_samples(&cap->ch[1], b, 3);
    tf_capture_destroy(cap);

    tf_import_options_init(&opt);
    snprintf(opt.channels, sizeof opt.channels, "a,zz");
    expect_text_error("chan3.csv", text, &opt, TF_ERR_USAGE, "no channel 'zz'");
    snprintf(opt.channels, sizeof opt.channels, "t");
    expect_text_error("chan4.csv", text, &opt, TF_ERR_USAGE, "the time base is not a channel");
}

/* ---- outside reference: Python's csv module ---- */

static void check_python_dialect(const char *dialect)
{
    if (!tf_test_have("/usr/bin/python3"))
        skip();
    const size_t rows = 3000;
    char csvname[64], expname[64];
    snprintf(csvname, sizeof csvname, "py-%s.csv", dialect);
    snprintf(expname, sizeof expname, "py-%s.exp", dialect);
    const char *csvpath = tf_test_tmpfile(csvname), *exppath = tf_test_tmpfile(expname);
    assert_int_equal(tf_test_system("/usr/bin/python3 '%s' %s %zu 7 '%s' '%s'",
                                    tf_test_src("tests/support/import_csv_pywrite.py"), dialect,
                                    rows, csvpath, exppath),
                     0);
    tf_capture *cap = load(csvpath, NULL);
    FILE *e = fopen(exppath, "r");
    assert_non_null(e);
    double t0, dt;
    assert_int_equal(fscanf(e, "%lf %lf", &t0, &dt), 2);
    assert_int_equal(cap->n, rows);
    assert_int_equal(cap->nchan, 3);
    assert_int_equal(cap->nmeta, 2);
    assert_string_equal(cap->ch[0].name, "v_out");
    assert_string_equal(cap->ch[0].unit, "V");
    assert_string_equal(cap->ch[1].unit, "A");
    assert_string_equal(cap->ch[2].name, "v_cap");
    /* reference: the values Python's csv module wrote, rounded to float32 by
     * struct.pack (IEEE 754 round to nearest): equal bit for bit */
    for (size_t k = 0; k < rows; k++)
        for (size_t c = 0; c < 3; c++) {
            char hex[64];
            assert_int_equal(fscanf(e, "%63s", hex), 1);
            float want = (float)strtod(hex, NULL);
            if (cap->ch[c].samples[k] != want)
                fail_msg("%s row %zu channel %zu: %a, python %a", dialect, k, c,
                         (double)cap->ch[c].samples[k], (double)want);
        }
    fclose(e);
    /* the time grid python wrote: t0 + k*dt */
    assert_true(fabs(cap->dt_s - dt) / dt < 1e-9);
    assert_true(fabs(cap->t0_s - t0) < dt * 1e-6);
    tf_capture_destroy(cap);
}

static void test_import_csv_python_excel(void **state) { (void)state; check_python_dialect("excel"); }
static void test_import_csv_python_excel_e(void **state) { (void)state; check_python_dialect("excel-e"); }
static void test_import_csv_python_excel_tab(void **state) { (void)state; check_python_dialect("excel-tab"); }
static void test_import_csv_python_unix(void **state) { (void)state; check_python_dialect("unix"); }
static void test_import_csv_python_semicolon(void **state) { (void)state; check_python_dialect("semicolon-quoted"); }
static void test_import_csv_python_decimal_comma(void **state) { (void)state; check_python_dialect("semicolon-decimal-comma"); }
static void test_import_csv_python_space(void **state) { (void)state; check_python_dialect("space"); }

/* ---- two parser threads ---- */

typedef struct progress_log {
    int calls;
    double last;
    int monotonic;
} progress_log;

static void on_progress(void *ctx, double fraction)
{
    progress_log *log = ctx;
    if (fraction < log->last || fraction > 1.0)
        log->monotonic = 0;
    log->last = fraction;
    log->calls++;
}

/* A file above the two-thread threshold with blank lines in the first half:
 * two threads must give exactly what one gives, and an error in the second
 * half must name its true line. */
/* Append row (with a bad second field, bad) to the file at path (named name):
 * one thread and two must both report it at line, field 2. */
static void expect_bad_last_row(const char *path, const char *name, const char *row,
                                size_t line, const char *bad, const tf_import_options *one,
                                const tf_import_options *two)
{
    FILE *f = fopen(path, "a");
    assert_non_null(f);
    fputs(row, f);
    fclose(f);
    char want[160];
    snprintf(want, sizeof want, "%s:%zu:2: expected a number, found '%s'", name, line, bad);
    expect_error(path, two, TF_ERR_DATA, want);
    expect_error(path, one, TF_ERR_DATA, want);
}

static void test_import_csv_two_threads(void **state)
{
    (void)state;
    size_t rows = 400000;
    const char *path = tf_test_tmpfile("big.csv");
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    fprintf(f, "time_s,a,b\n");
    size_t line = 1;
    for (size_t k = 0; k < rows; k++) {
        if (k % 1000 == 17) {
            fputs("\n", f);
            line++;
        }
        fprintf(f, "%.9e,%.5e,%d\n", -0.01 + (double)k * 1e-7, sin((double)k * 1e-3),
                (int)(k % 4096));
        line++;
    }
    fclose(f);
    tf_import_options one, two;
    tf_import_options_init(&one);
    tf_import_options_init(&two);
    one.threads = 1;
    two.threads = 2;
    progress_log log = {0, 0.0, 1};
    two.progress = on_progress;
    two.progress_ctx = &log;
    tf_capture *a = load(path, &one), *b = load(path, &two);
    /* progress: several reports, never decreasing, ending at 1 */
    assert_true(log.calls >= 2);
    assert_true(log.monotonic);
    assert_true(log.last == 1.0);
    assert_int_equal(a->n, rows);
    assert_int_equal(b->n, rows);
    for (size_t c = 0; c < 2; c++)
        assert_memory_equal(a->ch[c].samples, b->ch[c].samples, rows * sizeof(float));
    assert_true(a->dt_s == b->dt_s);
    assert_true(fabs(a->dt_s - 1e-7) < 1e-16);
    assert_true(fabs(a->t0_s + 0.01) < 1e-12);
    /* value check: row 300000 of channel b is 300000 % 4096 */
    assert_true(a->ch[1].samples[300000] == (float)(300000 % 4096));
    tf_capture_destroy(a);
    tf_capture_destroy(b);

    /* a bad field late in the file: the second thread's line count is exact */
    expect_bad_last_row(path, "big.csv", "4.0e-02,abc,1\n", line + 1, "abc", &one, &two);
}

/* Row k of the layout test below: long rows (a channel printed with 13
 * significant digits) where long(k), else short ones (small integers). The
 * text of the channel goes to val. */
static int write_row(FILE *f, size_t k, int is_long, char *val, size_t size)
{
    if (is_long)
        snprintf(val, size, "%.12e", sin((double)k * 1e-3) * 3.0);
    else
        snprintf(val, size, "%d", (int)(k % 7) - 3);
    return fprintf(f, "%.9e,%s\n", (double)k * 1e-7, val);
}

/* Rows whose length changes along the file, so that the rows each parser
 * expects from the first 64 KiB are too many or too few: with the first part
 * longer than expected, the second part, both, and rows that stay as long.
 * Every value must equal the float of its text (glibc strtod, correctly
 * rounded), with one thread and with two, and a bad field in the second
 * part must name its line. */
static void test_import_csv_parts_of_changing_length(void **state)
{
    (void)state;
    const size_t rows = 600000, head = 2000;
    for (int layout = 0; layout < 4; layout++) {
        const char *path = tf_test_tmpfile("changing.csv");
        FILE *f = fopen(path, "w");
        assert_non_null(f);
        fprintf(f, "time_s,a\n");
        float *want = malloc(rows * sizeof *want);
        assert_non_null(want);
        char val[64];
        for (size_t k = 0; k < rows; k++) {
            /* 0: long head, short rest (both parts overflow their windows);
             * 1: long head, short to the middle, long after (the first part
             *    overflows, the second does not);
             * 2: long to the middle, short after (the second part's window
             *    is too large, the first fits);
             * 3: short head, long rest (both windows too large) */
            int is_long = layout == 0 ? k < head
                        : layout == 1 ? k < head || k >= rows / 2
                        : layout == 2 ? k < rows / 2
                        : k >= head;
            write_row(f, k, is_long, val, sizeof val);
            want[k] = (float)strtod(val, NULL);
        }
        fclose(f);
        tf_import_options one, two;
        tf_import_options_init(&one);
        tf_import_options_init(&two);
        one.threads = 1;
        two.threads = 2;
        tf_capture *a = load(path, &one), *b = load(path, &two);
        assert_int_equal(a->n, rows);
        assert_int_equal(b->n, rows);
        assert_samples(&a->ch[0], want, rows);
        assert_samples(&b->ch[0], want, rows);
        assert_true(fabs(b->dt_s - 1e-7) < 1e-16);
        tf_capture_destroy(a);
        tf_capture_destroy(b);
        free(want);
        /* a bad field in the last row: line = header + rows + 1 */
        expect_bad_last_row(path, "changing.csv", "6.0e-02,x1\n", rows + 2, "x1", &one, &two);
    }
}

/* A split file with a quoted field after the first MiB (which detection sees
 * unquoted) is read again as one part: the quoted field holds line ends, and
 * the middle of the data, where a split would fall, lies inside it (rows of
 * one length on both sides). */
static void test_import_csv_late_quotes(void **state)
{
    (void)state;
    const size_t half = 250000; /* rows before and after: about 10 MB in all */
    const char *path = tf_test_tmpfile("late-quotes.csv");
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    fprintf(f, "time_s,a,note\n");
    for (size_t k = 0; k < 2 * half + 1; k++) {
        fprintf(f, "%.9e,%02d,", (double)(k + 1) * 1e-7, (int)(k % 100));
        if (k == half) {
            fputc('"', f);
            for (int j = 0; j < 2000; j++)
                fputs("x\n", f);
            fputs("\"\n", f);
        } else {
            fputs("0\n", f);
        }
    }
    fclose(f);
    tf_import_options two;
    tf_import_options_init(&two);
    two.threads = 2;
    snprintf(two.channels, sizeof two.channels, "a");
    tf_capture *b = load(path, &two);
    assert_int_equal(b->n, 2 * half + 1);
    for (size_t k = 0; k < b->n; k++)
        if (b->ch[0].samples[k] != (float)(k % 100))
            fail_msg("row %zu: %g, expected %zu", k, (double)b->ch[0].samples[k], k % 100);
    tf_capture_destroy(b);
}

/* Line numbers from the second parser thread in a gap warning and in a time
 * base error: the lines of the first part come before them. */
static void test_import_csv_second_part_lines(void **state)
{
    (void)state;
    const size_t rows = 500000, gap_row = 450000, jump_row = 400000;
    const char *path = tf_test_tmpfile("second-part.csv");
    for (int jump = 0; jump < 2; jump++) {
        FILE *f = fopen(path, "w");
        assert_non_null(f);
        fprintf(f, "# an invented bench capture\ntime_s,a\n");
        for (size_t k = 0; k < rows; k++) {
            double t = (double)(k + (jump && k >= jump_row ? 5 : 0)) * 1e-7;
            if (k == gap_row)
                fprintf(f, "%.9e,\n", t);
            else
                fprintf(f, "%.9e,%d\n", t, (int)(k % 50));
        }
        fclose(f);
        tf_import_options two;
        tf_import_options_init(&two);
        two.threads = 2;
        two.gaps_interpolate = 1;
        char want[160];
        if (jump) { /* data starts at line 3: row k is line k + 3 */
            snprintf(want, sizeof want, "second-part.csv:%zu:1: expected a time step of 1e-07 s",
                     jump_row + 3);
            expect_error(path, &two, TF_ERR_DATA, want);
            continue;
        }
        tf_capture *cap = load(path, &two);
        assert_int_equal(cap->n, rows);
        assert_int_equal(cap->nwarn, 1);
        snprintf(want, sizeof want, "1 empty or non-finite value filled by linear interpolation "
                 "(the first at line %zu)", gap_row + 3);
        if (!strstr(cap->warnings[0], want))
            fail_msg("warning '%s', expected '%s'", cap->warnings[0], want);
        tf_capture_destroy(cap);
    }
}

/* Columns of text beside the numbers (a clock time, a status word), as data
 * loggers write them: found, skipped with a warning each, refused by
 * --channels; the number columns read as usual (values against glibc strtod). */
static void test_import_csv_text_columns(void **state)
{
    (void)state;
    const size_t rows = 3000;
    const char *path = tf_test_tmpfile("text-columns.csv");
    FILE *f = fopen(path, "w");
    assert_non_null(f);
    fprintf(f, "Logger;invented bench logger\nChannel count;2\n");
    fprintf(f, "Time;Seconds (s);I load (A);Status\n");
    float *want = malloc(rows * sizeof *want);
    assert_non_null(want);
    for (size_t k = 0; k < rows; k++) {
        char t[32], v[32];
        snprintf(t, sizeof t, "%.7f", (double)k * 1e-6);
        snprintf(v, sizeof v, "%.4f", (double)(k % 17) * 0.25 - 1.0);
        want[k] = (float)strtod(v, NULL);
        *strchr(t, '.') = ',';
        *strchr(v, '.') = ',';
        fprintf(f, "05:30:00.%06zu;%s;%s;%s\n", k, t, v, k % 500 ? "RUN" : "MARK");
    }
    fclose(f);
    tf_capture *cap = load(path, NULL);
    assert_int_equal(cap->n, rows);
    assert_int_equal(cap->nchan, 1);
    assert_string_equal(cap->ch[0].name, "I load");
    assert_string_equal(cap->ch[0].unit, "A");
    assert_int_equal(cap->dialect.time_column, 1);
    assert_int_equal(cap->dialect.decimal, ',');
    assert_int_equal(cap->nmeta, 2);
    assert_true(fabs(cap->dt_s - 1e-6) < 1e-15);
    assert_samples(&cap->ch[0], want, rows);
    assert_int_equal(cap->nwarn, 2);
    assert_non_null(strstr(cap->warnings[0], "column 1 ('Time') holds text, not numbers"));
    assert_non_null(strstr(cap->warnings[1], "column 4 ('Status') holds text, not numbers"));
    tf_capture_destroy(cap);
    free(want);
    tf_import_options opt;
    tf_import_options_init(&opt);
    snprintf(opt.channels, sizeof opt.channels, "Status");
    expect_error(path, &opt, TF_ERR_USAGE, "column 'Status' of");
    /* text in a number column further on is still an error at its line */
    f = fopen(path, "a");
    fputs("05:30:01.000000;0,0030000;x;RUN\n", f);
    fclose(f);
    expect_error(path, NULL, TF_ERR_DATA, "text-columns.csv:3004:3: expected a number, found 'x'");
}

/* One channel with decimal commas splits at its commas into two columns of
 * integers: under a one-name header, and when the integers before the commas
 * cannot be a time column, it is read as one column. Rising integers keep the
 * two-column reading (time, value). */
static void test_import_csv_one_decimal_comma_column(void **state)
{
    (void)state;
    tf_import_options opt;
    tf_import_options_init(&opt);
    opt.sample_rate_hz = 1e6;
    tf_capture *cap = load_text("one-column.csv", "i_load (A)\n1,5\n2,25\n\n-0,75\n3,0\n", &opt);
    const float want[] = {1.5f, 2.25f, -0.75f, 3.0f};
    assert_int_equal(cap->nchan, 1);
    assert_int_equal(cap->n, 4);
    assert_string_equal(cap->ch[0].name, "i_load");
    assert_string_equal(cap->ch[0].unit, "A");
    assert_int_equal(cap->dialect.decimal, ',');
    assert_int_equal(cap->dialect.header_line, 1);
    assert_samples(&cap->ch[0], want, 4);
    tf_capture_destroy(cap);
    cap = load_text("two-columns.csv", "Waveform\n0,5\n1,5\n2,7\n", NULL);
    const float v[] = {5, 5, 7};
    assert_int_equal(cap->nchan, 1);
    assert_int_equal(cap->n, 3);
    assert_int_equal(cap->dialect.time_column, 0);
    assert_samples(&cap->ch[0], v, 3);
    tf_capture_destroy(cap);
}

/* Lone CRs in a file of LF line ends end lines as well (every CR, LF or CRLF
 * ends a line, and line numbers count them so). */
static void test_import_csv_mixed_line_ends(void **state)
{
    (void)state;
    tf_capture *cap = load_text("mixed-ends.csv", "t,a\n0,1\r1,2\r\n2,3\n3,4\n", NULL);
    const float want[] = {1, 2, 3, 4};
    assert_int_equal(cap->n, 4);
    assert_samples(&cap->ch[0], want, 4);
    tf_capture_destroy(cap);
    expect_text_error("mixed-ends-bad.csv", "t,a\n0,1\r1,2\r\n2,x\n", NULL, TF_ERR_DATA,
                      "mixed-ends-bad.csv:4:2: expected a number, found 'x'");
}

static void test_import_csv_memory_entry(void **state)
{
    (void)state;
    const char text[] = "t,v\n0,1\n1,2\n";
    tf_capture *cap = NULL;
    tf_error err;
    assert_int_equal(tf_csv_import_memory("mem", text, sizeof text - 1, NULL, &cap, &err), TF_OK);
    assert_int_equal(cap->n, 2);
    assert_string_equal(cap->path, "mem");
    tf_capture_destroy(cap);
    /* found by fuzz_csv (2026-12-02): a header-like line with more fields than
     * the text-column layout made detection read past its column flags; now a
     * clear error (AddressSanitizer checks the reads) */
    static const char fuzzed[] = "\377\377\377\377\377\377\377\377\377|,\206\323i\n"
                                 "000,e+00,1.0,2.0\n1.000000e,1.5,\n2.0000'0e-06,nan,3.0\n"
                                 "3.000infe-06,2.5,3.5\n";
    cap = (tf_capture *)1;
    assert_int_equal(tf_csv_import_memory("fuzzed", fuzzed, sizeof fuzzed - 1, NULL, &cap, &err),
                     TF_ERR_DATA);
    assert_null(cap);
    assert_non_null(strstr(err.msg, "fuzzed:3:1: expected a time column"));
}

/* ---- outside references: files written by numpy.savetxt, pandas.DataFrame.to_csv,
 * Python's csv module and invented instrument-like layouts
 * (tests/support/import_csv_robust.py; each case names its tool there) ---- */

/* One case: generate, import, compare with what the generator says it wrote.
 * Returns 0 when the importer did the right thing, else prints why. */
static int robust_case(const char *name)
{
    char csvname[128], expname[128];
    snprintf(csvname, sizeof csvname, "robust-%s.csv", name);
    snprintf(expname, sizeof expname, "robust-%s.exp", name);
    const char *p = tf_test_tmpfile(csvname);
    char csvpath[512], exppath[512];
    snprintf(csvpath, sizeof csvpath, "%s", p);
    snprintf(exppath, sizeof exppath, "%s", tf_test_tmpfile(expname));
    if (tf_test_system("/usr/bin/python3 '%s' %s '%s' '%s'",
                       tf_test_src("tests/support/import_csv_robust.py"), name, csvpath,
                       exppath) != 0) {
        print_error("%s: the generator failed\n", name);
        return 1;
    }
    FILE *e = fopen(exppath, "r");
    if (!e)
        return print_error("%s: no expectation file\n", name), 1;
    char kind[16] = "";
    int bad = 0;
    if (fscanf(e, "%15s", kind) != 1) {
        fclose(e);
        return print_error("%s: empty expectation\n", name), 1;
    }
    tf_import_options opt;
    tf_import_options_init(&opt);
    tf_capture *cap = NULL;
    tf_error err;
    tf_error_clear(&err);
    if (strcmp(kind, "error") == 0) {
        char code[16], text[256], want[600];
        unsigned line, col;
        if (fscanf(e, "%15s %u %u %255[^\n]", code, &line, &col, text) != 4) {
            fclose(e);
            return print_error("%s: bad expectation\n", name), 1;
        }
        tf_status wcode = strcmp(code, "USAGE") == 0 ? TF_ERR_USAGE : TF_ERR_DATA;
        tf_status st = tf_import_csv(csvpath, &opt, &cap, &err);
        snprintf(want, sizeof want, "%s:%u:%u: ", csvpath, line, col);
        if (st != wcode || strncmp(err.msg, want, strlen(want)) != 0 || !strstr(err.msg, text)) {
            print_error("%s: expected code %d '%s...%s', got %d '%s'\n", name, (int)wcode, want,
                        text, (int)st, err.msg);
            bad = 1;
        }
        if (cap)
            tf_capture_destroy(cap), bad = 1;
        fclose(e);
        return bad;
    }
    size_t n, nchan;
    double t0, dt;
    unsigned gaps;
    if (fscanf(e, "%zu %zu %lf %lf %u", &n, &nchan, &t0, &dt, &gaps) != 5) {
        fclose(e);
        return print_error("%s: bad expectation\n", name), 1;
    }
    opt.gaps_interpolate = gaps > 0;
    tf_status st = tf_import_csv(csvpath, &opt, &cap, &err);
    if (st != TF_OK) {
        fclose(e);
        return print_error("%s: unexpected error %d: %s\n", name, (int)st, err.msg), 1;
    }
    if (cap->n != n || cap->nchan != nchan) {
        print_error("%s: %zu rows x %zu channels, expected %zu x %zu\n", name, cap->n,
                    cap->nchan, n, nchan);
        bad = 1;
    }
    /* the time grid the generator wrote, t0 + k*dt: the fit must find it to well
     * within one printing unit */
    if (fabs(cap->dt_s - dt) > 1e-6 * dt || fabs(cap->t0_s - t0) > 1e-3 * dt) {
        print_error("%s: t0 %.12g dt %.12g, expected %.12g %.12g\n", name, cap->t0_s,
                    cap->dt_s, t0, dt);
        bad = 1;
    }
    size_t filled = 0;
    for (size_t c = 0; c < nchan; c++) {
        char nm[TF_NAME_SIZE + 8], un[TF_NAME_SIZE + 8];
        if (fscanf(e, " %[^\t]\t%[^\n]", nm, un) != 2)
            bad = 1;
        if (strcmp(un, "-") == 0)
            un[0] = '\0';
        if (c < cap->nchan) {
            filled += cap->ch[c].gaps_filled;
            if (strcmp(cap->ch[c].name, nm) != 0 || strcmp(cap->ch[c].unit, un) != 0) {
                print_error("%s: channel %zu is '%s' [%s], expected '%s' [%s]\n", name, c,
                            cap->ch[c].name, cap->ch[c].unit, nm, un);
                bad = 1;
            }
        }
    }
    if (filled != gaps) {
        print_error("%s: %zu gaps filled, expected %u\n", name, filled, gaps);
        bad = 1;
    }
    /* reference: the printed numbers read back by Python's float(), scaled, rounded to
     * float32 by numpy; a scaled value may differ from a product rounded another way by
     * one float ulp */
    for (size_t k = 0; k < n && !bad; k++)
        for (size_t c = 0; c < nchan && !bad; c++) {
            char hex[64];
            if (fscanf(e, "%63s", hex) != 1) {
                bad = 1;
                break;
            }
            float want = (float)strtod(hex, NULL), got = cap->ch[c].samples[k];
            if (got != want && fabsf(got - want) > 1.2e-7f * fabsf(want)) {
                print_error("%s: row %zu channel %zu: %a, expected %a\n", name, k, c,
                            (double)got, (double)want);
                bad = 1;
            }
        }
    fclose(e);
    tf_capture_destroy(cap);
    return bad;
}

static void test_import_csv_independent_tools(void **state)
{
    (void)state;
    /* tests/run installs python3 (tests/install-deps): its absence is a broken set-up */
    assert_true(tf_test_have("/usr/bin/python3"));
    int failed;
    int ran = tf_test_run_listed("tests/support/import_csv_robust.py", robust_case, &failed);
    print_message("%d cases from independent tools, %d failed\n", ran, failed);
    assert_true(ran >= 20);
    assert_int_equal(failed, 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_import_csv_comma_header_units),
        cmocka_unit_test(test_import_csv_semicolon_decimal_comma_bom_crlf),
        cmocka_unit_test(test_import_csv_metadata_key_value),
        cmocka_unit_test(test_import_csv_tab_cr_no_header),
        cmocka_unit_test(test_import_csv_space_runs),
        cmocka_unit_test(test_import_csv_quotes_trailing_delimiter_spaces),
        cmocka_unit_test(test_import_csv_sample_rate_no_time),
        cmocka_unit_test(test_import_csv_time_few_digits),
        cmocka_unit_test(test_import_csv_time_errors),
        cmocka_unit_test(test_import_csv_time_resolution),
        cmocka_unit_test(test_import_csv_bad_corpus),
        cmocka_unit_test(test_import_csv_bom_crlf_good_twin),
        cmocka_unit_test(test_import_csv_gaps),
        cmocka_unit_test(test_import_csv_huge_line),
        cmocka_unit_test(test_import_csv_channel_options),
        cmocka_unit_test(test_import_csv_python_excel),
        cmocka_unit_test(test_import_csv_python_excel_e),
        cmocka_unit_test(test_import_csv_python_excel_tab),
        cmocka_unit_test(test_import_csv_python_unix),
        cmocka_unit_test(test_import_csv_python_semicolon),
        cmocka_unit_test(test_import_csv_python_decimal_comma),
        cmocka_unit_test(test_import_csv_python_space),
        cmocka_unit_test(test_import_csv_two_threads),
        cmocka_unit_test(test_import_csv_parts_of_changing_length),
        cmocka_unit_test(test_import_csv_late_quotes),
        cmocka_unit_test(test_import_csv_second_part_lines),
        cmocka_unit_test(test_import_csv_mixed_line_ends),
        cmocka_unit_test(test_import_csv_text_columns),
        cmocka_unit_test(test_import_csv_one_decimal_comma_column),
        cmocka_unit_test(test_import_csv_memory_entry),
        cmocka_unit_test(test_import_csv_independent_tools),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
