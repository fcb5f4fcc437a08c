/* The fit stage alone on a capture file, as `tankfit check` runs it (design's C, L and
 * drops, current i_load, voltage v_out): wall and CPU time of tf_fit_run on 1 and 2
 * threads, best of REPS, and the "resonance" JSON of each run compared byte for byte
 * (the figures must not depend on the thread count). Not run by ctest.
 * With ROLES "guess" the channel roles are guessed (as analyze does without options).
 * Usage: bench_fit_check CAPTURE DESIGN.ini [REPS] [JSON_OUT] [ROLES] */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include <tankfit/tankfit.h>

static double now(clockid_t id)
{
    struct timespec t;
    clock_gettime(id, &t);
    return (double)t.tv_sec + 1e-9 * (double)t.tv_nsec;
}

int main(int argc, char **argv)
{
    if (argc < 3) {
        fputs("usage: bench_fit_check CAPTURE DESIGN.ini [REPS] [JSON_OUT]\n", stderr);
        return 64;
    }
    const int reps = argc > 3 ? atoi(argv[3]) : 3;
    tf_error err;
    tf_design d;
    tf_design_init(&d);
    if (tf_design_load(argv[2], &d, &err) != TF_OK) {
        fprintf(stderr, "%s\n", err.msg);
        return 1;
    }
    tf_import_options io;
    tf_import_options_init(&io);
    tf_capture *cap = NULL;
    if (tf_import_file(argv[1], &io, &cap, &err) != TF_OK) {
        fprintf(stderr, "%s\n", err.msg);
        return 1;
    }
    tf_capture_compute_stats(cap);
    tf_analysis_options o;
    tf_analysis_options_init(&o, &d);
    if (!(argc > 5 && strcmp(argv[5], "guess") == 0)) {
        o.roles.current = "i_load";
        o.roles.voltage = "v_out";
        o.roles.cap_voltage = "v_cap";
    }
    tf_roles roles;
    tf_segment_result *seg = NULL;
    if (tf_roles_resolve(cap, &o.roles, &d, &roles, &err) != TF_OK ||
        tf_segment_run(cap, &roles, &o.segment, &seg, &err) != TF_OK) {
        fprintf(stderr, "%s\n", err.msg);
        return 1;
    }
    printf("%zu samples, %zu bursts, %zu lobes\n", cap->n, seg->nbursts, seg->nlobes);
    char *first = NULL;
    int same = 1;
    for (int threads = 1; threads <= 2; threads++) {
        double bw = 1e9, bc = 1e9;
        for (int r = 0; r < reps; r++) {
            o.fit.threads = threads;
            tf_fit_result *fr = NULL;
            const double w0 = now(CLOCK_MONOTONIC), c0 = now(CLOCK_PROCESS_CPUTIME_ID);
            if (tf_fit_run(cap, &roles, seg, &o.fit, &fr, &err) != TF_OK) {
                fprintf(stderr, "fit: %s\n", err.msg);
                return 1;
            }
            const double w = now(CLOCK_MONOTONIC) - w0, c = now(CLOCK_PROCESS_CPUTIME_ID) - c0;
            bw = w < bw ? w : bw;
            bc = c < bc ? c : bc;
            json_t *j = tf_fit_to_json(fr);
            char *s = json_dumps(j, JSON_SORT_KEYS | JSON_REAL_PRECISION(17));
            json_decref(j);
            if (!first) {
                first = s;
                if (argc > 4 && strcmp(argv[4], "-") != 0) {
                    FILE *f = fopen(argv[4], "w");
                    if (f) {
                        fputs(s, f);
                        fclose(f);
                    }
                }
            } else {
                same &= strcmp(first, s) == 0;
                free(s);
            }
            tf_fit_free(fr);
        }
        printf("fit, %d thread(s): best wall %.3f s, best CPU %.3f s\n", threads, bw, bc);
    }
    printf("results identical across runs and thread counts: %s\n", same ? "yes" : "NO");
    /* where the time goes (1 thread): bursts only, bursts and lobes, everything */
    for (int part = 0; part < 2; part++) {
        tf_roles r2 = roles;
        r2.voltage = -1;
        o.fit.threads = 1;
        o.fit.skip_lobes = part == 0;
        double bc = 1e9;
        for (int r = 0; r < reps; r++) {
            tf_fit_result *fr = NULL;
            const double c0 = now(CLOCK_PROCESS_CPUTIME_ID);
            if (tf_fit_run(cap, &r2, seg, &o.fit, &fr, &err) != TF_OK)
                return 1;
            const double c = now(CLOCK_PROCESS_CPUTIME_ID) - c0;
            bc = c < bc ? c : bc;
            tf_fit_free(fr);
        }
        printf("without v-i and power, %s: best CPU %.3f s\n",
               part ? "bursts and lobes" : "bursts only", bc);
    }
    free(first);
    tf_segment_free(seg);
    tf_capture_destroy(cap);
    return same ? 0 : 1;
}
