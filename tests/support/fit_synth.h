/* fit tests: exact series-RLC bursts of a half-bridge (or a ring-down) with device
 * drops, scope noise, 8-bit quantisation and probe skew, plus the matching segments. */
#ifndef TF_FIT_SYNTH_H
#define TF_FIT_SYNTH_H

#include <tankfit/tankfit.h>

typedef struct fit_synth_cfg {
    double l_h, c_f, r_ohm;      /* tank */
    double vdc_v;                /* DC link (half-bridge) or precharge (ring-down) */
    double vt_v, vd_v;           /* thyristor and diode drops (0: none) */
    double fire_hz;              /* firing rate of each thyristor (half-bridge) */
    double dt_s, duration_s;
    double noise_i_a, noise_v_v; /* Gaussian noise sigma */
    double range_i_a;            /* +- range of the current channel (0: none) */
    int bits_i;                  /* ADC bits over the range (0: none) */
    double skew_v_s;             /* the voltage channel shows v(t - skew) */
    unsigned long seed;
    int ring_down;               /* one ring-down burst instead of a half-bridge */
    /* optional schedule: R and L at each firing instant t (seconds) */
    double (*r_of_t)(double t, void *ctx);
    double (*l_of_t)(double t, void *ctx);
    void *ctx;
} fit_synth_cfg;

/* Truth per burst (arrays of nbursts, owned). */
typedef struct fit_synth_truth {
    size_t nbursts;
    double *t_s, *r_ohm, *l_h, *peak_a;
} fit_synth_truth;

void fit_synth_defaults(fit_synth_cfg *c);

/* Build the capture (channels "i" in A and "v" in V) and segments. 0 on success. */
int fit_synth_make(const fit_synth_cfg *c, tf_capture **cap, tf_segment_result **seg,
                   fit_synth_truth *truth);

void fit_synth_free(tf_capture *cap, tf_segment_result *seg, fit_synth_truth *truth);

/* Damped sinusoid A exp(-alpha t) sin(wd t + phi) + noise (sigma) into x[n]. */
void fit_synth_damped(float *x, size_t n, double dt, double a, double alpha, double wd,
                      double phi, double sigma, unsigned long seed);

#endif
