/* Track: per-burst table from the fit, reflected resistance, and change points by PELT
 * with a piecewise-linear least-squares cost. */
#include <tankfit/track.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "fit_internal.h"

/* Prefix sums of one series for O(1) segment costs. */
typedef struct prefix {
    double *sx, *skx, *sxx;   /* n + 1 each */
} prefix;

/* Straight-line least squares over rows [a, b) of one series: residual sum of
 * squares, and the line's mean and slope (about the segment's centre index). */
static double seg_line(const prefix *p, size_t a, size_t b, double *mean, double *slope)
{
    const double m = (double)(b - a), kbar = 0.5 * (double)(a + b - 1);
    const double sx = p->sx[b] - p->sx[a], skx = p->skx[b] - p->skx[a], sxx = p->sxx[b] - p->sxx[a];
    const double vk = m * (m * m - 1.0) / 12.0;
    const double cxx = sxx - sx * sx / m, ckx = skx - kbar * sx;
    if (mean)
        *mean = sx / m;
    if (slope)
        *slope = vk > 0 ? ckx / vk : 0.0;
    const double r = vk > 0 ? cxx - ckx * ckx / vk : cxx;
    return r > 0 ? r : 0.0;
}

tf_status tf_changepoints_pelt(const double *const *x, size_t m, size_t n, double beta,
                               size_t min_seg, size_t **cps, size_t *ncp, tf_error *err)
{
    *cps = NULL;
    *ncp = 0;
    if (!x || m == 0 || m > 8 || min_seg < 3 || !(beta >= 0))
        return tf_error_set(err, TF_ERR_USAGE, "change points: expected 1..8 series, min_seg >= 3, penalty >= 0");
    if (n < 2 * min_seg)
        return TF_OK;
    prefix p[8];
    double *mem = calloc(3 * m * (n + 1), sizeof *mem);
    double *F = malloc((n + 1) * sizeof *F);
    size_t *last = malloc((n + 1) * sizeof *last), *cand = malloc((n + 1) * sizeof *cand);
    if (!mem || !F || !last || !cand) {
        free(mem); free(F); free(last); free(cand);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    for (size_t s = 0; s < m; s++) {
        p[s].sx = mem + 3 * s * (n + 1);
        p[s].skx = p[s].sx + n + 1;
        p[s].sxx = p[s].skx + n + 1;
        for (size_t k = 0; k < n; k++) {
            const double v = x[s][k];
            p[s].sx[k + 1] = p[s].sx[k] + v;
            p[s].skx[k + 1] = p[s].skx[k] + (double)k * v;
            p[s].sxx[k + 1] = p[s].sxx[k] + v * v;
        }
    }
    /* F[t]: least cost of rows [0, t); the candidate set is pruned by the PELT rule
     * F[tau] + C(tau, t) > F[t] (K = 0 for least-squares costs) */
    size_t nc = 1;
    cand[0] = 0;
    F[0] = -beta;
    for (size_t t = 1; t <= n; t++) {
        F[t] = INFINITY;
        last[t] = 0;
        for (size_t q = 0; q < nc; q++) {
            const size_t tau = cand[q];
            if (t - tau < min_seg || !isfinite(F[tau]))
                continue;
            double c = 0;
            for (size_t s = 0; s < m; s++)
                c += seg_line(&p[s], tau, t, NULL, NULL);
            const double v = F[tau] + c + beta;
            if (v < F[t]) {
                F[t] = v;
                last[t] = tau;
            }
        }
        size_t keep = 0;
        for (size_t q = 0; q < nc; q++) {
            const size_t tau = cand[q];
            int drop = 0;
            if (t - tau >= min_seg && isfinite(F[t])) {
                double c = 0;
                for (size_t s = 0; s < m; s++)
                    c += seg_line(&p[s], tau, t, NULL, NULL);
                drop = F[tau] + c > F[t];
            }
            if (!drop)
                cand[keep++] = tau;
        }
        nc = keep;
        if (isfinite(F[t]))
            cand[nc++] = t;
    }
    size_t cnt = 0;
    for (size_t t = n; t > 0 && last[t] > 0; t = last[t])
        cnt++;
    size_t *out = malloc((cnt + 1) * sizeof *out);
    if (!out) {
        free(mem); free(F); free(last); free(cand);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    size_t q = cnt;
    for (size_t t = n; t > 0 && last[t] > 0; t = last[t])
        out[--q] = last[t];
    free(mem); free(F); free(last); free(cand);
    *cps = out;
    *ncp = cnt;
    return TF_OK;
}

/* Robust noise of a slowly varying series: 1.4826 MAD of first differences / sqrt 2. */
static double diff_sigma(const double *x, size_t n, double *scratch)
{
    if (n < 3)
        return NAN;
    for (size_t k = 1; k < n; k++)
        scratch[k - 1] = x[k] - x[k - 1];
    double med = tf_fit_median(scratch, n - 1);
    for (size_t k = 0; k + 1 < n; k++)
        scratch[k] = fabs(scratch[k] - med);
    return 1.4826 * tf_fit_median(scratch, n - 1) / sqrt(2.0);
}

/* Non-zero when the segment [b, c) is a short, steep move between two levels: at
 * most a tenth of the run (and at most 16 bursts), and its own line moves R_eff or
 * fd by more than 4 noise sigmas and by a physically relevant amount (the same
 * thresholds as a step). */
static int steep_transition(const prefix *pr, const prefix *pf, size_t b, size_t c, size_t n,
                            double sr, double sf, double r0, double f0)
{
    const size_t len = c - b;
    if (len > 16 || len * 10 > n)
        return 0;
    double mr, slr, mf, slf;
    seg_line(pr, b, c, &mr, &slr);
    seg_line(pf, b, c, &mf, &slf);
    const double dr = fabs(slr) * (double)len, df = fabs(slf) * (double)len;
    const double lr = fabs(r0 + sr * mr), lf = fabs(f0 + sf * mf);
    return (dr > 4.0 && dr * sr > 0.02 * lr) || (df > 4.0 && df * sf > 0.005 * lf);
}

static tf_status find_changes(tf_track_result *t, double penalty, tf_error *err)
{
    const size_t n = t->rows_ok;
    if (n < 6)
        return TF_OK;
    double *buf = malloc(5 * n * sizeof *buf);
    size_t *map = malloc(n * sizeof *map);
    if (!buf || !map) {
        free(buf);
        free(map);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    double *r = buf, *f = buf + n, *zr = buf + 2 * n, *zf = buf + 3 * n, *scr = buf + 4 * n;
    size_t q = 0;
    for (size_t k = 0; k < t->nrows; k++)
        if (t->rows[k].ok) {
            map[q] = k;
            r[q] = t->rows[k].r_eff_ohm;
            f[q] = t->rows[k].fd_hz;
            q++;
        }
    double sr = diff_sigma(r, n, scr), sf = diff_sigma(f, n, scr);
    /* a noise-free series still needs a scale: a part in 10^9 of its level */
    const double mr = fabs(r[n / 2]), mf = fabs(f[n / 2]);
    if (!(sr > 1e-9 * mr))
        sr = 1e-9 * mr + 1e-300;
    if (!(sf > 1e-9 * mf))
        sf = 1e-9 * mf + 1e-300;
    t->sigma_r_ohm = sr;
    t->sigma_fd_hz = sf;
    for (size_t k = 0; k < n; k++) {
        zr[k] = (r[k] - r[0]) / sr;
        zf[k] = (f[k] - f[0]) / sf;
    }
    const double beta = penalty > 0 ? penalty : 5.0 * log((double)n);
    t->penalty = beta;
    const double *series[2] = {zr, zf};
    size_t *cps = NULL, ncp = 0;
    tf_status st = tf_changepoints_pelt(series, 2, n, beta, 3, &cps, &ncp, err);
    if (st == TF_OK && ncp) {
        t->changes = calloc(ncp, sizeof *t->changes);
        if (!t->changes)
            st = tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    if (st == TF_OK) {
        /* the line of each segment on both sides, evaluated half-way between the last
         * row before and the first row after the change */
        prefix pr, pf;
        double *pm = calloc(6 * (n + 1), sizeof *pm);
        if (!pm && ncp)
            st = tf_error_set(err, TF_ERR_NOMEM, "out of memory");
        size_t nout = 0;
        for (size_t c = 0; st == TF_OK && c < ncp; c++) {
            if (c == 0) {
                pr.sx = pm; pr.skx = pm + n + 1; pr.sxx = pm + 2 * (n + 1);
                pf.sx = pm + 3 * (n + 1); pf.skx = pm + 4 * (n + 1); pf.sxx = pm + 5 * (n + 1);
                for (size_t k = 0; k < n; k++) {
                    pr.sx[k + 1] = pr.sx[k] + zr[k];
                    pr.skx[k + 1] = pr.skx[k] + (double)k * zr[k];
                    pr.sxx[k + 1] = pr.sxx[k] + zr[k] * zr[k];
                    pf.sx[k + 1] = pf.sx[k] + zf[k];
                    pf.skx[k + 1] = pf.skx[k] + (double)k * zf[k];
                    pf.sxx[k + 1] = pf.sxx[k] + zf[k] * zf[k];
                }
            }
            /* a change that happens during a burst leaves that burst (or two) between
             * the levels: PELT gives them a short segment of their own; such a pair of
             * changes is one change, placed at the largest burst-to-burst jump */
            const size_t a = c ? cps[c - 1] : 0, b = cps[c];
            size_t b2 = b;
            int ramp = 0;
            if (c + 1 < ncp && cps[c + 1] - b <= 3) {
                b2 = cps[++c];
            } else if (c + 1 < ncp && steep_transition(&pr, &pf, b, cps[c + 1], n, sr, sf,
                                                       r[0], f[0])) {
                /* a short steep segment between two changes (a load that moves from one
                 * level to another within a few bursts, like a workpiece passing its
                 * magnetic transition) is one change with a duration */
                b2 = cps[++c];
                ramp = 1;
            }
            const size_t e = c + 1 < ncp ? cps[c + 1] : n;
            size_t at = b;
            double big = -1;
            for (size_t k = b; !ramp && k <= b2 && k < n; k++) {
                const double j = hypot(zr[k] - zr[k - 1], zf[k] - zf[k - 1]);
                if (j > big) {
                    big = j;
                    at = k;
                }
            }
            double m1, s1, m2, s2, vals[4];
            const prefix *pp[2] = {&pr, &pf};
            for (int q2 = 0; q2 < 2; q2++) {
                /* before: the left line at the change's start; after: the right line at
                 * its end (the same instant for a step) */
                const double k1 = (double)(ramp ? b : at) - 0.5;
                const double k2 = (double)(ramp ? b2 : at) - 0.5;
                seg_line(pp[q2], a, b, &m1, &s1);
                seg_line(pp[q2], b2, e, &m2, &s2);
                vals[2 * q2] = m1 + s1 * (k1 - 0.5 * (double)(a + b - 1));
                vals[2 * q2 + 1] = m2 + s2 * (k2 - 0.5 * (double)(b2 + e - 1));
            }
            tf_track_change *ch = &t->changes[nout++];
            ch->index = map[at];
            ch->time_s = t->rows[map[at]].time_s;
            ch->duration_s = ramp ? t->rows[map[b2]].time_s - t->rows[map[b]].time_s : 0.0;
            ch->r_before_ohm = r[0] + sr * vals[0];
            ch->r_after_ohm = r[0] + sr * vals[1];
            ch->r_step_ohm = ch->r_after_ohm - ch->r_before_ohm;
            ch->fd_before_hz = f[0] + sf * vals[2];
            ch->fd_after_hz = f[0] + sf * vals[3];
            ch->fd_step_hz = ch->fd_after_hz - ch->fd_before_hz;
            /* a step: a jump beyond 4 noise sigmas that also matters physically
             * (2 % of R_eff or 0.5 % of fd; a magnetic transition moves both by far
             * more); smaller significant changes are reported as trend changes */
            ch->step = (fabs(vals[1] - vals[0]) > 4.0 &&
                        fabs(ch->r_step_ohm) > 0.02 * fabs(ch->r_before_ohm)) ||
                       (fabs(vals[3] - vals[2]) > 4.0 &&
                        fabs(ch->fd_step_hz) > 0.005 * fabs(ch->fd_before_hz));
        }
        ncp = nout;
        free(pm);
        if (st == TF_OK)
            t->nchanges = ncp;
    }
    free(cps);
    free(buf);
    free(map);
    return st;
}

tf_status tf_track_build(const tf_fit_result *fit, double r_coil_ohm, double penalty,
                         tf_track_result **out, tf_error *err)
{
    *out = NULL;
    size_t nb;
    const tf_fit_burst *b = tf_fit_bursts(fit, &nb);
    if (!b || !nb)
        return tf_error_set(err, TF_ERR_DATA, "track: no bursts");
    tf_track_result *t = calloc(1, sizeof *t);
    if (!t || !(t->rows = calloc(nb, sizeof *t->rows))) {
        free(t);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    t->nrows = nb;
    t->r_coil_ohm = r_coil_ohm;
    t->sigma_r_ohm = t->sigma_fd_hz = t->penalty = NAN;
    const int ring = isfinite(fit->ringdown_r.value);
    snprintf(t->r_source, sizeof t->r_source, "%s", ring ? fit->ringdown_r.method : "v-i");
    for (size_t k = 0; k < nb; k++) {
        tf_track_row *w = &t->rows[k];
        w->burst = b[k].index;
        w->time_s = b[k].start_s;
        w->status = b[k].status;
        w->r_eff_ohm = ring ? b[k].resistance_ohm : b[k].vi_resistance_ohm;
        w->u_r_eff_ohm = ring ? b[k].u_resistance_ohm : NAN;
        w->l_eff_h = isfinite(b[k].inductance_h) ? b[k].inductance_h : (ring ? NAN : b[k].vi_inductance_h);
        w->c_f = isfinite(b[k].capacitance_f) ? b[k].capacitance_f : (ring ? NAN : b[k].vi_capacitance_f);
        w->fd_hz = b[k].fd_hz;
        w->q = b[k].q;
        w->peak_a = b[k].peak_a;
        w->ok = b[k].status == TF_FITB_OK && isfinite(w->r_eff_ohm) && isfinite(w->fd_hz);
        w->r_w_ohm = isfinite(r_coil_ohm) ? w->r_eff_ohm - r_coil_ohm : NAN;
        w->efficiency = isfinite(w->r_w_ohm) && w->r_eff_ohm > 0 ? w->r_w_ohm / w->r_eff_ohm : NAN;
        t->rows_ok += w->ok;
    }
    if (!t->rows_ok) {
        tf_track_free(t);
        return tf_error_set(err, TF_ERR_DATA,
                            "track: no burst has an effective resistance: give the capacitance "
                            "(--capacitance or the design's) or a voltage channel");
    }
    tf_status st = find_changes(t, penalty, err);
    if (st != TF_OK) {
        tf_track_free(t);
        return st;
    }
    *out = t;
    return TF_OK;
}

void tf_track_free(tf_track_result *t)
{
    if (!t)
        return;
    free(t->rows);
    free(t->changes);
    free(t);
}

static json_t *num(double v) { return isfinite(v) ? json_real(v) : json_null(); }

json_t *tf_track_to_json(const tf_track_result *t)
{
    json_t *o = json_object(), *rows = json_array(), *ch = json_array();
    for (size_t k = 0; k < t->nrows; k++) {
        const tf_track_row *w = &t->rows[k];
        json_t *r = json_object();
        json_object_set_new(r, "burst", json_integer((json_int_t)w->burst));
        json_object_set_new(r, "time_s", num(w->time_s));
        json_object_set_new(r, "status", json_string(tf_fitb_status_name(w->status)));
        json_object_set_new(r, "used", json_boolean(w->ok));
        json_object_set_new(r, "r_eff_ohm", num(w->r_eff_ohm));
        json_object_set_new(r, "u_r_eff_ohm", num(w->u_r_eff_ohm));
        json_object_set_new(r, "l_eff_h", num(w->l_eff_h));
        json_object_set_new(r, "c_f", num(w->c_f));
        json_object_set_new(r, "fd_hz", num(w->fd_hz));
        json_object_set_new(r, "q", num(w->q));
        json_object_set_new(r, "peak_a", num(w->peak_a));
        json_object_set_new(r, "r_w_ohm", num(w->r_w_ohm));
        json_object_set_new(r, "efficiency", num(w->efficiency));
        json_array_append_new(rows, r);
    }
    for (size_t k = 0; k < t->nchanges; k++) {
        const tf_track_change *c = &t->changes[k];
        json_array_append_new(
            ch, json_pack("{s:I, s:o, s:s, s:o, s:o, s:o, s:o, s:o, s:o}", "burst",
                          (json_int_t)t->rows[c->index].burst, "time_s", num(c->time_s), "kind",
                          c->step ? "step" : "trend", "r_before_ohm", num(c->r_before_ohm),
                          "r_after_ohm", num(c->r_after_ohm), "r_step_ohm", num(c->r_step_ohm),
                          "fd_before_hz", num(c->fd_before_hz), "fd_after_hz",
                          num(c->fd_after_hz), "fd_step_hz", num(c->fd_step_hz)));
        json_object_set_new(json_array_get(ch, json_array_size(ch) - 1), "duration_s",
                            num(c->duration_s));
    }
    json_object_set_new(o, "rows", rows);
    json_object_set_new(o, "changes", ch);
    json_object_set_new(o, "rows_ok", json_integer((json_int_t)t->rows_ok));
    json_object_set_new(o, "r_coil_ohm", num(t->r_coil_ohm));
    json_object_set_new(o, "r_source", json_string(t->r_source));
    json_object_set_new(o, "sigma_r_ohm", num(t->sigma_r_ohm));
    json_object_set_new(o, "sigma_fd_hz", num(t->sigma_fd_hz));
    json_object_set_new(o, "penalty", num(t->penalty));
    json_object_set_new(o, "change_method", json_string("PELT, piecewise-linear least squares"));
    return o;
}
