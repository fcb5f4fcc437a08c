/* Per-channel statistics: range, mean, RMS, robust noise, quantisation step, clipping. */
#ifndef TANKFIT_STATS_H
#define TANKFIT_STATS_H

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Statistics of one channel, all in the channel's physical unit. */
typedef struct tf_channel_stats {
    double min, max;        /* extreme sample values */
    double mean, rms;       /* arithmetic mean and root mean square */
    double noise_sigma;     /* robust noise: 1.4826 * MAD(first differences) / sqrt(2) */
    double lsb;             /* estimated quantisation step; 0 when none is visible */
    size_t clipped_samples; /* samples inside runs sitting at the extreme codes */
    size_t clipped_runs;    /* number of such runs */
    int clipped_high;       /* non-zero when runs sit at the maximum */
    int clipped_low;        /* non-zero when runs sit at the minimum */
} tf_channel_stats;

/* Compute statistics of x[0..n-1] (n >= 1). Never fails for n >= 1; finite input
 * expected. Uses O(1) extra memory apart from a bounded sample for the
 * median-based estimates. */
void tf_stats_compute(const float *x, size_t n, tf_channel_stats *out);

/* Robust noise sigma of x alone (median absolute deviation of first
 * differences, scaled for Gaussian noise): shared by inspect and the segmenter. */
double tf_stats_noise_sigma(const float *x, size_t n);

#ifdef __cplusplus
}
#endif
#endif
