/* SVG plots: min/max decimation keeps every extreme of a 10^7-sample trace in a
 * size set by the width, SI-prefixed axis labels, escaping, and well-formed XML
 * (reference: Python's xml.etree parser). */
#include "tf_test.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <tankfit/svg.h>

static void test_svg_create_bounds(void **state)
{
    (void)state;
    assert_null(tf_svg_create(10, 300, "x"));
    assert_null(tf_svg_create(900, 5000, "x"));
    tf_svg *s = tf_svg_create(900, 300, "t");
    assert_non_null(s);
    tf_svg_axes bad = {1, 1, 0, 1, "time", "s", "y", "A", 0};
    assert_int_equal(tf_svg_axes_draw(s, &bad), -1);
    bad.x1 = NAN;
    assert_int_equal(tf_svg_axes_draw(s, &bad), -1);
    tf_svg_destroy(s);
    tf_svg_destroy(NULL);
}

static void test_svg_escape(void **state)
{
    (void)state;
    char b[64];
    assert_string_equal(tf_svg_escape(b, sizeof b, "<a & \"b\">"), "&lt;a &amp; &quot;b&quot;&gt;");
    /* cut before an entity that does not fit, never inside it */
    assert_string_equal(tf_svg_escape(b, 6, "ab&cd"), "ab");
}

/* Largest and smallest y pixel of the first path of text. */
static void path_extremes(const char *text, double *ymin, double *ymax, size_t *points)
{
    const char *p = strstr(text, "<path");
    assert_non_null(p);
    p = strstr(p, " d=\"");
    assert_non_null(p);
    p += 4;
    *ymin = INFINITY;
    *ymax = -INFINITY;
    *points = 0;
    while (*p && *p != '"') {
        assert_true(*p == 'M' || *p == 'L');
        char *end;
        strtod(p + 1, &end);
        double y = strtod(end, &end);
        *ymin = fmin(*ymin, y);
        *ymax = fmax(*ymax, y);
        (*points)++;
        p = end;
    }
}

/* 10^7 samples of a 1 kHz sine with one single-sample spike: the output stays small
 * (two points per pixel column) and the spike's pixel is in it. */
static void test_svg_decimation_keeps_spikes(void **state)
{
    (void)state;
    size_t n = 10000000;
    float *y = malloc(n * sizeof *y);
    assert_non_null(y);
    double dt = 1e-7;
    for (size_t k = 0; k < n; k++)
        y[k] = (float)(100 * sin(2 * M_PI * 1000 * (double)k * dt));
    y[1234567] = 180.0f;
    y[7654321] = -170.0f;
    tf_svg *s = tf_svg_create(900, 300, "spike");
    tf_svg_axes ax = {0, (double)(n - 1) * dt, -200, 200, "time", "s", "current", "A", 0};
    assert_int_equal(tf_svg_axes_draw(s, &ax), 0);
    tf_svg_trace(s, y, n, 0, dt, "#0072B2", 1.0);
    size_t len;
    const char *text = tf_svg_finish(s, &len);
    assert_non_null(text);
    assert_true(len < 100000);
    const char *tr = strstr(text, "<path fill=\"none\"");
    assert_non_null(tr);
    double ymin, ymax;
    size_t pts;
    path_extremes(tr, &ymin, &ymax, &pts);
    int cols = (int)ceil(tf_svg_px(s, ax.x1) - tf_svg_px(s, ax.x0));
    assert_true(pts <= 2 * (size_t)cols && pts >= (size_t)cols);
    /* the spikes' pixels, to the 0.1 px the writer prints */
    assert_true(fabs(ymin - tf_svg_py(s, 180)) < 0.06);
    assert_true(fabs(ymax - tf_svg_py(s, -170)) < 0.06);
    tf_svg_destroy(s);
    free(y);
}

/* Within a pixel column the minimum and the maximum are drawn in the order they occur,
 * so the path does not run backwards in time; where the extreme value occurs twice the
 * first occurrence decides (common practice for min/max decimation). */
static void test_svg_decimation_order(void **state)
{
    (void)state;
    const size_t n = 90000;
    float *y = calloc(n, sizeof *y);
    assert_non_null(y);
    tf_svg *s = tf_svg_create(900, 300, "order");
    tf_svg_axes ax = {0, (double)(n - 1), -2, 2, "time", "s", "y", "", 0};
    assert_int_equal(tf_svg_axes_draw(s, &ax), 0);
    const int cols = (int)ceil(tf_svg_px(s, ax.x1) - tf_svg_px(s, ax.x0));
    const double w = (double)(n - 1) / cols;
    for (int c = 0; c < cols; c++) {
        /* even columns: the maximum first (and again at the end); odd: the minimum */
        const float first = c % 2 ? -1.0f : 1.0f;
        y[(size_t)((c + 0.25) * w)] = first;
        y[(size_t)((c + 0.5) * w)] = -first;
        y[(size_t)((c + 0.8) * w)] = first;
    }
    tf_svg_trace(s, y, n, 0, 1, "#000", 1);
    const char *text = tf_svg_finish(s, NULL);
    const char *p = strstr(strstr(text, "<path fill=\"none\""), " d=\"") + 4;
    int c = 0;
    while (*p && *p != '"') {
        char *end;
        strtod(p + 1, &end);
        const double ya = strtod(end, &end);
        assert_true(*end == 'L');
        strtod(end + 1, &end);
        const double yb = strtod(end, &end);
        const double want = tf_svg_py(s, c % 2 ? -1.0 : 1.0);
        assert_true(fabs(ya - want) < 0.06);
        assert_true(fabs(yb - tf_svg_py(s, c % 2 ? 1.0 : -1.0)) < 0.06);
        c++;
        p = end;
    }
    assert_int_equal(c, cols);
    tf_svg_destroy(s);
    free(y);
}

/* Few samples: each is drawn as it is. */
static void test_svg_short_trace(void **state)
{
    (void)state;
    float y[5] = {0, 1, 0, -1, 0};
    tf_svg *s = tf_svg_create(400, 200, "short");
    tf_svg_axes ax = {0, 4, -1, 1, "t", "", "y", "", 0};
    assert_int_equal(tf_svg_axes_draw(s, &ax), 0);
    tf_svg_trace(s, y, 5, 0, 1, "#000", 1);
    const char *text = tf_svg_finish(s, NULL);
    double ymin, ymax;
    size_t pts;
    path_extremes(strstr(text, "<path fill=\"none\""), &ymin, &ymax, &pts);
    assert_int_equal(pts, 5);
    tf_svg_destroy(s);
}

/* Axis labels carry the prefix of the range; numbers are in that prefix. */
static void test_svg_axis_prefix(void **state)
{
    (void)state;
    tf_svg *s = tf_svg_create(900, 300, "units");
    tf_svg_axes ax = {0, 2e-3, -150, 150, "time", "s", "load current", "A", 0};
    assert_int_equal(tf_svg_axes_draw(s, &ax), 0);
    const char *text = tf_svg_finish(s, NULL);
    assert_non_null(strstr(text, "time (ms)"));
    assert_non_null(strstr(text, "load current (A)"));
    assert_non_null(strstr(text, ">1.00<") ? strstr(text, ">1.00<") : strstr(text, ">1.0<"));
    tf_svg_destroy(s);
    s = tf_svg_create(900, 300, "units");
    tf_svg_axes ax2 = {0, 40e-6, 0, 35e-6, "firing time", "s", "time", "s", 0};
    assert_int_equal(tf_svg_axes_draw(s, &ax2), 0);
    text = tf_svg_finish(s, NULL);
    assert_non_null(strstr(text, "firing time (us)"));
    tf_svg_destroy(s);
}

/* Every drawing call together gives XML that Python's parser accepts. */
static void test_svg_well_formed(void **state)
{
    (void)state;
    tf_svg *s = tf_svg_create(900, 300, "all <parts> & more");
    tf_svg_axes ax = {0.3, 15.7, 0, 100, "harmonic number", "", "amplitude", "A", 1};
    assert_int_equal(tf_svg_axes_draw(s, &ax), 0);
    double x[3] = {1, 2, 3}, yv[3] = {10, NAN, 30};
    tf_svg_band(s, 2, 4, "#E69F00", 0.2);
    tf_svg_bar(s, 1, 0.4, 64, "#0072B2");
    tf_svg_line_xy(s, x, yv, 3, "#D55E00", 1);
    tf_svg_hline(s, 50, "#CC79A7", 1, "limit <50 A>");
    tf_svg_vline(s, 5, "#000", 0);
    tf_svg_mark(s, 6, "#000");
    tf_svg_xlabel_at(s, 1, "1");
    tf_svg_label_top(s, 3, "T1&D1");
    const char *labels[] = {"measured", "expected"}, *cols[] = {"#0072B2", "#56B4E9"};
    tf_svg_legend(s, labels, cols, 2);
    size_t len;
    const char *text = tf_svg_finish(s, &len);
    assert_non_null(text);
    const char *p = tf_test_tmpfile("plot.svg");
    assert_int_equal(tf_test_write(p, text), 0);
    tf_svg_destroy(s);
    if (!tf_test_have("/usr/bin/python3")) {
        print_message("skipped: /usr/bin/python3 not available for the XML check\n");
        return;
    }
    assert_int_equal(tf_test_system("/usr/bin/python3 -c \"import xml.etree.ElementTree as E,"
                                    "sys; r=E.parse(sys.argv[1]).getroot(); "
                                    "sys.exit(0 if r.tag.endswith('svg') else 1)\" '%s'", p), 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_svg_create_bounds),
        cmocka_unit_test(test_svg_escape),
        cmocka_unit_test(test_svg_decimation_keeps_spikes),
        cmocka_unit_test(test_svg_short_trace),
        cmocka_unit_test(test_svg_decimation_order),
        cmocka_unit_test(test_svg_axis_prefix),
        cmocka_unit_test(test_svg_well_formed),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
