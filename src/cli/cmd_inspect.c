/* tankfit inspect: a capture's layout, time base and per-channel statistics, as a table or JSON. */
#include "common.h"

#include <pthread.h>
#include <stdatomic.h>
#include <string.h>

#include <tankfit/siformat.h>

/* Channel statistics on two threads: each takes the next channel not yet done. */
typedef struct {
    tf_capture *cap;
    atomic_size_t next;
} stats_job;

static void *stats_worker(void *arg)
{
    stats_job *job = arg;
    size_t c;
    while ((c = atomic_fetch_add(&job->next, 1)) < job->cap->nchan) {
        tf_channel *ch = &job->cap->ch[c];
        tf_stats_compute(ch->samples, job->cap->n, &ch->stats);
        ch->stats_valid = 1;
    }
    return NULL;
}

static void compute_stats(tf_capture *cap)
{
    stats_job job = {cap, 0};
    pthread_t t;
    if (cap->n == 0)
        return;
    int threaded = cap->nchan > 1 && pthread_create(&t, NULL, stats_worker, &job) == 0;
    stats_worker(&job);
    if (threaded)
        pthread_join(t, NULL);
}

static void help(FILE *out)
{
    fputs("Usage: tankfit inspect FILE [--json] [capture options]\n"
          "Report how FILE (CSV, or WAV/RF64/W64/FLAC/... read by libsndfile) is laid out\n"
          "and what each channel holds: samples, sample rate, duration, and per channel\n"
          "name, unit, min, max, mean, RMS, noise sigma (robust, from the median absolute\n"
          "deviation of first differences), quantisation step (LSB) and clipped samples\n"
          "(runs sitting flat at the channel's extreme value). Clipped channels are\n"
          "warned about on stderr. A WAV takes its scaling from --full-scale or from the\n"
          "sidecar FILE.tfscale (see docs/import-wav.md); without it values stay in\n"
          "full-scale units (FS). For a WAV, --sample-rate or --dt replace the rate\n"
          "written in the file.\n\n"
          "Options:\n"
          "  --json                  print one JSON document instead of the table\n"
          "                          (keys: docs/inspect.md)\n"
          "  -h, --help              this text\n\n",
          out);
    tf_cli_import_options_help(out);
    fputs("\nExit status: 0 done, 64 usage, 65 bad data, 66 cannot open FILE, 74 write error.\n"
          "Caution: captures come from stages at hundreds of volts; connect probes only\n"
          "with the stage de-energised and its capacitors discharged.\n",
          out);
}

static const char *yes_no(int v)
{
    return v ? "yes" : "no";
}

static void print_layout(const tf_capture *cap)
{
    const tf_dialect *d = &cap->dialect;
    char a[48], b[48];
    printf("file         %s\n", cap->path);
    if (d->delimiter) {
        const char *delim = d->delimiter == '\t' ? "tab" : d->delimiter == ' ' ? "spaces"
                           : NULL;
        char dbuf[4] = {'\'', d->delimiter, '\'', 0};
        printf("format       %s, delimiter %s, decimal mark '%c'\n", d->format[0] ? d->format
               : "csv", delim ? delim : dbuf, d->decimal ? d->decimal : '.');
        if (d->header_line > 0)
            printf("header       line %d\n", d->header_line);
        else
            printf("header       none\n");
        printf("metadata     %zu line%s\n", d->metadata_lines, d->metadata_lines == 1 ? "" : "s");
        for (size_t k = 0; k < cap->nmeta; k++)
            printf("             %s\n", cap->metadata[k]);
        printf("line end     %s, byte-order mark %s\n", d->line_end[0] ? d->line_end : "?",
               yes_no(d->has_bom));
        if (d->time_column >= 0)
            printf("time column  %d (printed to %s)\n", d->time_column + 1,
                   tf_si_format(a, sizeof a, d->time_resolution_s, "s", 3));
        else
            printf("time column  none\n");
    } else {
        printf("format       %s, %s\n", d->format, d->wav_subformat[0] ? d->wav_subformat : "?");
        for (size_t k = 0; k < cap->nmeta; k++)
            printf("%-12s %s\n", k ? "" : "metadata", cap->metadata[k]);
    }
    printf("samples      %zu\n", cap->n);
    printf("sample rate  %s (dt %s)\n", tf_si_format(a, sizeof a, 1.0 / cap->dt_s, "Hz", 6),
           tf_si_format(b, sizeof b, cap->dt_s, "s", 6));
    printf("duration     %s\n", tf_si_format(a, sizeof a, (double)cap->n * cap->dt_s, "s", 6));
    printf("t0           %s\n", tf_si_format(a, sizeof a, cap->t0_s, "s", 6));
}

static void print_channels(const tf_capture *cap)
{
    size_t w = 7;
    for (size_t c = 0; c < cap->nchan; c++)
        if (strlen(cap->ch[c].name) > w)
            w = strlen(cap->ch[c].name);
    printf("\n%-*s  %-5s %12s %12s %12s %12s %12s %12s %8s\n", (int)w, "channel", "unit", "min",
           "max", "mean", "RMS", "noise", "LSB", "clipped");
    for (size_t c = 0; c < cap->nchan; c++) {
        const tf_channel *ch = &cap->ch[c];
        const tf_channel_stats *s = &ch->stats;
        char v[6][48];
        const char *u = ch->unit;
        tf_si_format(v[0], sizeof v[0], s->min, u, 4);
        tf_si_format(v[1], sizeof v[1], s->max, u, 4);
        tf_si_format(v[2], sizeof v[2], s->mean, u, 4);
        tf_si_format(v[3], sizeof v[3], s->rms, u, 4);
        tf_si_format(v[4], sizeof v[4], s->noise_sigma, u, 3);
        if (s->lsb > 0)
            tf_si_format(v[5], sizeof v[5], s->lsb, u, 4);
        else
            strcpy(v[5], "-");
        printf("%-*s  %-5s %12s %12s %12s %12s %12s %12s %8zu\n", (int)w, ch->name,
               u[0] ? u : "-", v[0], v[1], v[2], v[3], v[4], v[5], s->clipped_samples);
    }
}

static void warn_clipped(const tf_capture *cap)
{
    char a[48];
    for (size_t c = 0; c < cap->nchan; c++) {
        const tf_channel_stats *s = &cap->ch[c].stats;
        if (!s->clipped_samples)
            continue;
        const char *where = s->clipped_high && s->clipped_low ? "maximum and minimum"
                            : s->clipped_high ? "maximum" : "minimum";
        tf_si_format(a, sizeof a, s->clipped_high ? s->max : s->min, cap->ch[c].unit, 4);
        fprintf(stderr, "tankfit: warning: %s: channel %s looks clipped: %zu samples in %zu "
                "run%s sit flat at its %s (%s); the trace left the instrument's range there\n",
                cap->path, cap->ch[c].name, s->clipped_samples, s->clipped_runs,
                s->clipped_runs == 1 ? "" : "s", where, a);
    }
}

static int run(int argc, char **argv)
{
    tf_import_options opt;
    const char *file = NULL;
    int json = 0, r;
    tf_import_options_init(&opt);
    int files_only = 0;
    for (int i = 1; i < argc; i++) {
        if ((r = tf_cli_operand("inspect", argv[i], &files_only, &file)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            continue;
        }
        if ((r = tf_cli_import_option(argc, argv, &i, &opt)) != 0) {
            if (r < 0)
                return EXIT_USAGE;
            continue;
        }
        if (strcmp(argv[i], "--json") == 0)
            json = 1;
        else
            return tf_cli_usage("inspect", "unknown option '%s'", argv[i]);
    }
    if (!file)
        return tf_cli_usage("inspect", "expected a capture FILE to inspect");
    tf_capture *cap = NULL;
    if ((r = tf_cli_load_capture(file, &opt, &cap)) != 0)
        return r;
    compute_stats(cap);
    warn_clipped(cap);
    if (json) {
        r = tf_cli_print_json(tf_capture_to_json(cap));
    } else {
        print_layout(cap);
        print_channels(cap);
        r = fflush(stdout) == 0 && !ferror(stdout) ? 0 : EXIT_IOERR;
    }
    tf_capture_destroy(cap);
    if (r == EXIT_IOERR)
        fputs("tankfit: inspect: cannot write the report to stdout\n", stderr);
    return r;
}

const tf_cli_command tf_cmd_inspect = {
    "inspect", "report a capture's layout, channels, noise, quantisation and clipping", run,
    help};
