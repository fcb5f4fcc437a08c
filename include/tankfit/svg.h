/* A small SVG plot writer for reports: axes with SI-prefixed labels, min/max
 * decimated waveforms (one vertical span per pixel column), bands, lines, bars. */
#ifndef TANKFIT_SVG_H
#define TANKFIT_SVG_H

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Opaque plot under construction. */
typedef struct tf_svg tf_svg;

/* Data ranges and labels of a plot. Units are base units ("s", "A", "V", "" for
 * plain numbers); the axis label shows the SI prefix chosen for the range, e.g.
 * "time (ms)". y1 > y0 and x1 > x0 required. */
typedef struct tf_svg_axes {
    double x0, x1, y0, y1;
    const char *xlabel, *xunit;
    const char *ylabel, *yunit;
    int xcategory;               /* non-zero: no x ticks (the caller labels bars) */
} tf_svg_axes;

/* New plot of width x height pixels (width 200..4000, height 100..3000) with an
 * accessible title (may be NULL). NULL when out of memory or sizes out of range. */
tf_svg *tf_svg_create(int width, int height, const char *title);

/* Free; NULL is a no-op. */
void tf_svg_destroy(tf_svg *s);

/* Set the data ranges and draw the frame, grid, ticks and axis labels. Must come
 * before anything drawn in data coordinates. Returns -1 on bad ranges. */
int tf_svg_axes_draw(tf_svg *s, const tf_svg_axes *a);

/* Pixel coordinates of data x, y (inside the plot area after tf_svg_axes_draw). */
double tf_svg_px(const tf_svg *s, double x);
double tf_svg_py(const tf_svg *s, double y);

/* Waveform y[k] at x = t0 + k dt for k in [0, n), clipped to the x range: one
 * min/max pair per pixel column, so the output size depends on the width, not
 * on n. stroke: CSS colour. */
void tf_svg_trace(tf_svg *s, const float *y, size_t n, double t0, double dt,
                  const char *stroke, double width);

/* Polyline through (x[k], y[k]); markers non-zero draws a dot at each point
 * (at most 4000 points are drawn; more are decimated by skipping). */
void tf_svg_line_xy(tf_svg *s, const double *x, const double *y, size_t n, const char *stroke,
                    int markers);

/* Vertical band over [xa, xb] across the plot, filled with colour at opacity. */
void tf_svg_band(tf_svg *s, double xa, double xb, const char *fill, double opacity);

/* Vertical / horizontal line at data x / y; dashed non-zero for a dashed line;
 * label (may be NULL) written at its end. */
void tf_svg_vline(tf_svg *s, double x, const char *stroke, int dashed);
void tf_svg_hline(tf_svg *s, double y, const char *stroke, int dashed, const char *label);

/* Bar from y = 0 to y at x with data width w. */
void tf_svg_bar(tf_svg *s, double x, double w, double y, const char *fill);

/* Short tick mark at data x on the bottom edge of the plot (e.g. a firing). */
void tf_svg_mark(tf_svg *s, double x, const char *stroke);

/* Text at data x under the plot area (a category label). */
void tf_svg_xlabel_at(tf_svg *s, double x, const char *text);

/* Text at data x just inside the top of the plot area (a lobe's device name). */
void tf_svg_label_top(tf_svg *s, double x, const char *text);

/* Legend entries (colour swatch and label) in a row above the plot. */
void tf_svg_legend(tf_svg *s, const char *const *labels, const char *const *colours, size_t n);

/* Close the SVG and return its text (owned by s, valid until tf_svg_destroy) and
 * length. NULL when memory ran out at any point while drawing. */
const char *tf_svg_finish(tf_svg *s, size_t *len);

/* Write text with &, <, >, " escaped for XML into buf (size bytes, always
 * NUL-terminated, cut when too long). Returns buf. */
char *tf_svg_escape(char *buf, size_t size, const char *text);

#ifdef __cplusplus
}
#endif
#endif
