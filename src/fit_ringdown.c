/* Damped-sine fit of one burst: matrix pencil start, then Levenberg-Marquardt (GSL). */
#include "fit_internal.h"

#include <math.h>
#include <pthread.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_blas.h>
#include <gsl/gsl_eigen.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_linalg.h>
#include <gsl/gsl_multifit_nlinear.h>

#define PENCIL_MAX 128   /* decimated samples used by the matrix pencil */
#define NCACHE 6         /* GSL workspaces kept per thread (by padded length) */
#define RESYNC 256       /* recompute exp/cos/sin exactly every RESYNC samples */
#define FINE_MAX 512     /* first-stage block averages of the pencil start */
#define WARM_MOVE 0.2    /* a warm start is kept when the pole moved less than this share */

typedef struct cache_ent {
    size_t n, p;
    unsigned long used;
    gsl_multifit_nlinear_workspace *w;
} cache_ent;

struct tf_dsfit_workspace {
    cache_ent cache[NCACHE];
    unsigned long tick;
    double hank[PENCIL_MAX * PENCIL_MAX], vmat[PENCIL_MAX * PENCIL_MAX];
    double sv[PENCIL_MAX], svwork[PENCIL_MAX], dec[PENCIL_MAX], fine[FINE_MAX];
    gsl_eigen_nonsymm_workspace *eig;
    gsl_matrix *covar[2];    /* 4x4 and 5x5 */
    double *cross[2], *csign[2]; /* crossing positions (samples) and drop signs */
    size_t ccap[2];
};

static pthread_once_t gsl_once = PTHREAD_ONCE_INIT;
static void gsl_off(void) { gsl_set_error_handler_off(); }
void tf_fit_gsl_quiet(void) { pthread_once(&gsl_once, gsl_off); }

tf_dsfit_workspace *tf_dsfit_workspace_create(void)
{
    tf_fit_gsl_quiet();
    tf_dsfit_workspace *w = calloc(1, sizeof *w);
    if (!w)
        return NULL;
    w->eig = gsl_eigen_nonsymm_alloc(3);
    w->covar[0] = gsl_matrix_alloc(4, 4);
    w->covar[1] = gsl_matrix_alloc(5, 5);
    if (!w->eig || !w->covar[0] || !w->covar[1]) {
        tf_dsfit_workspace_destroy(w);
        return NULL;
    }
    return w;
}

void tf_dsfit_workspace_destroy(tf_dsfit_workspace *w)
{
    if (!w)
        return;
    for (int k = 0; k < NCACHE; k++)
        if (w->cache[k].w)
            gsl_multifit_nlinear_free(w->cache[k].w);
    if (w->eig)
        gsl_eigen_nonsymm_free(w->eig);
    for (int k = 0; k < 2; k++)
        if (w->covar[k])
            gsl_matrix_free(w->covar[k]);
    for (int k = 0; k < 2; k++) {
        free(w->cross[k]);
        free(w->csign[k]);
    }
    free(w);
}

double tf_q_from_log_decrement(double delta)
{
    /* source: textbook series RLC response (DOMAIN.md section 2) */
    const double r = delta / (2.0 * M_PI);
    return (M_PI / delta) * sqrt(1.0 + r * r);
}

/* Round n up so that padding is at most 1/8: few distinct workspace sizes. */
static size_t padded_length(size_t n)
{
    size_t step = 1;
    while ((step << 4) <= n)
        step <<= 1;
    return (n + step - 1) / step * step;
}

static gsl_multifit_nlinear_workspace *get_workspace(tf_dsfit_workspace *w, size_t n, size_t p)
{
    size_t np = padded_length(n);
    int victim = 0;
    w->tick++;
    for (int k = 0; k < NCACHE; k++) {
        if (w->cache[k].w && w->cache[k].n == np && w->cache[k].p == p) {
            w->cache[k].used = w->tick;
            return w->cache[k].w;
        }
        if (!w->cache[k].w || w->cache[k].used < w->cache[victim].used)
            victim = k;
        if (!w->cache[k].w)
            break;
    }
    if (w->cache[victim].w)
        gsl_multifit_nlinear_free(w->cache[victim].w);
    gsl_multifit_nlinear_parameters par = gsl_multifit_nlinear_default_parameters();
    par.trs = gsl_multifit_nlinear_trs_lm;
    par.scale = gsl_multifit_nlinear_scale_more;
    par.solver = gsl_multifit_nlinear_solver_cholesky;
    w->cache[victim].w = gsl_multifit_nlinear_alloc(gsl_multifit_nlinear_trust, &par, np, p);
    w->cache[victim].n = np;
    w->cache[victim].p = p;
    w->cache[victim].used = w->tick;
    return w->cache[victim].w;
}

/* ---- the model -------------------------------------------------------------------- */

typedef struct model_ctx {
    const float *x;
    size_t n;              /* real samples; rows beyond are padding (zero) */
    size_t p;              /* 4 or 5 */
    const double *cross;   /* crossing positions in samples, ascending */
    const double *dsign;   /* D_j = dsign[j] * drop */
    size_t ncross;
    double drop;
} model_ctx;

/* Walk over the samples: P_k = z^k with z = exp(-a + j w) by recurrence (exact
 * every RESYNC samples), and the drop terms as S_k = sum_j D_j z^(k - c_j) =
 * P_k Cs, T_k = sum_j (k - c_j) D_j z^(k - c_j) = k S_k - P_k Ct, with the
 * constants Cs, Ct updated as each crossing c_j is passed: no extra recurrence. */
typedef struct walk {
    double a, w, zr, zi, pr, pi, csr, csi, ctr, cti;
    size_t j;
} walk;

static inline void walk_init(walk *s, double a, double wv)
{
    const double ea = exp(-a);
    s->a = a;
    s->w = wv;
    s->zr = ea * cos(wv);
    s->zi = ea * sin(wv);
    s->pr = 1.0;
    s->pi = 0.0;
    s->csr = s->csi = s->ctr = s->cti = 0.0;
    s->j = 0;
}

/* Drop terms at sample k: Im S (model), and Re T, Im T (Jacobian). */
static inline void walk_at(walk *s, const model_ctx *m, size_t k, double *si, double *tr,
                           double *ti)
{
    const double kd = (double)k;
    if (k % RESYNC == 0 && k) {
        const double e = exp(-s->a * kd);
        s->pr = e * cos(s->w * kd);
        s->pi = e * sin(s->w * kd);
    }
    if (!m->ncross) {
        *si = *tr = *ti = 0.0;
        return;
    }
    while (s->j < m->ncross && m->cross[s->j] <= kd) {
        const double c = m->cross[s->j], e = exp(s->a * c) * m->dsign[s->j] * m->drop;
        const double dr = e * cos(s->w * c), di = -e * sin(s->w * c);  /* D z^-c */
        s->csr += dr;
        s->csi += di;
        s->ctr += c * dr;
        s->cti += c * di;
        s->j++;
    }
    const double Sr = s->pr * s->csr - s->pi * s->csi, Si = s->pr * s->csi + s->pi * s->csr;
    const double Pr = s->pr * s->ctr - s->pi * s->cti, Pi = s->pr * s->cti + s->pi * s->ctr;
    *si = Si;
    *tr = kd * Sr - Pr;
    *ti = kd * Si - Pi;
}

static inline void walk_next(walk *s)
{
    const double t0 = s->pr * s->zr - s->pi * s->zi;
    s->pi = s->pr * s->zi + s->pi * s->zr;
    s->pr = t0;
}

/* Residuals (model - data) into f (may be NULL) and, when J is not NULL, the
 * Jacobian; rows beyond the real samples are padding (zero). */
static void eval_model(const double *p, const model_ctx *m, gsl_vector *f, gsl_matrix *J)
{
    const size_t ntot = f ? f->size : J->size1;
    const double c1 = p[2], c2 = p[3], c0 = m->p == 5 ? p[4] : 0.0;
    walk s;
    walk_init(&s, p[0], p[1]);
    for (size_t k = 0; k < m->n; k++) {
        double si, tr, ti;
        walk_at(&s, m, k, &si, &tr, &ti);
        const double kd = (double)k, base = c1 * s.pr + c2 * s.pi;
        if (f)
            gsl_vector_set(f, k, base + c0 + si - (double)m->x[k]);
        if (J) {
            double *row = gsl_matrix_ptr(J, k, 0);
            row[0] = -kd * base - ti;
            row[1] = kd * (c2 * s.pr - c1 * s.pi) + tr;
            row[2] = s.pr;
            row[3] = s.pi;
            if (m->p == 5)
                row[4] = 1.0;
        }
        walk_next(&s);
    }
    for (size_t k = m->n; k < ntot; k++) {
        if (f)
            gsl_vector_set(f, k, 0.0);
        if (J)
            for (size_t c = 0; c < m->p; c++)
                gsl_matrix_set(J, k, c, 0.0);
    }
}

static int cb_f(const gsl_vector *x, void *ctx, gsl_vector *f)
{
    eval_model(x->data, ctx, f, NULL);
    return GSL_SUCCESS;
}

static int cb_df(const gsl_vector *x, void *ctx, gsl_matrix *J)
{
    eval_model(x->data, ctx, NULL, J);
    return GSL_SUCCESS;
}

/* ---- start values: matrix pencil (Hua and Sarkar 1990) on block averages ---------- */

/* Block averaging keeps the poles of a sum of damped exponentials (z -> z^s), so
 * the pencil of the averaged sequence gives exp((-alpha + j wd) s dt). */
static int pencil_start(tf_dsfit_workspace *w, const float *x, size_t n, int order,
                        double *a_out, double *w_out)
{
    /* one pass: averages of s0 samples (at most FINE_MAX of them); peak, crossings and
     * the pencil's coarser blocks come from these */
    const size_t s0 = n > FINE_MAX ? (n + FINE_MAX - 1) / FINE_MAX : 1, nf = n / s0;
    double peak = 0;
    for (size_t m = 0; m < nf; m++) {
        double acc = 0;
        for (size_t q = 0; q < s0; q++)
            acc += x[m * s0 + q];
        w->fine[m] = acc / (double)s0;
        if (fabs(w->fine[m]) > peak)
            peak = fabs(w->fine[m]);
    }
    if (!(peak > 0))
        return -1;
    /* crossings with hysteresis (20 % of peak) give samples per period */
    size_t cross = 0;
    int state = 0;
    for (size_t m = 0; m < nf; m++) {
        int sg = w->fine[m] > 0.2 * peak ? 1 : (w->fine[m] < -0.2 * peak ? -1 : 0);
        if (sg && sg != state) {
            if (state)
                cross++;
            state = sg;
        }
    }
    const double spp = 2.0 * (double)nf / (double)(cross + 1); /* in fine blocks */
    size_t g = (size_t)(spp / 20.0);
    if (g > nf / 24)
        g = nf / 24;
    if (g < 1)
        g = 1;
    const size_t s = g * s0;
    size_t nd = nf / g;
    if (nd > PENCIL_MAX)
        nd = PENCIL_MAX;
    if (nd < 8)
        return -1;
    for (size_t m = 0; m < nd; m++) {
        double acc = 0;
        for (size_t q = 0; q < g; q++)
            acc += w->fine[m * g + q];
        w->dec[m] = acc / (double)g;
    }
    /* pencil parameter L = N / 3, the low end of Hua and Sarkar's N/3..N/2 (smaller SVD) */
    const size_t L = nd / 3 > (size_t)order ? nd / 3 : (size_t)order + 1, rows = nd - L, cols = L + 1;
    gsl_matrix_view Y = gsl_matrix_view_array(w->hank, rows, cols);
    for (size_t r = 0; r < rows; r++)
        for (size_t c = 0; c < cols; c++)
            gsl_matrix_set(&Y.matrix, r, c, w->dec[r + c]);
    gsl_matrix_view V = gsl_matrix_view_array(w->vmat, cols, cols);
    gsl_vector_view S = gsl_vector_view_array(w->sv, cols);
    gsl_vector_view work = gsl_vector_view_array(w->svwork, cols);
    if (gsl_linalg_SV_decomp(&Y.matrix, &V.matrix, &S.vector, &work.vector) != GSL_SUCCESS)
        return -1;
    /* Z = pinv(V1) V2 with V1, V2 the first M right singular vectors without their
     * last / first row; via the M x M normal equations */
    const size_t M = (size_t)order;
    double A[9] = {0}, B[9] = {0};
    for (size_t r = 0; r < L; r++)
        for (size_t i = 0; i < M; i++)
            for (size_t jj = 0; jj < M; jj++) {
                A[i * M + jj] += gsl_matrix_get(&V.matrix, r, i) * gsl_matrix_get(&V.matrix, r, jj);
                B[i * M + jj] += gsl_matrix_get(&V.matrix, r, i) * gsl_matrix_get(&V.matrix, r + 1, jj);
            }
    gsl_matrix_view Am = gsl_matrix_view_array(A, M, M);
    gsl_matrix_view Bm = gsl_matrix_view_array(B, M, M);
    if (gsl_linalg_cholesky_decomp1(&Am.matrix) != GSL_SUCCESS)
        return -1;
    for (size_t c = 0; c < M; c++) {
        gsl_vector_view col = gsl_matrix_column(&Bm.matrix, c);
        gsl_linalg_cholesky_svx(&Am.matrix, &col.vector);
    }
    double ev_re[3], ev_im[3];
    gsl_vector_complex_view eval;
    double evbuf[6];
    eval = gsl_vector_complex_view_array(evbuf, M);
    gsl_eigen_nonsymm_workspace *ew = w->eig;
    if (M != 3) {
        /* 2x2: closed form */
        const double tr = B[0] + B[3], det = B[0] * B[3] - B[1] * B[2];
        const double disc = tr * tr / 4.0 - det;
        if (disc >= 0)
            return -1;
        ev_re[0] = tr / 2.0;
        ev_im[0] = sqrt(-disc);
    } else {
        if (gsl_eigen_nonsymm(&Bm.matrix, &eval.vector, ew) != GSL_SUCCESS)
            return -1;
        int best = -1;
        for (size_t i = 0; i < M; i++) {
            ev_re[i] = evbuf[2 * i];
            ev_im[i] = fabs(evbuf[2 * i + 1]);
            if (ev_im[i] > 0 && (best < 0 || ev_im[i] > ev_im[best]))
                best = (int)i;
        }
        if (best < 0)
            return -1;
        ev_re[0] = ev_re[best];
        ev_im[0] = ev_im[best];
    }
    const double mag = hypot(ev_re[0], ev_im[0]), ang = atan2(ev_im[0], ev_re[0]);
    if (!(mag > 0) || !(ang > 0))
        return -1;
    *a_out = -log(mag) / (double)s;
    *w_out = ang / (double)s;
    return 0;
}

/* Two samples at a time: lane 0 holds sample k, lane 1 sample k + 1, both advanced by
 * z^2 (GCC/Clang vector extension: SSE2 on x86-64, NEON on arm64). */
typedef double v2d __attribute__((vector_size(16)));

static inline double hsum(v2d v)
{
    double d[2];
    memcpy(d, &v, sizeof d);
    return d[0] + d[1];
}

/* Linear least squares of the amplitudes for fixed (a, w) (per-sample units); the
 * sums two samples at a time. */
static int linear_amplitudes(const float *x, size_t n, size_t p, double a, double wv, double *c)
{
    const v2d zero = {0.0, 0.0};
    v2d v_rr = zero, v_ri = zero, v_ii = zero, v_r = zero, v_i = zero, v_br = zero;
    v2d v_bi = zero, v_b1 = zero;
    double t[8] = {0};
    const double ea = exp(-a), zr = ea * cos(wv), zi = ea * sin(wv);
    const double z2r = zr * zr - zi * zi, z2i = 2.0 * zr * zi;
    const v2d Z2r = {z2r, z2r}, Z2i = {z2i, z2i};
    for (size_t k0 = 0; k0 < n; k0 += RESYNC) {
        const size_t k1 = k0 + RESYNC < n ? k0 + RESYNC : n;
        const double e = exp(-a * (double)k0);
        const double p0r = k0 ? e * cos(wv * (double)k0) : 1.0;
        const double p0i = k0 ? e * sin(wv * (double)k0) : 0.0;
        v2d pr = {p0r, p0r * zr - p0i * zi}, pi = {p0i, p0r * zi + p0i * zr};
        size_t k = k0;
        for (; k + 1 < k1; k += 2) {
            const v2d xk = {(double)x[k], (double)x[k + 1]};
            v_rr += pr * pr;
            v_ri += pr * pi;
            v_ii += pi * pi;
            v_r += pr;
            v_i += pi;
            v_br += pr * xk;
            v_bi += pi * xk;
            v_b1 += xk;
            const v2d t0 = pr * Z2r - pi * Z2i;
            pi = pr * Z2i + pi * Z2r;
            pr = t0;
        }
        if (k < k1) { /* odd sample at the block's end: lane 0 */
            double d[2], f[2];
            memcpy(d, &pr, sizeof d);
            memcpy(f, &pi, sizeof f);
            const double xk = x[k];
            const double v[8] = {d[0] * d[0], d[0] * f[0], f[0] * f[0], d[0], f[0],
                                 d[0] * xk, f[0] * xk, xk};
            for (int q = 0; q < 8; q++)
                t[q] += v[q];
        }
    }
    const double s_rr = hsum(v_rr) + t[0], s_ri = hsum(v_ri) + t[1], s_ii = hsum(v_ii) + t[2];
    const double s_r = hsum(v_r) + t[3], s_i = hsum(v_i) + t[4], b_r = hsum(v_br) + t[5];
    const double b_i = hsum(v_bi) + t[6], b_1 = hsum(v_b1) + t[7];
    const size_t q = p - 2;
    double G[9] = {s_rr, s_ri, s_r, s_ri, s_ii, s_i, s_r, s_i, (double)n};
    double b[3] = {b_r, b_i, b_1};
    if (q == 2)
        G[2] = s_ri, G[3] = s_ii; /* 2 x 2 in the first four places */
    gsl_matrix_view Gm = gsl_matrix_view_array(G, q, q);
    gsl_vector_view bv = gsl_vector_view_array(b, q);
    if (gsl_linalg_cholesky_decomp1(&Gm.matrix) != GSL_SUCCESS ||
        gsl_linalg_cholesky_svx(&Gm.matrix, &bv.vector) != GSL_SUCCESS)
        return -1;
    for (size_t i = 0; i < q; i++)
        c[i + 2] = b[i];
    return 0;
}

/* Zero crossings strictly inside the window (sign changes of the model with the
 * current drop terms), in samples, into buffer b. (size_t)-1 when out of memory. */
static size_t model_crossings(tf_dsfit_workspace *w, int b, const double *p, const model_ctx *m)
{
    const double c1 = p[2], c2 = p[3], c0 = m->p == 5 ? p[4] : 0.0;
    double prev = 0;
    size_t nc = 0;
    walk s;
    walk_init(&s, p[0], p[1]);
    for (size_t k = 0; k < m->n; k++) {
        double si, tr, ti;
        walk_at(&s, m, k, &si, &tr, &ti);
        const double kd = (double)k, cur = c1 * s.pr + c2 * s.pi + c0 + si;
        const double lobe = M_PI / p[1], kc = k > 0 ? kd - 1.0 + prev / (prev - cur) : 0;
        if (k > 0 && ((prev > 0 && cur <= 0) || (prev < 0 && cur >= 0)) && kc >= 0.1 * lobe &&
            kc <= (double)(m->n - 1) - 0.1 * lobe) {
            if (nc == w->ccap[b]) {
                size_t nc2 = w->ccap[b] ? 2 * w->ccap[b] : 64;
                double *q1 = realloc(w->cross[b], nc2 * sizeof *q1);
                if (!q1)
                    return (size_t)-1;
                w->cross[b] = q1;
                double *q2 = realloc(w->csign[b], nc2 * sizeof *q2);
                if (!q2)
                    return (size_t)-1;
                w->csign[b] = q2;
                w->ccap[b] = nc2;
            }
            w->cross[b][nc] = kc;
            w->csign[b][nc] = prev > 0 ? 1.0 : -1.0; /* the step opposes the new lobe */
            nc++;
        }
        prev = cur;
        walk_next(&s);
    }
    return nc;
}

/* The same crossings without a pass over the data, for the model without offset:
 * the plain sinusoid vanishes at k_m = (m pi - phi) / w, and so does every drop term
 * started at such a zero (same period), so these are the full model's zeros too.
 * Zeros within a tenth of a lobe of the window's ends (the firing, the end of
 * conduction) are not commutations and get no term. */
static size_t analytic_crossings(tf_dsfit_workspace *w, int b, const double *p, size_t n)
{
    const double phi = atan2(p[2], p[3]), wv = p[1], lobe = M_PI / wv;
    size_t nc = 0;
    if (!(wv > 0) || !(wv < M_PI) || !isfinite(phi))
        return 0; /* no oscillation below Nyquist: nothing to place */
    /* at most one zero per pi / wv samples: m stays below n wv / pi + 2 */
    const long mmax = (long)((double)n * wv / M_PI) + 2;
    for (long m = 0; m <= mmax; m++) {
        const double k = ((double)m * M_PI - phi) / wv;
        if (k > (double)(n - 1) - 0.1 * lobe)
            break;
        if (k < 0.1 * lobe)
            continue;
        if (nc == w->ccap[b]) {
            size_t nc2 = w->ccap[b] ? 2 * w->ccap[b] : 64;
            double *q1 = realloc(w->cross[b], nc2 * sizeof *q1);
            if (!q1)
                return (size_t)-1;
            w->cross[b] = q1;
            double *q2 = realloc(w->csign[b], nc2 * sizeof *q2);
            if (!q2)
                return (size_t)-1;
            w->csign[b] = q2;
            w->ccap[b] = nc2;
        }
        w->cross[b][nc] = k;
        w->csign[b][nc] = (m % 2) ? 1.0 : -1.0; /* sin is positive just before odd m pi */
        nc++;
    }
    return nc;
}

static int run_lm(gsl_multifit_nlinear_workspace *ws, model_ctx *m, double *par, int maxit,
                  int *iters)
{
    gsl_multifit_nlinear_fdf fdf;
    fdf.f = cb_f;
    fdf.df = cb_df;
    fdf.fvv = NULL;
    fdf.n = ws->f->size;
    fdf.p = m->p;
    fdf.params = m;
    gsl_vector_view x0 = gsl_vector_view_array(par, m->p);
    if (gsl_multifit_nlinear_init(&x0.vector, &fdf, ws) != GSL_SUCCESS)
        return -1;
    int info = 0;
    int st = gsl_multifit_nlinear_driver((size_t)maxit, 1e-11, 1e-14, 1e-14, NULL, NULL, &info, ws);
    *iters += (int)gsl_multifit_nlinear_niter(ws);
    if (st != GSL_SUCCESS && st != GSL_EMAXITER)
        return -1;
    gsl_vector *xr = gsl_multifit_nlinear_position(ws);
    for (size_t k = 0; k < m->p; k++)
        par[k] = gsl_vector_get(xr, k);
    return 0;
}

/* Sums over one stretch between crossings, in the basis u = (pr, pi, k pr, k pi) of
 * P_k = z^k: the Jacobian's rows are fixed combinations of u there (see accumulate). */
typedef struct stretch_sums {
    double a[9];   /* pr^2, pr pi, pi^2, then times k, then times k^2 */
    double ru[4];  /* r u */
    double u[4];   /* u (offset term only) */
    double r;      /* r (offset term only) */
    double rss;
    size_t count;
} stretch_sums;

/* Samples [k, kend) of a stretch with model constants e1, e2, c0: the sums of
 * stretch_sums, recurrence inside blocks of RESYNC samples, exact at their starts. */
static void stretch_pass(const float *x, size_t k, size_t kend, double a, double wv, double zr,
                         double zi, double e1, double e2, double c0, stretch_sums *o)
{
    const v2d zero = {0.0, 0.0};
    v2d s0 = zero, s1 = zero, s2 = zero, s3 = zero, s4 = zero, s5 = zero, s6 = zero, s7 = zero;
    v2d s8 = zero, r0 = zero, r1 = zero, r2 = zero, r3 = zero, u0 = zero, u1 = zero, u2 = zero;
    v2d u3 = zero, sr = zero, rss = zero;
    const double z2r = zr * zr - zi * zi, z2i = 2.0 * zr * zi;
    const v2d Z2r = {z2r, z2r}, Z2i = {z2i, z2i}, E1 = {e1, e1}, E2 = {e2, e2}, C0 = {c0, c0};
    const v2d two = {2.0, 2.0};
    o->count = kend - k;
    double tail[9 + 4 + 4 + 2] = {0};
    while (k < kend) {
        size_t kb = k + RESYNC - k % RESYNC;
        if (kb > kend)
            kb = kend;
        const double e0 = exp(-a * (double)k);
        const double p0r = e0 * cos(wv * (double)k), p0i = e0 * sin(wv * (double)k);
        v2d pr = {p0r, p0r * zr - p0i * zi}, pi = {p0i, p0r * zi + p0i * zr};
        v2d kd = {(double)k, (double)k + 1.0};
        for (; k + 1 < kb; k += 2) {
            const v2d xk = {(double)x[k], (double)x[k + 1]};
            const v2d r = E1 * pr + E2 * pi + C0 - xk;
            const v2d pp = pr * pr, pq = pr * pi, qq = pi * pi, rr = r * pr, ri = r * pi;
            const v2d k2 = kd * kd;
            rss += r * r;
            s0 += pp; s1 += pq; s2 += qq;
            s3 += kd * pp; s4 += kd * pq; s5 += kd * qq;
            s6 += k2 * pp; s7 += k2 * pq; s8 += k2 * qq;
            r0 += rr; r1 += ri; r2 += kd * rr; r3 += kd * ri;
            u0 += pr; u1 += pi; u2 += kd * pr; u3 += kd * pi;
            sr += r;
            const v2d t0 = pr * Z2r - pi * Z2i;
            pi = pr * Z2i + pi * Z2r;
            pr = t0;
            kd += two;
        }
        if (k < kb) { /* an odd sample at the block's end: lane 0 */
            double d[2], e[2];
            memcpy(d, &pr, sizeof d);
            memcpy(e, &pi, sizeof e);
            const double qr = d[0], qi = e[0], kk = (double)k;
            const double r = e1 * qr + e2 * qi + c0 - (double)x[k];
            const double pp = qr * qr, pq = qr * qi, qq = qi * qi;
            const double v[19] = {pp, pq, qq, kk * pp, kk * pq, kk * qq, kk * kk * pp,
                                  kk * kk * pq, kk * kk * qq, r * qr, r * qi, kk * r * qr,
                                  kk * r * qi, qr, qi, kk * qr, kk * qi, r, r * r};
            for (int q = 0; q < 19; q++)
                tail[q] += v[q];
            k++;
        }
    }
    const v2d av[9] = {s0, s1, s2, s3, s4, s5, s6, s7, s8};
    for (int q = 0; q < 9; q++)
        o->a[q] = hsum(av[q]) + tail[q];
    const v2d rv[4] = {r0, r1, r2, r3}, uv[4] = {u0, u1, u2, u3};
    for (int q = 0; q < 4; q++) {
        o->ru[q] = hsum(rv[q]) + tail[9 + q];
        o->u[q] = hsum(uv[q]) + tail[13 + q];
    }
    o->r = hsum(sr) + tail[17];
    o->rss = hsum(rss) + tail[18];
}

/* Residuals only, no sums for H. */
static double stretch_rss(const float *x, size_t k, size_t kend, double a, double wv, double zr,
                          double zi, double e1, double e2, double c0)
{
    double rss = 0;
    while (k < kend) {
        size_t kb = k + RESYNC - k % RESYNC;
        if (kb > kend)
            kb = kend;
        const double e0 = exp(-a * (double)k);
        double pr = e0 * cos(wv * (double)k), pi = e0 * sin(wv * (double)k);
        for (; k < kb; k++) {
            const double r = e1 * pr + e2 * pi + c0 - (double)x[k];
            rss += r * r;
            const double t0 = pr * zr - pi * zi;
            pi = pr * zi + pi * zr;
            pr = t0;
        }
    }
    return rss;
}

/* One pass over the samples: residual sum of squares and, when H is not NULL, the
 * normal equations H = J^T J, g = J^T r (p x p, row-major), without storing J. */
static double accumulate(const double *p, const model_ctx *m, double *H, double *g)
{
    const double a = p[0], wv = p[1], c1 = p[2], c2 = p[3], c0 = m->p == 5 ? p[4] : 0.0;
    const double ea = exp(-a), zr = ea * cos(wv), zi = ea * sin(wv);
    const size_t P = m->p;
    const int full = P == 5;
    double rss = 0;
    if (H) {
        memset(H, 0, P * P * sizeof *H);
        memset(g, 0, P * sizeof *g);
    }
    /* Between crossings the drop terms are P_k times constants (see walk): the model is
     * e1 pr + e2 pi with e1 = c1 + Im Cs, e2 = c2 + Re Cs, and the Jacobian's rows are
     *   j0 = cti pr + ctr pi - e1 k pr - e2 k pi,  j1 = -ctr pr + cti pi + e2 k pr - e1 k pi,
     *   j2 = pr, j3 = pi (, j4 = 1),
     * i.e. T u with u = (pr, pi, k pr, k pi): H = T (sum u u^T) T^T, g = T sum r u. */
    double csr = 0, csi = 0, ctr = 0, cti = 0;
    size_t j = 0, k = 0;
    while (k < m->n) {
        while (j < m->ncross && m->cross[j] <= (double)k) {
            const double cc = m->cross[j], e = exp(a * cc) * m->dsign[j] * m->drop;
            const double dr = e * cos(wv * cc), di = -e * sin(wv * cc);
            csr += dr;
            csi += di;
            ctr += cc * dr;
            cti += cc * di;
            j++;
        }
        size_t kend = m->n;
        if (j < m->ncross) {
            const double nx = ceil(m->cross[j]);
            if (nx < (double)kend)
                kend = (size_t)nx;
        }
        if (kend <= k)
            kend = k + 1;
        const double e1 = c1 + csi, e2 = c2 + csr;
        if (!H) {
            rss += stretch_rss(m->x, k, kend, a, wv, zr, zi, e1, e2, c0);
            k = kend;
            continue;
        }
        stretch_sums ss;
        stretch_pass(m->x, k, kend, a, wv, zr, zi, e1, e2, c0, &ss);
        k = kend;
        rss += ss.rss;
        const double *A = ss.a;
        const double Gu[4][4] = {{A[0], A[1], A[3], A[4]},
                                 {A[1], A[2], A[4], A[5]},
                                 {A[3], A[4], A[6], A[7]},
                                 {A[4], A[5], A[7], A[8]}};
        const double T[4][4] = {{cti, ctr, -e1, -e2},
                                {-ctr, cti, e2, -e1},
                                {1, 0, 0, 0},
                                {0, 1, 0, 0}};
        double TG[4][4];
        for (int r = 0; r < 4; r++)
            for (int c = 0; c < 4; c++)
                TG[r][c] = T[r][0] * Gu[0][c] + T[r][1] * Gu[1][c] + T[r][2] * Gu[2][c] +
                           T[r][3] * Gu[3][c];
        for (int r = 0; r < 4; r++) {
            for (int c = r; c < 4; c++)
                H[r * P + c] += TG[r][0] * T[c][0] + TG[r][1] * T[c][1] + TG[r][2] * T[c][2] +
                                TG[r][3] * T[c][3];
            g[r] += T[r][0] * ss.ru[0] + T[r][1] * ss.ru[1] + T[r][2] * ss.ru[2] +
                    T[r][3] * ss.ru[3];
        }
        if (full) {
            for (int r = 0; r < 4; r++)
                H[r * P + 4] += T[r][0] * ss.u[0] + T[r][1] * ss.u[1] + T[r][2] * ss.u[2] +
                                T[r][3] * ss.u[3];
            H[4 * P + 4] += (double)ss.count;
            g[4] += ss.r;
        }
    }
    if (H)
        for (size_t r = 0; r < P; r++)
            for (size_t c = 0; c < r; c++)
                H[r * P + c] = H[c * P + r];
    return rss;
}

/* Solve (H + lambda diag(H)) d = -g by Cholesky on the Jacobi-scaled system. */
static int lm_step(const double *H, const double *g, size_t P, double lambda, double *d)
{
    double A[25], b[5], sc[5];
    for (size_t i = 0; i < P; i++) {
        if (!(H[i * P + i] > 0))
            return -1;
        sc[i] = 1.0 / sqrt(H[i * P + i]);
    }
    for (size_t i = 0; i < P; i++) {
        for (size_t c = 0; c < P; c++)
            A[i * P + c] = H[i * P + c] * sc[i] * sc[c];
        A[i * P + i] = 1.0 + lambda;
        b[i] = -g[i] * sc[i];
    }
    gsl_matrix_view Am = gsl_matrix_view_array(A, P, P);
    gsl_vector_view bv = gsl_vector_view_array(b, P);
    if (gsl_linalg_cholesky_decomp1(&Am.matrix) != GSL_SUCCESS ||
        gsl_linalg_cholesky_svx(&Am.matrix, &bv.vector) != GSL_SUCCESS)
        return -1;
    for (size_t i = 0; i < P; i++)
        d[i] = b[i] * sc[i];
    return 0;
}

/* Levenberg-Marquardt (Levenberg 1944, Marquardt 1963) on the streamed normal
 * equations: one pass over the data per iteration. */
/* Standard uncertainties of the first two parameters (per-sample units) from H
 * and the residual variance; 0 when H is singular. */
/* H^-1 into inv (P x P) when not NULL; returns 1 when H could be inverted. */
static int step_scale(const double *H, size_t P, double rss, size_t n, double *u, double *inv)
{
    double A[25];
    memcpy(A, H, P * P * sizeof *A);
    gsl_matrix_view Am = gsl_matrix_view_array(A, P, P);
    u[0] = u[1] = 0.0;
    if (n <= P || gsl_linalg_cholesky_decomp1(&Am.matrix) != GSL_SUCCESS ||
        gsl_linalg_cholesky_invert(&Am.matrix) != GSL_SUCCESS)
        return 0;
    const double s2 = rss / (double)(n - P);
    u[0] = sqrt(s2 * A[0]);
    u[1] = sqrt(s2 * A[P + 1]);
    if (inv)
        memcpy(inv, A, P * P * sizeof *A);
    return 1;
}

/* Levenberg-Marquardt (Levenberg 1944, Marquardt 1963) on the streamed normal
 * equations: one pass over the data per trial point. Converged when the step of
 * alpha and wd is below 1e-9 relative or below 1 % of their standard
 * uncertainty; such a last step is applied without another pass (H and the
 * residual change by a negligible second-order amount). */
static int run_fast(model_ctx *m, double *par, int maxit, int *iters, double *H_out,
                    double *rss_out, int *conv, double *inv_out, int *inv_ok)
{
    *conv = 0;
    *inv_ok = 0; /* set while inv_out is the inverse of the H handed back */
    const size_t P = m->p;
    double H[25], g[5], Hn[25], gn[5], d[5], trial[5], u[2];
    double rss = accumulate(par, m, H, g), lambda = 1e-4;
    if (!isfinite(rss))
        return -1;
    for (int it = 0; it < maxit; it++) {
        if (lm_step(H, g, P, lambda, d) != 0)
            return -1;
        *inv_ok = step_scale(H, P, rss, m->n, u, inv_out);
        const int small = (fabs(d[0]) <= 1e-9 * (fabs(par[0]) + fabs(par[1])) ||
                           fabs(d[0]) <= 0.01 * u[0]) &&
                          (fabs(d[1]) <= 1e-9 * fabs(par[1]) || fabs(d[1]) <= 0.01 * u[1]);
        if (small && lambda <= 1e-3) {
            for (size_t i = 0; i < P; i++)
                par[i] += d[i];
            *conv = 1;
            break;
        }
        for (size_t i = 0; i < P; i++)
            trial[i] = par[i] + d[i];
        const double rn = accumulate(trial, m, Hn, gn);
        ++*iters;
        if (isfinite(rn) && rn <= rss) {
            memcpy(par, trial, P * sizeof *par);
            memcpy(H, Hn, sizeof H);
            memcpy(g, gn, sizeof g);
            *inv_ok = 0;
            rss = rn;
            lambda = fmax(lambda * 0.1, 1e-12);
        } else {
            if (small)
                break;
            lambda *= 10.0;
            if (lambda > 1e12)
                break;
        }
    }
    memcpy(H_out, H, P * P * sizeof *H);
    *rss_out = rss;
    return 0;
}

/* The fit, from the matrix pencil's start or, when start is not NULL, from the given
 * (alpha, wd) in per-sample units; *conv (may be NULL) says whether the plain fit
 * met its convergence test. */
static tf_status fit_core(int use_gsl, tf_dsfit_workspace *w, const float *x, size_t n,
                          double dt_s, const tf_dsfit_options *o, const double *start,
                          tf_dsfit *out, int *conv, tf_error *err)
{
    int conv_plain = 1, conv_drop = 1;
    if (conv)
        *conv = 0;
    memset(out, 0, sizeof *out);
    out->offset_a = out->u_offset_a = NAN;
    if (!w || !x || n < 8 || !(dt_s > 0))
        return tf_error_set(err, TF_ERR_USAGE,
                            "damped-sine fit: expected >= 8 samples and dt > 0, found %zu", n);
    const int offset = o && o->offset_term;
    double drop = o && o->drop_step_a > 0 ? o->drop_step_a : 0.0;
    const int drop_from_tank = !(drop > 0) && o && o->drop_step_v > 0 &&
                               (o->drop_c_f > 0 || o->drop_l_h > 0);
    const int maxit = o && o->max_iter > 0 ? o->max_iter : 50;
    const size_t p = offset ? 5 : 4;
    double par[5] = {0}, H[25], rss = NAN, Hinv[25];
    int inv_ok = 0; /* Hinv is H^-1 (run_fast's last one: no second inversion) */
    if (start) {
        par[0] = start[0];
        par[1] = start[1];
    } else if (pencil_start(w, x, n, offset ? 3 : 2, &par[0], &par[1]) != 0) {
        /* no oscillation seen by the pencil (a single lobe, say): half a period */
        par[0] = 0.0;
        par[1] = M_PI / (double)n;
    }
    out->init_alpha_per_s = par[0] / dt_s;
    out->init_wd_rad_s = par[1] / dt_s;
    if (linear_amplitudes(x, n, p, par[0], par[1], par) != 0)
        return tf_error_set(err, TF_ERR_NUMERIC, "damped-sine fit: singular amplitude system");
    gsl_multifit_nlinear_workspace *ws = NULL;
    if (use_gsl && !(ws = get_workspace(w, n, p)))
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    model_ctx m = {x, n, p, NULL, NULL, 0, 0.0};
    int iters = 0;
    if ((use_gsl ? run_lm(ws, &m, par, maxit, &iters)
                 : run_fast(&m, par, maxit, &iters, H, &rss, &conv_plain, Hinv, &inv_ok)) != 0)
        return tf_error_set(err, TF_ERR_NUMERIC, "damped-sine fit did not converge");
    {
        /* the plain fit, kept whatever follows */
        double g[5], Hc[25];
        memcpy(Hc, H, sizeof Hc);
        double u[2];
        if (use_gsl || !isfinite(rss)) {
            rss = accumulate(par, &m, Hc, g);
            inv_ok = 0;
        }
        if (inv_ok) {
            const double s2 = rss / (double)(n - p);
            u[0] = sqrt(s2 * Hinv[0]);
            u[1] = sqrt(s2 * Hinv[p + 1]);
        } else
            step_scale(Hc, p, rss, n, u, NULL);
        out->raw_alpha_per_s = par[0] / dt_s;
        out->raw_wd_rad_s = par[1] / dt_s;
        out->raw_u_alpha_per_s = u[0] / dt_s;
        if (drop_from_tank && par[1] > 0) {
            const double wd = par[1] / dt_s, a = par[0] / dt_s;
            const double L = o->drop_l_h > 0 ? o->drop_l_h : 1.0 / ((wd * wd + a * a) * o->drop_c_f);
            drop = o->drop_step_v / (wd * L);
        }
    }
    out->drop_step_a = drop;
    if (drop > 0) {
        /* drop steps at the model's own crossings; crossings move slightly when the
         * steps are added, so repeat until they settle */
        int cur = 0;
        m.drop = drop;
        for (int round = 0; round < 4; round++) {
            const int nb = 1 - cur;
            size_t nc = offset ? model_crossings(w, nb, par, &m) : analytic_crossings(w, nb, par, n);
            if (nc == (size_t)-1)
                return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
            double shift = INFINITY;
            if (round > 0 && nc == m.ncross) {
                shift = 0;
                for (size_t k = 0; k < nc; k++)
                    shift = fmax(shift, fabs(w->cross[nb][k] - m.cross[k]));
            }
            cur = nb;
            m.cross = w->cross[cur];
            m.dsign = w->csign[cur];
            m.ncross = nc;
            if (shift < 1e-2) /* a hundredth of a sample: far below the noise */
                break;
            if (round == 0 && nc > 0) {
                /* start closer: after the first commutation the plain fit sees the
                 * envelope A e^{-at} reduced by D e^{a k1}, which it reads as extra
                 * decay of about -(w / pi) ln(1 - (D / A) e^{a k1}) */
                const double A = hypot(par[2], par[3]);
                const double rel = drop / A * exp(par[0] * m.cross[0]);
                if (A > 0 && rel > 0 && rel < 0.5)
                    par[0] += par[1] / M_PI * log(1.0 - rel);
            }
            if ((use_gsl ? run_lm(ws, &m, par, maxit, &iters)
                         : run_fast(&m, par, maxit, &iters, H, &rss, &conv_drop, Hinv,
                                    &inv_ok)) != 0)
                return tf_error_set(err, TF_ERR_NUMERIC, "drop-corrected fit did not converge");
        }
        out->ncross = m.ncross;
    }
    if (!(par[1] > 0) || !(par[1] < M_PI) || !isfinite(par[0]))
        return tf_error_set(err, TF_ERR_NUMERIC,
                            "damped-sine fit: no oscillation below the Nyquist frequency");
    /* covariance (J^T J)^-1 scaled by the residual variance */
    if (use_gsl || !isfinite(rss)) {
        double g[5];
        rss = accumulate(par, &m, H, g);
        inv_ok = 0;
    }
    gsl_matrix *cov = w->covar[p == 5];
    for (size_t r = 0; r < p; r++)
        for (size_t c = 0; c < p; c++)
            gsl_matrix_set(cov, r, c, inv_ok ? Hinv[r * p + c] : H[r * p + c]);
    if (!inv_ok && (gsl_linalg_cholesky_decomp1(cov) != GSL_SUCCESS ||
                    gsl_linalg_cholesky_invert(cov) != GSL_SUCCESS))
        return tf_error_set(err, TF_ERR_NUMERIC, "damped-sine fit: singular normal equations");
    const double s2 = n > p ? rss / (double)(n - p) : NAN;
    out->alpha_per_s = par[0] / dt_s;
    out->wd_rad_s = par[1] / dt_s;
    out->u_alpha_per_s = sqrt(s2 * gsl_matrix_get(cov, 0, 0)) / dt_s;
    out->u_wd_rad_s = sqrt(s2 * gsl_matrix_get(cov, 1, 1)) / dt_s;
    out->cov_alpha_wd = s2 * gsl_matrix_get(cov, 0, 1) / (dt_s * dt_s);
    out->amplitude_a = hypot(par[2], par[3]);
    out->phase_rad = atan2(par[2], par[3]);
    if (offset) {
        out->offset_a = par[4];
        out->u_offset_a = sqrt(s2 * gsl_matrix_get(cov, 4, 4));
    }
    out->residual_rms = sqrt(rss / (double)n);
    out->iterations = iters;
    if (conv)
        *conv = conv_plain && conv_drop;
    return TF_OK;
}

tf_status tf_dsfit_run(tf_dsfit_workspace *w, const float *x, size_t n, double dt_s,
                       const tf_dsfit_options *o, tf_dsfit *out, tf_error *err)
{
    return fit_core(0, w, x, n, dt_s, o, NULL, out, NULL, err);
}

tf_status tf_dsfit_run_from(tf_dsfit_workspace *w, const float *x, size_t n, double dt_s,
                            const tf_dsfit_options *o, double alpha0_per_s, double wd0_rad_s,
                            tf_dsfit *out, tf_error *err)
{
    if (w && dt_s > 0 && isfinite(alpha0_per_s) && wd0_rad_s > 0 && wd0_rad_s * dt_s < M_PI) {
        const double st[2] = {alpha0_per_s * dt_s, wd0_rad_s * dt_s};
        int conv = 0;
        if (fit_core(0, w, x, n, dt_s, o, st, out, &conv, err) == TF_OK && conv &&
            hypot(out->raw_alpha_per_s - alpha0_per_s, out->raw_wd_rad_s - wd0_rad_s) <=
                WARM_MOVE * hypot(alpha0_per_s, wd0_rad_s))
            return TF_OK;
        tf_error_clear(err);
    }
    return fit_core(0, w, x, n, dt_s, o, NULL, out, NULL, err);
}

tf_status tf_dsfit_run_gsl(tf_dsfit_workspace *w, const float *x, size_t n, double dt_s,
                           const tf_dsfit_options *o, tf_dsfit *out, tf_error *err)
{
    return fit_core(1, w, x, n, dt_s, o, NULL, out, NULL, err);
}
