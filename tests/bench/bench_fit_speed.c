/* Fitting speed: tf_fit_run on a half-bridge capture of N bursts of about 1000
 * samples (exact series-RLC bursts with device drops, 40 dB noise), drop model on
 * (C and drops known), lobes skipped, on 1 and on all cores; then with the voltage
 * channel (v-i identification with the skew search, power method).
 * Usage: bench_fit_speed [BURSTS] */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "fit_synth.h"

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

int main(int argc, char **argv)
{
    const size_t bursts = argc > 1 ? (size_t)atol(argv[1]) : 16000;
    fit_synth_cfg c;
    fit_synth_defaults(&c);
    c.duration_s = (double)bursts / (2 * c.fire_hz) + 1e-4;
    c.noise_i_a = 0.45;
    tf_capture *cap;
    tf_segment_result *seg;
    fit_synth_truth tr;
    if (fit_synth_make(&c, &cap, &seg, &tr) != 0)
        return 1;
    tf_roles roles;
    memset(&roles, 0, sizeof roles);
    roles.voltage = roles.cap_voltage = roles.switch_voltage = -1;
    for (int k = 0; k < 4; k++)
        roles.gate[k] = -1;
    size_t len = 0;
    for (size_t k = 0; k < seg->nbursts; k++)
        len += seg->bursts[k].i1 - seg->bursts[k].i0;
    printf("%zu bursts, %.0f samples per burst on average, capture of %zu samples\n",
           seg->nbursts, (double)len / (double)seg->nbursts, cap->n);
    const int threads[] = {1, 0, 1, 1};
    const char *what[] = {"drop model", "drop model", "plain model", "drop model + v-i + power"};
    for (int t = 0; t < 4; t++) {
        tf_fit_options o;
        tf_fit_options_init(&o);
        o.capacitance_f = c.c_f;
        roles.voltage = t == 3 ? 1 : -1;
        if (t != 2) { /* run 2: plain model only */
            o.thyristor_drop_v = c.vt_v;
            o.diode_drop_v = c.vd_v;
        }
        o.skip_lobes = 1;
        o.threads = threads[t];
        tf_fit_result *r;
        tf_error e;
        double t0 = now();
        clock_t c0 = clock();
        if (tf_fit_run(cap, &roles, seg, &o, &r, &e) != TF_OK) {
            fprintf(stderr, "%s\n", e.msg);
            return 1;
        }
        double el = now() - t0, cpu = (double)(clock() - c0) / CLOCKS_PER_SEC;
        printf("threads %s, %s: %.3f s wall, %.3f s CPU, %.1f us CPU per burst; R %.5g ohm (true %.5g)\n",
               threads[t] ? "1" : "all", what[t], el, cpu,
               1e6 * cpu / (double)seg->nbursts, r->resistance_ohm.value, c.r_ohm);
        tf_fit_free(r);
    }
    fit_synth_free(cap, seg, &tr);
    return 0;
}
