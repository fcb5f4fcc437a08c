/* The HTML report: self-contained (no scripts, no network), every check id and the
 * verdict present, under 2 MB for a 10^7-sample capture, and loaded by headless
 * Chromium (reference: a real browser): DOM, a non-blank screenshot, an A4 PDF. */
#include "tf_test.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <tankfit/tankfit.h>
#include <tankfit/check.h>
#include <tankfit/report.h>

#include "check_samples.h"

static const char *const check_ids[] = {
    "turnoff-margin", "reverse-bias", "max-frequency", "resonant-frequency", "q-factor",
    "resistance", "current-thd", "voltage-thd", "current-harmonics", "peak-current",
    "capacitor-voltage", "mode"};

/* The report of a failing unit, made by `tankfit check`; its path in html. */
static void make_report(char *html)
{
    static char cached[4096];
    if (cached[0]) {
        snprintf(html, 4096, "%s", cached);
        return;
    }
    char design[4096], capture[4096];
    const char *slow[] = {"turnoff_time = 24 us", NULL};
    tf_check_test_sample(tf_test_tmpdir(), "report", slow, design, capture);
    char out[4096];
    snprintf(out, sizeof out, "%s/report-out", tf_test_tmpdir());
    mkdir(out, 0777);
    const char *list = tf_test_tmpfile("report.list");
    assert_int_equal(tf_test_system("'%s' check '%s' --design '%s' --out '%s' >/dev/null 2>&1; "
                                    "test $? -eq 1 && ls '%s'/*.html > '%s'",
                                    tf_test_cli(), capture, design, out, out, list), 0);
    char *t = tf_test_slurp(list, NULL);
    assert_non_null(t);
    t[strcspn(t, "\n")] = 0;
    snprintf(cached, sizeof cached, "%s", t);
    snprintf(html, 4096, "%s", t);
    free(t);
}

static void test_report_self_contained(void **state)
{
    (void)state;
    char path[4096];
    make_report(path);
    size_t len;
    char *h = tf_test_slurp(path, &len);
    assert_non_null(h);
    assert_null(strstr(h, "<script"));
    assert_null(strstr(h, "<link"));
    assert_null(strstr(h, "<img"));
    assert_null(strstr(h, "url("));
    assert_null(strstr(h, "@import"));
    assert_null(strstr(h, "https:"));
    /* the only URL is the SVG namespace name, which is never fetched */
    for (const char *p = strstr(h, "http:"); p; p = strstr(p + 1, "http:"))
        assert_memory_equal(p, "http://www.w3.org/2000/svg", 26);
    assert_non_null(strstr(h, "@media print"));
    assert_non_null(strstr(h, "size:A4"));
    assert_non_null(strstr(h, ">FAIL<"));
    for (size_t k = 0; k < sizeof check_ids / sizeof check_ids[0]; k++) {
        char id[64];
        snprintf(id, sizeof id, "id=\"check-%s\"", check_ids[k]);
        if (!strstr(h, id))
            fail_msg("report lacks %s", id);
    }
    assert_non_null(strstr(h, "differential or isolated probes"));
    assert_non_null(strstr(h, "qualified engineer"));
    free(h);
}

/* A 10^7-sample capture (2 s at 5 MS/s) with a hand-filled analysis of 12 000
 * cycles: the report stays under 2 MB. */
static void test_report_large_capture(void **state)
{
    (void)state;
    size_t n = 10000000, ncyc = 12000;
    double dt = 2e-7, fd = 16356, f0 = 6000;
    tf_capture *cap = tf_capture_create();
    tf_error err;
    assert_int_equal(tf_capture_alloc(cap, 2, n, &err), TF_OK);
    cap->dt_s = dt;
    snprintf(cap->ch[0].name, TF_NAME_SIZE, "i_load");
    snprintf(cap->ch[0].unit, TF_UNIT_SIZE, "A");
    snprintf(cap->ch[1].name, TF_NAME_SIZE, "v_out");
    snprintf(cap->ch[1].unit, TF_UNIT_SIZE, "V");
    snprintf(cap->dialect.format, sizeof cap->dialect.format, "wav");
    for (size_t k = 0; k < n; k++) {
        double t = (double)k * dt, ph = fmod(t * f0 * 2, 1.0) / (f0 * 2);
        cap->ch[0].samples[k] = (float)(ph < 1 / fd ? 150 * sin(2 * M_PI * fd * ph) : 0);
        cap->ch[1].samples[k] = (float)(fmod(t * f0, 1.0) < 0.5 ? 540 : 0);
    }
    tf_capture_compute_stats(cap);
    tf_segment_result *seg = calloc(1, sizeof *seg);
    seg->cycles = calloc(ncyc, sizeof *seg->cycles);
    seg->lobes = calloc(2 * ncyc, sizeof *seg->lobes);
    seg->ncycles = ncyc;
    seg->nlobes = 2 * ncyc;
    seg->topology = TF_TOPO_HALF_BRIDGE;
    seg->mode = TF_MODE_NON_OVERLAPPING;
    for (size_t k = 0; k < ncyc; k++) {
        tf_cycle *c = &seg->cycles[k];
        c->start_s = (double)k / (2 * f0);
        c->period_s = 1 / f0;
        c->turnoff_available_s = 0.5 / fd;
        c->thyristor = k % 2 ? TF_DEV_T2 : TF_DEV_T1;
        c->lobe_thyristor = 2 * k;
        c->lobe_diode = 2 * k + 1;
        seg->lobes[2 * k] = (tf_lobe){.start_s = c->start_s, .end_s = c->start_s + 0.5 / fd,
                                      .device = c->thyristor, .peak_a = 150};
        seg->lobes[2 * k + 1] = (tf_lobe){.start_s = c->start_s + 0.5 / fd,
                                          .end_s = c->start_s + 1 / fd,
                                          .device = k % 2 ? TF_DEV_D2 : TF_DEV_D1, .peak_a = -150};
    }
    seg->output_frequency_hz = (tf_stat3){f0, f0, f0, ncyc};
    tf_analysis an;
    memset(&an, 0, sizeof an);
    an.roles = (tf_roles){.current = 0, .voltage = 1, .cap_voltage = -1, .switch_voltage = -1,
                          .gate = {-1, -1, -1, -1}};
    an.seg = seg;
    an.fit_error.code = TF_ERR_DATA;
    snprintf(an.fit_error.msg, sizeof an.fit_error.msg, "not fitted in this test");
    tf_design *d = malloc(sizeof *d);
    tf_design_init(d);
    d->turnoff_time_s = 18e-6;
    d->turnoff_ratio_min = 1.3;
    d->peak_current_max_a = 350;
    tf_check_input in = {d, cap, &an, NULL, NULL, "not simulated in this test"};
    tf_check_result *r = NULL;
    assert_int_equal(tf_check_evaluate(&in, &r, &err), TF_OK);
    tf_report_capture rc = {"big.wav", "00", 40000044ULL, cap, &an, r, NULL};
    tf_report_info info = {"IH-X", "tester", "t-1", "", "2026-01-01T00:00:00Z", "0", "d.ini", "00",
                           d, "r.json", "not simulated in this test", r->overall};
    char *html = NULL;
    size_t len = 0;
    assert_int_equal(tf_report_html(&info, &rc, 1, &html, &len, &err), TF_OK);
    assert_true(len < 2u * 1024 * 1024);
    assert_true(len > 20000);
    assert_non_null(strstr(html, "id=\"check-turnoff-margin\""));
    free(html);
    /* missing input */
    assert_int_equal(tf_report_html(&info, &rc, 0, &html, &len, &err), TF_ERR_USAGE);
    tf_check_free(r);
    free(d);
    free(seg->cycles);
    free(seg->lobes);
    free(seg);
    tf_capture_destroy(cap);
}

/* ---- headless Chromium ------------------------------------------------------------ */

static const char *chromium(void)
{
    static const char *const names[] = {"chromium", "chromium-browser", NULL};
    for (int k = 0; names[k]; k++)
        if (tf_test_have(names[k]))
            return names[k];
    return NULL;
}

static int browser(const char *what, const char *html, const char *redirect)
{
    char prof[4096];
    snprintf(prof, sizeof prof, "%s/chromium-profile-XXXXXX", tf_test_tmpdir());
    assert_non_null(mkdtemp(prof));
    return tf_test_system("timeout 120 %s --headless --no-sandbox --disable-gpu --disable-quic "
                          "--no-first-run --disable-background-networking "
                          "--disable-component-update --disable-sync --user-data-dir='%s' "
                          "%s 'file://%s' %s 2>/dev/null",
                          chromium(), prof, what, html, redirect);
}

static void test_report_chromium(void **state)
{
    (void)state;
    if (!chromium()) {
        print_message("skipped: chromium is not installed (tests/install-deps installs it)\n");
        skip();
    }
    char path[4096];
    make_report(path);
    /* DOM: the verdict and every check id */
    const char *dom = tf_test_tmpfile("report.dom");
    char redirect[4200];
    snprintf(redirect, sizeof redirect, "> '%s'", dom);
    assert_int_equal(browser("--dump-dom", path, redirect), 0);
    char *t = tf_test_slurp(dom, NULL);
    assert_non_null(t);
    assert_non_null(strstr(t, "FAIL"));
    for (size_t k = 0; k < sizeof check_ids / sizeof check_ids[0]; k++)
        if (!strstr(t, check_ids[k]))
            fail_msg("the DOM lacks %s", check_ids[k]);
    free(t);
    /* a screenshot with many colours: decoded with Python's zlib and PNG un-filtering */
    char png[4096], pdf[4096], arg[4300];
    snprintf(png, sizeof png, "%s/report.png", tf_test_tmpdir());
    snprintf(arg, sizeof arg, "--window-size=1100,1600 --screenshot='%s'", png);
    assert_int_equal(browser(arg, path, ""), 0);
    const char *py = tf_test_tmpfile("png_colours.py");
    assert_int_equal(tf_test_write(py,
        "import sys, zlib, struct\n"
        "d = open(sys.argv[1], 'rb').read()\n"
        "assert d[:8] == b'\\x89PNG\\r\\n\\x1a\\n'\n"
        "p, idat = 8, b''\n"
        "while p < len(d):\n"
        "    n, = struct.unpack('>I', d[p:p+4]); k = d[p+4:p+8]; c = d[p+8:p+8+n]\n"
        "    if k == b'IHDR': w, h, bits, ct = struct.unpack('>IIBB', c[:10])\n"
        "    if k == b'IDAT': idat += c\n"
        "    p += 12 + n\n"
        "bpp = {2: 3, 6: 4}[ct]\n"
        "raw = zlib.decompress(idat); st = w * bpp\n"
        "prev = bytearray(st); colours = set(); i = 0\n"
        "for y in range(h):\n"
        "    f = raw[i]; line = bytearray(raw[i+1:i+1+st]); i += 1 + st\n"
        "    for x in range(st):\n"
        "        a = line[x-bpp] if x >= bpp else 0; b = prev[x]; c = prev[x-bpp] if x >= bpp else 0\n"
        "        if f == 1: line[x] = (line[x] + a) & 255\n"
        "        elif f == 2: line[x] = (line[x] + b) & 255\n"
        "        elif f == 3: line[x] = (line[x] + (a + b) // 2) & 255\n"
        "        elif f == 4:\n"
        "            pa, pb, pc = abs(b - c), abs(a - c), abs(a + b - 2 * c)\n"
        "            line[x] = (line[x] + (a if pa <= pb and pa <= pc else b if pb <= pc else c)) & 255\n"
        "    if y % 4 == 0:\n"
        "        for x in range(0, st, bpp * 3): colours.add(bytes(line[x:x+3]))\n"
        "    prev = line\n"
        "print(w, h, len(colours))\n"
        "sys.exit(0 if w >= 1000 and len(colours) >= 50 else 1)\n"), 0);
    assert_int_equal(tf_test_system("/usr/bin/python3 '%s' '%s'", py, png), 0);
    /* a PDF of at least one page */
    snprintf(pdf, sizeof pdf, "%s/report.pdf", tf_test_tmpdir());
    snprintf(arg, sizeof arg, "--no-pdf-header-footer --print-to-pdf='%s'", pdf);
    assert_int_equal(browser(arg, path, ""), 0);
    size_t len;
    t = tf_test_slurp(pdf, &len);
    assert_non_null(t);
    assert_true(len > 1000);
    assert_memory_equal(t, "%PDF", 4);
    free(t);
    /* pages, and their size: A4 is 210 x 297 mm = 595.3 x 841.9 pt (source: ISO 216) */
    assert_int_equal(tf_test_system("/usr/bin/python3 -c \"import re,sys; d=open(sys.argv[1],'rb')"
                                    ".read(); n=len(re.findall(rb'/Type\\s*/Page[^s]', d)); "
                                    "b=[list(map(float,m.split())) for m in re.findall("
                                    "rb'/MediaBox\\s*\\[([^\\]]*)\\]', d)]; "
                                    "a4=all(abs(x[2]-x[0]-595.3)<2 and abs(x[3]-x[1]-841.9)<2 "
                                    "for x in b); print('pages', n, 'A4', a4); "
                                    "sys.exit(0 if n >= 1 and b and a4 else 1)\" '%s'", pdf),
                     0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_report_self_contained),
        cmocka_unit_test(test_report_large_capture),
        cmocka_unit_test(test_report_chromium),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
