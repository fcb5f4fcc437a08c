/* Human-readable sections of `tankfit analyze`, one file per pipeline stage. */
#ifndef TF_CLI_ANALYZE_PARTS_H
#define TF_CLI_ANALYZE_PARTS_H

#include <stdio.h>
#include <tankfit/tankfit.h>

/* Resonance section: fd, alpha, Q, R, L, C with uncertainties and the methods'
 * agreement (analyze_fit.c). */
void tf_cli_print_resonance(FILE *out, const tf_capture *cap, const tf_fit_result *fit);

/* Harmonic table (first nshow harmonics) and power (analyze_spectrum.c). */
void tf_cli_print_spectrum(FILE *out, const tf_capture *cap, const tf_spectrum_result *spec,
                           int nshow);

#endif
