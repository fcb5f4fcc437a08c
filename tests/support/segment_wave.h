/* Test waveforms for the segmenter: exact piecewise series-RLC response of inverter
 * stages (textbook series RLC circuit analysis), with known conduction intervals. */
#ifndef SEGMENT_WAVE_H
#define SEGMENT_WAVE_H

#include <stddef.h>
#include <tankfit/tankfit.h>

typedef struct segw_cfg {
    tf_topology topo;
    double L, C, R;         /* tank */
    double E;               /* bridge: output +/-E; single: DC source; ring-down: precharge */
    double vt, vd;          /* thyristor and diode drops */
    double reset_v;         /* single: capacitor voltage restored before each firing */
    double fire_step_s;     /* time between successive firings (bridge: half the period) */
    double t_first_s;       /* first firing */
    double fs, duration_s;
    double noise;           /* Gaussian sigma, A */
    double snr_db;          /* > 0: noise sigma = clean RMS / 10^(snr/20), overrides noise */
    double range;           /* clip at +/-range (0: none) */
    int bits;               /* quantise over +/-range (0: none) */
    double tq_s;            /* thyristor recovery: re-conducts if forward voltage returns sooner */
    int skip_firing;        /* index of a firing left out (-1: none) */
    unsigned long long seed;
    int gates;              /* add gate channels g1.. */
} segw_cfg;

typedef struct segw_interval {
    tf_device dev;
    double t0, t1;
    int refire;             /* a thyristor interval that started without a firing */
    double peak;            /* largest |current| of the clean samples inside it, A */
} segw_interval;

typedef struct segw_out {
    tf_capture *cap;        /* channel 0 "i_load" (A); gates "g1".."g4" when asked */
    segw_interval *iv;
    size_t niv;
    double *fire;           /* firing instants */
    size_t nfire;
    double wd, alpha;
    double rms;             /* RMS of the clean current */
    double noise;           /* noise sigma used */
} segw_out;

/* Defaults: a 6 kHz-ish half-bridge tank at 10 MS/s, non-overlapping. */
void segw_defaults(segw_cfg *c);

/* Simulate and sample. Returns 0 on success. */
int segw_make(const segw_cfg *c, segw_out *o);
void segw_free(segw_out *o);

#endif
