/* SVG plot writer: frame, nice ticks with SI prefixes, min/max decimated traces. */
#include <tankfit/svg.h>

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

struct tf_svg {
    char *buf;
    size_t len, cap;
    int failed, finished;
    int width, height;
    double left, right, top, bottom;   /* plot area in pixels */
    double x0, x1, y0, y1;
    int have_axes;
    double legend_x;
};

static void put(tf_svg *s, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

static void put(tf_svg *s, const char *fmt, ...)
{
    if (s->failed || s->finished)
        return;
    for (;;) {
        va_list ap;
        va_start(ap, fmt);
        int n = vsnprintf(s->buf + s->len, s->cap - s->len, fmt, ap);
        va_end(ap);
        if (n < 0) {
            s->failed = 1;
            return;
        }
        if ((size_t)n < s->cap - s->len) {
            s->len += (size_t)n;
            return;
        }
        size_t ncap = s->cap * 2 + (size_t)n + 1;
        char *nb = realloc(s->buf, ncap);
        if (!nb) {
            s->failed = 1;
            return;
        }
        s->buf = nb;
        s->cap = ncap;
    }
}

char *tf_svg_escape(char *buf, size_t size, const char *text)
{
    size_t o = 0;
    if (!size)
        return buf;
    for (const char *p = text ? text : ""; *p; p++) {
        const char *rep = *p == '&' ? "&amp;" : *p == '<' ? "&lt;" : *p == '>' ? "&gt;"
                          : *p == '"' ? "&quot;" : NULL;
        size_t need = rep ? strlen(rep) : 1;
        if (o + need >= size)
            break;
        if (rep) {
            memcpy(buf + o, rep, need);
        } else {
            buf[o] = *p;
        }
        o += need;
    }
    buf[o] = 0;
    return buf;
}

tf_svg *tf_svg_create(int width, int height, const char *title)
{
    if (width < 200 || width > 4000 || height < 100 || height > 3000)
        return NULL;
    tf_svg *s = calloc(1, sizeof *s);
    if (!s)
        return NULL;
    s->cap = 65536;
    s->buf = malloc(s->cap);
    if (!s->buf) {
        free(s);
        return NULL;
    }
    s->buf[0] = 0;
    s->width = width;
    s->height = height;
    s->left = 74;
    s->right = width - 16;
    s->top = 30;
    s->bottom = height - 44;
    char t[256];
    put(s, "<svg xmlns=\"http://www.w3.org/2000/svg\" viewBox=\"0 0 %d %d\" width=\"%d\" "
        "height=\"%d\" role=\"img\" class=\"plot\"><title>%s</title>\n",
        width, height, width, height, tf_svg_escape(t, sizeof t, title ? title : "plot"));
    return s;
}

void tf_svg_destroy(tf_svg *s)
{
    if (!s)
        return;
    free(s->buf);
    free(s);
}

double tf_svg_px(const tf_svg *s, double x)
{
    return s->left + (x - s->x0) / (s->x1 - s->x0) * (s->right - s->left);
}

double tf_svg_py(const tf_svg *s, double y)
{
    return s->bottom - (y - s->y0) / (s->y1 - s->y0) * (s->bottom - s->top);
}

/* Tick step 1, 2 or 5 x 10^k giving about target ticks over span. */
static double nice_step(double span, int target)
{
    double raw = span / target;
    double p = pow(10, floor(log10(raw)));
    double m = raw / p;
    return (m < 1.5 ? 1 : m < 3.5 ? 2 : m < 7.5 ? 5 : 10) * p;
}

/* SI prefix for values up to maxabs: exponent (multiple of 3) and its letter. */
static int prefix_for(double maxabs, const char *unit, const char **letter)
{
    static const char *const L[] = {"p", "n", "u", "m", "", "k", "M", "G"};
    *letter = "";
    if (!unit || !unit[0] || !(maxabs > 0) || strcmp(unit, "%") == 0)
        return 0;
    int e = (int)floor(log10(maxabs) / 3.0) * 3;
    if (e < -12)
        e = -12;
    if (e > 9)
        e = 9;
    *letter = L[(e + 12) / 3];
    return e;
}

static void axis_label(char *buf, size_t size, const char *label, const char *letter,
                       const char *unit)
{
    if (unit && unit[0])
        snprintf(buf, size, "%s (%s%s)", label ? label : "", letter, unit);
    else
        snprintf(buf, size, "%s", label ? label : "");
}

static int decimals_for(double step_scaled)
{
    int d = (int)ceil(-log10(step_scaled) - 1e-9);
    return d < 0 ? 0 : d > 6 ? 6 : d;
}

int tf_svg_axes_draw(tf_svg *s, const tf_svg_axes *a)
{
    if (!(a->x1 > a->x0) || !(a->y1 > a->y0) || !isfinite(a->x0) || !isfinite(a->x1) ||
        !isfinite(a->y0) || !isfinite(a->y1))
        return -1;
    s->x0 = a->x0;
    s->x1 = a->x1;
    s->y0 = a->y0;
    s->y1 = a->y1;
    s->have_axes = 1;
    char lab[160], esc[320];
    put(s, "<rect class=\"area\" x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\"/>\n",
        s->left, s->top, s->right - s->left, s->bottom - s->top);
    /* y ticks */
    const char *yl;
    int ye = prefix_for(fmax(fabs(a->y0), fabs(a->y1)), a->yunit, &yl);
    double ys = nice_step(a->y1 - a->y0, (s->bottom - s->top) / 40 < 6 ? (int)fmax(2, (s->bottom - s->top) / 40) : 6), yscale = pow(10, -ye);
    int yd = decimals_for(ys * yscale);
    for (double v = ceil(a->y0 / ys) * ys; v <= a->y1 + ys * 1e-9; v += ys) {
        double py = tf_svg_py(s, v);
        double shown = fabs(v) < ys * 1e-6 ? 0 : v * yscale;
        put(s, "<line class=\"grid\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\"/>"
            "<text class=\"tick\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"end\">%.*f</text>\n",
            s->left, py, s->right, py, s->left - 5, py + 4, yd, shown);
    }
    axis_label(lab, sizeof lab, a->ylabel, yl, a->yunit);
    put(s, "<text class=\"axis\" transform=\"translate(14 %.1f) rotate(-90)\" "
        "text-anchor=\"middle\">%s</text>\n", (s->top + s->bottom) / 2,
        tf_svg_escape(esc, sizeof esc, lab));
    /* x ticks */
    const char *xl = "";
    if (!a->xcategory) {
        int xe = prefix_for(fmax(fabs(a->x0), fabs(a->x1)), a->xunit, &xl);
        double xs = nice_step(a->x1 - a->x0, 8), xscale = pow(10, -xe);
        int xd = decimals_for(xs * xscale);
        for (double v = ceil(a->x0 / xs) * xs; v <= a->x1 + xs * 1e-9; v += xs) {
            double px = tf_svg_px(s, v);
            double shown = fabs(v) < xs * 1e-6 ? 0 : v * xscale;
            put(s, "<line class=\"grid\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\"/>"
                "<text class=\"tick\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\">%.*f</text>\n",
                px, s->top, px, s->bottom, px, s->bottom + 16, xd, shown);
        }
    }
    axis_label(lab, sizeof lab, a->xlabel, xl, a->xunit);
    put(s, "<text class=\"axis\" x=\"%.1f\" y=\"%d\" text-anchor=\"middle\">%s</text>\n",
        (s->left + s->right) / 2, s->height - 8, tf_svg_escape(esc, sizeof esc, lab));
    if (a->y0 < 0 && a->y1 > 0)
        put(s, "<line class=\"zero\" x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\"/>\n", s->left,
            tf_svg_py(s, 0), s->right, tf_svg_py(s, 0));
    s->legend_x = s->left;
    return 0;
}

static double clampy(const tf_svg *s, double py)
{
    return py < s->top ? s->top : py > s->bottom ? s->bottom : py;
}

/* First index in [k, i1) whose time t0 + k dt is not before xe (i1 when none): the
 * times grow with k, so a guess from the division is moved to the exact boundary. */
static size_t column_end(size_t k, size_t i1, double t0, double dt, double xe)
{
    if (k >= i1 || !(t0 + (double)k * dt < xe))
        return k < i1 ? k : i1;
    double g = ceil((xe - t0) / dt);
    size_t e = g <= (double)k ? k + 1 : g >= (double)i1 ? i1 : (size_t)g;
    while (e > k + 1 && !(t0 + (double)(e - 1) * dt < xe))
        e--;
    while (e < i1 && t0 + (double)e * dt < xe)
        e++;
    return e;
}

/* Indices of the first smallest and the first largest of y[a..b) (b > a): the values by
 * an eight-lane pass the compiler vectorises, then the first index holding each. A NAN
 * in the first place is kept as both, as a plain scan keeping strict improvements would. */
static void column_extremes(const float *y, size_t a, size_t b, size_t *ilo, size_t *ihi)
{
    *ilo = *ihi = a;
    if (isnan(y[a]))
        return;
    float mn[8], mx[8];
    for (int j = 0; j < 8; j++)
        mn[j] = mx[j] = y[a];
    size_t k = a + 1;
    for (; k + 8 <= b; k += 8)
        for (int j = 0; j < 8; j++) {
            const float v = y[k + j];
            mn[j] = v < mn[j] ? v : mn[j];
            mx[j] = v > mx[j] ? v : mx[j];
        }
    for (; k < b; k++) {
        mn[0] = y[k] < mn[0] ? y[k] : mn[0];
        mx[0] = y[k] > mx[0] ? y[k] : mx[0];
    }
    float lo = mn[0], hi = mx[0];
    for (int j = 1; j < 8; j++) {
        lo = mn[j] < lo ? mn[j] : lo;
        hi = mx[j] > hi ? mx[j] : hi;
    }
    size_t i = a;
    while (!(y[i] == lo))
        i++;
    *ilo = i;
    i = a;
    while (!(y[i] == hi))
        i++;
    *ihi = i;
}

void tf_svg_trace(tf_svg *s, const float *y, size_t n, double t0, double dt,
                  const char *stroke, double width)
{
    if (!s->have_axes || !n || !(dt > 0))
        return;
    double fa = ceil((s->x0 - t0) / dt), fb = floor((s->x1 - t0) / dt) + 1;
    if (fa < 0)
        fa = 0;
    if (fb > (double)n)
        fb = (double)n;
    if (!(fb > fa))
        return;
    size_t i0 = (size_t)fa, i1 = (size_t)fb;
    int cols = (int)ceil(s->right - s->left);
    put(s, "<path fill=\"none\" stroke=\"%s\" stroke-width=\"%.2g\" stroke-linejoin=\"round\" d=\"",
        stroke, width);
    if ((double)(i1 - i0) <= 2.0 * cols) {
        for (size_t k = i0; k < i1; k++)
            put(s, "%c%.1f %.1f", k == i0 ? 'M' : 'L', tf_svg_px(s, t0 + (double)k * dt),
                clampy(s, tf_svg_py(s, y[k])));
    } else {
        /* min/max per pixel column: every extreme stays visible */
        size_t k = i0;
        int first = 1;
        for (int c = 0; c < cols && k < i1; c++) {
            double xe = s->x0 + (s->x1 - s->x0) * (c + 1) / cols;
            /* every column takes at least its first sample, then those before xe */
            const size_t end = column_end(k + 1, i1, t0, dt, xe);
            size_t ilo, ihi;
            column_extremes(y, k, end, &ilo, &ihi);
            const float lo = y[ilo], hi = y[ihi];
            k = end;
            double px = s->left + c + 0.5;
            /* keep the order in time so the path does not zig-zag backwards */
            double ya = ilo <= ihi ? lo : hi, yb = ilo <= ihi ? hi : lo;
            put(s, "%c%.1f %.1fL%.1f %.1f", first ? 'M' : 'L', px, clampy(s, tf_svg_py(s, ya)), px,
                clampy(s, tf_svg_py(s, yb)));
            first = 0;
        }
    }
    put(s, "\"/>\n");
}

void tf_svg_line_xy(tf_svg *s, const double *x, const double *y, size_t n, const char *stroke,
                    int markers)
{
    if (!s->have_axes || !n)
        return;
    size_t step = n > 4000 ? (n + 3999) / 4000 : 1;
    put(s, "<path fill=\"none\" stroke=\"%s\" stroke-width=\"1.5\" d=\"", stroke);
    int first = 1;
    for (size_t k = 0; k < n; k += step) {
        if (!isfinite(x[k]) || !isfinite(y[k])) {
            first = 1;
            continue;
        }
        put(s, "%c%.1f %.1f", first ? 'M' : 'L', tf_svg_px(s, x[k]), clampy(s, tf_svg_py(s, y[k])));
        first = 0;
    }
    put(s, "\"/>\n");
    if (!markers)
        return;
    put(s, "<g fill=\"%s\">", stroke);
    for (size_t k = 0; k < n; k += step)
        if (isfinite(x[k]) && isfinite(y[k]))
            put(s, "<circle cx=\"%.1f\" cy=\"%.1f\" r=\"2.2\"/>", tf_svg_px(s, x[k]),
                clampy(s, tf_svg_py(s, y[k])));
    put(s, "</g>\n");
}

void tf_svg_band(tf_svg *s, double xa, double xb, const char *fill, double opacity)
{
    if (!s->have_axes || !(xb > s->x0) || !(xa < s->x1))
        return;
    double pa = tf_svg_px(s, fmax(xa, s->x0)), pb = tf_svg_px(s, fmin(xb, s->x1));
    put(s, "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" fill=\"%s\" "
        "fill-opacity=\"%.2g\"/>\n", pa, s->top, fmax(pb - pa, 0.5), s->bottom - s->top, fill,
        opacity);
}

void tf_svg_vline(tf_svg *s, double x, const char *stroke, int dashed)
{
    if (!s->have_axes || x < s->x0 || x > s->x1)
        return;
    double px = tf_svg_px(s, x);
    put(s, "<line x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" stroke=\"%s\"%s/>\n", px, s->top,
        px, s->bottom, stroke, dashed ? " stroke-dasharray=\"5 3\"" : "");
}

void tf_svg_hline(tf_svg *s, double y, const char *stroke, int dashed, const char *label)
{
    if (!s->have_axes || y < s->y0 || y > s->y1)
        return;
    double py = tf_svg_py(s, y);
    put(s, "<line x1=\"%.1f\" y1=\"%.1f\" x2=\"%.1f\" y2=\"%.1f\" stroke=\"%s\" "
        "stroke-width=\"1.5\"%s/>\n", s->left, py, s->right, py, stroke,
        dashed ? " stroke-dasharray=\"6 3\"" : "");
    if (label) {
        char esc[256];
        put(s, "<text class=\"note\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"end\" fill=\"%s\">%s</text>\n",
            s->right - 4, py - 4, stroke, tf_svg_escape(esc, sizeof esc, label));
    }
}

void tf_svg_bar(tf_svg *s, double x, double w, double y, const char *fill)
{
    if (!s->have_axes || !isfinite(y))
        return;
    double pa = tf_svg_px(s, x - w / 2), pb = tf_svg_px(s, x + w / 2);
    double base = clampy(s, tf_svg_py(s, s->y0 > 0 ? s->y0 : 0)), top = clampy(s, tf_svg_py(s, y));
    double yy = fmin(base, top), hh = fabs(base - top);
    put(s, "<rect x=\"%.1f\" y=\"%.1f\" width=\"%.1f\" height=\"%.1f\" fill=\"%s\"/>\n", pa, yy,
        fmax(pb - pa, 0.5), fmax(hh, 0.5), fill);
}

void tf_svg_mark(tf_svg *s, double x, const char *stroke)
{
    if (!s->have_axes || x < s->x0 || x > s->x1)
        return;
    double px = tf_svg_px(s, x);
    put(s, "<path d=\"M%.1f %.1fl-4 -8h8z\" fill=\"%s\"/>\n", px, s->bottom, stroke);
}

void tf_svg_xlabel_at(tf_svg *s, double x, const char *text)
{
    if (!s->have_axes)
        return;
    char esc[128];
    put(s, "<text class=\"tick\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\">%s</text>\n",
        tf_svg_px(s, x), s->bottom + 16, tf_svg_escape(esc, sizeof esc, text));
}

void tf_svg_label_top(tf_svg *s, double x, const char *text)
{
    if (!s->have_axes || x < s->x0 || x > s->x1)
        return;
    char esc[128];
    put(s, "<text class=\"note\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\">%s</text>\n",
        tf_svg_px(s, x), s->top + 13, tf_svg_escape(esc, sizeof esc, text));
}

void tf_svg_legend(tf_svg *s, const char *const *labels, const char *const *colours, size_t n)
{
    double x = s->have_axes ? s->legend_x : 74;
    char esc[160];
    for (size_t k = 0; k < n; k++) {
        put(s, "<rect x=\"%.1f\" y=\"8\" width=\"14\" height=\"12\" fill=\"%s\"/>"
            "<text class=\"legend\" x=\"%.1f\" y=\"18\">%s</text>\n", x, colours[k], x + 19,
            tf_svg_escape(esc, sizeof esc, labels[k]));
        x += 30 + 7.0 * (double)strlen(labels[k]);
    }
    s->legend_x = x;
}

const char *tf_svg_finish(tf_svg *s, size_t *len)
{
    if (!s->finished) {
        put(s, "</svg>\n");
        s->finished = 1;
    }
    if (s->failed)
        return NULL;
    if (len)
        *len = s->len;
    return s->buf;
}
