/* Synchronous harmonic analysis and power over whole periods: choose M periods, resample
 * to S points per period (cubic), fold, one S-point FFT per channel (docs/spectrum.md). */
#include <tankfit/spectrum.h>
#include <tankfit/stats.h>

#include "spectrum_internal.h"

#include <float.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MAX_CH TF_SP_MAX_CH
#define MAX_THREADS TF_SP_MAX_THREADS

/* Per analysed channel working state. */
typedef struct work {
    int idx;
    const char *role;
    const float *x;
    double shift_s;      /* read at t + shift_s */
    double pos0;         /* fractional sample index of the window start */
    double *fold;        /* S sums, one per point of the period */
    double sumsq;        /* sum of squares of the resampled window */
    double peak;         /* largest |raw sample| in the window */
    double complex *ph;  /* H + 1 phasors (index h) referred to the window start */
    double *fh;          /* frequency of each phasor */
} work;

void tf_spectrum_options_init(tf_spectrum_options *o)
{
    memset(o, 0, sizeof *o);
    o->harmonics = 40;
}

void tf_spectrum_free(tf_spectrum_result *r)
{
    if (!r)
        return;
    for (size_t c = 0; c < r->nch; c++)
        free(r->ch[c].harm);
    free(r->ch);
    free(r->power.harm);
    free(r);
}

static double wrap_deg(double rad)
{
    double d = fmod(rad * 180.0 / M_PI, 360.0);
    if (d > 180.0)
        d -= 360.0;
    else if (d <= -180.0)
        d += 360.0;
    return d;
}

static int cmp_double(const void *a, const void *b)
{
    const double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* The fundamental and where it came from. */
static tf_status pick_fundamental(const tf_capture *cap, const tf_segment_result *seg,
                                  const tf_spectrum_options *opt, int ref, double *f,
                                  char *source, tf_error *err)
{
    if (opt->fundamental_hz > 0.0) {
        *f = opt->fundamental_hz;
        strcpy(source, "option");
        return TF_OK;
    }
    if (seg && seg->ncycles > 0) {
        /* mean of the periods within 5 % of their median: a missing firing
         * makes one period twice as long and must not bias the rest */
        double *p = malloc(sizeof(double) * seg->ncycles);
        size_t np = 0;
        for (size_t c = 0; p && c < seg->ncycles; c++)
            if (isfinite(seg->cycles[c].period_s) && seg->cycles[c].period_s > 0.0)
                p[np++] = seg->cycles[c].period_s;
        double sum = 0.0;
        size_t k = 0;
        if (np > 0) {
            qsort(p, np, sizeof *p, cmp_double);
            const double med = np % 2 ? p[np / 2] : 0.5 * (p[np / 2 - 1] + p[np / 2]);
            for (size_t c = 0; c < np; c++)
                if (fabs(p[c] - med) <= 0.05 * med) {
                    sum += p[c];
                    k++;
                }
        }
        free(p);
        if (k > 0) {
            *f = (double)k / sum;
            strcpy(source, "segmenter");
            return TF_OK;
        }
    }
    tf_status st = tf_spectrum_estimate_fundamental(cap->ch[ref].samples, cap->n, cap->dt_s, f, err);
    if (st != TF_OK) {
        char why[TF_ERROR_MSG_SIZE / 2] = "";
        if (err)
            memcpy(why, err->msg, sizeof why - 1);
        return tf_error_set(err, st, "channel '%s': cannot estimate the fundamental: %s",
                            cap->ch[ref].name, why);
    }
    strcpy(source, "estimated");
    return TF_OK;
}

/* Synchronous phasors: FFT of the folded period; exactly bins M h of the
 * M S-point DFT of the whole resampled window. */
static tf_status sync_phasors(work *w, size_t M, size_t S, int H, double f, double *dc,
                              double *msq_periodic, tf_error *err)
{
    double *p = fftw_malloc(sizeof(double) * S);
    fftw_complex *X = fftw_malloc(sizeof(fftw_complex) * (S / 2 + 1));
    fftw_plan plan = tf_sp_plan_r2c(S);
    if (!p || !X || !plan) {
        fftw_free(p);
        fftw_free(X);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory for a %zu-point FFT", S);
    }
    double ms = 0.0;
    for (size_t s = 0; s < S; s++) {
        p[s] = w->fold[s] / (double)M;
        ms += p[s] * p[s];
    }
    fftw_execute_dft_r2c(plan, p, X);
    *dc = creal(X[0]) / (double)S;
    *msq_periodic = ms / (double)S;
    w->ph[0] = *dc;
    w->fh[0] = 0.0;
    for (int h = 1; h <= H; h++) {
        w->ph[h] = 2.0 * X[h] / (double)S;
        w->fh[h] = h * f;
    }
    fftw_free(p);
    fftw_free(X);
    return TF_OK;
}

/* Length of the Hann transform: at most count, of the form 2^a m with a small odd m
 * (FFTW_ESTIMATE plans such lengths well: about 2.5x faster than a general
 * 7-smooth length near 10^7 points on this machine); short windows take the
 * largest 7-smooth length. */
static size_t hann_length(size_t count)
{
    static const size_t odd[] = {1, 3, 5, 7, 9, 15};
    if (count < 4096)
        return tf_spectrum_smooth_down(count);
    size_t best = 0;
    for (int i = 0; i < 6; i++) {
        size_t L = odd[i];
        while (L * 2 <= count)
            L *= 2;
        if (L > best)
            best = L;
    }
    return best;
}

/* Hann-window phasors on the raw samples of the window (non-synchronous). */
static tf_status hann_phasors(const tf_capture *cap, work *w, double t_a, size_t count, int H,
                              double f, size_t *used, tf_error *err)
{
    long k0 = (long)ceil(w->pos0 - 1e-9);
    if (k0 < 0)
        k0 = 0;
    if ((size_t)k0 + count > cap->n)
        count = cap->n - (size_t)k0;
    const size_t L = hann_length(count);
    double *buf = fftw_malloc(sizeof(double) * L);
    fftw_complex *X = fftw_malloc(sizeof(fftw_complex) * (L / 2 + 1));
    fftw_plan plan = tf_sp_plan_r2c(L);
    if (!buf || !X || !plan) {
        fftw_free(buf);
        fftw_free(X);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory for a %zu-point FFT", L);
    }
    *used = L;
    for (size_t k = 0; k < L; k++)
        buf[k] = w->x[(size_t)k0 + k];
    tf_sp_hann_apply(buf, L);
    fftw_execute_dft_r2c(plan, buf, X);
    const double dt = cap->dt_s, tk0 = tf_capture_time(cap, (size_t)k0);
    /* harmonics lie f L dt bins apart: search at most a third of that around each */
    const double spacing = f * (double)L * dt;
    const int search = spacing >= 6.0 ? 2 : (spacing >= 3.0 ? 1 : 0);
    for (int h = 1; h <= H; h++) {
        double nu, amp, phase;
        if (tf_sp_hann_peak(X, L, h * f * (double)L * dt, search, &nu, &amp, &phase) != 0) {
            nu = h * f * (double)L * dt;
            amp = 0.0;
            phase = 0.0;
        }
        const double fh = nu / ((double)L * dt);
        /* refer the phase to the window start in corrected time */
        phase += 2.0 * M_PI * fh * (t_a + w->shift_s - tk0);
        w->ph[h] = amp * cexp(I * phase);
        w->fh[h] = fh;
    }
    fftw_free(buf);
    fftw_free(X);
    return TF_OK;
}

/* Minimum, median and maximum of the energies of the cycles integrated by the pass. */
static void cycle_energies(double *e, size_t ncycles, tf_power *pw)
{
    pw->cycle_energy_min_j = pw->cycle_energy_median_j = pw->cycle_energy_max_j = NAN;
    pw->cycles = 0;
    size_t ne = 0;
    for (size_t c = 0; e && c < ncycles; c++)
        if (!isnan(e[c]))
            e[ne++] = e[c];
    if (ne > 0) {
        qsort(e, ne, sizeof *e, cmp_double);
        pw->cycle_energy_min_j = e[0];
        pw->cycle_energy_max_j = e[ne - 1];
        pw->cycle_energy_median_j = ne % 2 ? e[ne / 2] : 0.5 * (e[ne / 2 - 1] + e[ne / 2]);
        pw->cycles = ne;
    }
}

static tf_status check_inputs(const tf_capture *cap, const tf_roles *roles,
                              const tf_spectrum_options *opt, tf_error *err)
{
    if (!cap || !roles)
        return tf_error_set(err, TF_ERR_USAGE, "spectrum: no capture or roles given");
    if (opt->harmonics < 1 || opt->harmonics > TF_SPECTRUM_MAX_HARMONICS)
        return tf_error_set(err, TF_ERR_USAGE, "harmonics: expected 1..%d, found %d",
                            TF_SPECTRUM_MAX_HARMONICS, opt->harmonics);
    if (!isfinite(opt->fundamental_hz) || opt->fundamental_hz < 0.0)
        return tf_error_set(err, TF_ERR_USAGE,
                            "fundamental: expected a positive frequency, found %g",
                            opt->fundamental_hz);
    if (opt->threads < 0 || opt->threads > MAX_THREADS)
        return tf_error_set(err, TF_ERR_USAGE, "threads: expected 0..%d, found %d", MAX_THREADS,
                            opt->threads);
    if (!isfinite(opt->skew_s) || fabs(opt->skew_s) >= 1e-3)
        return tf_error_set(err, TF_ERR_USAGE, "skew: expected |skew| < 1 ms, found %g s",
                            opt->skew_s);
    if (!(cap->dt_s > 0.0) || cap->n < 8)
        return tf_error_set(err, TF_ERR_DATA,
                            "spectrum: the capture holds %zu samples, at least 8 are needed",
                            cap->n);
    return TF_OK;
}

/* Channels with a role, in a fixed order, and the phase reference. */
static int collect(const tf_capture *cap, const tf_roles *roles, work *w, int *ref, int *iv,
                   int *ii)
{
    const int idx[MAX_CH] = {roles->current, roles->voltage, roles->cap_voltage};
    static const char *const names[MAX_CH] = {"current", "voltage", "cap_voltage"};
    int nw = 0;
    *iv = *ii = -1;
    for (int r = 0; r < MAX_CH; r++) {
        if (idx[r] < 0 || (size_t)idx[r] >= cap->nchan || !cap->ch[idx[r]].samples)
            continue;
        w[nw].idx = idx[r];
        w[nw].role = names[r];
        w[nw].x = cap->ch[idx[r]].samples;
        if (r == 0)
            *ii = nw;
        if (r == 1)
            *iv = nw;
        nw++;
    }
    *ref = *iv >= 0 ? *iv : 0;
    return nw;
}

static void free_work(work *w, int nw)
{
    for (int c = 0; c < nw; c++) {
        free(w[c].fold);
        free(w[c].ph);
        free(w[c].fh);
    }
}

/* Fill one channel's result from its phasors. */
static tf_status fill_channel(const tf_capture *cap, const work *w, const work *ref, int H,
                              double dc, double rms, double msq_periodic,
                              tf_channel_spectrum *cs, tf_error *err)
{
    cs->channel = w->idx;
    snprintf(cs->role, sizeof cs->role, "%s", w->role);
    snprintf(cs->name, sizeof cs->name, "%s", cap->ch[w->idx].name);
    snprintf(cs->unit, sizeof cs->unit, "%s", cap->ch[w->idx].unit);
    cs->harm = calloc((size_t)H, sizeof *cs->harm);
    if (!cs->harm)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    cs->nharm = (size_t)H;
    const double ref1 = carg(ref->ph[1]);
    double sum2 = 0.0;
    for (int h = 1; h <= H; h++) {
        tf_harmonic *hm = &cs->harm[h - 1];
        hm->n = h;
        hm->amplitude = cabs(w->ph[h]);
        hm->rms = hm->amplitude / M_SQRT2;
        hm->phase_deg = wrap_deg(carg(w->ph[h]) - h * ref1);
        hm->frequency_hz = w->fh[h];
        if (h >= 2)
            sum2 += hm->amplitude * hm->amplitude;
    }
    cs->dc = dc;
    cs->rms = rms;
    cs->peak = w->peak;
    cs->crest_factor = rms > 0.0 ? w->peak / rms : NAN;
    cs->thd = cs->harm[0].amplitude > 0.0 ? sqrt(sum2) / cs->harm[0].amplitude : NAN;
    const double ap = rms * rms - msq_periodic;
    cs->aperiodic_rms = ap > 0.0 ? sqrt(ap) : 0.0;
    cs->shift_s = w->shift_s;
    const tf_channel *ch = &cap->ch[w->idx];
    if (ch->stats_valid) {
        cs->clipped_samples = ch->stats.clipped_samples;
    } else {
        tf_channel_stats st;
        tf_stats_compute(ch->samples, cap->n, &st);
        cs->clipped_samples = st.clipped_samples;
    }
    return TF_OK;
}

static tf_status fill_power(const work *wv, const work *wi, int H, double f, double vi_mean,
                            double v_rms, double i_rms, double dcv, double dci, double skew,
                            tf_power *pw, tf_error *err)
{
    pw->harm = calloc((size_t)H, sizeof *pw->harm);
    if (!pw->harm)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    pw->nharm = (size_t)H;
    pw->valid = 1;
    pw->mean_w = vi_mean;
    pw->v_rms = v_rms;
    pw->i_rms = i_rms;
    pw->apparent_va = v_rms * i_rms;
    pw->power_factor = pw->apparent_va > 0.0 ? vi_mean / pw->apparent_va : NAN;
    pw->displacement_factor = (cabs(wv->ph[1]) > 0.0 && cabs(wi->ph[1]) > 0.0)
                                  ? cos(carg(wv->ph[1]) - carg(wi->ph[1]))
                                  : NAN;
    pw->energy_per_cycle_j = vi_mean / f;
    pw->dc_w = dcv * dci;
    pw->skew_s = skew;
    for (int h = 1; h <= H; h++) {
        /* V_rms I_rms cos(dphi) = Re(V conj(I)) / 2 with peak phasors */
        pw->harm[h - 1].n = h;
        pw->harm[h - 1].mean_w = 0.5 * creal(wv->ph[h] * conj(wi->ph[h]));
    }
    return TF_OK;
}

/* Window geometry: S, M and start time shared by every channel. */
typedef struct geometry {
    double T, tau, step, t_a;
    size_t S, M;
} geometry;

static tf_status choose_geometry(const tf_capture *cap, double f, int H, double lo_shift,
                                 double hi_shift, geometry *g, tf_error *err)
{
    const double dt = cap->dt_s;
    g->T = 1.0 / f;
    double r = g->T / dt;
    if (fabs(r - round(r)) < 1e-9 * r)
        r = round(r);
    size_t need = (size_t)ceil(r);
    if (need < (size_t)(2 * H + 2))
        need = (size_t)(2 * H + 2);
    if (need < 8)
        need = 8;
    g->S = tf_spectrum_smooth_up(need);
    g->tau = g->T / (double)g->S;
    g->step = g->tau / dt;
    /* every channel, read at t + shift, must stay inside the record; the last
     * point may lie up to half a sample past the last sample (a capture of
     * exactly M periods ends one sample before the M-th period does) */
    g->t_a = cap->t0_s - lo_shift;
    const double t_last = tf_capture_time(cap, cap->n - 1) + 0.5 * dt - hi_shift;
    const double avail = t_last - g->t_a;
    const double periods = (avail + g->tau) / g->T;
    if (!(periods >= 1.0 - 1e-9))
        return tf_error_set(err, TF_ERR_DATA,
                            "the capture (%g s) holds %.3g periods of %g Hz; at least one whole "
                            "period is needed",
                            (double)cap->n * dt, periods > 0 ? periods : 0.0, f);
    g->M = (size_t)floor(periods + 1e-9);
    if (g->M > SIZE_MAX / g->S)
        return tf_error_set(err, TF_ERR_DATA, "capture too long to analyse");
    return TF_OK;
}

static tf_status analyse(const tf_capture *cap, const tf_segment_result *seg,
                         const tf_spectrum_options *opt, work *w, int nw, int ref, int iv,
                         int ii, tf_spectrum_result *r, tf_error *err)
{
    const double dt = cap->dt_s, fs = 1.0 / dt;
    const double f = r->fundamental_hz;
    if (!(f > 0.0) || !isfinite(f) || f >= 0.5 * fs)
        return tf_error_set(err, TF_ERR_DATA,
                            "fundamental %g Hz is not below the Nyquist frequency %g Hz", f,
                            0.5 * fs);
    int hmax = (int)fmin((double)TF_SPECTRUM_MAX_HARMONICS, ceil(0.5 * fs / f - 1e-9) - 1.0);
    if (hmax < 1)
        hmax = 1;
    int H = opt->harmonics;
    if (H > hmax) {
        H = hmax;
        r->harmonics_capped = 1;
    }
    r->harmonics = H;
    double lo = 0.0, hi = 0.0;
    for (int c = 0; c < nw; c++) {
        w[c].shift_s = (c == iv && ii >= 0) ? opt->skew_s : 0.0;
        lo = fmin(lo, w[c].shift_s);
        hi = fmax(hi, w[c].shift_s);
    }
    geometry g = {0};
    tf_status st = choose_geometry(cap, f, H, lo, hi, &g, err);
    if (st != TF_OK)
        return st;
    r->periods = g.M;
    r->samples_per_period = g.S;
    r->resample_step_s = g.tau;
    r->window_start_s = g.t_a;
    r->transform_length = g.S;
    r->window = opt->window != 0;
    const size_t N = g.M * g.S;
    for (int c = 0; c < nw; c++) {
        w[c].pos0 = (g.t_a + w[c].shift_s - cap->t0_s) / dt;
        w[c].fold = calloc(g.S, sizeof(double));
        w[c].ph = calloc((size_t)H + 1, sizeof(double complex));
        w[c].fh = calloc((size_t)H + 1, sizeof(double));
        if (!w[c].fold || !w[c].ph || !w[c].fh)
            return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    const int power = iv >= 0 && ii >= 0;
    double *energy = NULL;
    tf_sp_channel sc[MAX_CH];
    for (int c = 0; c < nw; c++)
        sc[c] = (tf_sp_channel){w[c].x, w[c].pos0, w[c].fold, 0.0, 0.0};
    const double vi = tf_sp_pass(cap, sc, nw, g.M, g.S, g.step, power ? iv : -1, ii, seg,
                                 opt->skew_s, opt->threads, &energy);
    for (int c = 0; c < nw; c++) {
        w[c].sumsq = sc[c].sumsq;
        w[c].peak = sc[c].peak;
    }
    if (isnan(vi))
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    double dc[MAX_CH], msq[MAX_CH];
    for (int c = 0; c < nw && st == TF_OK; c++) {
        st = sync_phasors(&w[c], g.M, g.S, H, f, &dc[c], &msq[c], err);
        if (st == TF_OK && r->window) {
            st = hann_phasors(cap, &w[c], g.t_a, (size_t)floor((double)N * g.step) + 1, H, f,
                              &r->transform_length, err);
        }
    }
    if (st == TF_OK) {
        r->ch = calloc((size_t)nw, sizeof *r->ch);
        if (!r->ch)
            st = tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    if (st != TF_OK) {
        free(energy);
        return st;
    }
    r->reference_channel = w[ref].idx;
    r->nch = (size_t)nw;
    for (int c = 0; c < nw && st == TF_OK; c++)
        st = fill_channel(cap, &w[c], &w[ref], H, dc[c], sqrt(w[c].sumsq / (double)N), msq[c],
                          &r->ch[c], err);
    if (st == TF_OK && power) {
        st = fill_power(&w[iv], &w[ii], H, f, vi / (double)N, sqrt(w[iv].sumsq / (double)N),
                        sqrt(w[ii].sumsq / (double)N), dc[iv], dc[ii], opt->skew_s, &r->power,
                        err);
        if (st == TF_OK)
            cycle_energies(energy, seg ? seg->ncycles : 0, &r->power);
    }
    free(energy);
    return st;
}

tf_status tf_spectrum_run(const tf_capture *cap, const tf_roles *roles,
                          const tf_segment_result *seg, const tf_spectrum_options *opt,
                          tf_spectrum_result **out, tf_error *err)
{
    tf_spectrum_options defaults;
    if (out)
        *out = NULL;
    if (!opt) {
        tf_spectrum_options_init(&defaults);
        opt = &defaults;
    }
    if (!out)
        return tf_error_set(err, TF_ERR_USAGE, "spectrum: no output given");
    tf_status st = check_inputs(cap, roles, opt, err);
    if (st != TF_OK)
        return st;
    work w[MAX_CH];
    memset(w, 0, sizeof w);
    int ref, iv, ii;
    const int nw = collect(cap, roles, w, &ref, &iv, &ii);
    if (nw == 0)
        return tf_error_set(err, TF_ERR_DATA,
                            "spectrum: no current, voltage or capacitor-voltage channel");
    tf_spectrum_result *r = calloc(1, sizeof *r);
    if (!r)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    r->power.cycle_energy_min_j = r->power.cycle_energy_median_j =
        r->power.cycle_energy_max_j = NAN;
    st = pick_fundamental(cap, seg, opt, w[ref].idx, &r->fundamental_hz, r->fundamental_source,
                          err);
    if (st == TF_OK)
        st = analyse(cap, seg, opt, w, nw, ref, iv, ii, r, err);
    free_work(w, nw);
    if (st != TF_OK) {
        tf_spectrum_free(r);
        return st;
    }
    *out = r;
    return TF_OK;
}
