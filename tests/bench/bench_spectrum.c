/* Benchmark driver for the spectrum module: three channels of N samples (default 10^7)
 * at 10 MS/s, 6 kHz fundamental; times tf_spectrum_run. Built by bench_spectrum.sh. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include <tankfit/tankfit.h>

static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_MONOTONIC, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static double cpu(void)
{
    struct timespec t;
    clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

static double time_run(const tf_capture *cap, const tf_roles *roles, const tf_segment_result *seg,
                       const tf_spectrum_options *o, const char *label)
{
    tf_spectrum_result *r = NULL;
    tf_error err;
    const double a = now(), ca = cpu();
    if (tf_spectrum_run(cap, roles, seg, o, &r, &err) != TF_OK) {
        fprintf(stderr, "%s: %s\n", label, err.msg);
        exit(1);
    }
    const double t = now() - a, ct = cpu() - ca;
    printf("%-34s %7.3f s wall %7.3f s cpu  (M = %zu periods, S = %zu, H = %d, f = %.9g Hz, THD(i) = %.4f %%)\n",
           label, t, ct, r->periods, r->samples_per_period, r->harmonics, r->fundamental_hz,
           100.0 * r->ch[0].thd);
    tf_spectrum_free(r);
    return t;
}

int main(int argc, char **argv)
{
    const size_t n = argc > 1 ? (size_t)atof(argv[1]) : 10000000;
    const double dt = 1e-7, f = 6e3;
    tf_capture *cap = tf_capture_create();
    tf_error err;
    if (!cap || tf_capture_alloc(cap, 3, n, &err) != TF_OK) {
        fprintf(stderr, "out of memory\n");
        return 71;
    }
    cap->dt_s = dt;
    cap->t0_s = 0.37 * dt;
    for (size_t k = 0; k < n; k++) {
        const double t = cap->t0_s + (double)k * dt, w = 2.0 * M_PI * f * t;
        double v = 0.0;
        for (int h = 1; h <= 15; h += 2)
            v += 300.0 / h * sin(h * w);
        cap->ch[0].samples[k] = (float)(120.0 * sin(w - 0.6) + 9.0 * sin(3.0 * w + 0.2));
        cap->ch[1].samples[k] = (float)v;
        cap->ch[2].samples[k] = (float)(450.0 * cos(w - 0.6));
    }
    tf_roles roles;
    memset(&roles, 0, sizeof roles);
    roles.current = 0;
    roles.voltage = 1;
    roles.cap_voltage = 2;
    roles.switch_voltage = -1;
    for (int g = 0; g < 4; g++)
        roles.gate[g] = -1;
    tf_spectrum_options o;
    tf_spectrum_options_init(&o);
    o.fundamental_hz = f; /* as the segmenter would give it */
    o.skew_s = 50e-9;
    /* firing cycles one period apart, as the segmenter would give them: the
     * spectrum then also integrates the energy of every cycle */
    tf_segment_result seg;
    memset(&seg, 0, sizeof seg);
    seg.ncycles = (size_t)floor((double)n * dt * f) - 1;
    seg.cycles = calloc(seg.ncycles, sizeof *seg.cycles);
    if (!seg.cycles) {
        fprintf(stderr, "out of memory\n");
        return 71;
    }
    for (size_t c = 0; c < seg.ncycles; c++) {
        seg.cycles[c].start_s = cap->t0_s + 5e-6 + (double)c / f;
        seg.cycles[c].period_s = 1.0 / f;
        seg.cycles[c].frequency_hz = f;
    }
    printf("3 channels x %zu samples\n", n);
    time_run(cap, &roles, NULL, &o, "synchronous, fundamental given");
    time_run(cap, &roles, NULL, &o, "same again (plans cached)");
    o.threads = 1;
    time_run(cap, &roles, NULL, &o, "same, one thread");
    o.threads = 0;
    time_run(cap, &roles, &seg, &o, "with cycle energies");
    o.threads = 1;
    time_run(cap, &roles, &seg, &o, "with cycle energies, one thread");
    o.threads = 0;
    o.fundamental_hz = 0.0;
    time_run(cap, &roles, NULL, &o, "synchronous, fundamental estimated");
    o.fundamental_hz = f;
    o.window = 1;
    time_run(cap, &roles, NULL, &o, "Hann window");
    free(seg.cycles);
    tf_capture_destroy(cap);
    return 0;
}
