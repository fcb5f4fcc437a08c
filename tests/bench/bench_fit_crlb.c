/* Monte-Carlo accuracy of the damped-sine fit against the Cramer-Rao lower bound.
 *
 * Model s_k = A exp(-alpha t_k) sin(wd t_k + phi), t_k = k dt, in white Gaussian
 * noise of variance sigma^2. The Fisher information is
 *   I = (1 / sigma^2) sum_k grad s_k grad s_k^T,  theta = (A, alpha, wd, phi)
 * (S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation Theory,
 * 1993, the general Gaussian case, from memory) and the bound on var(alpha),
 * var(fd) is the matching diagonal entry of I^-1. SNR = mean(s_k^2) / sigma^2.
 * Prints a Markdown table; floors: RMSE <= 1.15 x sqrt(CRLB), |bias| < 0.2 RMSE.
 * Usage: bench_fit_crlb [TRIALS] */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include <gsl/gsl_linalg.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include <tankfit/fit.h>

int main(int argc, char **argv)
{
    const int trials = argc > 1 ? atoi(argv[1]) : 1000;
    /* one burst: a damped period of a Q = 10 tank at 5 kHz, 1000 samples */
    const size_t n = 1000;
    const double fd = 5e3, wd = 2 * M_PI * fd, q = 10.0;
    const double alpha = wd / (2 * q) / sqrt(1 + 1 / (4 * q * q)); /* Q = w0 / (2 alpha) */
    const double dt = 1.0 / (fd * (double)n), A = 100.0, phi = 0.05;
    float *x = malloc(n * sizeof *x);
    double *s = malloc(n * sizeof *s);
    double ps = 0;
    gsl_matrix *I = gsl_matrix_calloc(4, 4);
    for (size_t k = 0; k < n; k++) {
        const double t = (double)k * dt, e = exp(-alpha * t), sn = sin(wd * t + phi),
                     cs = cos(wd * t + phi);
        s[k] = A * e * sn;
        ps += s[k] * s[k];
        const double g[4] = {e * sn, -t * A * e * sn, t * A * e * cs, A * e * cs};
        for (int r = 0; r < 4; r++)
            for (int c = 0; c < 4; c++)
                *gsl_matrix_ptr(I, r, c) += g[r] * g[c];
    }
    ps /= (double)n;
    gsl_linalg_cholesky_decomp1(I);
    gsl_linalg_cholesky_invert(I); /* I^-1 for sigma = 1 */
    const double crlb_alpha1 = gsl_matrix_get(I, 1, 1), crlb_w1 = gsl_matrix_get(I, 2, 2);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 2024);
    tf_dsfit_workspace *w = tf_dsfit_workspace_create();
    const double snrs[] = {20, 30, 40, 60};
    int ok = 1;
    printf("Monte-Carlo: %d trials per SNR, %zu samples, fd = %.0f Hz, Q = %.0f, "
           "alpha = %.1f 1/s\n\n", trials, n, fd, q, alpha);
    printf("| SNR dB | RMSE fd / CRLB | bias fd / RMSE | RMSE alpha / CRLB | bias alpha / RMSE | "
           "mean u(alpha) / RMSE | failures |\n|---|---|---|---|---|---|---|\n");
    for (size_t si = 0; si < sizeof snrs / sizeof snrs[0]; si++) {
        const double sigma = sqrt(ps / pow(10.0, snrs[si] / 10.0));
        double sf = 0, sf2 = 0, sa = 0, sa2 = 0, su = 0;
        int fails = 0, m = 0;
        for (int t = 0; t < trials; t++) {
            for (size_t k = 0; k < n; k++)
                x[k] = (float)(s[k] + gsl_ran_gaussian(rng, sigma));
            tf_dsfit f;
            tf_error e;
            if (tf_dsfit_run(w, x, n, dt, NULL, &f, &e) != TF_OK) {
                fails++;
                continue;
            }
            const double ef = f.wd_rad_s / (2 * M_PI) - fd, ea = f.alpha_per_s - alpha;
            sf += ef;
            sf2 += ef * ef;
            sa += ea;
            sa2 += ea * ea;
            su += f.u_alpha_per_s;
            m++;
        }
        const double rf = sqrt(sf2 / m), ra = sqrt(sa2 / m);
        const double bf = sqrt(crlb_w1) * sigma / (2 * M_PI), ba = sqrt(crlb_alpha1) * sigma;
        const double qf = rf / bf, qa = ra / ba, pf = fabs(sf / m) / rf, pa = fabs(sa / m) / ra;
        printf("| %.0f | %.3f | %.3f | %.3f | %.3f | %.3f | %d |\n", snrs[si], qf, pf, qa, pa,
               su / m / ra, fails);
        ok &= qf <= 1.15 && qa <= 1.15 && pf < 0.2 && pa < 0.2 && fails == 0;
    }
    printf("\nfloor (RMSE <= 1.15 CRLB, |bias| < 0.2 RMSE): %s\n", ok ? "met" : "NOT MET");
    tf_dsfit_workspace_destroy(w);
    gsl_rng_free(rng);
    gsl_matrix_free(I);
    free(x);
    free(s);
    return ok ? 0 : 1;
}
