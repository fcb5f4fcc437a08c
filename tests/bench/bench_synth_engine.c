/* Simulator engine benchmark: times tf_synth_fill of N samples x 6 channels (and the
 * truth) for a half-bridge, a full-bridge and a single-switch stage. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <tankfit/synth.h>

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static void run(const char *name, tf_topology topo, double f, size_t n, double fs)
{
    static tf_design d;
    tf_design_init(&d);
    d.topology = topo;
    d.split_capacitor = 0;
    d.dc_link_v = 500;
    d.firing_frequency_hz = f;
    d.n_firing_times = 0;
    d.capacitance_f = 2e-6;
    d.inductance_h = 50e-6;
    d.resistance_ohm = 0.5;
    d.turnoff_time_s = 15e-6;
    d.thyristor_drop_v = 1.5;
    d.diode_drop_v = 1.0;
    d.stray_inductance_h = 0.5e-6;
    d.reset_inductance_h = 2e-3;
    d.reset_resistance_ohm = 2;
    d.precharge_v = NAN;
    d.start_s = 0;
    d.duration_s = (double)n / fs;
    d.nschedule = 0;
    tf_error e;
    tf_synth *s = tf_synth_create(&d, &e);
    if (!s) {
        fprintf(stderr, "%s\n", e.msg);
        exit(1);
    }
    enum { B = 65536 };
    static float buf[8][B];
    float *out[TF_SYN_NCHAN] = {0};
    int chans[6] = {TF_SYN_I_LOAD, TF_SYN_V_OUT, TF_SYN_V_C, TF_SYN_V_AK1, TF_SYN_G1, TF_SYN_G2};
    for (int c = 0; c < 6; c++)
        out[chans[c]] = buf[c];
    double skew[TF_SYN_NCHAN] = {0, 20e-9, 20e-9, -10e-9, 0, 0, 0, 0};
    double t0 = now();
    clock_t c0 = clock();
    for (size_t k = 0; k < n; k += B) {
        size_t m = n - k < B ? n - k : B;
        if (tf_synth_fill(s, (double)k / fs, 1 / fs, m, skew, out, &e) != TF_OK) {
            fprintf(stderr, "%s\n", e.msg);
            exit(1);
        }
    }
    double t1 = now();
    clock_t c1 = clock();
    json_t *j = tf_synth_truth(s, &e);
    double t2 = now();
    clock_t c2 = clock();
    size_t niv;
    tf_synth_intervals(s, &niv);
    printf("%-12s %zu samples x 6 channels (%.3g s simulated, %zu intervals): fill %.2f s "
           "(CPU %.2f s), truth %.2f s (CPU %.2f s)\n", name, n, d.duration_s, niv, t1 - t0,
           (double)(c1 - c0) / CLOCKS_PER_SEC, t2 - t1, (double)(c2 - c1) / CLOCKS_PER_SEC);
    json_decref(j);
    tf_synth_destroy(s);
}

int main(int argc, char **argv)
{
    size_t n = argc > 1 ? (size_t)atof(argv[1]) : 10000000;
    double fs = 10e6;
    run("half-bridge", TF_TOPO_HALF_BRIDGE, 9000, n, fs);
    run("full-bridge", TF_TOPO_FULL_BRIDGE, 5000, n, fs);
    run("single", TF_TOPO_SINGLE, 4000, n / 10, fs);
    return 0;
}
