/* Spectrum and power: synchronous (whole-period) harmonic analysis with FFTW. */
#ifndef TANKFIT_SPECTRUM_H
#define TANKFIT_SPECTRUM_H

#include <stddef.h>
#include <jansson.h>
#include <tankfit/capture.h>
#include <tankfit/roles.h>
#include <tankfit/segment.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef struct tf_spectrum_options {
    int harmonics;             /* H, default 40 (capped by Nyquist) */
    int window;                /* non-zero: Hann window, non-synchronous */
    double fundamental_hz;     /* > 0 overrides the segmenter's output frequency */
    double skew_s;             /* voltage-to-current delay to correct before power */
} tf_spectrum_options;

typedef struct tf_harmonic {
    int n;
    double amplitude;          /* peak */
    double rms;
    double phase_deg;          /* relative to the output voltage's fundamental */
} tf_harmonic;

typedef struct tf_channel_spectrum {
    int channel;               /* index in the capture */
    char role[24];             /* "current", "voltage", "cap_voltage" */
    size_t nharm;
    tf_harmonic *harm;         /* harm[0] is n = 1 */
    double dc, rms, crest_factor, thd;   /* thd as a fraction */
} tf_channel_spectrum;

typedef struct tf_power {
    int valid;
    double mean_w, v_rms, i_rms, apparent_va, power_factor, displacement_factor;
    double energy_per_cycle_j;
} tf_power;

typedef struct tf_spectrum_result {
    double fundamental_hz;
    size_t periods;            /* M whole periods analysed */
    int harmonics;             /* H used */
    tf_channel_spectrum *ch;   size_t nch;
    tf_power power;
} tf_spectrum_result;

void tf_spectrum_options_init(tf_spectrum_options *o);

tf_status tf_spectrum_run(const tf_capture *cap, const tf_roles *roles,
                          const tf_segment_result *seg, const tf_spectrum_options *opt,
                          tf_spectrum_result **out, tf_error *err);
void tf_spectrum_free(tf_spectrum_result *r);

/* JSON "spectrum" and "power" members added to obj (keys: docs/json.md). */
void tf_spectrum_to_json(const tf_spectrum_result *r, json_t *obj);

#ifdef __cplusplus
}
#endif
#endif
