/* FFT helpers of the spectrum module: 7-smooth lengths, cached plans, Hann peak interpolation. */
#include "spectrum_internal.h"

#include <pthread.h>
#include <stdlib.h>
#include <tankfit/spectrum.h>

static int is_smooth(size_t n)
{
    static const size_t primes[] = {2, 3, 5, 7};
    for (int i = 0; i < 4; i++)
        while (n % primes[i] == 0)
            n /= primes[i];
    return n == 1;
}

size_t tf_spectrum_smooth_up(size_t n)
{
    if (n < 1)
        n = 1;
    while (!is_smooth(n))
        n++;
    return n;
}

size_t tf_spectrum_smooth_down(size_t n)
{
    if (n < 1)
        return 1;
    while (!is_smooth(n))
        n--;
    return n;
}

void tf_sp_resample(const float *x, size_t n, double pos0, double step, size_t count,
                    double *out)
{
    for (size_t j = 0; j < count; j++)
        out[j] = tf_sp_interp(x, n, pos0 + (double)j * step);
}

/* The FFTW planner is not thread-safe; executing a plan is. Plans live until
 * the process ends (FFTW_ESTIMATE costs little, but callers run many sizes
 * repeatedly, e.g. burst by burst). */
#define PLAN_CACHE 64
static pthread_mutex_t plan_lock = PTHREAD_MUTEX_INITIALIZER;
static struct { size_t n; fftw_plan p; } plans[PLAN_CACHE];
static int nplans;

fftw_plan tf_sp_plan_r2c(size_t n)
{
    fftw_plan p = NULL;
    pthread_mutex_lock(&plan_lock);
    for (int i = 0; i < nplans; i++)
        if (plans[i].n == n) {
            p = plans[i].p;
            break;
        }
    if (!p && nplans < PLAN_CACHE && n >= 1 && n <= (size_t)0x7fffffff) {
        double *in = fftw_malloc(sizeof(double) * n);
        fftw_complex *out = fftw_malloc(sizeof(fftw_complex) * (n / 2 + 1));
        if (in && out)
            p = fftw_plan_dft_r2c_1d((int)n, in, out, FFTW_ESTIMATE);
        fftw_free(in);
        fftw_free(out);
        if (p) {
            plans[nplans].n = n;
            plans[nplans].p = p;
            nplans++;
        }
    }
    pthread_mutex_unlock(&plan_lock);
    return p;
}

void tf_sp_hann_apply(double *x, size_t L)
{
    const double w = 2.0 * M_PI / (double)L;
    for (size_t k = 0; k < L; k++)
        x[k] *= 0.5 - 0.5 * cos(w * (double)k);
}

/* Transform of the periodic Hann window evaluated at -d bins, exact for a
 * finite L: a tone at bin k + d gives X[k] = (A / 2) e^{i phi} W(d). */
static double complex hann_response(double d, size_t L)
{
    const double Ld = (double)L;
    if (fabs(d) < 1e-12)
        return 0.5 * Ld;
    const double complex rot = cexp(I * M_PI * d * (Ld - 1.0) / Ld);
    const double s = sin(M_PI * d);
    const double complex br = 0.5 / sin(M_PI * d / Ld) -
                              0.25 * cexp(-I * M_PI / Ld) / sin(M_PI * (d + 1.0) / Ld) -
                              0.25 * cexp(I * M_PI / Ld) / sin(M_PI * (d - 1.0) / Ld);
    return rot * s * br;
}

int tf_sp_hann_peak(const fftw_complex *X, size_t L, double nu_guess, int search, double *nu,
                    double *amp, double *phase)
{
    const long nb = (long)(L / 2);
    long c = lround(nu_guess), lo = c - search, hi = c + search;
    if (lo < 1)
        lo = 1;
    if (hi > nb - 1)
        hi = nb - 1;
    if (lo > hi)
        return -1;
    long k = lo;
    for (long q = lo; q <= hi; q++)
        if (cabs(X[q]) > cabs(X[k]))
            k = q;
    const double m0 = cabs(X[k]);
    if (!(m0 > 0.0)) {
        *nu = (double)k;
        *amp = 0.0;
        *phase = 0.0;
        return 0;
    }
    const double mr = cabs(X[k + 1]), ml = cabs(X[k - 1]);
    double d;
    if (mr >= ml) {
        const double a = mr / m0;
        d = (2.0 * a - 1.0) / (a + 1.0);
    } else {
        const double a = ml / m0;
        d = -(2.0 * a - 1.0) / (a + 1.0);
    }
    if (d > 0.5 && mr < m0)
        d = 0.5;
    if (d < -0.5 && ml < m0)
        d = -0.5;
    const double complex z = 2.0 * X[k] / hann_response(d, L);
    *nu = (double)k + d;
    *amp = cabs(z);
    *phase = carg(z);
    return 0;
}
