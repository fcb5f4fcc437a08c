/* Segmenter benchmark: tf_segment_run on an N-sample half-bridge current (40 dB noise,
 * 12-bit), best of three runs. Built and run by bench_segment.sh; not run by ctest. */
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

#include <tankfit/tankfit.h>

#include "segment_wave.h"

static double now(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

int main(int argc, char **argv)
{
    size_t n = argc > 1 ? (size_t)strtod(argv[1], NULL) : 10000000;
    segw_cfg c;
    segw_defaults(&c);
    c.snr_db = 40;
    c.range = 200;
    c.bits = 12;
    c.duration_s = (double)n / c.fs;
    segw_out w;
    if (segw_make(&c, &w) != 0) {
        fputs("cannot make the waveform\n", stderr);
        return 1;
    }
    tf_roles roles = {0, -1, -1, -1, {-1, -1, -1, -1}, ""};
    double best = 1e9, best_cpu = 1e9;
    size_t lobes = 0, cycles = 0;
    for (int rep = 0; rep < 3; rep++) {
        tf_segment_result *r = NULL;
        tf_error err;
        double t0 = now();
        clock_t c0 = clock();
        if (tf_segment_run(w.cap, &roles, NULL, &r, &err) != TF_OK) {
            fprintf(stderr, "segment: %s\n", err.msg);
            return 1;
        }
        double t = now() - t0, cpu = (double)(clock() - c0) / CLOCKS_PER_SEC;
        best = t < best ? t : best;
        best_cpu = cpu < best_cpu ? cpu : best_cpu;
        lobes = r->nlobes;
        cycles = r->ncycles;
        /* TF_BENCH_DUMP=FILE: every lobe's boundaries and peak in hex, to compare the
         * bits of two builds */
        const char *dump = getenv("TF_BENCH_DUMP");
        FILE *df = rep == 0 && dump ? fopen(dump, "w") : NULL;
        for (size_t i = 0; df && i < r->nlobes; i++)
            fprintf(df, "%a %a %a %a %d %d\n", r->lobes[i].start_s, r->lobes[i].end_s,
                    r->lobes[i].peak_s, r->lobes[i].charge_c, r->lobes[i].start_model,
                    r->lobes[i].end_model);
        if (df)
            fclose(df);
        tf_segment_free(r);
    }
    printf("%zu samples, %zu lobes, %zu cycles: best wall %.3f s (%.1f million samples/s), "
           "best CPU %.3f s (%.1f million samples/s)\n", w.cap->n, lobes, cycles, best,
           (double)w.cap->n / best / 1e6, best_cpu, (double)w.cap->n / best_cpu / 1e6);
    segw_free(&w);
    return 0;
}
