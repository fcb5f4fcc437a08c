/* Private pieces of the CSV importer shared by import_csv.c, csv_detect.c and csv_time.c. */
#ifndef TF_CSV_INTERNAL_H
#define TF_CSV_INTERNAL_H

#include <float.h>
#include <math.h>
#include <stddef.h>
#include <stdint.h>
#include <sys/types.h>
#include <tankfit/import.h>

#include "numparse.h"

/* Longest field (and line, for the first lines looked at) accepted: a bad file
 * such as a 1 GB single line costs at most this much memory per parser. */
#define TF_CSV_FIELD_MAX ((size_t)1 << 20)
/* Bytes read from the start of the file to detect the dialect. */
#define TF_CSV_HEAD_MAX ((size_t)1 << 20)
/* Lines of the head examined for delimiter, header and metadata. */
#define TF_CSV_HEAD_LINES 2000
/* Columns a file may have. */
#define TF_CSV_COLS_MAX 2000
/* Fields per row beyond which a row is reported without counting further. */
#define TF_CSV_FIELDS_MAX ((size_t)1 << 20)
/* Characters of a field quoted in an error message. */
#define TF_CSV_EXCERPT 40

/* Where the bytes come from: a file descriptor (pread) or memory. */
typedef struct tf_csv_source {
    const char *path;              /* name used in messages */
    int fd;                        /* -1 for memory */
    const unsigned char *mem;
    size_t size;
} tf_csv_source;

/* Read up to len bytes at off; returns bytes read (0 at end) or -1 on error. */
ssize_t tf_csv_read(const tf_csv_source *src, size_t off, void *buf, size_t len);

/* One column of the file as detected. */
typedef struct tf_csv_column {
    char name[TF_NAME_SIZE];
    char unit[TF_UNIT_SIZE];
    double factor;                 /* from a prefixed unit in the header ("kV" -> 1000) */
    int unnamed;                   /* the header field was empty, or there is no header */
    int empty;                     /* unnamed trailing column, empty in every head row: its
                                      fields must stay empty and it is not a channel */
    int text;                      /* a column of text beside the numbers (lay->text): not
                                      a channel, its fields not read */
} tf_csv_column;

/* The layout found by tf_csv_detect. */
typedef struct tf_csv_layout {
    char delim;                    /* ',' ';' '\t' or ' ' (runs of spaces) */
    char decimal;                  /* '.' or ',' */
    int space_mode;                /* delim is ' ': runs of blanks separate fields */
    int has_bom;
    char line_end[8];              /* "LF", "CRLF", "CR" */
    char term;                     /* the byte that ends each line: '\n' or '\r' */
    size_t ncols;                  /* fields per data row */
    tf_csv_column *cols;           /* ncols entries (malloc'd) */
    size_t header_line;            /* 1-based; 0 when none */
    size_t units_line;             /* 1-based line of a units row under the header; 0: none */
    char comment;                  /* the header's comment mark ('#' or '%'); 0: not commented */
    size_t data_line;              /* 1-based line of the first data row */
    size_t data_offset;            /* byte offset of that line */
    size_t metadata_lines;         /* non-blank lines before the header/data */
    int time_col;                  /* -1 when none */
    int time_named;                /* the time column was recognised by name or unit */
    double t_ref, d_ref;           /* first time value and a reference step from the head;
                                      d_ref 0: take the first step */
    int time_sig;                  /* significant digits of the time column; 0: fixed decimals */
    size_t head_rows;              /* data rows seen in the head */
    int quotes;                    /* a '"' appears in the head */
    unsigned char *text;           /* ncols flags, a text column (malloc'd); NULL: none */
} tf_csv_layout;

/* Detect the dialect, header, metadata and time column from the first bytes.
 * Metadata lines go to cap. On failure sets err (TF_ERR_DATA with position). */
tf_status tf_csv_detect(const tf_csv_source *src, const tf_import_options *opt,
                        tf_csv_layout *lay, tf_capture *cap, tf_error *err);

void tf_csv_layout_free(tf_csv_layout *lay);

/* tf_import_csv on bytes in memory (name is used in messages): the entry
 * point of the fuzz harness and of tests that need no file. */
tf_status tf_csv_import_memory(const char *name, const void *data, size_t len,
                               const tf_import_options *opt, tf_capture **out, tf_error *err);

/* The printed form of a number: digits after the decimal mark, exponent,
 * decimal exponent of the first significant digit. */
typedef struct tf_num_text {
    long frac, exp, lead;
    int nonzero, has_exp;
} tf_num_text;
void tf_csv_scan_number(const char *s, size_t len, char decimal, tf_num_text *nt);

/* Printing resolution: one unit in the last printed digit ("1.2340e-05" ->
 * 1e-9, "12" -> 1), or, when sig_digits > 0 (the column is printed with that
 * many significant digits, trailing zeros possibly dropped as by %g), one unit
 * in the last of those digits if that is coarser. Zero has resolution 0. */
double tf_csv_resolution(const tf_num_text *nt, int sig_digits);

/* 10^k: k within -40 .. 40 from a table of literals (correctly rounded), else pow(). */
extern const double tf_csv_pow10_table[81];
double tf_csv_pow10_far(long k);
static inline double tf_csv_pow10(long k)
{
    return k >= -40 && k <= 40 ? tf_csv_pow10_table[k + 40] : tf_csv_pow10_far(k);
}

/* Decimal digits of m, 1 <= m < 10^19: from the bit length, then one compare
 * (1233 / 4096 ~ log10(2), so g is the digit count or one less). */
static inline long tf_csv_digits10(uint64_t m)
{
    static const uint64_t p10[20] = {1ull, 10ull, 100ull, 1000ull, 10000ull, 100000ull,
        1000000ull, 10000000ull, 100000000ull, 1000000000ull, 10000000000ull,
        100000000000ull, 1000000000000ull, 10000000000000ull, 100000000000000ull,
        1000000000000000ull, 10000000000000000ull, 100000000000000000ull,
        1000000000000000000ull, 10000000000000000000ull};
    long g = ((64 - __builtin_clzll(m)) * 1233) >> 12;
    return g + (m >= p10[g]);
}

/* The decimal exponent of the last digit that counts in the resolution of a
 * nonzero short decimal d (as tf_csv_resolution): the lead digit of m sits at
 * e + digits(m) - 1, its last at e. */
static inline long tf_csv_short_last(const tf_short_dec *d, int sig_digits)
{
    long last = d->e, lead = d->e + tf_csv_digits10(d->m) - 1;
    if (sig_digits > 0 && lead - sig_digits + 1 < last)
        last = lead - sig_digits + 1;
    return last;
}

/* tf_csv_time_value for any text (two passes). */
int tf_csv_time_value_general(const char *s, size_t len, char decimal, int sig_digits,
                              double *value, double *q);

/* A time field: its value (correctly rounded, as tf_parse_field) and its
 * resolution (as tf_csv_resolution) in one pass. Returns 0, or -1 when the
 * field is not one number. Inline: it runs once per row. */
static inline int tf_csv_time_value(const char *s, size_t len, char decimal, int sig_digits,
                                    double *value, double *q)
{
    tf_short_dec d;
    if (FLT_EVAL_METHOD != 0 || tf_scan_short(s, len, decimal, &d) != 0 || d.m == 0)
        return tf_csv_time_value_general(s, len, decimal, sig_digits, value, q);
    *value = tf_short_value(&d); /* Clinger's fast path, as tf_parse_field */
    *q = tf_csv_pow10(tf_csv_short_last(&d, sig_digits));
    return 0;
}

/* Significant digits printed (0 for zero). */
int tf_csv_sig_digits(const tf_num_text *nt);

/* realloc that refuses blocks above TF_CSV_FIELD_MAX (libcsv's field buffer). */
void *tf_csv_capped_realloc(void *p, size_t n);

/* ---- time base (csv_time.c) ---- */

#define TF_TIME_BLOCK 256          /* rows per residual block */

typedef struct tf_time_block {
    double hi, lo;                 /* max(u - q/2), min(u + q/2) over the block */
    double hi_t, lo_t;             /* the time values where they occur */
    size_t hi_line, lo_line;
    size_t hi_k, lo_k;             /* their local row indices */
} tf_time_block;

/* Streaming accumulator of one parser thread: u_k = t_k - (t_first + k * d_ref). */
typedef struct tf_time_acc {
    double d_ref;
    double t_scale;                /* |first time of the file|: q is never below 4 ulp of it */
    size_t n;                      /* values added */
    double t_first, q_first;
    size_t line_first;
    double t_prev, q_prev;
    double q_max, q_min;
    double sum_u, sum_ku;
    tf_time_block *blocks;
    size_t nblocks, cap_blocks;
} tf_time_acc;

/* Prepare for about max_rows values (more make room as they come). TF_ERR_NOMEM on failure. */
tf_status tf_time_acc_init(tf_time_acc *a, double t_ref, double d_ref, size_t max_rows,
                           tf_error *err);
void tf_time_acc_free(tf_time_acc *a);

/* Largest deviation of one step from the uniform step that rounding to the
 * printed digits can explain: each value is within q/2 of the true time, so a
 * step is within (q_a + q_b)/2; 1.5x that leaves room for the reference step's
 * own small error (q is never below a few ulps of the value itself). */
static inline double tf_time_step_tolerance(double qa, double qb)
{
    return 0.75 * (qa + qb);
}

enum { TF_TIME_NOT_LATER, TF_TIME_BAD_STEP, TF_TIME_TOO_MANY };

/* Room for twice the blocks: 0, or -1 when out of memory. */
int tf_time_acc_grow(tf_time_acc *a);

/* Write the message of tf_time_acc_add's failure why into msg; returns -1. */
int tf_time_acc_fail(const tf_time_acc *a, int why, double t, double d, double tol, char *msg,
                     size_t msg_size);

/* Add the value t printed as text (resolution q) from line. Returns 0, or -1
 * after writing "expected ..., found ..." (without position) into msg when the
 * step from the previous value is not the uniform step, -2 (with msg) when out
 * of memory. Inline: it runs once per row. */
static inline int tf_time_acc_add(tf_time_acc *a, double t, double q, size_t line, char *msg,
                                  size_t msg_size)
{
    size_t k = a->n;
    /* no finer than the double itself, nor than the first time: a generator's
     * t0 + k*dt keeps the rounding of t0 even where it passes zero */
    double floor_q = 4.0 * DBL_EPSILON * (fabs(t) + a->t_scale);
    if (q < floor_q)
        q = floor_q;
    if (k == 0) {
        a->t_first = t;
        a->q_first = q;
        a->line_first = line;
        a->q_max = a->q_min = q;
    } else {
        double d = t - a->t_prev;
        double tol = tf_time_step_tolerance(q, a->q_prev);
        if (k == 1 && a->d_ref == 0 && d > 0)
            a->d_ref = d; /* no reference from the head: the first step is it */
        if (!(d > 0))
            return tf_time_acc_fail(a, TF_TIME_NOT_LATER, t, d, tol, msg, msg_size);
        if (fabs(d - a->d_ref) > tol)
            return tf_time_acc_fail(a, TF_TIME_BAD_STEP, t, d, tol, msg, msg_size);
        if (q > a->q_max)
            a->q_max = q;
        if (q < a->q_min)
            a->q_min = q;
    }
    double u = t - (a->t_first + (double)k * a->d_ref);
    a->sum_u += u;
    a->sum_ku += (double)k * u;
    size_t b = k / TF_TIME_BLOCK;
    if (b >= a->cap_blocks && tf_time_acc_grow(a) != 0) {
        tf_time_acc_fail(a, TF_TIME_TOO_MANY, t, 0, 0, msg, msg_size);
        return -2;
    }
    if (b == a->nblocks) {
        tf_time_block *nb = &a->blocks[a->nblocks++];
        nb->hi = -HUGE_VAL;
        nb->lo = HUGE_VAL;
    }
    tf_time_block *blk = &a->blocks[b];
    if (u - 0.5 * q > blk->hi) {
        blk->hi = u - 0.5 * q;
        blk->hi_t = t;
        blk->hi_line = line;
        blk->hi_k = k;
    }
    if (u + 0.5 * q < blk->lo) {
        blk->lo = u + 0.5 * q;
        blk->lo_t = t;
        blk->lo_line = line;
        blk->lo_k = k;
    }
    a->t_prev = t;
    a->q_prev = q;
    a->n++;
    return 0;
}

/* Combine the accumulators of consecutive parts (in file order), check the step across part boundaries and every
 * residual of the least-squares line against the printing resolution, and set
 * t0/dt. On failure sets err with the line; col is the time column (1-based). */
tf_status tf_time_finish(const tf_time_acc *acc, size_t parts, const char *path, size_t col,
                         double *t0, double *dt, double *resolution,
                         tf_error *err);

#endif
