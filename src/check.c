/* Acceptance checks against the design: turn-off margin, reverse bias, usable
 * frequency, resonance, Q, R, THD, harmonics, peaks, mode, with quality gates. */
#include <tankfit/check.h>

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <tankfit/siformat.h>
#include <tankfit/stats.h>
#include <tankfit/synth_output.h>

const char *tf_verdict_name(tf_verdict v)
{
    switch (v) {
    case TF_VERDICT_PASS: return "pass";
    case TF_VERDICT_FAIL: return "fail";
    case TF_VERDICT_NOT_EVALUATED: return "not-evaluated";
    case TF_VERDICT_NOT_APPLICABLE: return "not-applicable";
    }
    return "not-evaluated";
}

tf_verdict tf_verdict_combine(tf_verdict a, tf_verdict b)
{
    if (a == TF_VERDICT_FAIL || b == TF_VERDICT_FAIL)
        return TF_VERDICT_FAIL;
    if (a == TF_VERDICT_NOT_EVALUATED || b == TF_VERDICT_NOT_EVALUATED)
        return TF_VERDICT_NOT_EVALUATED;
    return TF_VERDICT_PASS;
}

int tf_verdict_exit_code(tf_verdict v)
{
    return v == TF_VERDICT_PASS ? 0 : v == TF_VERDICT_FAIL ? 1 : 2;
}

double tf_check_design_fd(const tf_design *d)
{
    double L = d->inductance_h, C = d->capacitance_f, R = d->resistance_ohm;
    if (!(L > 0) || !(C > 0) || !(R >= 0))
        return NAN;
    double a = R / (2 * L), w0sq = 1.0 / (L * C);
    if (a * a >= w0sq)
        return NAN;
    return sqrt(w0sq - a * a) / (2 * M_PI);
}

double tf_check_design_q(const tf_design *d)
{
    double L = d->inductance_h, C = d->capacitance_f, R = d->resistance_ohm;
    if (!(L > 0) || !(C > 0) || !(R > 0))
        return NAN;
    return sqrt(L / C) / R;
}

int tf_check_reverse_bias(const float *x, size_t n, double t0_s, double dt_s, double t_a,
                          double t_b, double *reverse_s, double *excursion_v)
{
    *reverse_s = NAN;
    *excursion_v = NAN;
    if (!(dt_s > 0) || !(t_b > t_a) || n == 0)
        return -1;
    double fa = ceil((t_a - t0_s) / dt_s), fb = ceil((t_b - t0_s) / dt_s);
    if (fa < 0)
        fa = 0;
    if (fb > (double)n)
        fb = (double)n;
    if (!(fb > fa))
        return -1;
    size_t i0 = (size_t)fa, i1 = (size_t)fb;
    /* sliding mean over about 1 us (odd width), so that probe noise does not
     * chop the interval; never wider than a fifth of the interval */
    size_t w = (size_t)floor(1e-6 / dt_s);
    size_t wmax = (i1 - i0) / 5;
    if (w > wmax)
        w = wmax;
    if (w < 1)
        w = 1;
    size_t h = w / 2;
    w = 2 * h + 1;
    /* the window stays inside the interval: what happens after forward voltage
     * returns is not part of it */
    double sum = 0;
    size_t lo = i0, hi = i0; /* window [lo, hi) */
    size_t below = 0;
    double worst = -INFINITY;
    for (size_t k = i0; k < i1; k++) {
        size_t nlo = k >= i0 + h ? k - h : i0, nhi = k + h + 1 < i1 ? k + h + 1 : i1;
        while (lo < nlo)
            sum -= x[lo++];
        while (hi < nhi)
            sum += x[hi++];
        double m = sum / (double)(hi - lo);
        below += m < 0;
        if (m > worst)
            worst = m;
    }
    *reverse_s = (double)below * dt_s;
    *excursion_v = worst;
    return 0;
}

/* ---------------------------------------------------------------- helpers */

static tf_check *add(tf_check_result *r, const char *id, const char *title, const char *unit)
{
    tf_check *c = &r->checks[r->nchecks++];
    memset(c, 0, sizeof *c);
    snprintf(c->id, sizeof c->id, "%s", id);
    snprintf(c->title, sizeof c->title, "%s", title);
    snprintf(c->unit, sizeof c->unit, "%s", unit);
    c->value = c->u = c->limit_lo = c->limit_hi = c->nominal = c->expected = NAN;
    c->verdict = TF_VERDICT_NOT_EVALUATED;
    return c;
}

static void say(tf_check *c, tf_verdict v, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;

static void say(tf_check *c, tf_verdict v, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(c->reason, sizeof c->reason, fmt, ap);
    va_end(ap);
    c->verdict = v;
}

/* Judge value against [lo, hi] (simple acceptance: the measured value itself). */
static void judge(tf_check *c)
{
    if (!isfinite(c->value)) {
        if (c->verdict != TF_VERDICT_NOT_APPLICABLE && !c->reason[0])
            say(c, TF_VERDICT_NOT_EVALUATED, "no value was measured");
        else
            c->verdict = c->verdict == TF_VERDICT_NOT_APPLICABLE ? c->verdict
                                                                 : TF_VERDICT_NOT_EVALUATED;
        return;
    }
    int ok = (!isfinite(c->limit_lo) || c->value >= c->limit_lo) &&
             (!isfinite(c->limit_hi) || c->value <= c->limit_hi);
    c->verdict = ok ? TF_VERDICT_PASS : TF_VERDICT_FAIL;
}

static int channel_clipped(const tf_capture *cap, int idx)
{
    if (idx < 0 || (size_t)idx >= cap->nchan)
        return 0;
    const tf_channel *ch = &cap->ch[idx];
    if (ch->stats_valid)
        return ch->stats.clipped_samples > 0;
    tf_channel_stats s;
    tf_stats_compute(ch->samples, cap->n, &s);
    return s.clipped_samples > 0;
}

static const tf_channel_spectrum *spectrum_of(const tf_analysis *a, const char *role)
{
    if (!a || !a->spec)
        return NULL;
    for (size_t k = 0; k < a->spec->nch; k++)
        if (strcmp(a->spec->ch[k].role, role) == 0)
            return &a->spec->ch[k];
    return NULL;
}

static double min_turnoff(const tf_segment_result *s, size_t *count)
{
    double m = NAN;
    size_t n = 0;
    for (size_t k = 0; s && k < s->ncycles; k++) {
        double t = s->cycles[k].turnoff_available_s;
        if (!isfinite(t))
            continue;
        n++;
        if (!(t >= m))
            m = t;
    }
    if (count)
        *count = n;
    return m;
}

static double peak_current(const tf_segment_result *s)
{
    double m = NAN;
    for (size_t k = 0; s && k < s->nlobes; k++) {
        double p = fabs(s->lobes[k].peak_a);
        if (isfinite(p) && !(p <= m))
            m = p;
    }
    return m;
}

static double fit_value(const tf_analysis *a, int which, double *u)
{
    *u = NAN;
    if (!a || !a->fit)
        return NAN;
    const tf_estimate *e = which == 0 ? &a->fit->damped_frequency_hz
                           : which == 1 ? &a->fit->q : &a->fit->resistance_ohm;
    *u = e->u;
    return e->value;
}

/* Does the limit exist? Otherwise mark the check not-applicable. */
static int need_limit(tf_check *c, double limit, const char *key)
{
    snprintf(c->limit_key, sizeof c->limit_key, "%s", key);
    if (isfinite(limit))
        return 1;
    say(c, TF_VERDICT_NOT_APPLICABLE, "the design gives no %s", key);
    return 0;
}

/* Quality gates shared by the timing checks. */
static int gate_timing(tf_check *c, const tf_check_quality *q)
{
    if (q->ring_down) {
        say(c, TF_VERDICT_NOT_APPLICABLE, "a ring-down test has no firing sequence to judge");
        return 0;
    }
    if (q->clipped_zeros) {
        say(c, TF_VERDICT_NOT_EVALUATED, "the current channel is clipped at %.3g A, close to "
            "zero: its zero crossings are not trusted", q->current_clip_level_a);
        return 0;
    }
    if (isfinite(q->samples_per_period) && q->samples_per_period < TF_CHECK_MIN_SAMPLES_PER_PERIOD) {
        say(c, TF_VERDICT_NOT_EVALUATED, "%.1f samples per resonant period, fewer than %.0f",
            q->samples_per_period, TF_CHECK_MIN_SAMPLES_PER_PERIOD);
        return 0;
    }
    if (q->cycles < TF_CHECK_MIN_CYCLES) {
        say(c, TF_VERDICT_NOT_EVALUATED, "%zu complete firing cycles, fewer than %d",
            q->cycles, TF_CHECK_MIN_CYCLES);
        return 0;
    }
    return 1;
}

static int gate_fit(tf_check *c, const tf_check_input *in, const tf_check_quality *q)
{
    if (q->clipped_current) {
        say(c, TF_VERDICT_NOT_EVALUATED, "the current channel is clipped; a fit on it is "
            "not trusted");
        return 0;
    }
    if (isfinite(q->samples_per_period) && q->samples_per_period < TF_CHECK_MIN_SAMPLES_PER_PERIOD) {
        say(c, TF_VERDICT_NOT_EVALUATED, "%.1f samples per resonant period, fewer than %.0f",
            q->samples_per_period, TF_CHECK_MIN_SAMPLES_PER_PERIOD);
        return 0;
    }
    if (!in->an->fit) {
        say(c, TF_VERDICT_NOT_EVALUATED, "no fit: %s",
            in->an->fit_error.msg[0] ? in->an->fit_error.msg : "the fitter did not run");
        return 0;
    }
    return 1;
}

static int gate_spectrum(tf_check *c, const tf_check_input *in, const tf_check_quality *q,
                         int clipped, const char *what)
{
    if (clipped) {
        say(c, TF_VERDICT_NOT_EVALUATED, "the %s channel is clipped; its harmonics are not "
            "trusted", what);
        return 0;
    }
    if (q->cycles < TF_CHECK_MIN_CYCLES) {
        say(c, TF_VERDICT_NOT_EVALUATED, "%zu complete firing cycles, fewer than %d",
            q->cycles, TF_CHECK_MIN_CYCLES);
        return 0;
    }
    if (!in->an->spec) {
        say(c, TF_VERDICT_NOT_EVALUATED, "no spectrum: %s",
            in->an->spectrum_error.msg[0] ? in->an->spectrum_error.msg
                                          : "the spectrum did not run");
        return 0;
    }
    return 1;
}

/* ---------------------------------------------------------------- the checks */

static void check_turnoff(tf_check_result *r, const tf_check_input *in)
{
    const tf_design *d = in->design;
    const tf_segment_result *s = in->an->seg;
    tf_check *c = add(r, "turnoff-margin", "shortest turn-off time available / t_q", "");
    if (!need_limit(c, d->turnoff_ratio_min, "limits.turnoff_ratio_min"))
        return;
    c->limit_lo = d->turnoff_ratio_min;
    if (!(d->turnoff_time_s > 0)) {
        say(c, TF_VERDICT_NOT_EVALUATED, "the design gives no switch.turnoff_time (t_q)");
        return;
    }
    if (!gate_timing(c, &r->quality))
        return;
    double tq = d->turnoff_time_s;
    c->value = min_turnoff(s, NULL) / tq;
    /* each boundary is sub-sample; the difference of two has about dt / sqrt(6) */
    c->u = in->cap->dt_s / sqrt(6.0) / tq;
    if (in->expected && in->expected->seg)
        c->expected = min_turnoff(in->expected->seg, NULL) / tq;
    for (size_t k = 0; k < s->ncycles; k++) {
        double t = s->cycles[k].turnoff_available_s;
        if (!isfinite(t) || t / tq >= c->limit_lo)
            continue;
        if (c->noffenders < TF_CHECK_MAX_OFFENDERS)
            c->offenders[c->noffenders++] =
                (tf_check_offender){s->cycles[k].start_s, t, s->cycles[k].thyristor};
        c->offenders_total++;
    }
    judge(c);
    if (c->verdict == TF_VERDICT_FAIL) {
        char b[32];
        say(c, TF_VERDICT_FAIL, "%zu of %zu cycles give less than %.3g x t_q (t_q = %s)",
            c->offenders_total, r->quality.cycles, c->limit_lo,
            tf_si_format(b, sizeof b, tq, "s", 3));
    }
}

static int is_t1(tf_device dev)
{
    return dev == TF_DEV_T1 || dev == TF_DEV_T1T2;
}

static void check_reverse(tf_check_result *r, const tf_check_input *in)
{
    const tf_design *d = in->design;
    const tf_segment_result *s = in->an->seg;
    int sw = in->an->roles.switch_voltage;
    tf_check *c = add(r, "reverse-bias", "shortest time T1 is held reverse-biased in its "
                      "turn-off interval", "s");
    if (!need_limit(c, d->turnoff_ratio_min, "limits.turnoff_ratio_min"))
        return;
    if (sw < 0) {
        say(c, TF_VERDICT_NOT_APPLICABLE, "no switch-voltage channel in the capture");
        return;
    }
    if (!(d->turnoff_time_s > 0)) {
        say(c, TF_VERDICT_NOT_EVALUATED, "the design gives no switch.turnoff_time (t_q)");
        return;
    }
    snprintf(c->limit_key, sizeof c->limit_key, "limits.turnoff_ratio_min x switch.turnoff_time");
    c->limit_lo = d->turnoff_ratio_min * d->turnoff_time_s;
    if (!gate_timing(c, &r->quality))
        return;
    if (r->quality.clipped_switch_voltage) {
        say(c, TF_VERDICT_NOT_EVALUATED, "the switch-voltage channel is clipped");
        return;
    }
    const tf_capture *cap = in->cap;
    double worst_exc = -INFINITY;
    size_t used = 0;
    for (size_t k = 0; k < s->ncycles && k < r->ncycles; k++) {
        const tf_cycle *cy = &s->cycles[k];
        if (!is_t1(cy->thyristor) || !isfinite(cy->turnoff_available_s) ||
            cy->lobe_thyristor >= s->nlobes)
            continue;
        double ta = s->lobes[cy->lobe_thyristor].end_s;
        double rs, ex;
        if (tf_check_reverse_bias(cap->ch[sw].samples, cap->n, cap->t0_s, cap->dt_s, ta,
                                  ta + cy->turnoff_available_s, &rs, &ex) != 0)
            continue;
        r->reverse_s[k] = rs;
        r->excursion_v[k] = ex;
        used++;
        if (!(rs >= c->value))
            c->value = rs;
        if (ex > worst_exc)
            worst_exc = ex;
        if (rs < c->limit_lo) {
            if (c->noffenders < TF_CHECK_MAX_OFFENDERS)
                c->offenders[c->noffenders++] = (tf_check_offender){cy->start_s, rs, cy->thyristor};
            c->offenders_total++;
        }
    }
    if (!used) {
        say(c, TF_VERDICT_NOT_EVALUATED, "no T1 turn-off interval inside the capture");
        return;
    }
    c->u = cap->dt_s;
    judge(c);
    say(c, c->verdict, "%zu T1 intervals; highest switch voltage in them %.3g V%s", used, worst_exc,
        c->verdict == TF_VERDICT_FAIL ? "; forward voltage returns before t_q x ratio" : "");
}

static void check_fmax(tf_check_result *r, const tf_check_input *in)
{
    const tf_design *d = in->design;
    tf_check *c = add(r, "max-frequency", "output frequency against f_max = 1 / (2 t_q)", "Hz");
    if (!need_limit(c, d->turnoff_time_s, "switch.turnoff_time"))
        return;
    c->limit_hi = 1.0 / (2.0 * d->turnoff_time_s);
    if (!gate_timing(c, &r->quality))
        return;
    const tf_stat3 *f = &in->an->seg->output_frequency_hz;
    c->value = f->count ? f->median : NAN;
    if (in->expected && in->expected->seg && in->expected->seg->output_frequency_hz.count)
        c->expected = in->expected->seg->output_frequency_hz.median;
    c->u = in->cap->dt_s / sqrt(6.0) * c->value * c->value;
    judge(c);
}

static void check_tolerance(tf_check_result *r, const tf_check_input *in, int which)
{
    static const char *const ids[] = {"resonant-frequency", "q-factor", "resistance"};
    static const char *const titles[] = {"damped resonant frequency fd of the tank",
                                         "quality factor Q of the tank",
                                         "effective load resistance R_eff"};
    static const char *const units[] = {"Hz", "", "ohm"};
    static const char *const keys[] = {"limits.resonance_tolerance", "limits.q_tolerance",
                                       "limits.resistance_tolerance"};
    const tf_design *d = in->design;
    double tol = which == 0 ? d->resonance_tolerance
                 : which == 1 ? d->q_tolerance : d->resistance_tolerance;
    tf_check *c = add(r, ids[which], titles[which], units[which]);
    if (!need_limit(c, tol, keys[which]))
        return;
    c->nominal = which == 0 ? tf_check_design_fd(d)
                 : which == 1 ? tf_check_design_q(d) : d->resistance_ohm;
    if (!isfinite(c->nominal)) {
        say(c, TF_VERDICT_NOT_EVALUATED, "the design's tank values (capacitance, inductance, "
            "resistance) do not give a nominal value");
        return;
    }
    c->limit_lo = c->nominal * (1 - tol);
    c->limit_hi = c->nominal * (1 + tol);
    if (!gate_fit(c, in, &r->quality))
        return;
    c->value = fit_value(in->an, which, &c->u);
    double u;
    c->expected = fit_value(in->expected, which, &u);
    judge(c);
    if (c->verdict == TF_VERDICT_PASS || c->verdict == TF_VERDICT_FAIL)
        say(c, c->verdict, "%+.2f %% from the design value (method %s)",
            100.0 * (c->value / c->nominal - 1),
            which == 0 ? in->an->fit->damped_frequency_hz.method
            : which == 1 ? in->an->fit->q.method : in->an->fit->resistance_ohm.method);
}

static void check_thd(tf_check_result *r, const tf_check_input *in, int voltage)
{
    const tf_design *d = in->design;
    tf_check *c = add(r, voltage ? "voltage-thd" : "current-thd",
                      voltage ? "total harmonic distortion of the output voltage"
                              : "total harmonic distortion of the load current", "");
    c->percent = 1;
    double lim = voltage ? d->voltage_thd_max : d->current_thd_max;
    if (!need_limit(c, lim, voltage ? "limits.voltage_thd_max" : "limits.current_thd_max"))
        return;
    c->limit_hi = lim;
    if ((voltage ? in->an->roles.voltage : in->an->roles.current) < 0) {
        say(c, TF_VERDICT_NOT_EVALUATED, "no %s channel", voltage ? "output-voltage" : "current");
        return;
    }
    if (!gate_spectrum(c, in, &r->quality,
                       voltage ? r->quality.clipped_voltage : r->quality.clipped_current,
                       voltage ? "output-voltage" : "current"))
        return;
    const char *role = voltage ? "voltage" : "current";
    const tf_channel_spectrum *cs = spectrum_of(in->an, role), *ce = spectrum_of(in->expected, role);
    c->value = cs ? cs->thd : NAN;
    c->expected = ce ? ce->thd : NAN;
    judge(c);
    if (c->verdict != TF_VERDICT_NOT_APPLICABLE && in->an->spec)
        say(c, c->verdict, "harmonics 2..%d over %zu whole periods", in->an->spec->harmonics,
            in->an->spec->periods);
}

static void check_harmonics(tf_check_result *r, const tf_check_input *in)
{
    tf_check *c = add(r, "current-harmonics", "current harmonics 1..15 against the "
                      "design-expected ones", "");
    c->percent = 1;
    snprintf(c->limit_key, sizeof c->limit_key, "tankfit rule (no design key)");
    c->limit_hi = TF_CHECK_HARMONIC_TOLERANCE;
    if (!gate_spectrum(c, in, &r->quality, r->quality.clipped_current, "current"))
        return;
    const tf_channel_spectrum *cs = spectrum_of(in->an, "current");
    const tf_channel_spectrum *ce = spectrum_of(in->expected, "current");
    if (!ce) {
        say(c, TF_VERDICT_NOT_EVALUATED, "no design-expected spectrum: %s",
            in->expected_error && in->expected_error[0] ? in->expected_error
                                                        : "the simulated design has none");
        return;
    }
    if (!cs || !ce->nharm || !(ce->harm[0].amplitude > 0)) {
        say(c, TF_VERDICT_NOT_EVALUATED, "no current harmonics");
        return;
    }
    size_t h = cs->nharm < ce->nharm ? cs->nharm : ce->nharm;
    if (h > TF_CHECK_HARMONICS)
        h = TF_CHECK_HARMONICS;
    double worst = 0;
    int at = 1;
    for (size_t k = 0; k < h; k++) {
        double dev = fabs(cs->harm[k].amplitude - ce->harm[k].amplitude) / ce->harm[0].amplitude;
        if (dev > worst) {
            worst = dev;
            at = cs->harm[k].n;
        }
    }
    c->value = worst;
    c->expected = 0;
    judge(c);
    say(c, c->verdict, "largest at harmonic %d (over %zu harmonics)", at, h);
}

static void check_peak_current(tf_check_result *r, const tf_check_input *in)
{
    const tf_design *d = in->design;
    tf_check *c = add(r, "peak-current", "largest load current peak", "A");
    if (!need_limit(c, d->peak_current_max_a, "limits.peak_current_max"))
        return;
    c->limit_hi = d->peak_current_max_a;
    if (r->quality.clipped_current) {
        say(c, TF_VERDICT_NOT_EVALUATED, "the current channel is clipped: the true peak is "
            "above what was recorded");
        return;
    }
    c->value = peak_current(in->an->seg);
    c->u = in->an->seg->noise_sigma_a;
    c->expected = in->expected ? peak_current(in->expected->seg) : NAN;
    judge(c);
}

static double abs_max(const tf_capture *cap, int idx)
{
    const tf_channel *ch = &cap->ch[idx];
    tf_channel_stats s;
    if (ch->stats_valid)
        s = ch->stats;
    else
        tf_stats_compute(ch->samples, cap->n, &s);
    return fmax(fabs(s.min), fabs(s.max));
}

static void check_cap_voltage(tf_check_result *r, const tf_check_input *in,
                              const tf_capture *ecap)
{
    const tf_design *d = in->design;
    tf_check *c = add(r, "capacitor-voltage", "largest resonant capacitor voltage", "V");
    if (!need_limit(c, d->capacitor_voltage_max_v, "limits.capacitor_voltage_max"))
        return;
    c->limit_hi = d->capacitor_voltage_max_v;
    int idx = in->an->roles.cap_voltage;
    if (idx < 0) {
        say(c, TF_VERDICT_NOT_EVALUATED, "no capacitor-voltage channel in the capture");
        return;
    }
    if (r->quality.clipped_cap_voltage) {
        say(c, TF_VERDICT_NOT_EVALUATED, "the capacitor-voltage channel is clipped");
        return;
    }
    c->value = abs_max(in->cap, idx);
    const tf_channel *ch = &in->cap->ch[idx];
    c->u = ch->stats_valid ? ch->stats.noise_sigma : NAN;
    if (in->expected && ecap && in->expected->roles.cap_voltage >= 0)
        c->expected = abs_max(ecap, in->expected->roles.cap_voltage);
    judge(c);
}

static void check_mode(tf_check_result *r, const tf_check_input *in)
{
    const tf_design *d = in->design;
    tf_check *c = add(r, "mode", "operating mode of the firing sequence", "");
    snprintf(c->limit_key, sizeof c->limit_key, "limits.mode");
    if (d->mode == TF_MODE_ANY || d->mode == TF_MODE_UNKNOWN) {
        say(c, TF_VERDICT_NOT_APPLICABLE, "the design accepts any mode");
        return;
    }
    if (!gate_timing(c, &r->quality))
        return;
    tf_mode m = in->an->seg->mode;
    c->value = (double)m;
    c->limit_lo = c->limit_hi = (double)d->mode;
    if (in->expected && in->expected->seg)
        c->expected = (double)in->expected->seg->mode;
    say(c, m == d->mode ? TF_VERDICT_PASS : TF_VERDICT_FAIL, "%s, design asks %s (%s)",
        tf_mode_name(m), tf_mode_name(d->mode), in->an->seg->mode_evidence);
}

/* ---------------------------------------------------------------- comparison */

static void cmp(tf_check_result *r, const char *id, const char *label, const char *unit,
                double m, double e)
{
    if (r->ncompare >= TF_CHECK_MAX_COMPARE)
        return;
    tf_check_compare *c = &r->compare[r->ncompare++];
    snprintf(c->id, sizeof c->id, "%s", id);
    snprintf(c->label, sizeof c->label, "%s", label);
    snprintf(c->unit, sizeof c->unit, "%s", unit);
    c->measured = m;
    c->expected = e;
}

static double med(const tf_analysis *a, int which)
{
    if (!a || !a->seg)
        return NAN;
    const tf_segment_result *s = a->seg;
    const tf_stat3 *t = which == 0 ? &s->output_frequency_hz : which == 1 ? &s->thyristor_s
                        : which == 2 ? &s->diode_s : &s->dead_s;
    return t->count ? t->median : NAN;
}

static void compare_expected(tf_check_result *r, const tf_check_input *in)
{
    const tf_analysis *m = in->an, *e = in->expected;
    cmp(r, "output_frequency", "output frequency (median)", "Hz", med(m, 0), med(e, 0));
    cmp(r, "thyristor_conduction", "thyristor conduction (median)", "s", med(m, 1), med(e, 1));
    cmp(r, "diode_conduction", "diode conduction (median)", "s", med(m, 2), med(e, 2));
    cmp(r, "dead_time", "dead time (median)", "s", med(m, 3), med(e, 3));
    cmp(r, "turnoff_min", "shortest turn-off time available", "s", min_turnoff(m->seg, NULL),
        e ? min_turnoff(e->seg, NULL) : NAN);
    cmp(r, "peak_current", "largest current peak", "A", peak_current(m->seg),
        e ? peak_current(e->seg) : NAN);
    const tf_channel_spectrum *cs = spectrum_of(m, "current"), *ce = spectrum_of(e, "current");
    cmp(r, "current_rms", "load current RMS", "A", cs ? cs->rms : NAN, ce ? ce->rms : NAN);
    const tf_channel_spectrum *vs = spectrum_of(m, "voltage"), *ve = spectrum_of(e, "voltage");
    cmp(r, "voltage_rms", "output voltage RMS", "V", vs ? vs->rms : NAN, ve ? ve->rms : NAN);
    double pm = m->spec && m->spec->power.valid ? m->spec->power.mean_w : NAN;
    double pe = e && e->spec && e->spec->power.valid ? e->spec->power.mean_w : NAN;
    cmp(r, "power", "mean power into the tank", "W", pm, pe);
    for (int h = 1; h <= 11; h += 2) {
        char id[32], label[48];
        snprintf(id, sizeof id, "current_harmonic_%d", h);
        snprintf(label, sizeof label, "current harmonic %d (peak)", h);
        double a = cs && (size_t)h <= cs->nharm ? cs->harm[h - 1].amplitude : NAN;
        double b = ce && (size_t)h <= ce->nharm ? ce->harm[h - 1].amplitude : NAN;
        cmp(r, id, label, "A", a, b);
    }
}

/* ---------------------------------------------------------------- entry */

static void quality(tf_check_result *r, const tf_check_input *in)
{
    const tf_analysis *a = in->an;
    tf_check_quality *q = &r->quality;
    double fd = a->fit && isfinite(a->fit->damped_frequency_hz.value)
                    ? a->fit->damped_frequency_hz.value
                    : a->seg && isfinite(a->seg->damped_frequency_hz) ? a->seg->damped_frequency_hz
                                                                       : tf_check_design_fd(in->design);
    q->samples_per_period = fd > 0 ? 1.0 / (fd * in->cap->dt_s) : NAN;
    min_turnoff(a->seg, &q->cycles);
    q->ring_down = in->design->topology == TF_TOPO_RING_DOWN ||
                   (a->seg && a->seg->topology == TF_TOPO_RING_DOWN);
    q->clipped_current = channel_clipped(in->cap, a->roles.current) ||
                         (a->seg && a->seg->clipped_stretches > 0);
    q->current_clip_level_a = NAN;
    if (q->clipped_current && a->roles.current >= 0) {
        const tf_channel *ch = &in->cap->ch[a->roles.current];
        tf_channel_stats st;
        if (ch->stats_valid)
            st = ch->stats;
        else
            tf_stats_compute(ch->samples, in->cap->n, &st);
        double lvl = INFINITY;
        if (st.clipped_high)
            lvl = fmin(lvl, fabs(st.max));
        if (st.clipped_low)
            lvl = fmin(lvl, fabs(st.min));
        if (!st.clipped_high && !st.clipped_low) /* only the segmenter saw it */
            lvl = fmin(fabs(st.max), fabs(st.min));
        q->current_clip_level_a = lvl;
        double band = a->seg ? a->seg->band_a : NAN;
        q->clipped_zeros = !(isfinite(band) && band > 0) ||
                           lvl < TF_CHECK_CLIP_BAND_FACTOR * band;
    }
    q->clipped_voltage = channel_clipped(in->cap, a->roles.voltage);
    q->clipped_cap_voltage = channel_clipped(in->cap, a->roles.cap_voltage);
    q->clipped_switch_voltage = channel_clipped(in->cap, a->roles.switch_voltage);
}

static tf_status evaluate(const tf_check_input *in, const tf_capture *ecap,
                          tf_check_result **out, tf_error *err)
{
    *out = NULL;
    if (!in || !in->design || !in->cap || !in->an || !in->an->seg)
        return tf_error_set(err, TF_ERR_USAGE, "check: design, capture and analysis required");
    tf_check_result *r = calloc(1, sizeof *r);
    if (!r)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    r->ncycles = in->an->seg->ncycles;
    size_t nc = r->ncycles ? r->ncycles : 1;
    r->reverse_s = malloc(nc * sizeof *r->reverse_s);
    r->excursion_v = malloc(nc * sizeof *r->excursion_v);
    if (!r->reverse_s || !r->excursion_v) {
        tf_check_free(r);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    for (size_t k = 0; k < nc; k++)
        r->reverse_s[k] = r->excursion_v[k] = NAN;
    quality(r, in);
    check_turnoff(r, in);
    check_reverse(r, in);
    check_fmax(r, in);
    for (int w = 0; w < 3; w++)
        check_tolerance(r, in, w);
    check_thd(r, in, 0);
    check_thd(r, in, 1);
    check_harmonics(r, in);
    check_peak_current(r, in);
    check_cap_voltage(r, in, ecap);
    check_mode(r, in);
    compare_expected(r, in);
    r->overall = TF_VERDICT_PASS;
    for (size_t k = 0; k < r->nchecks; k++)
        r->overall = tf_verdict_combine(r->overall, r->checks[k].verdict);
    *out = r;
    return TF_OK;
}

tf_status tf_check_evaluate(const tf_check_input *in, tf_check_result **out, tf_error *err)
{
    return evaluate(in, in ? in->expected_cap : NULL, out, err);
}

void tf_check_free(tf_check_result *r)
{
    if (!r)
        return;
    free(r->reverse_s);
    free(r->excursion_v);
    free(r);
}

tf_status tf_check_expected_run(const tf_design *d, const tf_analysis_options *opt,
                                tf_capture **cap, tf_analysis **an, tf_error *err)
{
    *cap = NULL;
    *an = NULL;
    tf_status st = tf_design_validate(d, 1, err);
    if (st != TF_OK)
        return st;
    st = tf_synth_to_capture(d, 1, cap, NULL, err);
    if (st != TF_OK)
        return st;
    tf_analysis_options o = *opt;
    memset(&o.roles, 0, sizeof o.roles);
    static const tf_synth_channel chans[] = {TF_SYN_I_LOAD, TF_SYN_V_OUT, TF_SYN_V_C,
                                             TF_SYN_V_AK1, TF_SYN_G1, TF_SYN_G2, TF_SYN_G3,
                                             TF_SYN_G4};
    const char **slot[] = {&o.roles.current, &o.roles.voltage, &o.roles.cap_voltage,
                           &o.roles.switch_voltage, &o.roles.gate[0], &o.roles.gate[1],
                           &o.roles.gate[2], &o.roles.gate[3]};
    for (size_t k = 0; k < 8; k++) {
        const char *name = tf_synth_channel_name(chans[k]);
        if (tf_capture_find(*cap, name) >= 0)
            *slot[k] = name;
    }
    st = tf_analysis_run(*cap, d, &o, an, err);
    if (st != TF_OK) {
        tf_capture_destroy(*cap);
        *cap = NULL;
    }
    return st;
}
