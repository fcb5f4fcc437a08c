/* Private benchmark driver for the importers: loads one capture, prints its shape,
 * wall time, MB/s and peak RSS (getrusage). Built by tests/bench/bench_import.sh. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/resource.h>
#include <sys/stat.h>
#include <time.h>

#include <tankfit/import.h>

int main(int argc, char **argv)
{
    if (argc < 2) {
        fprintf(stderr, "usage: csv_load FILE [threads] [print-rows]\n");
        return 64;
    }
    tf_import_options opt;
    tf_import_options_init(&opt);
    if (argc > 2)
        opt.threads = atoi(argv[2]);
    size_t show = argc > 3 ? (size_t)atol(argv[3]) : 0;
    struct stat sb;
    if (stat(argv[1], &sb) != 0) {
        perror(argv[1]);
        return 66;
    }
    struct timespec a, b;
    clock_gettime(CLOCK_MONOTONIC, &a);
    tf_capture *cap = NULL;
    tf_error err;
    tf_error_clear(&err);
    tf_status st = tf_import_file(argv[1], &opt, &cap, &err);
    clock_gettime(CLOCK_MONOTONIC, &b);
    if (st != TF_OK) {
        fprintf(stderr, "error %d: %s\n", (int)st, err.msg);
        return tf_exit_code(st);
    }
    double s = (double)(b.tv_sec - a.tv_sec) + 1e-9 * (double)(b.tv_nsec - a.tv_nsec);
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    printf("rows %zu channels %zu t0 %.12g dt %.12g res %.3g delim '%c' decimal '%c' header %d "
           "meta %zu line_end %s time_col %d\n",
           cap->n, cap->nchan, cap->t0_s, cap->dt_s, cap->dialect.time_resolution_s,
           cap->dialect.delimiter ? cap->dialect.delimiter : '0',
           cap->dialect.decimal ? cap->dialect.decimal : '0', cap->dialect.header_line,
           cap->dialect.metadata_lines, cap->dialect.line_end, cap->dialect.time_column);
    for (size_t c = 0; c < cap->nchan; c++)
        printf("  %s [%s] scale %g gaps %zu\n", cap->ch[c].name, cap->ch[c].unit,
               cap->ch[c].scale, cap->ch[c].gaps_filled);
    for (size_t k = 0; k < show && k < cap->n; k++) {
        printf("  %zu:", k);
        for (size_t c = 0; c < cap->nchan; c++)
            printf(" %.9g", cap->ch[c].samples[k]);
        printf("\n");
    }
    for (size_t i = 0; i < cap->nmeta; i++)
        printf("  meta: %s\n", cap->metadata[i]);
    for (size_t i = 0; i < cap->nwarn; i++)
        printf("  warning: %s\n", cap->warnings[i]);
    printf("seconds %.3f MB/s %.1f peak_rss_MiB %.1f\n", s, (double)sb.st_size / 1e6 / s,
           (double)ru.ru_maxrss / 1024.0);
    tf_capture_destroy(cap);
    return 0;
}
