/* HTML acceptance report: verdict banner, checks, waveform, turn-off per cycle,
 * burst fit, spectrum, load values, capture facts, safety cautions. */
#include <tankfit/report.h>

#include <math.h>
#include <pthread.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <tankfit/fit.h>
#include <tankfit/siformat.h>
#include <tankfit/svg.h>

/* Okabe-Ito colour-blind-safe palette (M. Okabe and K. Ito, "Color Universal
 * Design", 2008): blue, vermillion, bluish green, orange, reddish purple, sky blue. */
#define C_CURRENT "#0072B2"
#define C_VOLTAGE "#D55E00"
#define C_DIODE "#009E73"
#define C_THYR "#E69F00"
#define C_LIMIT "#CC79A7"
#define C_EXPECT "#56B4E9"
#define C_INK "#222222"

typedef struct hbuf {
    char *b;
    size_t len, cap;
    int failed;
} hbuf;

static void hp(hbuf *h, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

static void hp(hbuf *h, const char *fmt, ...)
{
    if (h->failed)
        return;
    for (;;) {
        va_list ap;
        va_start(ap, fmt);
        int n = vsnprintf(h->b ? h->b + h->len : NULL, h->b ? h->cap - h->len : 0, fmt, ap);
        va_end(ap);
        if (n < 0) {
            h->failed = 1;
            return;
        }
        if (h->b && (size_t)n < h->cap - h->len) {
            h->len += (size_t)n;
            return;
        }
        size_t nc = h->cap * 2 + (size_t)n + 4096;
        char *nb = realloc(h->b, nc);
        if (!nb) {
            h->failed = 1;
            return;
        }
        h->b = nb;
        h->cap = nc;
    }
}

static void hraw(hbuf *h, const char *text, size_t n)
{
    if (h->failed || !text)
        return;
    if (h->len + n + 1 > h->cap) {
        size_t nc = (h->len + n + 1) * 2;
        char *nb = realloc(h->b, nc);
        if (!nb) {
            h->failed = 1;
            return;
        }
        h->b = nb;
        h->cap = nc;
    }
    memcpy(h->b + h->len, text, n);
    h->len += n;
    h->b[h->len] = 0;
}

/* escaped text */
static void ht(hbuf *h, const char *text)
{
    char esc[2048];
    tf_svg_escape(esc, sizeof esc, text ? text : "");
    hraw(h, esc, strlen(esc));
}

static void svg_out(hbuf *h, tf_svg *s)
{
    size_t n = 0;
    const char *t = s ? tf_svg_finish(s, &n) : NULL;
    if (t)
        hraw(h, t, n);
    else
        hp(h, "<p class=\"muted\">(plot not available)</p>");
    tf_svg_destroy(s);
}

static const char *si(char *buf, double v, const char *unit, int digits)
{
    if (!isfinite(v))
        return "&ndash;";
    if (unit && strcmp(unit, "ohm") == 0) {
        tf_si_format(buf, 40, v, "Ω", digits);
        return buf;
    }
    return tf_si_format(buf, 40, v, unit, digits);
}

static const char *check_value_d(char *buf, size_t size, const tf_check *c, double v, int digits)
{
    if (!isfinite(v))
        return "&ndash;";
    if (c->percent)
        snprintf(buf, size, "%.*f %%", digits > 2 ? 2 : 3, 100 * v);
    else if (strcmp(c->id, "mode") == 0)
        snprintf(buf, size, "%s", tf_mode_name((tf_mode)(int)v));
    else if (!c->unit[0])
        tf_si_format(buf, size, v, "", digits);
    else
        si(buf, v, c->unit, digits);
    return buf;
}

static const char *check_value(char *buf, size_t size, const tf_check *c, double v)
{
    return check_value_d(buf, size, c, v, 4);
}

static const char *verdict_class(tf_verdict v)
{
    return v == TF_VERDICT_PASS ? "pass" : v == TF_VERDICT_FAIL ? "fail"
           : v == TF_VERDICT_NOT_EVALUATED ? "ne" : "na";
}

static const char *verdict_word(tf_verdict v)
{
    return v == TF_VERDICT_PASS ? "PASS" : v == TF_VERDICT_FAIL ? "FAIL"
           : v == TF_VERDICT_NOT_EVALUATED ? "NOT EVALUATED" : "not applicable";
}

static const char css[] =
    "<style>\n"
    ":root{--ink:#222;--muted:#5b5b5b;--line:#d0d0d0;--pass:#00734d;--fail:#b3261e;"
    "--ne:#8a5a00;}\n"
    "body{font:15px/1.45 'DejaVu Sans',Arial,sans-serif;color:var(--ink);margin:0;"
    "background:#f4f4f1}\n"
    "main{max-width:1000px;margin:0 auto;padding:18px 26px 40px;background:#fff}\n"
    "h1{font-size:22px;margin:4px 0 10px}h2{font-size:18px;margin:26px 0 8px;"
    "border-bottom:2px solid var(--ink);padding-bottom:3px}h3{font-size:15px;margin:18px 0 6px}\n"
    ".banner{border-radius:6px;padding:14px 18px;color:#fff;margin:8px 0 14px}\n"
    ".banner .word{font-size:34px;font-weight:bold;letter-spacing:1px}\n"
    ".banner.pass{background:var(--pass)}.banner.fail{background:var(--fail)}"
    ".banner.ne{background:var(--ne)}\n"
    ".banner ul{margin:6px 0 0 18px;padding:0}\n"
    "table{border-collapse:collapse;width:100%;margin:6px 0 10px;font-size:13.5px}\n"
    "th,td{border-bottom:1px solid var(--line);padding:4px 6px;text-align:left;"
    "vertical-align:top}\n"
    "table.checks th:nth-child(1){width:21%}table.checks th:nth-child(6){width:30%}\n"
    "th{background:#ecece8}td.num{text-align:right;white-space:nowrap;"
    "font-variant-numeric:tabular-nums}\n"
    ".v{font-weight:bold;white-space:nowrap}.v.pass{color:var(--pass)}.v.fail{color:var(--fail)}"
    ".v.ne{color:var(--ne)}.v.na{color:var(--muted);font-weight:normal}\n"
    "tr.fail td{background:#fbeceb}tr.ne td{background:#fbf4e6}\n"
    ".muted,.key{color:var(--muted)}.key{font-size:12px}\n"
    "code,.hash{font-family:'DejaVu Sans Mono',monospace;font-size:12px;word-break:break-all}\n"
    "dl.facts{display:grid;grid-template-columns:190px 1fr;gap:2px 12px;margin:6px 0}\n"
    "dl.facts dt{color:var(--muted)}dl.facts dd{margin:0}\n"
    "figure{margin:10px 0 16px;break-inside:avoid}figcaption{font-size:13px;color:var(--muted)}\n"
    "svg.plot{width:100%;height:auto;background:#fff}\n"
    "svg .area{fill:#fbfbf9;stroke:#888}svg .grid{stroke:#e3e3e3}svg .zero{stroke:#999}\n"
    "svg text{font-family:'DejaVu Sans',Arial,sans-serif;fill:#222}svg .tick{font-size:11px}"
    "svg .axis{font-size:12.5px}svg .legend{font-size:12px}svg .note{font-size:11px}\n"
    ".safety{border:2px solid var(--fail);border-radius:6px;padding:8px 14px;margin-top:24px}\n"
    ".safety h2{border:0;margin-top:6px;color:var(--fail)}\n"
    "@media print{@page{size:A4;margin:13mm 12mm}body{background:#fff;font-size:10.5pt}"
    "main{max-width:none;padding:0}.banner{-webkit-print-color-adjust:exact;"
    "print-color-adjust:exact}th,tr.fail td,tr.ne td{-webkit-print-color-adjust:exact;"
    "print-color-adjust:exact}h2{break-after:avoid}table{font-size:9pt}"
    "section.capture{break-before:page}section.capture:first-of-type{break-before:auto}}\n"
    "</style>\n";

/* ---------------------------------------------------------------- sections */

static void banner(hbuf *h, const tf_report_info *in, const tf_report_capture *caps, size_t n)
{
    hp(h, "<div class=\"banner %s\" id=\"verdict\"><div class=\"word\">%s</div>",
       verdict_class(in->overall), verdict_word(in->overall));
    const char *what = in->overall == TF_VERDICT_PASS
                           ? "Every check the design asks for passed."
                       : in->overall == TF_VERDICT_FAIL
                           ? "At least one check failed:"
                           : "Nothing failed, but these checks could not be evaluated:";
    hp(h, "<div>%s</div>", what);
    if (in->overall != TF_VERDICT_PASS) {
        hp(h, "<ul>");
        for (size_t k = 0; k < n; k++)
            for (size_t j = 0; j < caps[k].checks->nchecks; j++) {
                const tf_check *c = &caps[k].checks->checks[j];
                if (c->verdict != in->overall)
                    continue;
                hp(h, "<li><b>%s</b>", c->id);
                if (n > 1)
                    hp(h, " (capture %zu)", k + 1);
                hp(h, ": ");
                ht(h, c->reason[0] ? c->reason : c->title);
                hp(h, "</li>");
            }
        hp(h, "</ul>");
    }
    hp(h, "</div>\n");
}

static void run_facts(hbuf *h, const tf_report_info *in)
{
    hp(h, "<dl class=\"facts\">");
    const char *lab[] = {"Unit serial", "Operator", "Test id", "Time (UTC)", "Design file",
                         "Design SHA-256", "Record", "tankfit version", "Notes"};
    const char *val[] = {in->unit_serial, in->operator_name, in->test_id, in->time_utc,
                         in->design_path, in->design_sha256, in->record_name, in->tool_version,
                         in->notes};
    for (int k = 0; k < 9; k++) {
        if (!val[k] || !val[k][0])
            continue;
        hp(h, "<dt>%s</dt><dd%s>", lab[k], k == 5 ? " class=\"hash\"" : "");
        ht(h, val[k]);
        hp(h, "</dd>");
    }
    hp(h, "</dl>\n");
}

static void checks_table(hbuf *h, const tf_check_result *r)
{
    hp(h, "<table class=\"checks\"><thead><tr><th>check</th><th>measured</th><th>limit</th>"
       "<th>design-expected</th><th>verdict</th><th>detail</th></tr></thead><tbody>\n");
    char a[64], b[64], c2[64];
    for (size_t k = 0; k < r->nchecks; k++) {
        const tf_check *c = &r->checks[k];
        hp(h, "<tr class=\"%s\" id=\"check-%s\"><td><b>%s</b><br><span class=\"key\">", verdict_class(c->verdict),
           c->id, c->id);
        ht(h, c->title);
        hp(h, "</span></td><td class=\"num\">%s", check_value(a, sizeof a, c, c->value));
        if (isfinite(c->u) && isfinite(c->value))
            hp(h, "<br><span class=\"key\">&plusmn; %s</span>", check_value_d(b, sizeof b, c, c->u, 2));
        hp(h, "</td><td class=\"num\">");
        if (strcmp(c->id, "mode") == 0 && isfinite(c->limit_lo))
            hp(h, "%s", check_value(a, sizeof a, c, c->limit_lo));
        else if (isfinite(c->limit_lo) && isfinite(c->limit_hi))
            hp(h, "%s &hellip; %s", check_value(a, sizeof a, c, c->limit_lo),
               check_value(b, sizeof b, c, c->limit_hi));
        else if (isfinite(c->limit_lo))
            hp(h, "&ge; %s", check_value(a, sizeof a, c, c->limit_lo));
        else if (isfinite(c->limit_hi))
            hp(h, "&le; %s", check_value(a, sizeof a, c, c->limit_hi));
        else
            hp(h, "&ndash;");
        hp(h, "<br><span class=\"key\">");
        ht(h, c->limit_key);
        hp(h, "</span></td><td class=\"num\">%s</td><td><span class=\"v %s\">%s</span></td><td>",
           check_value(c2, sizeof c2, c, c->expected), verdict_class(c->verdict),
           tf_verdict_name(c->verdict));
        ht(h, c->reason);
        if (c->noffenders) {
            hp(h, "<br><span class=\"key\">cycles: ");
            for (size_t j = 0; j < c->noffenders && j < 8; j++)
                hp(h, "%s%s at %s (%s)", j ? "; " : "", tf_device_name(c->offenders[j].device),
                   si(a, c->offenders[j].time_s, "s", 4),
                   strcmp(c->id, "turnoff-margin") == 0
                       ? si(b, c->offenders[j].value, "s", 4) /* t_off itself */
                       : check_value(b, sizeof b, c, c->offenders[j].value));
            if (c->offenders_total > 8)
                hp(h, "; and %zu more", c->offenders_total - 8);
            hp(h, "</span>");
        }
        hp(h, "</td></tr>\n");
    }
    hp(h, "</tbody></table>\n");
}

static void fix_range(double *lo, double *hi)
{
    if (!isfinite(*lo) || !isfinite(*hi)) {
        *lo = -1;
        *hi = 1;
    }
    if (!(*hi > *lo)) {
        double m = fabs(*lo) > 0 ? fabs(*lo) * 0.1 : 1;
        *lo -= m;
        *hi += m;
    }
    double pad = (*hi - *lo) * 0.06;
    *lo -= pad;
    *hi += pad;
}

static void chan_range(const tf_capture *cap, int idx, size_t i0, size_t i1, double *lo,
                       double *hi)
{
    /* eight lanes, so that the compiler vectorises the pass (NANs are passed over) */
    float mn[8], mx[8];
    for (int j = 0; j < 8; j++) {
        mn[j] = INFINITY;
        mx[j] = -INFINITY;
    }
    const float *x = cap->ch[idx].samples;
    size_t k = i0;
    for (; k + 8 <= i1; k += 8)
        for (int j = 0; j < 8; j++) {
            mn[j] = x[k + j] < mn[j] ? x[k + j] : mn[j];
            mx[j] = x[k + j] > mx[j] ? x[k + j] : mx[j];
        }
    for (; k < i1; k++) {
        mn[0] = x[k] < mn[0] ? x[k] : mn[0];
        mx[0] = x[k] > mx[0] ? x[k] : mx[0];
    }
    for (int j = 1; j < 8; j++) {
        mn[0] = mn[j] < mn[0] ? mn[j] : mn[0];
        mx[0] = mx[j] > mx[0] ? mx[j] : mx[0];
    }
    *lo = mn[0];
    *hi = mx[0];
    fix_range(lo, hi);
}

static const char *lobe_colour(tf_device d)
{
    return tf_device_is_thyristor(d) ? C_THYR : d == TF_DEV_RING ? C_EXPECT : C_DIODE;
}

/* Window of the zoomed waveform: about four firing periods from the first cycle. */
static void zoom_window(const tf_report_capture *rc, double *ta, double *tb)
{
    const tf_capture *cap = rc->cap;
    const tf_segment_result *s = rc->an->seg;
    double t_end = tf_capture_time(cap, cap->n - 1);
    *ta = cap->t0_s;
    *tb = t_end;
    if (s->ncycles >= 2) {
        const tf_cycle *c0 = &s->cycles[0];
        double per = isfinite(c0->period_s) ? c0->period_s : s->cycles[1].start_s - c0->start_s;
        int nper = s->topology == TF_TOPO_SINGLE ? 4 : 2; /* bridges: both thyristors fire */
        double a = c0->start_s - 0.1 * per, b = a + nper * per + 0.2 * per;
        if (a < *ta)
            a = *ta;
        if (b > t_end)
            b = t_end;
        if (b > a) {
            *ta = a;
            *tb = b;
        }
    }
}

/* One waveform plot (pass 0 the load current, pass 1 the output voltage) over the
 * samples [i0, i1) of the window [ta, tb]; g stays NULL when the channel is absent. */
typedef struct wave_job {
    const tf_report_capture *rc;
    int overview, pass;
    double ta, tb;
    size_t i0, i1;
    tf_svg *g;
    int failed;
} wave_job;

static void *wave_plot(void *arg)
{
    wave_job *j = arg;
    const tf_capture *cap = j->rc->cap;
    const tf_segment_result *s = j->rc->an->seg;
    const int pass = j->pass, overview = j->overview;
    const double ta = j->ta, tb = j->tb;
    int idx = pass == 0 ? j->rc->an->roles.current : j->rc->an->roles.voltage;
    if (idx < 0)
        return NULL;
    tf_svg *g = tf_svg_create(920, pass == 0 ? 280 : 220,
                              pass == 0 ? "load current" : "output voltage");
    if (!g) {
        j->failed = 1;
        return NULL;
    }
    double lo, hi;
    chan_range(cap, idx, j->i0, j->i1, &lo, &hi);
    tf_svg_axes ax = {ta, tb, lo, hi, "time", "s",
                      pass == 0 ? "load current" : "output voltage",
                      cap->ch[idx].unit[0] ? cap->ch[idx].unit : "", 0};
    tf_svg_axes_draw(g, &ax);
    if (!overview) {
        for (size_t k = 0; k < s->nlobes; k++) {
            const tf_lobe *l = &s->lobes[k];
            if (l->end_s < ta || l->start_s > tb)
                continue;
            tf_svg_band(g, l->start_s, l->end_s, lobe_colour(l->device),
                        tf_device_is_thyristor(l->device) ? 0.22 : 0.18);
        }
    }
    tf_svg_trace(g, cap->ch[idx].samples, cap->n, cap->t0_s, cap->dt_s,
                 pass == 0 ? C_CURRENT : C_VOLTAGE, 1.4);
    for (size_t k = 0; k < s->nfirings && !overview; k++)
        tf_svg_mark(g, s->firings_s[k], C_INK);
    if (pass == 0 && !overview) {
        const char *labels[] = {"current", "thyristor lobe", "diode lobe", "firing"};
        const char *cols[] = {C_CURRENT, C_THYR, C_DIODE, C_INK};
        tf_svg_legend(g, labels, cols, 4);
    } else {
        const char *labels[] = {pass == 0 ? "current" : "output voltage"};
        const char *cols[] = {pass == 0 ? C_CURRENT : C_VOLTAGE};
        tf_svg_legend(g, labels, cols, 1);
    }
    if (!overview && pass == 0)
        for (size_t k = 0; k < s->nlobes; k++) {
            const tf_lobe *l = &s->lobes[k];
            if (l->start_s < ta || l->end_s > tb || (l->end_s - l->start_s) < (tb - ta) * 0.03)
                continue;
            tf_svg_label_top(g, 0.5 * (l->start_s + l->end_s), tf_device_name(l->device));
        }
    j->g = g;
    return NULL;
}

static void waveform(hbuf *h, const tf_report_capture *rc, int overview)
{
    const tf_capture *cap = rc->cap;
    double ta = cap->t0_s, tb = tf_capture_time(cap, cap->n - 1);
    if (!overview)
        zoom_window(rc, &ta, &tb);
    size_t i0 = (size_t)fmax(0, floor((ta - cap->t0_s) / cap->dt_s));
    size_t i1 = (size_t)fmin((double)cap->n, ceil((tb - cap->t0_s) / cap->dt_s) + 1);
    if (i1 <= i0)
        return;
    wave_job jobs[2];
    for (int p = 0; p < 2; p++)
        jobs[p] = (wave_job){rc, overview, p, ta, tb, i0, i1, NULL, 0};
    /* the two plots of a long window each read every sample of their channel (range and
     * decimation): the voltage's on a second thread; the text is joined in the same order */
    pthread_t th;
    const int threaded = i1 - i0 >= ((size_t)1 << 20) &&
                         pthread_create(&th, NULL, wave_plot, &jobs[1]) == 0;
    wave_plot(&jobs[0]);
    if (threaded)
        pthread_join(th, NULL);
    else
        wave_plot(&jobs[1]);
    for (int p = 0; p < 2; p++) {
        if (jobs[p].failed) {
            h->failed = 1;
            tf_svg_destroy(jobs[0].g);
            tf_svg_destroy(jobs[1].g);
            return;
        }
    }
    for (int p = 0; p < 2; p++)
        if (jobs[p].g)
            svg_out(h, jobs[p].g);
}

static void turnoff_plot(hbuf *h, const tf_report_capture *rc, const tf_design *d)
{
    const tf_segment_result *s = rc->an->seg;
    const tf_check_result *r = rc->checks;
    if (!s->ncycles) {
        hp(h, "<p class=\"muted\">No firing cycle: no turn-off times to show.</p>");
        return;
    }
    double *x = malloc(s->ncycles * sizeof *x), *y = malloc(s->ncycles * sizeof *y);
    double *z = malloc(s->ncycles * sizeof *z);
    if (!x || !y || !z) {
        free(x);
        free(y);
        free(z);
        h->failed = 1;
        return;
    }
    double lo = INFINITY, hi = -INFINITY;
    int have_rb = 0;
    for (size_t k = 0; k < s->ncycles; k++) {
        x[k] = s->cycles[k].start_s;
        y[k] = s->cycles[k].turnoff_available_s;
        z[k] = k < r->ncycles ? r->reverse_s[k] : NAN;
        have_rb |= isfinite(z[k]);
        if (isfinite(y[k])) {
            lo = fmin(lo, y[k]);
            hi = fmax(hi, y[k]);
        }
        if (isfinite(z[k])) {
            lo = fmin(lo, z[k]);
            hi = fmax(hi, z[k]);
        }
    }
    double need = d->turnoff_time_s * (isfinite(d->turnoff_ratio_min) ? d->turnoff_ratio_min : 1);
    if (isfinite(d->turnoff_time_s)) {
        lo = fmin(lo, d->turnoff_time_s);
        hi = fmax(hi, need);
    }
    lo = fmin(lo, 0);
    fix_range(&lo, &hi);
    lo = 0;
    double xa = x[0], xb = x[s->ncycles - 1];
    if (!(xb > xa)) {
        xa -= 1e-4;
        xb += 1e-4;
    }
    double pad = (xb - xa) * 0.03;
    tf_svg *g = tf_svg_create(920, 260, "turn-off time available per cycle");
    if (g) {
        tf_svg_axes ax = {xa - pad, xb + pad, lo, hi, "firing time", "s", "time", "s", 0};
        tf_svg_axes_draw(g, &ax);
        char lab[96], b1[40];
        if (isfinite(need)) {
            snprintf(lab, sizeof lab, "required: t_q x %.3g = %s",
                     isfinite(d->turnoff_ratio_min) ? d->turnoff_ratio_min : 1.0,
                     tf_si_format(b1, sizeof b1, need, "s", 3));
            tf_svg_hline(g, need, C_LIMIT, 1, lab);
            snprintf(lab, sizeof lab, "t_q = %s", tf_si_format(b1, sizeof b1, d->turnoff_time_s, "s", 3));
            tf_svg_hline(g, d->turnoff_time_s, "#888888", 1, lab);
        }
        tf_svg_line_xy(g, x, y, s->ncycles, C_CURRENT, 1);
        if (have_rb)
            tf_svg_line_xy(g, x, z, s->ncycles, C_VOLTAGE, 1);
        const char *labels[] = {"turn-off time available", "time held reverse-biased (T1)",
                                "required"};
        const char *cols[] = {C_CURRENT, C_VOLTAGE, C_LIMIT};
        if (have_rb) {
            tf_svg_legend(g, labels, cols, 3);
        } else {
            const char *l2[] = {labels[0], labels[2]};
            const char *c2[] = {cols[0], cols[2]};
            tf_svg_legend(g, l2, c2, 2);
        }
    }
    svg_out(h, g);
    free(x);
    free(y);
    free(z);
}

static void fit_plot(hbuf *h, const tf_report_capture *rc)
{
    const tf_capture *cap = rc->cap;
    const tf_analysis *an = rc->an;
    if (!an->fit) {
        hp(h, "<p class=\"muted\">No fit: ");
        ht(h, an->fit_error.msg[0] ? an->fit_error.msg : "the fitter did not run");
        hp(h, "</p>");
        return;
    }
    size_t nb = 0;
    const tf_fit_burst *fb = tf_fit_bursts(an->fit, &nb);
    const tf_fit_burst *use = NULL;
    for (size_t k = 0; k < nb && !use; k++)
        if (fb[k].status == TF_FITB_OK)
            use = &fb[k];
    if (!use || use->index >= an->seg->nbursts) {
        hp(h, "<p class=\"muted\">No fitted burst to show.</p>");
        return;
    }
    const tf_burst *b = &an->seg->bursts[use->index];
    size_t i0 = b->i0, i1 = b->i1 <= cap->n ? b->i1 : cap->n;
    if (i1 <= i0 + 8)
        return;
    const float *x = cap->ch[an->roles.current].samples + i0;
    size_t n = i1 - i0;
    tf_dsfit_workspace *w = tf_dsfit_workspace_create();
    tf_dsfit f;
    tf_error err;
    float *model = malloc(n * sizeof *model), *res = malloc(n * sizeof *res);
    if (!w || !model || !res || tf_dsfit_run(w, x, n, cap->dt_s, NULL, &f, &err) != TF_OK) {
        hp(h, "<p class=\"muted\">The burst could not be refitted for the plot.</p>");
        tf_dsfit_workspace_destroy(w);
        free(model);
        free(res);
        return;
    }
    tf_dsfit_workspace_destroy(w);
    double rlo = INFINITY, rhi = -INFINITY;
    for (size_t k = 0; k < n; k++) {
        double t = (double)k * cap->dt_s;
        double m = f.amplitude_a * exp(-f.alpha_per_s * t) * sin(f.wd_rad_s * t + f.phase_rad) +
                   (isfinite(f.offset_a) ? f.offset_a : 0);
        model[k] = (float)m;
        res[k] = (float)(x[k] - m);
        rlo = fmin(rlo, res[k]);
        rhi = fmax(rhi, res[k]);
    }
    double t0 = tf_capture_time(cap, i0), t1 = tf_capture_time(cap, i1 - 1);
    double lo, hi;
    chan_range(cap, an->roles.current, i0, i1, &lo, &hi);
    tf_svg *g = tf_svg_create(920, 250, "damped-sine fit of one burst");
    if (g) {
        tf_svg_axes ax = {t0, t1, lo, hi, "time", "s", "load current", "A", 0};
        tf_svg_axes_draw(g, &ax);
        tf_svg_trace(g, x, n, t0, cap->dt_s, C_CURRENT, 2.4);
        tf_svg_trace(g, model, n, t0, cap->dt_s, C_VOLTAGE, 1.2);
        const char *labels[] = {"measured", "fitted damped sine"};
        const char *cols[] = {C_CURRENT, C_VOLTAGE};
        tf_svg_legend(g, labels, cols, 2);
    }
    svg_out(h, g);
    fix_range(&rlo, &rhi);
    g = tf_svg_create(920, 160, "fit residual");
    if (g) {
        tf_svg_axes ax = {t0, t1, rlo, rhi, "time", "s", "residual", "A", 0};
        tf_svg_axes_draw(g, &ax);
        tf_svg_trace(g, res, n, t0, cap->dt_s, C_INK, 1.0);
    }
    svg_out(h, g);
    char a[40], bb[40], c[40], dd[40];
    hp(h, "<figcaption>Burst %zu at %s: plain damped sine A e<sup>&minus;&alpha;t</sup> "
       "sin(&omega;<sub>d</sub>t + &phi;) fitted to this burst alone for the plot "
       "(f<sub>d</sub> = %s, &alpha; = %s, residual RMS %s). The reported values come from "
       "every burst and model the device drops when the design gives them.</figcaption>",
       use->index + 1, si(a, t0, "s", 4), si(bb, f.wd_rad_s / (2 * M_PI), "Hz", 5),
       si(c, f.alpha_per_s, "1/s", 4), si(dd, f.residual_rms, "A", 3));
    free(model);
    free(res);
}

static const tf_channel_spectrum *spec_of(const tf_analysis *a, const char *role)
{
    if (!a || !a->spec)
        return NULL;
    for (size_t k = 0; k < a->spec->nch; k++)
        if (strcmp(a->spec->ch[k].role, role) == 0)
            return &a->spec->ch[k];
    return NULL;
}

static void spectrum_plot(hbuf *h, const tf_report_capture *rc, const char *role,
                          const char *title, const char *unit)
{
    const tf_channel_spectrum *m = spec_of(rc->an, role), *e = spec_of(rc->expected, role);
    if (!m) {
        if (strcmp(role, "current") == 0) {
            hp(h, "<p class=\"muted\">No spectrum: ");
            ht(h, rc->an->spectrum_error.msg[0] ? rc->an->spectrum_error.msg : "not computed");
            hp(h, "</p>");
        }
        return;
    }
    size_t nh = m->nharm < TF_CHECK_HARMONICS ? m->nharm : TF_CHECK_HARMONICS;
    if (!nh)
        return;
    double hi = 0;
    for (size_t k = 0; k < nh; k++) {
        hi = fmax(hi, m->harm[k].amplitude);
        if (e && k < e->nharm)
            hi = fmax(hi, e->harm[k].amplitude);
    }
    if (!(hi > 0))
        hi = 1;
    tf_svg *g = tf_svg_create(920, 240, title);
    if (g) {
        tf_svg_axes ax = {0.3, (double)nh + 0.7, 0, hi * 1.08, "harmonic number", "",
                          "amplitude (peak)", unit, 1};
        tf_svg_axes_draw(g, &ax);
        int tol = e && e->nharm && strcmp(role, "current") == 0;
        for (size_t k = 0; k < nh; k++) {
            double xh = (double)m->harm[k].n;
            tf_svg_bar(g, xh - (e ? 0.18 : 0), e ? 0.34 : 0.6, m->harm[k].amplitude, C_CURRENT);
            if (e && k < e->nharm)
                tf_svg_bar(g, xh + 0.18, 0.34, e->harm[k].amplitude, C_EXPECT);
            char lab[16];
            snprintf(lab, sizeof lab, "%d", m->harm[k].n);
            tf_svg_xlabel_at(g, xh, lab);
            if (tol && k < e->nharm) {
                /* the agreement limit: expected +/- tolerance x expected fundamental */
                double band = TF_CHECK_HARMONIC_TOLERANCE * e->harm[0].amplitude;
                double up = e->harm[k].amplitude + band;
                double xs[2] = {xh - 0.35, xh + 0.35}, ys[2] = {up, up};
                tf_svg_line_xy(g, xs, ys, 2, C_LIMIT, 0);
            }
        }
        const char *labels[] = {"measured", "design-expected", "upper agreement limit"};
        const char *cols[] = {C_CURRENT, C_EXPECT, C_LIMIT};
        tf_svg_legend(g, labels, cols, e ? (tol ? 3 : 2) : 1);
    }
    svg_out(h, g);
}

static void load_values(hbuf *h, const tf_report_capture *rc, const tf_design *d)
{
    const tf_fit_result *f = rc->an->fit;
    if (!f)
        return;
    char a[40], b[40], c[40];
    hp(h, "<table><thead><tr><th>quantity</th><th>measured</th><th>&plusmn; u</th>"
       "<th>method</th><th>design</th></tr></thead><tbody>");
    struct { const char *name; const tf_estimate *e; const char *unit; double design; } rows[] = {
        {"damped resonant frequency f<sub>d</sub>", &f->damped_frequency_hz, "Hz", tf_check_design_fd(d)},
        {"decay rate &alpha;", &f->decay_per_s, "1/s", d->resistance_ohm / (2 * d->inductance_h)},
        {"quality factor Q", &f->q, "", tf_check_design_q(d)},
        {"inductance L", &f->inductance_h, "H", d->inductance_h},
        {"capacitance C", &f->capacitance_f, "F", d->capacitance_f},
        {"effective resistance R<sub>eff</sub>", &f->resistance_ohm, "ohm", d->resistance_ohm},
        {"R<sub>eff</sub>, v-i identification", &f->vi_r, "ohm", NAN},
        {"R<sub>eff</sub>, power method", &f->power_r, "ohm", NAN},
    };
    for (size_t k = 0; k < sizeof rows / sizeof rows[0]; k++) {
        if (!isfinite(rows[k].e->value))
            continue;
        hp(h, "<tr><td>%s</td><td class=\"num\">%s</td><td class=\"num\">%s</td><td>", rows[k].name,
           rows[k].unit[0] ? si(a, rows[k].e->value, rows[k].unit, 5)
                           : (snprintf(a, sizeof a, "%.4g", rows[k].e->value), a),
           rows[k].unit[0] ? si(b, rows[k].e->u, rows[k].unit, 2)
                           : (isfinite(rows[k].e->u) ? (snprintf(b, sizeof b, "%.2g", rows[k].e->u), b) : "&ndash;"));
        ht(h, rows[k].e->method);
        hp(h, "</td><td class=\"num\">%s</td></tr>",
           rows[k].unit[0] ? si(c, rows[k].design, rows[k].unit, 4)
                           : (isfinite(rows[k].design) ? (snprintf(c, sizeof c, "%.4g", rows[k].design), c) : "&ndash;"));
    }
    if (isfinite(d->coil_resistance_ohm) && isfinite(f->resistance_ohm.value) &&
        f->resistance_ohm.value > 0) {
        double rw = f->resistance_ohm.value - d->coil_resistance_ohm;
        hp(h, "<tr><td>workpiece part R<sub>w</sub> = R<sub>eff</sub> &minus; R<sub>coil</sub></td>"
           "<td class=\"num\">%s</td><td></td><td>design coil resistance %s</td><td></td></tr>",
           si(a, rw, "ohm", 4), si(b, d->coil_resistance_ohm, "ohm", 3));
        hp(h, "<tr><td>coil efficiency R<sub>w</sub> / R<sub>eff</sub></td><td class=\"num\">"
           "%.1f %%</td><td></td><td></td><td></td></tr>", 100 * rw / f->resistance_ohm.value);
    }
    if (isfinite(f->skew_s))
        hp(h, "<tr><td>probe skew (voltage after current)</td><td class=\"num\">%s</td>"
           "<td class=\"num\">%s</td><td>%s</td><td></td></tr>", si(a, f->skew_s, "s", 3),
           si(b, f->skew_u_s, "s", 2), f->skew_method);
    hp(h, "</tbody></table>\n");
    for (size_t k = 0; k < f->nwarnings; k++) {
        hp(h, "<p class=\"muted\">Note: ");
        ht(h, f->warnings[k]);
        hp(h, "</p>");
    }
}

static void compare_table(hbuf *h, const tf_check_result *r, const char *note)
{
    if (note && note[0]) {
        hp(h, "<p class=\"muted\">No design-expected values: ");
        ht(h, note);
        hp(h, "</p>");
    }
    char a[40], b[40], c[40];
    hp(h, "<table><thead><tr><th>quantity</th><th>measured</th><th>design-expected</th>"
       "<th>difference</th></tr></thead><tbody>");
    for (size_t k = 0; k < r->ncompare; k++) {
        const tf_check_compare *q = &r->compare[k];
        double dlt = q->measured - q->expected;
        hp(h, "<tr><td>%s</td><td class=\"num\">%s</td><td class=\"num\">%s</td>"
           "<td class=\"num\">%s", q->label, si(a, q->measured, q->unit, 4),
           si(b, q->expected, q->unit, 4), si(c, dlt, q->unit, 3));
        if (isfinite(dlt) && fabs(q->expected) > 0)
            hp(h, " (%+.1f %%)", 100 * dlt / fabs(q->expected));
        hp(h, "</td></tr>");
    }
    hp(h, "</tbody></table>\n");
}

static void capture_facts(hbuf *h, const tf_report_capture *rc)
{
    const tf_capture *cap = rc->cap;
    const tf_analysis *an = rc->an;
    char a[40], b[40];
    hp(h, "<dl class=\"facts\"><dt>File</dt><dd>");
    ht(h, rc->path);
    hp(h, "</dd><dt>SHA-256</dt><dd class=\"hash\">%s</dd>", rc->sha256 ? rc->sha256 : "");
    hp(h, "<dt>Size</dt><dd>%llu bytes, %s</dd>", rc->bytes, cap->dialect.format);
    hp(h, "<dt>Samples</dt><dd>%zu per channel at %s (%s)</dd>", cap->n,
       si(a, 1.0 / cap->dt_s, "Hz", 4), si(b, (double)cap->n * cap->dt_s, "s", 4));
    hp(h, "<dt>Topology, mode</dt><dd>%s, %s</dd>", tf_topology_name(an->seg->topology),
       tf_mode_name(an->seg->mode));
    hp(h, "<dt>Segmentation</dt><dd>%zu lobes, %zu bursts, %zu firing cycles</dd>",
       an->seg->nlobes, an->seg->nbursts, an->seg->ncycles);
    const tf_check_quality *q = &rc->checks->quality;
    hp(h, "<dt>Samples per resonant period</dt><dd>%.1f</dd>", q->samples_per_period);
    hp(h, "</dl><table><thead><tr><th>channel</th><th>role</th><th>unit</th><th>min</th>"
       "<th>max</th><th>clipped samples</th></tr></thead><tbody>");
    for (size_t k = 0; k < cap->nchan; k++) {
        const tf_channel *ch = &cap->ch[k];
        int ik = (int)k;
        const char *role = ik == an->roles.current ? "load current"
                           : ik == an->roles.voltage ? "output voltage"
                           : ik == an->roles.cap_voltage ? "capacitor voltage"
                           : ik == an->roles.switch_voltage ? "switch voltage (T1)" : "";
        for (int g = 0; g < 4 && !role[0]; g++)
            if (ik == an->roles.gate[g])
                role = g == 0 ? "gate 1" : g == 1 ? "gate 2" : g == 2 ? "gate 3" : "gate 4";
        hp(h, "<tr><td>");
        ht(h, ch->name);
        hp(h, "</td><td>%s</td><td>", role);
        ht(h, ch->unit);
        hp(h, "</td>");
        if (ch->stats_valid)
            hp(h, "<td class=\"num\">%.5g</td><td class=\"num\">%.5g</td><td class=\"num\">%zu</td>",
               ch->stats.min, ch->stats.max, ch->stats.clipped_samples);
        else
            hp(h, "<td></td><td></td><td></td>");
        hp(h, "</tr>");
    }
    hp(h, "</tbody></table>\n");
    const tf_segment_result *s = an->seg;
    if (s->nanomalies) {
        hp(h, "<h3>Anomalies found by the segmenter (%zu)</h3><ul>", s->nanomalies);
        for (size_t k = 0; k < s->nanomalies && k < 12; k++) {
            hp(h, "<li>%s ", si(a, s->anomalies[k].time_s, "s", 4));
            ht(h, s->anomalies[k].kind);
            hp(h, ": ");
            ht(h, s->anomalies[k].text);
            hp(h, "</li>");
        }
        if (s->nanomalies > 12)
            hp(h, "<li>and %zu more (see the record)</li>", s->nanomalies - 12);
        hp(h, "</ul>");
    }
    for (size_t k = 0; k < cap->nwarn; k++) {
        hp(h, "<p class=\"muted\">Import warning: ");
        ht(h, cap->warnings[k]);
        hp(h, "</p>");
    }
}

static void safety(hbuf *h)
{
    hp(h, "<section class=\"safety\" id=\"safety\"><h2>Safety</h2><ul>"
       "<li>These stages run at hundreds of volts, and the tank capacitor stays charged after "
       "the supply is off. Work on the stage only when it is de-energised and its capacitors "
       "are discharged and checked with a meter.</li>"
       "<li>Connect probes only to a de-energised stage. Use differential or isolated probes "
       "rated for the voltage; never float an earthed oscilloscope.</li>"
       "<li>Follow local electrical codes and licensed practice.</li>"
       "<li>The verdicts of this report support, and never replace, the judgement of a "
       "qualified engineer, who signs for the result.</li></ul>"
       "<p>Signature: ______________________________ &nbsp; Date: ______________</p>"
       "</section>\n");
}

static void one_capture(hbuf *h, const tf_report_info *in, const tf_report_capture *rc,
                        size_t k, size_t n)
{
    hp(h, "<section class=\"capture\"><h2>");
    if (n > 1)
        hp(h, "Capture %zu of %zu: ", k + 1, n);
    else
        hp(h, "Capture: ");
    ht(h, rc->path);
    hp(h, " &mdash; <span class=\"v %s\">%s</span></h2>\n", verdict_class(rc->checks->overall),
       tf_verdict_name(rc->checks->overall));
    hp(h, "<h3>Checks</h3>");
    checks_table(h, rc->checks);
    hp(h, "<h3>Waveforms</h3><figure>");
    waveform(h, rc, 0);
    hp(h, "<figcaption>Load current and output voltage over the first firing cycles; lobes "
       "shaded by conducting device (thyristor or diode), triangles mark the firings.</figcaption>"
       "</figure>\n<figure>");
    waveform(h, rc, 1);
    hp(h, "<figcaption>The whole capture (one minimum/maximum pair per pixel column).</figcaption>"
       "</figure>\n");
    hp(h, "<h3>Turn-off time available per cycle</h3><figure>");
    turnoff_plot(h, rc, in->design);
    hp(h, "<figcaption>From each thyristor's current zero to the return of forward voltage, "
       "against t<sub>q</sub> and the required t<sub>q</sub> &times; ratio.</figcaption></figure>\n");
    hp(h, "<h3>Fit over one burst</h3><figure>");
    fit_plot(h, rc);
    hp(h, "</figure>\n<h3>Harmonics</h3><figure>");
    spectrum_plot(h, rc, "current", "current harmonics", "A");
    spectrum_plot(h, rc, "voltage", "output voltage harmonics", "V");
    hp(h, "<figcaption>Whole-period harmonic amplitudes, measured beside the simulated design; "
       "the marks above the expected current bars are the agreement limit of the "
       "current-harmonics check.</figcaption></figure>\n");
    hp(h, "<h3>Load values</h3>");
    load_values(h, rc, in->design);
    hp(h, "<h3>Measured against the design-expected values</h3>");
    compare_table(h, rc->checks, rc->expected ? NULL : in->expected_note);
    hp(h, "<h3>Capture facts</h3>");
    capture_facts(h, rc);
    hp(h, "</section>\n");
}

tf_status tf_report_html(const tf_report_info *in, const tf_report_capture *caps,
                         size_t ncaps, char **html, size_t *len, tf_error *err)
{
    *html = NULL;
    if (len)
        *len = 0;
    if (!in || !in->design || !caps || !ncaps)
        return tf_error_set(err, TF_ERR_USAGE, "report: design and captures required");
    for (size_t k = 0; k < ncaps; k++)
        if (!caps[k].cap || !caps[k].an || !caps[k].an->seg || !caps[k].checks ||
            !caps[k].cap->n)
            return tf_error_set(err, TF_ERR_USAGE, "report: capture %zu incomplete", k + 1);
    hbuf h = {0};
    hp(&h, "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
       "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">"
       "<title>Acceptance report ");
    ht(&h, in->unit_serial && in->unit_serial[0] ? in->unit_serial : "");
    hp(&h, " &mdash; %s</title>\n", tf_verdict_name(in->overall));
    hp(&h, "%s</head><body><main>\n", css);
    hp(&h, "<h1>Acceptance report: ");
    ht(&h, in->unit_serial && in->unit_serial[0] ? in->unit_serial : "(no serial given)");
    hp(&h, "</h1>\n");
    banner(&h, in, caps, ncaps);
    run_facts(&h, in);
    for (size_t k = 0; k < ncaps; k++)
        one_capture(&h, in, &caps[k], k, ncaps);
    safety(&h);
    hp(&h, "<p class=\"muted\">Written by tankfit %s. Colours: Okabe&ndash;Ito colour-blind-safe "
       "palette.</p></main></body></html>\n", in->tool_version ? in->tool_version : "");
    if (h.failed) {
        free(h.b);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory while writing the report");
    }
    *html = h.b;
    if (len)
        *len = h.len;
    return TF_OK;
}
