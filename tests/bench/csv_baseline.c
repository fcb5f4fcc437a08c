/* Calibration for bench_import.sh: one libcsv parser with empty callbacks over a
 * file (read in 1 MiB chunks), the reference point (~220 MB/s on an idle
 * machine). Prints MB/s of wall time and of CPU time. */
#include <csv.h>
#include <stdio.h>
#include <stdlib.h>
#include <sys/resource.h>
#include <time.h>

static void cb1(void *s, size_t len, void *data) { (void)s; (void)len; ++*(size_t *)data; }
static void cb2(int c, void *data) { (void)c; (void)data; }

int main(int argc, char **argv)
{
    if (argc < 2)
        return 64;
    FILE *f = fopen(argv[1], "rb");
    if (!f)
        return 66;
    static char buf[1 << 20];
    struct csv_parser p;
    csv_init(&p, 0);
    size_t fields = 0, bytes = 0, got;
    struct timespec a, b;
    clock_gettime(CLOCK_MONOTONIC, &a);
    while ((got = fread(buf, 1, sizeof buf, f)) > 0) {
        csv_parse(&p, buf, got, cb1, cb2, &fields);
        bytes += got;
    }
    csv_fini(&p, cb1, cb2, &fields);
    clock_gettime(CLOCK_MONOTONIC, &b);
    struct rusage ru;
    getrusage(RUSAGE_SELF, &ru);
    double s = (double)(b.tv_sec - a.tv_sec) + 1e-9 * (double)(b.tv_nsec - a.tv_nsec);
    double cpu = (double)ru.ru_utime.tv_sec + 1e-6 * (double)ru.ru_utime.tv_usec +
                 (double)ru.ru_stime.tv_sec + 1e-6 * (double)ru.ru_stime.tv_usec;
    printf("libcsv empty callbacks: %zu fields, %.1f MB/s wall, %.1f MB/s per CPU second\n",
           fields, (double)bytes / 1e6 / s, (double)bytes / 1e6 / cpu);
    csv_free(&p);
    fclose(f);
    return 0;
}
