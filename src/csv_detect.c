/* CSV dialect detection from the first bytes: delimiter, decimal mark, metadata, header, time column. */
#include "csv_internal.h"

#include <csv.h>
#include <ctype.h>
#include <float.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "numparse.h"

ssize_t tf_csv_read(const tf_csv_source *src, size_t off, void *buf, size_t len)
{
    if (src->fd < 0) {
        if (off >= src->size)
            return 0;
        if (len > src->size - off)
            len = src->size - off;
        memcpy(buf, src->mem + off, len);
        return (ssize_t)len;
    }
    size_t got = 0;
    while (got < len) {
        ssize_t r = pread(src->fd, (char *)buf + got, len - got, (off_t)(off + got));
        if (r < 0)
            return -1;
        if (r == 0)
            break;
        got += (size_t)r;
    }
    return (ssize_t)got;
}

void *tf_csv_capped_realloc(void *p, size_t n)
{
    return n > TF_CSV_FIELD_MAX + 1 ? NULL : realloc(p, n);
}

/* ---- splitting one line into fields with libcsv ---- */

typedef struct fieldset {
    char *text;                    /* field copies, each NUL-terminated */
    size_t used, cap;
    size_t off[TF_CSV_COLS_MAX];   /* the first fields of the line */
    size_t len[TF_CSV_COLS_MAX];
    size_t n;                      /* fields kept */
    size_t total;                  /* fields in the line */
    int space_mode;
    int trail;                     /* the last field is empty: maybe a trailing delimiter */
    int full;                      /* out of memory while copying */
} fieldset;

static void fs_field(void *s, size_t len, void *data)
{
    fieldset *fs = data;
    if (fs->space_mode && len == 0)
        return;
    fs->total++;
    if (fs->n >= TF_CSV_COLS_MAX)
        return;
    if (fs->used + len + 1 > fs->cap) {
        size_t cap = (fs->used + len + 1) * 2;
        char *t = realloc(fs->text, cap);
        if (!t) {
            fs->full = 1;
            return;
        }
        fs->text = t;
        fs->cap = cap;
    }
    memcpy(fs->text + fs->used, s, len);
    fs->text[fs->used + len] = '\0';
    fs->off[fs->n] = fs->used;
    fs->len[fs->n++] = len;
    fs->used += len + 1;
}

static void fs_row(int c, void *data)
{
    (void)c;
    (void)data;
}

static const char *fs_get(const fieldset *fs, size_t i)
{
    return fs->text + fs->off[i];
}

/* Split line (no terminator) into fs. Returns 0, or -1 when libcsv fails. */
static int split_line(const char *line, size_t len, char delim, fieldset *fs)
{
    struct csv_parser p;
    fs->used = fs->n = fs->total = 0;
    fs->space_mode = delim == ' ';
    fs->full = 0;
    if (csv_init(&p, 0) != 0)
        return -1;
    csv_set_delim(&p, (unsigned char)delim);
    csv_set_realloc_func(&p, tf_csv_capped_realloc);
    csv_set_blk_size(&p, 65536);
    size_t done = csv_parse(&p, line, len, fs_field, fs_row, fs);
    int bad = done != len || csv_fini(&p, fs_field, fs_row, fs) != 0 || fs->full;
    csv_free(&p);
    fs->trail = !fs->space_mode && fs->total > 1 && fs->n == fs->total &&
                fs->len[fs->n - 1] == 0;
    return bad ? -1 : 0;
}

/* The line has ncols fields, or ncols and an empty one after a trailing delimiter. */
static int fits(const fieldset *fs, size_t ncols)
{
    return fs->total == ncols || (fs->total == ncols + 1 && fs->trail);
}

/* ---- classifying lines ---- */

enum { F_NUMBER = 1, F_GAP = 2, F_TEXT = 4 };

static int field_kind(const char *s, size_t len, char decimal)
{
    double v;
    const char *e;
    if (len == 0)
        return F_GAP;
    if (tf_parse_double(s, len, decimal, &v, &e) != 0 || e != s + len)
        return F_TEXT;
    return isfinite(v) ? F_NUMBER : F_GAP;
}

typedef struct line_info {
    size_t fields;                 /* all fields, a trailing empty one included */
    int trail;                     /* the last field is empty */
    int kinds;                     /* OR of the field kinds (a trailing empty one left out) */
} line_info;

static int is_numeric_row(const line_info *li)
{
    return (li->kinds & F_NUMBER) && !(li->kinds & F_TEXT);
}

static int row_fits(const line_info *li, size_t ncols)
{
    return li->fields == ncols || (li->fields == ncols + 1 && li->trail);
}

typedef struct head {
    char *buf;                     /* the first bytes, BOM removed */
    size_t len;
    size_t bom;                    /* 3 when a UTF-8 BOM was skipped */
    size_t start[TF_CSV_HEAD_LINES], length[TF_CSV_HEAD_LINES];
    size_t nlines;
    int complete;                  /* the head is the whole file */
} head;

/* The line's fields and their kinds; fields in the first ntext columns that
 * are marked in text (NULL: none) count as neither number nor text. */
static void classify(const head *h, size_t i, char delim, char decimal, fieldset *fs,
                     const unsigned char *text, size_t ntext, line_info *li)
{
    li->fields = 0;
    li->kinds = 0;
    li->trail = 0;
    if (split_line(h->buf + h->start[i], h->length[i], delim, fs) != 0) {
        li->kinds = F_TEXT;
        return;
    }
    li->fields = fs->total;
    li->trail = fs->trail;
    for (size_t k = 0; k < fs->n - (size_t)fs->trail; k++)
        if (!text || k >= ntext || !text[k])
            li->kinds |= field_kind(fs_get(fs, k), fs->len[k], decimal);
    if (fs->n < fs->total)
        li->kinds |= F_TEXT; /* too many fields to be a data row of this tool */
}

/* classify under the chosen layout, its text columns left out */
static void classify_in(const head *h, size_t i, const tf_csv_layout *lay, fieldset *fs,
                        line_info *li)
{
    classify(h, i, lay->delim, lay->decimal, fs, lay->text, lay->text ? lay->ncols : 0, li);
}

/* ---- reading the head and splitting it into lines ---- */

static tf_status read_head(const tf_csv_source *src, head *h, tf_csv_layout *lay, tf_error *err)
{
    size_t want = src->size < TF_CSV_HEAD_MAX ? src->size : TF_CSV_HEAD_MAX;
    h->buf = malloc(want + 1);
    if (!h->buf)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory reading %s", src->path);
    ssize_t got = tf_csv_read(src, 0, h->buf, want);
    if (got < 0)
        return tf_error_set(err, TF_ERR_IO, "%s: cannot read the file", src->path);
    h->len = (size_t)got;
    h->complete = h->len >= src->size;
    if (h->len >= 2 && (memcmp(h->buf, "\xff\xfe", 2) == 0 || memcmp(h->buf, "\xfe\xff", 2) == 0))
        return tf_error_set(err, TF_ERR_DATA,
                            "%s:1:1: expected ASCII or UTF-8 text, found a UTF-16 byte-order "
                            "mark (save the export as UTF-8)", src->path);
    if (h->len >= 3 && memcmp(h->buf, "\xef\xbb\xbf", 3) == 0) {
        h->bom = 3;
        lay->has_bom = 1;
    }
    const char *b = h->buf;
    size_t i = h->bom;
    int style_known = 0;
    strcpy(lay->line_end, "LF");
    lay->term = '\n';
    while (i < h->len && h->nlines < TF_CSV_HEAD_LINES) {
        size_t s = i;
        while (i < h->len && b[i] != '\n' && b[i] != '\r')
            i++;
        if (i >= h->len && !h->complete)
            break; /* partial last line */
        size_t e = i;
        if (i < h->len) {
            if (b[i] == '\r' && i + 1 < h->len && b[i + 1] == '\n')
                i++;
            else if (b[i] == '\r' && i + 1 >= h->len && !h->complete)
                break; /* cannot tell CR from CRLF yet */
            if (!style_known) {
                style_known = 1;
                if (b[e] == '\n') {
                    strcpy(lay->line_end, "LF");
                } else if (i > e) {
                    strcpy(lay->line_end, "CRLF");
                } else {
                    strcpy(lay->line_end, "CR");
                    lay->term = '\r';
                }
            }
            i++;
        }
        h->start[h->nlines] = s;
        h->length[h->nlines++] = e - s;
    }
    if (h->nlines == 0 && src->size > h->bom)
        return tf_error_set(err, TF_ERR_DATA,
                            "%s:1:1: expected a line end within the first %zu bytes, found a "
                            "longer line (lines are limited to 1 MiB)",
                            src->path, TF_CSV_HEAD_MAX);
    lay->quotes = memchr(h->buf, '"', h->len) != NULL;
    return TF_OK;
}

static int blank(const head *h, size_t i)
{
    for (size_t k = 0; k < h->length[i]; k++) {
        char c = h->buf[h->start[i] + k];
        if (c != ' ' && c != '\t')
            return 0;
    }
    return 1;
}

/* ---- choosing delimiter and decimal mark ---- */

typedef struct candidate {
    char delim, decimal;
} candidate;

static const candidate candidates[] = {
    {'\t', '.'}, {'\t', ','}, {';', '.'}, {';', ','}, {',', '.'}, {' ', '.'}, {' ', ','}};
#define NCAND (sizeof candidates / sizeof candidates[0])

/* Most common field count among numeric rows; when every such row ends in an
 * empty field, that is a trailing delimiter and one less is the column count.
 * Returns how many rows have it (0 when none, or fewer than min_fields columns). */
static size_t score(const line_info *li, size_t n, size_t min_fields, size_t *ncols)
{
    size_t best = 0, best_count = 0;
    for (size_t i = 0; i < n; i++) {
        if (!is_numeric_row(&li[i]) || li[i].fields == best)
            continue;
        size_t count = 0;
        for (size_t j = 0; j < n; j++)
            count += is_numeric_row(&li[j]) && li[j].fields == li[i].fields;
        if (count > best_count) {
            best_count = count;
            best = li[i].fields;
        }
        if (best_count * 2 > n)
            break;
    }
    int all_trail = best_count > 0;
    for (size_t i = 0; i < n && all_trail; i++)
        if (is_numeric_row(&li[i]) && li[i].fields == best)
            all_trail = li[i].trail;
    *ncols = best - (size_t)all_trail;
    return *ncols >= min_fields ? best_count : 0;
}

/* ---- header names and units ---- */

static void trim(const char **s, size_t *len)
{
    while (*len && isspace((unsigned char)**s)) {
        (*s)++;
        (*len)--;
    }
    while (*len && isspace((unsigned char)(*s)[*len - 1]))
        (*len)--;
}

/* Copy a header field as UTF-8: valid UTF-8 sequences are kept, any other byte
 * 0xA0..0xFF is read as Windows-1252 / ISO 8859-1 (0xB5 micro sign, 0xB0 degree
 * sign: the code point equals the byte), 0x80..0x9F becomes '?'. Returns the
 * length written (out has room for outsize - 1 bytes and a NUL). */
static size_t header_utf8(const char *s, size_t len, char *out, size_t outsize)
{
    size_t o = 0;
    for (size_t i = 0; i < len && o + 4 < outsize;) {
        unsigned char b = (unsigned char)s[i];
        size_t need = b < 0x80 ? 0 : (b & 0xE0) == 0xC0 ? 1 : (b & 0xF0) == 0xE0 ? 2
                                  : (b & 0xF8) == 0xF0 ? 3 : 9;
        int valid = need == 0;
        if (need >= 1 && need <= 3 && b >= 0xC2 && i + need < len) {
            valid = 1;
            for (size_t k = 1; k <= need; k++)
                if (((unsigned char)s[i + k] & 0xC0) != 0x80)
                    valid = 0;
        }
        if (valid) {
            memcpy(out + o, s + i, need + 1);
            o += need + 1;
            i += need + 1;
        } else if (b >= 0xA0) {
            out[o++] = (char)(0xC0 | (b >> 6));
            out[o++] = (char)(0x80 | (b & 0x3F));
            i++;
        } else {
            out[o++] = '?';
            i++;
        }
    }
    out[o] = '\0';
    return o;
}

/* "v [kV]" -> name "v", unit "V", factor 1000; "i_load (A)" -> "i_load", "A", 1. */
static void parse_column_name(const char *raw, size_t rawlen, size_t index, tf_csv_column *col)
{
    const char *unit = NULL;
    size_t ulen = 0;
    char utf[512];
    size_t len = header_utf8(raw, rawlen, utf, sizeof utf);
    const char *s = utf;
    trim(&s, &len);
    col->factor = 1.0;
    col->unit[0] = '\0';
    if (len >= 2 && (s[len - 1] == ')' || s[len - 1] == ']')) {
        char open = s[len - 1] == ')' ? '(' : '[';
        for (size_t k = len - 1; k-- > 0;)
            if (s[k] == open) {
                unit = s + k + 1;
                ulen = len - k - 2;
                len = k;
                break;
            }
    }
    trim(&s, &len);
    col->unnamed = len == 0;
    if (len == 0)
        snprintf(col->name, sizeof col->name, "col%zu", index + 1);
    else
        snprintf(col->name, sizeof col->name, "%.*s", (int)(len < 63 ? len : 63), s);
    if (!unit)
        return;
    trim(&unit, &ulen);
    if (ulen == 0 || ulen > 30)
        return;
    char text[40], base[TF_NAME_SIZE];
    double factor;
    snprintf(text, sizeof text, "1 %.*s", (int)ulen, unit);
    if (ulen == 1 && unit[0] == '%') {
        strcpy(col->unit, "%");
    } else if (tf_parse_quantity(text, &factor, base, sizeof base) == 0 && base[0] &&
               strlen(base) < TF_UNIT_SIZE && factor > 0) {
        strcpy(col->unit, base);
        col->factor = factor;
    } else {
        snprintf(col->unit, sizeof col->unit, "%.*s", (int)(ulen < 15 ? ulen : 15), unit);
    }
}

static int named_like_time(const tf_csv_column *c)
{
    static const char *const names[] = {"t", "time", "timestamp", "zeit", "tiempo", "temps",
                                        "seconds", "sec", NULL};
    char low[TF_NAME_SIZE];
    size_t k;
    for (k = 0; c->name[k] && k + 1 < sizeof low; k++)
        low[k] = (char)tolower((unsigned char)c->name[k]);
    low[k] = '\0';
    for (int i = 0; names[i]; i++)
        if (strcmp(low, names[i]) == 0)
            return 1;
    if (strncmp(low, "time", 4) == 0 && (low[4] == '_' || low[4] == '-' || low[4] == ' ' ||
                                         isdigit((unsigned char)low[4])))
        return 1;
    return strcmp(c->unit, "s") == 0;
}

/* Space-separated headers split "v [V]" in two: glue a unit field to its name. */
static void merge_units(fieldset *fs)
{
    size_t w = 0;
    for (size_t r = 0; r < fs->n; r++) {
        const char *f = fs_get(fs, r);
        if (w > 0 && (f[0] == '(' || f[0] == '[')) {
            /* fields are stored back to back: turn the NUL between them into a space */
            size_t prev_end = fs->off[w - 1] + fs->len[w - 1];
            if (prev_end + 1 == fs->off[r]) {
                fs->text[prev_end] = ' ';
                fs->len[w - 1] += 1 + fs->len[r];
                continue;
            }
        }
        fs->off[w] = fs->off[r];
        fs->len[w++] = fs->len[r];
    }
    fs->total -= fs->n - w;
    fs->n = w;
}

static int header_ok(fieldset *fs, size_t ncols, int space_mode, char decimal)
{
    if (space_mode)
        merge_units(fs);
    if (!fits(fs, ncols) || fs->n != fs->total)
        return 0;
    for (size_t k = 0; k < ncols; k++)
        if (field_kind(fs_get(fs, k), fs->len[k], decimal) == F_NUMBER)
            return 0;
    return 1;
}

/* ---- time column and the reference step ---- */

static int cmp_double(const void *a, const void *b)
{
    double x = *(const double *)a, y = *(const double *)b;
    return (x > y) - (x < y);
}

/* Times of the head's data rows (column col, after the unit factor) into t
 * and their resolutions into q; returns how many. The printing model comes
 * from these rows: fixed decimals when none has an exponent and all have the
 * same number of decimals, else significant digits (the most any row shows). */
static size_t head_times(const head *h, tf_csv_layout *lay, size_t first, size_t col,
                         fieldset *fs, double *t, double *q, tf_num_text *nt)
{
    size_t n = 0;
    for (size_t i = first; i < h->nlines; i++) {
        if (blank(h, i))
            continue;
        if (split_line(h->buf + h->start[i], h->length[i], lay->delim, fs) != 0 ||
            !fits(fs, lay->ncols) || fs->n <= col)
            break;
        const char *s = fs_get(fs, col);
        const char *e;
        double v;
        if (tf_parse_double(s, fs->len[col], lay->decimal, &v, &e) != 0 ||
            e != s + fs->len[col] || !isfinite(v))
            break;
        t[n] = v * lay->cols[col].factor;
        tf_csv_scan_number(s, fs->len[col], lay->decimal, &nt[n]);
        n++;
    }
    int fixed = n > 0;
    int sig = 0;
    for (size_t k = 0; k < n; k++) {
        fixed &= !nt[k].has_exp && nt[k].frac == nt[0].frac;
        if (tf_csv_sig_digits(&nt[k]) > sig)
            sig = tf_csv_sig_digits(&nt[k]);
    }
    lay->time_sig = fixed ? 0 : sig;
    for (size_t k = 0; k < n; k++) { /* as tf_time_acc_add: never below 4 ulp of the
                                          * value or of the first value (t0 + k*dt) */
        q[k] = tf_csv_resolution(&nt[k], lay->time_sig) * lay->cols[col].factor;
        double floor_q = 4.0 * DBL_EPSILON * (fabs(t[k]) + fabs(t[0]));
        if (q[k] < floor_q)
            q[k] = floor_q;
    }
    return n;
}

/* Reference step: least squares over the leading run of steps that agree with
 * the median step (a jump further on is then reported at its own line). */
static double reference_step(const double *t, const double *q, size_t n, double *scratch)
{
    if (n < 2)
        return 0;
    for (size_t i = 1; i < n; i++)
        scratch[i - 1] = t[i] - t[i - 1];
    qsort(scratch, n - 1, sizeof *scratch, cmp_double);
    double med = scratch[(n - 1) / 2];
    /* the median is one step of the head, perhaps between its largest (coarsest)
     * values: allow for its own rounding too */
    double qmax = 0;
    for (size_t i = 0; i < n; i++)
        if (q[i] > qmax)
            qmax = q[i];
    size_t m = 1;
    while (m < n && fabs(t[m] - t[m - 1] - med) <= 1.5 * (q[m] + q[m - 1]) + 2.0 * qmax)
        m++;
    if (m < 3)
        return m == 2 ? t[1] - t[0] : med;
    double kbar = (double)(m - 1) / 2, tbar = 0, skt = 0, skk = 0;
    for (size_t k = 0; k < m; k++)
        tbar += t[k];
    tbar /= (double)m;
    for (size_t k = 0; k < m; k++) {
        skt += ((double)k - kbar) * (t[k] - tbar);
        skk += ((double)k - kbar) * ((double)k - kbar);
    }
    return skt / skk;
}

static tf_status find_time(const head *h, const tf_import_options *opt, tf_csv_layout *lay,
                           size_t first, fieldset *fs, const tf_csv_source *src, tf_error *err)
{
    lay->time_col = -1;
    for (size_t c = 0; c < lay->ncols && lay->header_line; c++)
        if (!lay->cols[c].text && named_like_time(&lay->cols[c])) {
            lay->time_col = (int)c;
            lay->time_named = 1;
            break;
        }
    int given = opt && (opt->sample_rate_hz > 0 || opt->dt_s > 0);
    double *t = malloc(3 * h->nlines * sizeof *t + sizeof *t);
    tf_num_text *nt = malloc(h->nlines * sizeof *nt + sizeof *nt);
    if (!t || !nt) {
        free(t);
        free(nt);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    double *q = t + h->nlines, *scratch = q + h->nlines;
    size_t col = lay->time_col >= 0 ? (size_t)lay->time_col : 0;
    size_t n = head_times(h, lay, first, col, fs, t, q, nt);
    free(nt);
    lay->head_rows = n;
    if (lay->time_col < 0 && !given && lay->ncols >= 2 && n >= 2) {
        size_t k = 1;
        while (k < n && t[k] > t[k - 1])
            k++;
        if (k == n)
            lay->time_col = 0;
    }
    if (lay->time_col >= 0) {
        lay->t_ref = n ? t[0] : 0;
        lay->d_ref = reference_step(t, q, n, scratch);
        if (n < 2 && !h->complete) {
            free(t);
            return tf_error_set(err, TF_ERR_DATA,
                                "%s:%zu:%zu: expected at least 2 data rows within the first "
                                "%zu bytes, found %zu", src->path, lay->data_line, col + 1,
                                TF_CSV_HEAD_MAX, n);
        }
    }
    free(t);
    return TF_OK;
}

/* ---- putting it together ---- */

static tf_status no_data_error(const head *h, const tf_csv_source *src, tf_error *err)
{
    size_t last = 0;
    for (size_t i = 0; i < h->nlines; i++)
        if (!blank(h, i))
            last = i + 1;
    if (last == 0)
        return tf_error_set(err, TF_ERR_DATA,
                            "%s:1:1: expected a header or rows of numbers, found an empty file",
                            src->path);
    char ex[64];
    tf_error_excerpt(ex, sizeof ex, h->buf + h->start[last - 1],
                     (unsigned)h->length[last - 1], TF_CSV_EXCERPT);
    return tf_error_set(err, TF_ERR_DATA,
                        "%s:%zu:1: expected rows of numbers after line %zu, found %s "
                        "(the last line is '%s')",
                        src->path, last + 1, last, h->complete ? "the end of the file" : "none",
                        ex);
}

/* When no dialect gives rows of numbers only: rows of numbers beside columns
 * of text (a status word, a clock time). Under each candidate dialect the most
 * common field count of lines with at least 3 fields is taken; among those
 * lines a column is a number column when more of its fields are numbers (or
 * empty) than text, else a text column. Rows whose number columns all hold
 * numbers (at least one) are data rows; the candidate with the most wins,
 * given 2 number columns and 1 text column at least. Sets lay->text (ncols
 * flags) and the dialect; leaves lay->text NULL when nothing fits. */
static tf_status choose_with_text(const head *h, tf_csv_layout *lay, fieldset *fs,
                                  tf_error *err)
{
    size_t *fields = malloc(h->nlines * sizeof *fields);
    size_t *num = calloc(TF_CSV_COLS_MAX, sizeof *num), *txt = calloc(TF_CSV_COLS_MAX, sizeof *txt);
    unsigned char *mask = malloc(TF_CSV_COLS_MAX);
    size_t best = 0;
    tf_status st = TF_OK;
    if (!fields || !num || !txt || !mask) {
        st = tf_error_set(err, TF_ERR_NOMEM, "out of memory");
        goto done;
    }
    for (size_t c = 0; c < NCAND; c++) {
        char delim = candidates[c].delim, decimal = candidates[c].decimal;
        for (size_t i = 0; i < h->nlines; i++)
            fields[i] = blank(h, i) || split_line(h->buf + h->start[i], h->length[i], delim,
                                                  fs) != 0 || fs->n != fs->total ? 0 : fs->total;
        size_t mode = 0, mode_count = 0;
        for (size_t i = 0; i < h->nlines; i++) {
            if (fields[i] < 3 || fields[i] == mode)
                continue;
            size_t count = 0;
            for (size_t j = 0; j < h->nlines; j++)
                count += fields[j] == fields[i];
            if (count > mode_count) {
                mode_count = count;
                mode = fields[i];
            }
            if (mode_count * 2 > h->nlines)
                break;
        }
        if (mode == 0)
            continue;
        memset(num, 0, mode * sizeof *num);
        memset(txt, 0, mode * sizeof *txt);
        for (size_t i = 0; i < h->nlines; i++) {
            if (fields[i] != mode ||
                split_line(h->buf + h->start[i], h->length[i], delim, fs) != 0)
                continue;
            for (size_t k = 0; k < mode; k++) {
                if (field_kind(fs_get(fs, k), fs->len[k], decimal) == F_TEXT)
                    txt[k]++;
                else
                    num[k]++;
            }
        }
        size_t numeric = 0;
        for (size_t k = 0; k < mode; k++)
            numeric += num[k] > txt[k];
        if (numeric < 2 || numeric == mode)
            continue;
        size_t rows = 0;
        for (size_t i = 0; i < h->nlines; i++) {
            if (fields[i] != mode ||
                split_line(h->buf + h->start[i], h->length[i], delim, fs) != 0)
                continue;
            int ok = 1, any = 0;
            for (size_t k = 0; k < mode && ok; k++) {
                if (num[k] <= txt[k])
                    continue;
                int kind = field_kind(fs_get(fs, k), fs->len[k], decimal);
                ok = kind != F_TEXT;
                any |= kind == F_NUMBER;
            }
            rows += ok && any;
        }
        if (rows >= 2 && rows > best) {
            best = rows;
            lay->delim = delim;
            lay->decimal = decimal;
            lay->ncols = mode;
            for (size_t k = 0; k < mode; k++)
                mask[k] = num[k] <= txt[k];
        }
    }
    if (best) {
        lay->space_mode = lay->delim == ' ';
        lay->text = malloc(lay->ncols);
        if (!lay->text)
            st = tf_error_set(err, TF_ERR_NOMEM, "out of memory");
        else
            memcpy(lay->text, mask, lay->ncols);
    }
done:
    free(fields);
    free(num);
    free(txt);
    free(mask);
    return st;
}

static tf_status choose(head *h, tf_csv_layout *lay, fieldset *fs, const tf_csv_source *src,
                        tf_error *err)
{
    line_info *li = malloc(h->nlines * sizeof *li);
    if (!li)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    size_t best = 0, best_mode = 0;
    int chosen = -1;
    for (size_t c = 0; c < NCAND; c++) {
        for (size_t i = 0; i < h->nlines; i++)
            classify(h, i, candidates[c].delim, candidates[c].decimal, fs, NULL, 0, &li[i]);
        size_t mode, s = score(li, h->nlines, 2, &mode);
        if (s > best) {
            best = s;
            best_mode = mode;
            chosen = (int)c;
        }
    }
    if (chosen < 0) { /* a single column? */
        for (size_t i = 0; i < h->nlines; i++)
            classify(h, i, ',', '.', fs, NULL, 0, &li[i]);
        size_t mode;
        if (score(li, h->nlines, 1, &mode) > 0 && mode == 1) {
            chosen = 4;
            best_mode = 1;
        }
    }
    free(li);
    if (chosen < 0) {
        tf_status st = choose_with_text(h, lay, fs, err);
        return st == TF_OK && !lay->text ? no_data_error(h, src, err) : st;
    }
    lay->delim = candidates[chosen].delim;
    lay->decimal = candidates[chosen].decimal;
    lay->space_mode = lay->delim == ' ';
    lay->ncols = best_mode;
    return TF_OK;
}

/* Bytes to skip before a header written as a comment ("# t,v,i", "% t;v"):
 * leading blanks, a run of '#' or '%', and the blanks after it. 0 otherwise. */
static size_t comment_skip(const head *h, size_t i)
{
    const char *s = h->buf + h->start[i];
    size_t n = h->length[i], k = 0;
    while (k < n && (s[k] == ' ' || s[k] == '\t'))
        k++;
    if (k >= n || (s[k] != '#' && s[k] != '%'))
        return 0;
    char c = s[k];
    while (k < n && s[k] == c)
        k++;
    while (k < n && (s[k] == ' ' || s[k] == '\t'))
        k++;
    return k < n ? k : 0;
}

static int split_header(const head *h, size_t i, char delim, fieldset *fs)
{
    size_t k = comment_skip(h, i);
    return split_line(h->buf + h->start[i] + k, h->length[i] - k, delim, fs);
}

/* A known unit, alone or in brackets: "s", "kV", "(A)", "[us]", "%". */
static int known_unit(const char *s, size_t len)
{
    char text[48], base[TF_NAME_SIZE];
    double factor;
    trim(&s, &len);
    if (len >= 2 && ((s[0] == '(' && s[len - 1] == ')') || (s[0] == '[' && s[len - 1] == ']'))) {
        s++;
        len -= 2;
        trim(&s, &len);
    }
    if (len == 0 || len > 30)
        return 0;
    if (len == 1 && s[0] == '%')
        return 1;
    char utf[128];
    size_t ul = header_utf8(s, len, utf, sizeof utf);
    snprintf(text, sizeof text, "1 %.*s", (int)ul, utf);
    return tf_parse_quantity(text, &factor, base, sizeof base) == 0 && base[0];
}

/* A row of units under the names: every field empty, bracketed, or a short token
 * without blanks, and more than half of the non-empty ones known units. */
static int units_row(const fieldset *fs, size_t ncols)
{
    size_t known = 0, nonempty = 0;
    for (size_t k = 0; k < ncols && k < fs->n; k++) {
        const char *f = fs_get(fs, k);
        size_t len = fs->len[k];
        trim(&f, &len);
        if (len == 0)
            continue;
        nonempty++;
        int bracketed = len >= 2 && (f[0] == '(' || f[0] == '[');
        if (!bracketed && (len > 12 || memchr(f, ' ', len)))
            return 0;
        known += (size_t)known_unit(f, len);
    }
    return nonempty > 0 && 2 * known > nonempty;
}

/* Header: the first line of ncols non-numeric fields followed (after blank
 * lines) by a numeric row of ncols fields; it may be written as a comment
 * ("# t,v"), and it may be a row of units under a row of names (then *units is
 * that line and *header the names). Without one, data starts at the first
 * numeric row of ncols fields. Returns the index of the first data line. */
static size_t find_header(const head *h, tf_csv_layout *lay, fieldset *fs, size_t *header,
                          size_t *units)
{
    line_info li;
    size_t first_data = h->nlines;
    *header = h->nlines;
    *units = h->nlines;
    for (size_t i = 0; i < h->nlines; i++) {
        if (blank(h, i))
            continue;
        classify_in(h, i, lay, fs, &li);
        if (is_numeric_row(&li) && row_fits(&li, lay->ncols)) {
            if (first_data == h->nlines)
                first_data = i;
            break;
        }
        if (split_header(h, i, lay->delim, fs) != 0 ||
            !header_ok(fs, lay->ncols, lay->space_mode, lay->decimal))
            continue;
        int unitlike = units_row(fs, lay->ncols);
        size_t j = i + 1;
        while (j < h->nlines && blank(h, j))
            j++;
        if (j >= h->nlines)
            continue;
        classify_in(h, j, lay, fs, &li);
        if (is_numeric_row(&li) && row_fits(&li, lay->ncols)) {
            *header = i;
            size_t p = i;
            while (p > 0 && blank(h, p - 1))
                p--;
            if (unitlike && p > 0 && split_header(h, p - 1, lay->delim, fs) == 0 &&
                header_ok(fs, lay->ncols, lay->space_mode, lay->decimal) &&
                !units_row(fs, lay->ncols)) {
                *units = i;
                *header = p - 1;
            }
            return j;
        }
    }
    return first_data;
}

static tf_status fill_columns(const head *h, tf_csv_layout *lay, size_t header, size_t units,
                              fieldset *fs, tf_error *err)
{
    lay->cols = calloc(lay->ncols, sizeof *lay->cols);
    if (!lay->cols)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    /* "name" and a unit from the units row become "name [unit]" */
    char (*unit)[40] = NULL;
    if (units < h->nlines) {
        unit = calloc(lay->ncols, sizeof *unit);
        if (!unit)
            return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
        if (split_header(h, units, lay->delim, fs) == 0) {
            if (lay->space_mode)
                merge_units(fs);
            for (size_t c = 0; c < lay->ncols && c < fs->n; c++) {
                const char *u = fs_get(fs, c);
                size_t len = fs->len[c];
                trim(&u, &len);
                if (len && len < 30 && (u[0] == '(' || u[0] == '['))
                    snprintf(unit[c], sizeof unit[c], " %.*s", (int)len, u);
                else if (len && len < 30)
                    snprintf(unit[c], sizeof unit[c], " [%.*s]", (int)len, u);
            }
        }
    }
    int have = header < h->nlines && split_header(h, header, lay->delim, fs) == 0;
    if (have && lay->space_mode)
        merge_units(fs);
    for (size_t c = 0; c < lay->ncols; c++) {
        char both[600];
        const char *name = have && c < fs->n ? fs_get(fs, c) : "";
        size_t len = have && c < fs->n ? fs->len[c] : 0;
        if (unit && unit[c][0] && len && !memchr(name, '(', len) && !memchr(name, '[', len)) {
            int k = snprintf(both, sizeof both, "%.*s%s", (int)(len < 500 ? len : 500), name,
                             unit[c]);
            parse_column_name(both, (size_t)k, c, &lay->cols[c]);
        } else {
            parse_column_name(name, len, c, &lay->cols[c]);
        }
        lay->cols[c].text = lay->text && lay->text[c];
    }
    free(unit);
    return TF_OK;
}

/* Unnamed columns at the end that are empty in every data row of the head (a
 * spreadsheet's trailing empty columns) are not channels. */
static void mark_empty_columns(const head *h, tf_csv_layout *lay, size_t first, fieldset *fs)
{
    size_t c = lay->ncols;
    while (c > 1 && lay->cols[c - 1].unnamed)
        c--;
    if (c == lay->ncols)
        return;
    for (size_t i = first; i < h->nlines && c < lay->ncols; i++) {
        if (blank(h, i) || split_line(h->buf + h->start[i], h->length[i], lay->delim, fs) != 0)
            continue;
        for (size_t k = c; k < lay->ncols && k < fs->n; k++)
            if (fs->len[k] != 0)
                c = k + 1;
    }
    for (; c < lay->ncols; c++)
        lay->cols[c].empty = 1;
}

/* Digits only, after an optional sign when sign is set. */
static int plain_integer(const char *s, size_t len, int sign)
{
    size_t k = sign && len && (s[0] == '-' || s[0] == '+');
    if (k == len)
        return 0;
    for (; k < len; k++)
        if (s[k] < '0' || s[k] > '9')
            return 0;
    return 1;
}

/* One channel printed with decimal commas ("i_load (A)" over "1,5", "-0,75")
 * splits at the commas into two columns of integers. Taken for what it is when
 * the line just before the data is a single name (no comma: a header of one
 * column), every data row of the head is two fields, a signed integer and
 * digits, i.e. one number with a decimal comma, and the integers before the
 * commas do not increase strictly (so they cannot be a time column of a
 * two-column reading): then the layout becomes one column with ',' as the
 * decimal mark. Returns 1 when it changed the layout. */
static int one_decimal_comma_column(const head *h, tf_csv_layout *lay, fieldset *fs,
                                    size_t first)
{
    if (lay->delim != ',' || lay->ncols != 2 || lay->text)
        return 0;
    size_t p = first;
    while (p > 0 && blank(h, p - 1))
        p--;
    if (p == 0 || split_header(h, p - 1, ',', fs) != 0 || fs->total != 1 || fs->len[0] == 0 ||
        field_kind(fs_get(fs, 0), fs->len[0], '.') != F_TEXT)
        return 0;
    size_t rows = 0;
    int increasing = 1;
    double prev = 0;
    for (size_t i = first; i < h->nlines; i++) {
        if (blank(h, i))
            continue;
        if (split_line(h->buf + h->start[i], h->length[i], ',', fs) != 0 || fs->total != 2 ||
            fs->n != 2 || !plain_integer(fs_get(fs, 0), fs->len[0], 1) ||
            !plain_integer(fs_get(fs, 1), fs->len[1], 0))
            return 0;
        double v = strtod(fs_get(fs, 0), NULL); /* digits only: no locale question */
        if (rows && !(v > prev))
            increasing = 0;
        prev = v;
        rows++;
    }
    if (rows < 2 || increasing)
        return 0;
    lay->delim = ';'; /* absent from these lines: each is one field */
    lay->decimal = ',';
    lay->space_mode = 0;
    lay->ncols = 1;
    return 1;
}

tf_status tf_csv_detect(const tf_csv_source *src, const tf_import_options *opt,
                        tf_csv_layout *lay, tf_capture *cap, tf_error *err)
{
    head *h = calloc(1, sizeof *h);
    fieldset *fs = calloc(1, sizeof *fs);
    tf_status st = TF_OK;
    memset(lay, 0, sizeof *lay);
    lay->time_col = -1;
    if (!h || !fs) {
        st = tf_error_set(err, TF_ERR_NOMEM, "out of memory");
        goto done;
    }
    if ((st = read_head(src, h, lay, err)) != TF_OK)
        goto done;
    if ((st = choose(h, lay, fs, src, err)) != TF_OK)
        goto done;
    size_t header, units, first = find_header(h, lay, fs, &header, &units);
    if (first < h->nlines && header >= h->nlines && one_decimal_comma_column(h, lay, fs, first))
        first = find_header(h, lay, fs, &header, &units);
    if (first >= h->nlines) {
        st = no_data_error(h, src, err);
        goto done;
    }
    lay->header_line = header < h->nlines ? header + 1 : 0;
    lay->units_line = units < h->nlines ? units + 1 : 0;
    if (header < h->nlines && comment_skip(h, header)) {
        const char *c = h->buf + h->start[header];
        while (*c == ' ' || *c == '\t')
            c++;
        lay->comment = *c;
    }
    lay->data_line = first + 1;
    lay->data_offset = h->start[first];
    size_t meta_end = header < h->nlines ? header : first;
    for (size_t i = 0; i < meta_end; i++) {
        if (blank(h, i))
            continue;
        if (tf_capture_add_metadata(cap, h->buf + h->start[i], h->length[i]) != TF_OK) {
            st = tf_error_set(err, TF_ERR_NOMEM, "out of memory");
            goto done;
        }
        lay->metadata_lines++;
    }
    if ((st = fill_columns(h, lay, header, units, fs, err)) != TF_OK)
        goto done;
    if (lay->header_line)
        mark_empty_columns(h, lay, first, fs);
    st = find_time(h, opt, lay, first, fs, src, err);
done:
    if (h)
        free(h->buf);
    if (fs)
        free(fs->text);
    free(h);
    free(fs);
    return st;
}

void tf_csv_layout_free(tf_csv_layout *lay)
{
    free(lay->cols);
    free(lay->text);
    lay->cols = NULL;
    lay->text = NULL;
}
