/* CSV importer: libcsv in fixed-size chunks, two parser threads on line-aligned halves. */
#include <tankfit/import.h>

#include <csv.h>
#include <errno.h>
#include <fcntl.h>
#include <float.h>
#include <math.h>
#include <pthread.h>
#include <stdarg.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include "csv_internal.h"
#include "numparse.h"

#define CHUNK ((size_t)1 << 20)          /* bytes read and handed to libcsv per call */
#ifndef TF_CSV_MIN_SPLIT                 /* smaller files use one thread (the fuzz */
#define TF_CSV_MIN_SPLIT ((size_t)8 << 20) /* harness lowers it to reach both) */
#endif
#define MAX_WORKERS 2
enum { MAP_SKIP = -1, MAP_TIME = -2, MAP_EMPTY = -3 };

typedef struct csv_job {
    const tf_csv_source *src;
    const tf_csv_layout *lay;
    const tf_import_options *opt;
    const int *map;                      /* per file column: channel index, MAP_TIME or MAP_SKIP */
    const double *factor;                /* per channel: unit prefix factor from the header */
    size_t nout;
    size_t total;                        /* bytes to parse */
    size_t nparts;
    atomic_size_t done;
    atomic_int abort;                    /* the first part failed: later parts may stop */
    atomic_int quoted;                   /* a '"' in a split file: parse it again whole */
} csv_job;

/* One file column as on_field's fast path sees it: one load finds all. */
struct fast_col {
    int map;                             /* as csv_job.map */
    double factor;                       /* the channel's unit factor */
    float *dst;                          /* the channel's samples of the current region */
};

typedef struct csv_worker {
    csv_job *job;
    /* copies of what every field needs, kept next to the row state */
    const int *map;
    struct fast_col *fc;                 /* per file column: what on_field's fast path needs */
    const double *factor;
    size_t ncols;
    size_t fast_cols;                    /* ncols, or 0 while halt or row >= cap: on_field's
                                            inline part takes fields c < fast_cols */
    int space_mode;
    char decimal;
    int time_sig;                        /* the layout's time_sig */
    double time_factor;                  /* the time column's unit factor */
    size_t begin, end;                   /* byte range [begin, end), starting at a line */
    size_t line;                         /* line number of the row being read: from
                                            data_line in the first part, from 1 in a later
                                            one (made absolute once the parts before it
                                            have been read: shift_lines) */
    /* Rows go first to the part's window of the capture's arrays (win_cap rows
     * from index base, sized from an estimate), then to overflow arrays of its
     * own that grow as needed; assemble() puts them in place. */
    size_t base, win_cap, win_rows;      /* window; rows in it once it is full */
    float **cur;                         /* per channel: the current region */
    float **ovf;                         /* per channel: overflow arrays (NULL: none yet) */
    size_t cap;                          /* rows the current region holds */
    size_t row;                          /* rows stored in the current region */
    size_t col;                          /* fields seen in the current row */
    int trail;                           /* field ncols was empty (a trailing delimiter) */
    int have_t;                          /* the current row's time value is in t/q */
    double t, q;
    int prev_cr;
    int first;                           /* the first part: reports progress */
    tf_time_acc time;
    size_t *gaps, *gap_line;             /* per channel */
    tf_status status;
    int halt;                            /* status set or comment_row: ignore further fields */
    int comment_row;                     /* the row's first field starts with the comment mark */
    char comment;                        /* '#', or the header's own comment mark */
    size_t err_line, err_col;            /* where the failure is (err_line as line) */
    char msg[TF_ERROR_MSG_SIZE];         /* what it is: "expected ..., found ..." */
} csv_worker;

/* Keep fast_cols in step with halt, row and cap: call after changing any. */
static void set_fast_cols(csv_worker *w)
{
    w->fast_cols = !w->halt && w->row < w->cap ? w->ncols : 0;
}

static void fail(csv_worker *w, tf_status code, size_t col, const char *fmt, ...)
    __attribute__((format(printf, 4, 5)));

static void fail(csv_worker *w, tf_status code, size_t col, const char *fmt, ...)
{
    if (w->status)
        return;
    w->err_line = w->line;
    w->err_col = col;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(w->msg, sizeof w->msg, fmt, ap);
    va_end(ap);
    w->status = code;
    w->halt = 1;
    set_fast_cols(w);
}

/* A row whose first field starts with the comment mark is skipped (numpy's
 * footer=). Checked only where a field is not a number, so good rows pay nothing. */
static int comment_start(csv_worker *w, size_t c, const char *s, size_t len)
{
    if (c != 0 || len == 0 || s[0] != w->comment)
        return 0;
    w->comment_row = 1;
    w->halt = 1;
    set_fast_cols(w);
    return 1;
}

static void gap(csv_worker *w, int m, size_t c, const char *s, size_t len)
{
    if (!w->job->opt->gaps_interpolate) {
        char ex[64];
        if (len == 0)
            fail(w, TF_ERR_DATA, c + 1, "expected a number, found an empty field");
        else
            fail(w, TF_ERR_DATA, c + 1, "expected a finite number, found '%s'",
                 tf_error_excerpt(ex, sizeof ex, s, (unsigned)len, TF_CSV_EXCERPT));
        return;
    }
    w->cur[m][w->row] = NAN;
    if (w->gaps[m]++ == 0)
        w->gap_line[m] = w->line;
}

static void time_field(csv_worker *w, size_t c, const char *s, size_t len)
{
    const tf_csv_layout *lay = w->job->lay;
    double v, q, f = lay->cols[c].factor;
    char ex[64];
    if (len == 0 || tf_csv_time_value(s, len, lay->decimal, lay->time_sig, &v, &q) != 0 ||
        !isfinite(v)) {
        if (comment_start(w, c, s, len))
            return;
        fail(w, TF_ERR_DATA, c + 1, "expected a time value (a finite number), found '%s'",
             tf_error_excerpt(ex, sizeof ex, s, (unsigned)len, TF_CSV_EXCERPT));
        return;
    }
    w->t = v * f;
    w->q = q * f;
    w->have_t = 1;
}

static void bad_number(csv_worker *w, size_t c, const char *s, size_t len)
{
    char ex[64];
    if (comment_start(w, c, s, len))
        return;
    fail(w, TF_ERR_DATA, c + 1, "expected a number, found '%s'",
         tf_error_excerpt(ex, sizeof ex, s, (unsigned)len, TF_CSV_EXCERPT));
}

/* Every field the fast path of on_field does not finish: the full rules. */
static void field_slow(csv_worker *w, const char *s, size_t len)
{
    if (w->halt || (len == 0 && w->space_mode))
        return;
    size_t c = w->col++;
    if (c >= w->ncols) {
        w->trail = c == w->ncols && len == 0;
        if (w->col > TF_CSV_FIELDS_MAX)
            fail(w, TF_ERR_DATA, c + 1, "expected %zu fields, found more than %zu", w->ncols,
                 TF_CSV_FIELDS_MAX);
        return;
    }
    int m = w->map[c];
    if (m == MAP_SKIP) {
        comment_start(w, c, s, len);
        return;
    }
    if (w->row >= w->cap) /* only after the region could not grow (halt) */
        return;
    if (m == MAP_TIME) {
        time_field(w, c, s, len);
        return;
    }
    if (m == MAP_EMPTY) {
        if (len != 0 && !comment_start(w, c, s, len)) {
            char ex[64];
            fail(w, TF_ERR_DATA, c + 1, "expected an empty field (the column has no name and "
                 "is empty in the first rows), found '%s'",
                 tf_error_excerpt(ex, sizeof ex, s, (unsigned)len, TF_CSV_EXCERPT));
        }
        return;
    }
    double v;
    if (len == 0) {
        gap(w, m, c, s, len);
        return;
    }
    if (tf_parse_field(s, len, w->decimal, &v) != 0) {
        bad_number(w, c, s, len);
        return;
    }
    if (!isfinite(v)) {
        gap(w, m, c, s, len);
        return;
    }
    v *= w->factor[m];
    if (fabs(v) > FLT_MAX) {
        char ex[64];
        fail(w, TF_ERR_DATA, c + 1, "expected a value within +-3.4e38 (single precision), "
             "found '%s'", tf_error_excerpt(ex, sizeof ex, s, (unsigned)len, TF_CSV_EXCERPT));
        return;
    }
    w->cur[m][w->row] = (float)v;
}

/* on_field for every field its inline part does not take: the short numbers
 * of every other shape here, then the full rules (field_slow). Kept out of
 * line so that on_field's own path makes no call and saves no registers. */
static __attribute__((noinline)) void on_field_rest(csv_worker *w, const char *s, size_t len)
{
    /* a channel value in a row within the capacity, a short plain number in
     * range; everything else (and every error) goes the long way */
    size_t c = w->col;
    if (!w->halt && len != 0 && c < w->ncols && w->row < w->cap) {
        const struct fast_col *fc = &w->fc[c];
        int m = fc->map;
        double v;
        if (m >= 0 && tf_parse_field(s, len, w->decimal, &v) == 0) {
            v *= fc->factor;
            if (fabs(v) <= FLT_MAX) { /* false for NaN and infinities too */
                fc->dst[w->row] = (float)v;
                w->col = c + 1;
                return;
            }
        } else if (m == MAP_TIME) {
            double t, q;
            if (tf_csv_time_value(s, len, w->decimal, w->time_sig, &t, &q) == 0 &&
                fabs(t) <= DBL_MAX) {
                w->t = t * w->time_factor;
                w->q = q * w->time_factor;
                w->have_t = 1;
                w->col = c + 1;
                return;
            }
        }
    }
    field_slow(w, s, len);
}

static void on_field(void *data, size_t len, void *ctx)
{
    csv_worker *w = ctx;
    const char *s = data;
    size_t c = w->col;
#if TF_SWAR_DIGITS && defined(FLT_EVAL_METHOD) && FLT_EVAL_METHOD == 0
    /* the common field, in printf's %e form (tf_scan_eform), of a channel or
     * the time column, in a row within the capacity (fast_cols is 0 when the
     * row is halted or the capacity reached): the same value and resolution
     * as on_field_rest would find */
    if (c < w->fast_cols && len != 0) {
        const struct fast_col *fc = &w->fc[c];
        tf_short_dec d;
        d.neg = *s == '-';
        if (tf_scan_eform(s + (d.neg | (*s == '+')), s + len, w->decimal, &d)) {
            if (fc->map >= 0 && tf_short_float(&d, fc->factor, &fc->dst[w->row])) {
                w->col = c + 1;
                return;
            }
            double v = tf_short_value(&d);
            if (fc->map >= 0) {
                v *= fc->factor;
                if (fabs(v) <= FLT_MAX) { /* false for infinities too */
                    fc->dst[w->row] = (float)v;
                    w->col = c + 1;
                    return;
                }
            } else if (fc->map == MAP_TIME && d.m != 0) {
                long last = tf_csv_short_last(&d, w->time_sig);
                if (last >= -40 && last <= 40) {
                    w->t = v * w->time_factor;
                    w->q = tf_csv_pow10_table[last + 40] * w->time_factor;
                    w->have_t = 1;
                    w->col = c + 1;
                    return;
                }
            }
        }
    }
#endif
    on_field_rest(w, s, len);
}

/* Point the fast path at the current region of every channel. */
static void aim_columns(csv_worker *w)
{
    for (size_t c = 0; c < w->ncols; c++)
        if (w->fc[c].map >= 0)
            w->fc[c].dst = w->cur[w->fc[c].map];
}

/* The current region is full: go on in the overflow arrays, made at an eighth
 * of the window (at least 256 rows) and doubled as they fill. */
static void next_region(csv_worker *w)
{
    size_t nout = w->job->nout;
    int first = !w->ovf;
    size_t cap = first ? (w->win_cap / 8 > 256 ? w->win_cap / 8 : 256) : 2 * w->cap;
    if (first && !(w->ovf = calloc(nout ? nout : 1, sizeof *w->ovf))) {
        fail(w, TF_ERR_NOMEM, w->col + 1, "out of memory for the samples");
        return;
    }
    for (size_t m = 0; m < nout; m++) {
        float *p = cap <= SIZE_MAX / sizeof(float) ? realloc(w->ovf[m], cap * sizeof(float)) : NULL;
        if (!p) {
            fail(w, TF_ERR_NOMEM, w->col + 1, "out of memory for the samples");
            return;
        }
        w->ovf[m] = p;
    }
    if (first) {
        w->win_rows = w->row;
        w->row = 0;
    }
    w->cap = cap;
    for (size_t m = 0; m < nout; m++)
        w->cur[m] = w->ovf[m];
    aim_columns(w);
    set_fast_cols(w);
}

static void on_row(int term, void *ctx)
{
    csv_worker *w = ctx;
    if (term == '\n' && w->prev_cr && w->col == 0) { /* the LF of a CRLF */
        w->prev_cr = 0;
        return;
    }
    w->prev_cr = term == '\r';
    size_t fields = w->col, n = w->job->lay->ncols;
    int trail = w->trail;
    w->col = 0;
    w->trail = 0;
    if (fields == 0 || w->halt) {
        if (w->comment_row) {
            w->halt = w->comment_row = 0;
            set_fast_cols(w);
        }
        w->have_t = 0;
        w->line++;
        return;
    }
    if (fields != n && !(fields == n + 1 && trail)) {
        const tf_csv_layout *lay = w->job->lay;
        fail(w, TF_ERR_DATA, (fields < n ? fields : n) + 1,
             "expected %zu fields as in line %zu, found %zu", n,
             lay->header_line ? lay->header_line : lay->data_line, fields);
        w->line++;
        return;
    }
    if (w->have_t) {
        char why[400];
        w->have_t = 0;
        int r = tf_time_acc_add(&w->time, w->t, w->q, w->line, why, sizeof why);
        if (r != 0) {
            fail(w, r == -2 ? TF_ERR_NOMEM : TF_ERR_DATA, (size_t)w->job->lay->time_col + 1,
                 "%s", why);
            w->line++;
            return;
        }
    }
    w->row++;
    w->line++;
    if (w->row >= w->cap)
        next_region(w);
}

/* ---- a window of the file, read into a buffer ---- */

/* pread into a buffer, not mmap: a file truncated by another program while it
 * is read must give an I/O error, not SIGBUS. The copy costs a few per cent. */
typedef struct view {
    const char *p;
    size_t len;
    char *buf;                           /* CHUNK bytes, made on first use */
} view;

/* Make [off, off + len) readable at v->p; len <= CHUNK. Returns 0, or -1 on a
 * read error or a short read (the file shrank). */
static int view_get(const tf_csv_source *src, size_t off, size_t len, view *v)
{
    v->len = len;
    if (src->fd < 0) {
        v->p = (const char *)src->mem + off;
        return 0;
    }
    if (!v->buf && !(v->buf = malloc(CHUNK)))
        return -1;
    if (tf_csv_read(src, off, v->buf, len) != (ssize_t)len)
        return -1;
    v->p = v->buf;
    return 0;
}

/* ---- parsing a part ---- */

static void report_progress(csv_worker *w, size_t got)
{
    csv_job *job = w->job;
    size_t done = atomic_fetch_add(&job->done, got) + got;
    if (w->first && job->opt->progress && !job->opt->quiet_progress && job->total)
        job->opt->progress(job->opt->progress_ctx, (double)done / (double)job->total);
}

static void *parse_part(void *arg)
{
    csv_worker *w = arg;
    csv_job *job = w->job;
    struct csv_parser p;
    view v = {0};
    if (csv_init(&p, CSV_REPALL_NL) != 0) {
        w->status = TF_ERR_NOMEM;
        snprintf(w->msg, sizeof w->msg, "out of memory");
        return NULL;
    }
    csv_set_delim(&p, (unsigned char)job->lay->delim);
    csv_set_realloc_func(&p, tf_csv_capped_realloc);
    csv_set_blk_size(&p, 65536);
    for (size_t off = w->begin; off < w->end && !w->status;) {
        if ((!w->first && atomic_load(&job->abort)) || atomic_load(&job->quoted))
            break;
        size_t want = w->end - off < CHUNK ? w->end - off : CHUNK;
        if (view_get(job->src, off, want, &v) != 0) {
            fail(w, TF_ERR_IO, 1, "cannot read the file at byte %zu", off);
            break;
        }
        /* a quoted field may hold a line end, so a split file must have none */
        if (job->nparts > 1 && memchr(v.p, '"', want)) {
            atomic_store(&job->quoted, 1);
            break;
        }
        size_t used = csv_parse(&p, v.p, want, on_field, on_row, w);
        if (used != want && !w->status)
            fail(w, TF_ERR_DATA, w->col + 1,
                 "expected fields of at most 1 MiB, found a longer one (lines longer than "
                 "1 MiB are not accepted)");
        off += want;
        report_progress(w, want);
    }
    if (!w->status && !atomic_load(&job->quoted))
        csv_fini(&p, on_field, on_row, w);
    csv_free(&p);
    free(v.buf);
    if (w->status && w->first)
        atomic_store(&job->abort, 1);
    return NULL;
}

/* Run fn on every worker, on threads when there are several. */
static void run_workers(csv_worker *w, size_t n, void *(*fn)(void *))
{
    pthread_t th[MAX_WORKERS];
    int started[MAX_WORKERS] = {0};
    for (size_t i = 1; i < n; i++)
        started[i] = pthread_create(&th[i], NULL, fn, &w[i]) == 0;
    fn(&w[0]);
    for (size_t i = 1; i < n; i++) {
        if (started[i])
            pthread_join(th[i], NULL);
        else
            fn(&w[i]);
    }
}

/* ---- choosing columns ---- */

static int find_column(const tf_csv_layout *lay, const char *name, size_t len)
{
    for (size_t c = 0; c < lay->ncols; c++)
        if (strlen(lay->cols[c].name) == len && memcmp(lay->cols[c].name, name, len) == 0)
            return (int)c;
    return -1;
}

static void list_columns(const tf_csv_layout *lay, char *out, size_t size)
{
    out[0] = '\0';
    for (size_t c = 0; c < lay->ncols; c++) {
        if ((int)c == lay->time_col || lay->cols[c].text)
            continue;
        size_t l = strlen(out);
        snprintf(out + l, size - l, "%s%s", l ? ", " : "", lay->cols[c].name);
    }
}

/* Fill map (per file column) and return the number of channels, or -1 with err. */
static long choose_columns(const tf_csv_layout *lay, const tf_import_options *opt,
                           const char *path, int *map, tf_error *err)
{
    long n = 0;
    for (size_t c = 0; c < lay->ncols; c++)
        map[c] = (int)c == lay->time_col ? MAP_TIME : lay->cols[c].empty ? MAP_EMPTY : MAP_SKIP;
    if (!opt->channels[0]) {
        for (size_t c = 0; c < lay->ncols; c++)
            if (map[c] == MAP_SKIP && !lay->cols[c].text)
                map[c] = (int)n++;
        return n;
    }
    char have[512];
    for (const char *p = opt->channels; *p;) {
        const char *q = strchr(p, ',');
        size_t len = q ? (size_t)(q - p) : strlen(p);
        const char *s = p;
        while (len && *s == ' ') {
            s++;
            len--;
        }
        while (len && s[len - 1] == ' ')
            len--;
        int c = find_column(lay, s, len);
        list_columns(lay, have, sizeof have);
        if (c >= 0 && lay->cols[c].text) {
            tf_error_set(err, TF_ERR_USAGE, "--channels: column '%.*s' of %s holds text, not "
                         "numbers (channels: %s)", (int)len, s, path, have);
            return -1;
        }
        if (c < 0 || map[c] != MAP_SKIP) {
            tf_error_set(err, TF_ERR_USAGE, "--channels: %s '%.*s' in %s (channels: %s)",
                         c < 0 ? "no channel" : map[c] == MAP_TIME ? "the time base is not a channel:"
                                                                   : "listed twice:",
                         (int)len, s, path, have);
            return -1;
        }
        map[c] = (int)n++;
        p = q ? q + 1 : p + strlen(p);
    }
    return n;
}

/* ---- after parsing ---- */

/* Linear interpolation over NaN runs; runs at an end take the nearest value. */
static int fill_gaps(float *x, size_t n)
{
    size_t f = 0;
    while (f < n && isnan(x[f]))
        f++;
    if (f == n)
        return -1;
    for (size_t i = 0; i < f; i++)
        x[i] = x[f];
    size_t last = f;
    for (size_t i = f + 1; i < n; i++) {
        if (isnan(x[i]))
            continue;
        for (size_t k = last + 1; k < i; k++)
            x[k] = (float)(x[last] + (x[i] - (double)x[last]) * (double)(k - last) /
                                         (double)(i - last));
        last = i;
    }
    for (size_t i = last + 1; i < n; i++)
        x[i] = x[last];
    return 0;
}

static tf_status finish_gaps(tf_capture *cap, csv_worker *w, size_t nw, tf_error *err)
{
    for (size_t m = 0; m < cap->nchan; m++) {
        size_t count = 0, line = 0;
        for (size_t i = 0; i < nw; i++) {
            if (w[i].gaps[m] && !count)
                line = w[i].gap_line[m];
            count += w[i].gaps[m];
        }
        if (!count)
            continue;
        if (fill_gaps(cap->ch[m].samples, cap->n) != 0)
            return tf_error_set(err, TF_ERR_DATA,
                                "%s:%zu:1: expected at least one finite value in channel '%s', "
                                "found only empty or non-finite ones",
                                cap->path, line, cap->ch[m].name);
        cap->ch[m].gaps_filled = count;
        tf_capture_add_warning(cap, "%s: channel '%s': %zu empty or non-finite value%s filled "
                               "by linear interpolation (the first at line %zu)",
                               cap->path, cap->ch[m].name, count, count == 1 ? "" : "s", line);
    }
    return TF_OK;
}

static void fill_dialect(tf_capture *cap, const tf_csv_layout *lay, double resolution)
{
    tf_dialect *d = &cap->dialect;
    strcpy(d->format, "csv");
    d->delimiter = lay->delim;
    d->decimal = lay->decimal;
    d->header_line = (int)lay->header_line;
    d->metadata_lines = lay->metadata_lines;
    d->has_bom = lay->has_bom;
    snprintf(d->line_end, sizeof d->line_end, "%s", lay->line_end);
    d->time_column = lay->time_col;
    d->time_resolution_s = resolution;
    d->wav_subformat[0] = '\0';
}

/* Where the second part starts: just after the first line end past the middle. */
static size_t split_point(const tf_csv_source *src, const tf_csv_layout *lay)
{
    char buf[65536];
    size_t mid = lay->data_offset + (src->size - lay->data_offset) / 2;
    for (size_t off = mid; off < src->size && off < mid + TF_CSV_FIELD_MAX;) {
        ssize_t got = tf_csv_read(src, off, buf, sizeof buf);
        if (got <= 0)
            return 0;
        char *t = memchr(buf, lay->term, (size_t)got);
        if (t)
            return off + (size_t)(t - buf) + 1;
        off += (size_t)got;
    }
    return 0;
}

/* Split the data at a line end near the middle for two parser threads, or
 * keep it whole (whole set, one thread wanted, a small file, or quotes seen). */
static size_t plan_parts(const tf_csv_source *src, const tf_csv_layout *lay,
                         const tf_import_options *opt, int whole, csv_worker *w, csv_job *job)
{
    long cores = sysconf(_SC_NPROCESSORS_ONLN);
    size_t want = opt->threads > 0 ? (size_t)opt->threads : (cores > 1 ? 2 : 1);
    size_t split = 0;
    if (!whole && want > 1 && !lay->quotes && src->size - lay->data_offset >= TF_CSV_MIN_SPLIT)
        split = split_point(src, lay);
    size_t n = split && split < src->size ? 2 : 1;
    for (size_t i = 0; i < n; i++) {
        memset(&w[i], 0, sizeof w[i]);
        w[i].job = job;
        w[i].first = i == 0;
    }
    w[0].begin = lay->data_offset;
    w[0].end = n == 2 ? split : src->size;
    if (n == 2) {
        w[1].begin = split;
        w[1].end = src->size;
    }
    job->nparts = n;
    return n;
}

/* Rows to expect in bytes of data: from the line ends in the first 64 KiB of
 * the data, with 1/32 and 256 rows to spare (the window; more rows overflow,
 * which costs a copy, not a failure), and never more than a row of ncols
 * bytes (its delimiters and line end) allows, which bounds the window of a
 * file of blank lines. */
static size_t window_rows(const tf_csv_source *src, const tf_csv_layout *lay, size_t bytes)
{
    char buf[65536];
    size_t bound = bytes / lay->ncols + 1, est = bound;
    ssize_t got = tf_csv_read(src, lay->data_offset, buf, sizeof buf);
    if (got > 0) {
        size_t lines = 0;
        for (const char *p = buf, *e = buf + got; (p = memchr(p, lay->term, (size_t)(e - p)));
             p++)
            lines++;
        /* a partial last line counts as one when the sample is the whole data */
        if ((size_t)got < sizeof buf && got > 0 && buf[got - 1] != lay->term)
            lines++;
        if (lines) {
            double per = (double)got / (double)lines;
            double rows = (double)bytes / per;
            est = rows < (double)bound ? (size_t)rows : bound;
        }
    }
    est += est / 32 + 256;
    return est < bound ? est : bound;
}

/* Free what a part holds (its arrays, tables and time accumulator). */
static void free_part(csv_worker *w, size_t nout)
{
    if (w->ovf)
        for (size_t m = 0; m < nout; m++)
            free(w->ovf[m]);
    free(w->ovf);
    free(w->cur);
    free(w->gaps);
    free(w->fc);
    tf_time_acc_free(&w->time);
    w->ovf = w->cur = NULL;
    w->gaps = w->gap_line = NULL;
    w->fc = NULL;
}

/* Windows in the capture's arrays and the state of every part. */
static tf_status setup_parts(const tf_csv_source *src, const tf_csv_layout *lay, csv_job *job,
                             csv_worker *w, size_t nw, tf_capture *cap, tf_error *err)
{
    size_t total = 0;
    for (size_t i = 0; i < nw; i++) {
        w[i].base = total;
        w[i].win_cap = window_rows(src, lay, w[i].end - w[i].begin);
        total += w[i].win_cap;
    }
    w[0].line = lay->data_line;
    for (size_t i = 1; i < nw; i++)
        w[i].line = 1;
    tf_status st = tf_capture_alloc(cap, job->nout, total, err);
    if (st == TF_ERR_NOMEM && total > nw * 65536) {
        /* the estimate is only a hint (rows beyond a window overflow): when its
         * address space is refused, start small and let the rows grow it */
        total = 0;
        for (size_t i = 0; i < nw; i++) {
            w[i].base = total;
            w[i].win_cap = w[i].win_cap < 65536 ? w[i].win_cap : 65536;
            total += w[i].win_cap;
        }
        tf_error_clear(err);
        st = tf_capture_alloc(cap, job->nout, total, err);
    }
    if (st != TF_OK)
        return st;
    size_t nout = job->nout ? job->nout : 1;
    for (size_t i = 0; i < nw && st == TF_OK; i++) {
        w[i].map = job->map;
        w[i].factor = job->factor;
        w[i].ncols = lay->ncols;
        w[i].space_mode = lay->space_mode;
        w[i].decimal = lay->decimal;
        w[i].time_sig = lay->time_sig;
        w[i].time_factor = lay->time_col >= 0 ? lay->cols[lay->time_col].factor : 1;
        w[i].comment = lay->comment ? lay->comment : '#';
        w[i].gaps = calloc(2 * nout, sizeof(size_t));
        w[i].cur = calloc(nout, sizeof *w[i].cur);
        w[i].fc = malloc(lay->ncols * sizeof *w[i].fc);
        if (!w[i].gaps || !w[i].cur || !w[i].fc) {
            st = tf_error_set(err, TF_ERR_NOMEM, "out of memory");
            break;
        }
        w[i].gap_line = w[i].gaps + nout;
        for (size_t m = 0; m < job->nout; m++)
            w[i].cur[m] = cap->ch[m].samples + w[i].base;
        w[i].cap = w[i].win_cap;
        for (size_t c = 0; c < lay->ncols; c++) {
            int m = job->map[c];
            w[i].fc[c].map = m;
            w[i].fc[c].factor = m >= 0 ? job->factor[m] : 1;
        }
        aim_columns(&w[i]);
        if (lay->time_col >= 0)
            st = tf_time_acc_init(&w[i].time, lay->t_ref, lay->d_ref, w[i].win_cap, err);
        set_fast_cols(&w[i]);
    }
    return st;
}

/* Make the relative line numbers of a later part absolute: add shift. */
static void shift_lines(csv_worker *w, size_t shift)
{
    w->err_line += shift;
    w->time.line_first += shift;
    for (size_t b = 0; b < w->time.nblocks; b++) {
        w->time.blocks[b].hi_line += shift;
        w->time.blocks[b].lo_line += shift;
    }
    for (size_t m = 0; m < w->job->nout; m++)
        if (w->gaps[m])
            w->gap_line[m] += shift;
}

/* Put every part's rows in file order at the front of the capture's arrays and
 * shrink them to the rows read. Windows that move down go first, in order,
 * then those that move up, in reverse order, so none overwrites rows still to
 * move; the overflow rows then fill the places left for them. */
static tf_status assemble(tf_capture *cap, csv_worker *w, size_t nw, tf_error *err)
{
    size_t pos[MAX_WORKERS], win[MAX_WORKERS], over[MAX_WORKERS], n = 0;
    for (size_t i = 0; i < nw; i++) {
        win[i] = w[i].ovf ? w[i].win_rows : w[i].row;
        over[i] = w[i].ovf ? w[i].row : 0;
        pos[i] = n;
        n += win[i] + over[i];
    }
    if (n > cap->n) {
        tf_status st = tf_capture_resize(cap, n, err);
        if (st != TF_OK)
            return st;
    }
    for (size_t k = 0; k < 2 * nw; k++) {
        size_t i = k < nw ? k : 2 * nw - 1 - k;
        if (k < nw ? pos[i] < w[i].base : pos[i] > w[i].base)
            for (size_t m = 0; m < cap->nchan; m++)
                memmove(cap->ch[m].samples + pos[i], cap->ch[m].samples + w[i].base,
                        win[i] * sizeof(float));
    }
    /* overflow rows from the end, 2^18 at a time, each array shrunk behind the
     * copy: the grown arrays fill as the overflow empties, so memory does not
     * hold both */
    const size_t step = (size_t)1 << 18;
    for (size_t i = 0; i < nw; i++)
        for (size_t m = 0; m < cap->nchan && over[i]; m++) {
            float *dst = cap->ch[m].samples + pos[i] + win[i];
            for (size_t left = over[i]; left;) {
                size_t k = left < step ? left : step;
                left -= k;
                memcpy(dst + left, w[i].ovf[m] + left, k * sizeof(float));
                float *shrunk = left ? realloc(w[i].ovf[m], left * sizeof(float)) : NULL;
                if (shrunk)
                    w[i].ovf[m] = shrunk;
            }
        }
    return tf_capture_truncate(cap, n, err);
}

/* Parse every part (again as one part when a split file has quotes), report
 * the first failure in file order, and assemble the rows. */
static tf_status run_parse(const tf_csv_source *src, const tf_csv_layout *lay, csv_job *job,
                           csv_worker *w, size_t *nw, tf_capture *cap, tf_error *err)
{
    job->total = src->size - lay->data_offset;
    tf_status st = setup_parts(src, lay, job, w, *nw, cap, err);
    if (st == TF_OK)
        run_workers(w, *nw, parse_part);
    if (st == TF_OK && atomic_load(&job->quoted)) {
        for (size_t i = 0; i < *nw; i++)
            free_part(&w[i], job->nout);
        atomic_store(&job->quoted, 0);
        atomic_store(&job->done, 0);
        *nw = plan_parts(src, lay, job->opt, 1, w, job);
        st = setup_parts(src, lay, job, w, *nw, cap, err);
        if (st == TF_OK)
            run_workers(w, *nw, parse_part);
    }
    if (st != TF_OK)
        return st;
    if (job->opt->progress && !job->opt->quiet_progress)
        job->opt->progress(job->opt->progress_ctx, 1.0);
    /* part i > 0 starts at the line after the parts before it (their count is
     * whole only when they did not fail, and then their failure is reported) */
    size_t next = w[0].line;
    for (size_t i = 1; i < *nw && !w[i - 1].status; i++) {
        shift_lines(&w[i], next - 1);
        next += w[i].line - 1;
    }
    for (size_t i = 0; i < *nw; i++)
        if (w[i].status)
            return tf_error_set(err, w[i].status, "%s:%zu:%zu: %s", src->path, w[i].err_line,
                                w[i].err_col, w[i].msg);
    return assemble(cap, w, *nw, err);
}

static tf_status set_time_base(tf_capture *cap, const tf_csv_layout *lay, csv_worker *w,
                               size_t nw, const tf_import_options *opt, tf_error *err)
{
    double given = opt->dt_s > 0 ? opt->dt_s : opt->sample_rate_hz > 0 ? 1.0 / opt->sample_rate_hz : 0;
    if (opt->dt_s > 0 && opt->sample_rate_hz > 0 &&
        fabs(opt->dt_s * opt->sample_rate_hz - 1) > 1e-9)
        return tf_error_set(err, TF_ERR_USAGE, "--dt %g s and --sample-rate %g Hz disagree",
                            opt->dt_s, opt->sample_rate_hz);
    double res = 0;
    if (lay->time_col < 0) {
        cap->t0_s = 0;
        cap->dt_s = given;
    } else {
        tf_time_acc parts[MAX_WORKERS];
        for (size_t i = 0; i < nw; i++)
            parts[i] = w[i].time;
        tf_status st = tf_time_finish(parts, nw, cap->path, (size_t)lay->time_col + 1,
                                      &cap->t0_s, &cap->dt_s, &res, err);
        if (st != TF_OK)
            return st;
        if (given && fabs(cap->dt_s / given - 1) > 1e-6)
            tf_capture_add_warning(cap, "%s: the time column gives a sample period of %.9g s, "
                                   "the option %.9g s; using the time column",
                                   cap->path, cap->dt_s, given);
    }
    fill_dialect(cap, lay, res);
    return TF_OK;
}

static void name_channels(tf_capture *cap, const tf_csv_layout *lay, const int *map)
{
    for (size_t c = 0; c < lay->ncols; c++) {
        if (map[c] < 0)
            continue;
        tf_channel *ch = &cap->ch[map[c]];
        snprintf(ch->name, sizeof ch->name, "%s", lay->cols[c].name);
        snprintf(ch->unit, sizeof ch->unit, "%s", lay->cols[c].unit);
        ch->scale = lay->cols[c].factor;
    }
    for (size_t a = 0; a < cap->nchan; a++) /* keep names unique for lookups */
        for (size_t b = 0; b < a; b++)
            if (strcmp(cap->ch[a].name, cap->ch[b].name) == 0) {
                char old[TF_NAME_SIZE];
                snprintf(old, sizeof old, "%s", cap->ch[a].name);
                unsigned k = (unsigned)((a + 1) % 100000);
                snprintf(cap->ch[a].name, sizeof cap->ch[a].name, "%.50s_%u", old, k);
                tf_capture_add_warning(cap, "%s: a second column '%s' is named '%s'", cap->path,
                                       old, cap->ch[a].name);
                break;
            }
}

static tf_status check_shape(const tf_csv_layout *lay, const tf_import_options *opt,
                             const char *path, tf_error *err)
{
    int given = opt->sample_rate_hz > 0 || opt->dt_s > 0;
    size_t line = lay->header_line ? lay->header_line : lay->data_line;
    if (lay->ncols == 1 && !given)
        return tf_error_set(err, TF_ERR_DATA,
                            "%s:%zu:1: expected at least 2 columns (time and a channel), found "
                            "1 (for a single channel give its sample rate: --sample-rate or --dt)",
                            path, line);
    if (lay->time_col < 0 && !given)
        return tf_error_set(err, TF_ERR_DATA,
                            "%s:%zu:1: expected a time column (named like 't', 'time' or with "
                            "unit [s], or an increasing first column), found none; give the "
                            "sample rate with --sample-rate HZ or --dt S",
                            path, line);
    if (lay->ncols > TF_CSV_COLS_MAX)
        return tf_error_set(err, TF_ERR_DATA, "%s:%zu:1: expected at most %d columns, found %zu",
                            path, line, TF_CSV_COLS_MAX, lay->ncols);
    return TF_OK;
}

static tf_status import_source(const tf_csv_source *src, const tf_import_options *opt,
                               tf_capture **out, tf_error *err)
{
    tf_import_options defaults;
    if (!opt) {
        tf_import_options_init(&defaults);
        opt = &defaults;
    }
    tf_capture *cap = tf_capture_create();
    if (!cap)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    snprintf(cap->path, sizeof cap->path, "%s", src->path);
    tf_csv_layout lay;
    csv_job job;
    csv_worker w[MAX_WORKERS];
    size_t nw = 0;
    int *map = NULL;
    double *factor = NULL;
    memset(&job, 0, sizeof job);
    tf_status st = tf_csv_detect(src, opt, &lay, cap, err);
    if (st == TF_OK)
        st = check_shape(&lay, opt, src->path, err);
    if (st == TF_OK) {
        map = malloc(lay.ncols * sizeof *map);
        factor = malloc(lay.ncols * sizeof *factor);
        if (!map || !factor)
            st = tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    long nout = 0;
    if (st == TF_OK && (nout = choose_columns(&lay, opt, src->path, map, err)) < 0)
        st = TF_ERR_USAGE;
    if (st == TF_OK && nout == 0)
        st = tf_error_set(err, TF_ERR_DATA, "%s:%zu:1: expected a channel besides the time "
                          "column, found none", src->path, lay.header_line ? lay.header_line : lay.data_line);
    for (size_t c = 0; st == TF_OK && c < lay.ncols; c++)
        if (lay.cols[c].text)
            tf_capture_add_warning(cap, "%s: column %zu ('%s') holds text, not numbers: it is "
                                   "not read", src->path, c + 1, lay.cols[c].name);
    if (st == TF_OK) {
        for (size_t c = 0; c < lay.ncols; c++)
            if (map[c] >= 0)
                factor[map[c]] = lay.cols[c].factor;
        job.src = src;
        job.lay = &lay;
        job.opt = opt;
        job.map = map;
        job.factor = factor;
        job.nout = (size_t)nout;
        nw = plan_parts(src, &lay, opt, 0, w, &job);
        st = run_parse(src, &lay, &job, w, &nw, cap, err);
    }
    if (st == TF_OK)
        st = set_time_base(cap, &lay, w, nw, opt, err);
    if (st == TF_OK) {
        name_channels(cap, &lay, map);
        st = finish_gaps(cap, w, nw, err);
    }
    if (st == TF_OK)
        st = tf_import_apply_options(cap, opt, err);
    for (size_t i = 0; i < nw; i++)
        free_part(&w[i], job.nout);
    free(map);
    free(factor);
    tf_csv_layout_free(&lay);
    if (st != TF_OK) {
        tf_capture_destroy(cap);
        return st;
    }
    *out = cap;
    return TF_OK;
}

tf_status tf_csv_import_memory(const char *name, const void *data, size_t len,
                               const tf_import_options *opt, tf_capture **out, tf_error *err)
{
    tf_csv_source src = {name, -1, data, len};
    *out = NULL;
    return import_source(&src, opt, out, err);
}

tf_status tf_import_csv(const char *path, const tf_import_options *opt, tf_capture **out,
                        tf_error *err)
{
    *out = NULL;
    int fd = open(path, O_RDONLY | O_CLOEXEC);
    if (fd < 0)
        return tf_error_set(err, TF_ERR_NOINPUT, "%s: cannot open: %s", path, strerror(errno));
    struct stat sb;
    if (fstat(fd, &sb) != 0) {
        int e = errno;
        close(fd);
        return tf_error_set(err, TF_ERR_NOINPUT, "%s: cannot open: %s", path, strerror(e));
    }
    if (!S_ISREG(sb.st_mode)) {
        close(fd);
        return tf_error_set(err, TF_ERR_NOINPUT, "%s: cannot open: %s", path,
                            S_ISDIR(sb.st_mode) ? "it is a directory" : "not a regular file");
    }
#ifdef POSIX_FADV_SEQUENTIAL
    posix_fadvise(fd, 0, 0, POSIX_FADV_SEQUENTIAL);
#endif
    tf_csv_source src = {path, fd, NULL, (size_t)sb.st_size};
    tf_status st = import_source(&src, opt, out, err);
    close(fd);
    return st;
}
