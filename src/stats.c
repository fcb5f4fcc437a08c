/* Channel statistics: PLACEHOLDER (range, mean, RMS only) until the module lands. */
#include <tankfit/stats.h>

#include <math.h>
#include <string.h>

double tf_stats_noise_sigma(const float *x, size_t n) { (void)x; (void)n; return NAN; }
void tf_stats_compute(const float *x, size_t n, tf_channel_stats *out)
{
    memset(out, 0, sizeof *out);
    double s = 0, s2 = 0;
    out->min = out->max = x[0];
    for (size_t k = 0; k < n; k++) {
        s += x[k]; s2 += (double)x[k] * x[k];
        if (x[k] < out->min) out->min = x[k];
        if (x[k] > out->max) out->max = x[k];
    }
    out->mean = s / (double)n;
    out->rms = sqrt(s2 / (double)n);
    out->noise_sigma = NAN;
}
