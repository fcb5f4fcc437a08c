/* Design files: INI text (inih) into a tf_design, with file:line:column errors. */
#include <tankfit/design.h>

/* Debian's inih (r55) is built to pass the line number to the handler; the
 * prototype must match the library. Lines are also counted here, by the reader,
 * which is what messages use. */
#define INI_HANDLER_LINENO 1
#include <ini.h>

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "design_keys.h"
#include "quantity.h"

#define MAX_FILE_BYTES (1u << 20)
#define NKEYS_MAX 128

typedef struct pstate {
    tf_design *d;
    const char *name;
    tf_error *err;
    int failed;

    /* reader */
    const char *text;
    size_t len, pos;
    int lineno;             /* line most recently handed to inih */
    const char *buf;        /* inih's line buffer: handler strings point into it */
    size_t bufsize;
    char raw[1024];         /* the line as read, for columns */
    int indented;           /* the line starts with white space */
    int bom;                /* line 1 starts with a UTF-8 byte order mark */

    /* what inih will do with an indented line: continue the previous key */
    int have_prev;
    const tf_dkey *prev;
    int prev_line;

    int section_line[16];
    int key_line[NKEYS_MAX];
    int scale_line[TF_DESIGN_MAX_SCALES];
    int bits_given[TF_SYN_NCHAN], enabled_given[TF_SYN_NCHAN];
    char prev_item[48];     /* previous firing time as written */
    int point_line;         /* line of the previous schedule point */
    char prev_point[48];
} pstate;

/* ---- errors ---------------------------------------------------------------- */

/* Character column (1-based) of p within the current line, 0 when unknown. */
static int col_of(const pstate *st, const char *p)
{
    if (!st->buf || p < st->buf || p >= st->buf + st->bufsize)
        return 0;
    size_t off = (size_t)(p - st->buf);
    size_t start = st->bom ? 3 : 0;
    int col = 1;
    for (size_t i = start; i < off && i < sizeof st->raw && st->raw[i]; i++)
        if (((unsigned char)st->raw[i] & 0xC0) != 0x80)
            col++;
    return col;
}

static int failv(pstate *st, int line, int col, const char *fmt, va_list ap)
{
    if (st->failed)
        return 0;
    st->failed = line > 0 ? line : 1;
    char msg[768];
    vsnprintf(msg, sizeof msg, fmt, ap);
    if (col > 0)
        tf_error_set(st->err, TF_ERR_DATA, "%s:%d:%d: %s", st->name, line, col, msg);
    else
        tf_error_set(st->err, TF_ERR_DATA, "%s:%d: %s", st->name, line, msg);
    return 0;
}

/* Record the first error, at the current line; returns 0 (inih's "handler failed"). */
static int fail(pstate *st, int col, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;
static int fail(pstate *st, int col, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    failv(st, st->lineno, col, fmt, ap);
    va_end(ap);
    return 0;
}

/* The same, at another line (checks made after the whole file was read). */
static int fail_at(pstate *st, int line, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;
static int fail_at(pstate *st, int line, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    failv(st, line, 0, fmt, ap);
    va_end(ap);
    return 0;
}

static const char *excerpt(char *out, size_t size, const char *text)
{
    return tf_error_excerpt(out, (unsigned)size, text, (unsigned)strlen(text), 40);
}

/* ---- reader: one line at a time to inih, checked before inih sees it --------- */

/* Length of a valid UTF-8 sequence at s (at most n bytes), 0 when invalid. */
static size_t utf8_len(const unsigned char *s, size_t n)
{
    size_t l;
    uint32_t cp;
    if (s[0] < 0x80)
        return 1;
    else if ((s[0] & 0xE0) == 0xC0)
        l = 2, cp = s[0] & 0x1Fu;
    else if ((s[0] & 0xF0) == 0xE0)
        l = 3, cp = s[0] & 0x0Fu;
    else if ((s[0] & 0xF8) == 0xF0)
        l = 4, cp = s[0] & 0x07u;
    else
        return 0;
    if (l > n)
        return 0;
    for (size_t i = 1; i < l; i++) {
        if ((s[i] & 0xC0) != 0x80)
            return 0;
        cp = (cp << 6) | (s[i] & 0x3Fu);
    }
    static const uint32_t min_cp[5] = {0, 0, 0x80, 0x800, 0x10000};
    if (cp < min_cp[l] || cp > 0x10FFFF || (cp >= 0xD800 && cp <= 0xDFFF))
        return 0;
    return l;
}

/* Bytes a design line may not hold: NUL, control characters other than tab (a
 * carriage return only before the newline), and invalid UTF-8. */
static int check_bytes(pstate *st, const char *line, size_t n)
{
    size_t content = n;
    if (content && line[content - 1] == '\n')
        content--;
    if (content && line[content - 1] == '\r')
        content--;
    int col = 1;
    for (size_t i = 0; i < content; col++) {
        unsigned char c = (unsigned char)line[i];
        if (c == 0)
            return fail(st, col, "expected text, found a NUL byte (is this a design file?)");
        if (c == '\r')
            return fail(st, col, "expected text, found a carriage return inside a line (line "
                        "ends must be LF or CRLF)");
        if ((c < 0x20 && c != '\t') || c == 0x7F)
            return fail(st, col, "expected text, found control character 0x%02X", c);
        size_t l = utf8_len((const unsigned char *)line + i, content - i);
        if (l == 0)
            return fail(st, col,
                        "expected UTF-8 text, found byte 0x%02X (save the file as UTF-8)", c);
        i += l;
    }
    return 1;
}

/* A section header line (not one inih would take as a continuation): the name
 * must be known, given once, and nothing but a comment may follow it. */
static int check_section(pstate *st, const char *s, size_t n)
{
    const char *close = memchr(s, ']', n);
    if (!close)
        return 1; /* inih reports the missing ']' */
    char name[64];
    size_t l = (size_t)(close - s - 1);
    char ex[64];
    if (l >= sizeof name)
        l = sizeof name - 1;
    memcpy(name, s + 1, l);
    name[l] = '\0';
    int col = (int)(s - st->raw) + 2 - (st->bom ? 3 : 0);
    if (!tf_dsection_known(name)) {
        char hint[96];
        tf_dsection_suggest(name, hint, sizeof hint);
        return fail(st, col, "unknown section '[%s]'%s; sections are [inverter], [tank], "
                    "[switch], [limits], [channels], [record], [capture], [schedule]",
                    excerpt(ex, sizeof ex, name), hint);
    }
    const char *rest = close + 1;
    while (rest < s + n && (*rest == ' ' || *rest == '\t' || *rest == '\r' || *rest == '\n'))
        rest++;
    if (rest < s + n && *rest != ';' && *rest != '#')
        return fail(st, col + (int)(rest - s) - 1,
                    "expected a comment or the end of the line after '[%s]', found '%s'",
                    name, excerpt(ex, sizeof ex, rest));
    for (int i = 0; tf_design_sections[i]; i++)
        if (strcmp(tf_design_sections[i], name) == 0) {
            if (st->section_line[i])
                return fail(st, col, "duplicate section [%s] (first at line %d); "
                            "keep all its keys under one header", name, st->section_line[i]);
            st->section_line[i] = st->lineno;
        }
    st->have_prev = 0;
    st->prev = NULL;
    return 1;
}

static char *reader(char *str, int num, void *stream)
{
    pstate *st = stream;
    if (st->failed || st->pos >= st->len)
        return NULL;
    if (num < 4)
        return fail(st, 0, "internal: line buffer of %d bytes", num), NULL;
    const char *line = st->text + st->pos;
    const char *nl = memchr(line, '\n', st->len - st->pos);
    size_t n = nl ? (size_t)(nl - line) + 1 : st->len - st->pos;
    st->pos += n;
    st->lineno++;
    if (!check_bytes(st, line, n))
        return NULL;
    size_t content = n;
    while (content && (line[content - 1] == '\n' || line[content - 1] == '\r'))
        content--;
    /* inih would split a longer line silently; its buffer holds num - 1 bytes
     * with the line ending */
    if (content + 3 > (size_t)num || n >= sizeof st->raw)
        return fail(st, 0, "line is longer than %d bytes; split a long list or "
                    "notes over indented continuation lines",
                    (int)((size_t)num < sizeof st->raw ? num : (int)sizeof st->raw) - 3),
               NULL;
    memcpy(str, line, n);
    str[n] = '\0';
    memcpy(st->raw, line, n);
    st->raw[n] = '\0';
    st->buf = str;
    st->bufsize = (size_t)num;
    st->bom = st->lineno == 1 && n >= 3 && memcmp(line, "\xEF\xBB\xBF", 3) == 0;
    const char *s = st->raw + (st->bom ? 3 : 0);
    st->indented = *s == ' ' || *s == '\t';
    while (*s == ' ' || *s == '\t')
        s++;
    if (*s == '[' && !(st->indented && st->have_prev) &&
        !check_section(st, s, content - (size_t)(s - st->raw)))
        return NULL;
    return str;
}

/* ---- values ------------------------------------------------------------------ */

static const char *dim_example(tf_dim d)
{
    switch (d) {
    case TF_DIM_F: return "2.2 uF";
    case TF_DIM_H: return "36 uH";
    case TF_DIM_OHM: return "0.45 ohm";
    case TF_DIM_S: return "20 us";
    case TF_DIM_HZ: return "6 kHz";
    case TF_DIM_V: return "540 V";
    case TF_DIM_A: return "800 A";
    case TF_DIM_RATE: return "10 MS/s";
    case TF_DIM_GAIN: return "100 A/V";
    case TF_DIM_RATIO: return "5 %";
    case TF_DIM_LOGIC: return "0.01";
    }
    return "1";
}

/* Parse a quantity of dimension dim for key (named in messages as what). */
static int parse_qty(pstate *st, const char *what, tf_dim dim, tf_range range,
                     const char *text, int col, double *out)
{
    tf_quantity q;
    char ex[64], ex2[64];
    switch (tf_quantity_parse(text, &q)) {
    case TF_QTY_OK:
        break;
    case TF_QTY_EMPTY:
        return fail(st, col, "%s expects %s, found nothing", what, tf_dim_expects(dim));
    case TF_QTY_NUMBER:
        return fail(st, col, "%s: expected a number with an optional SI prefix and unit "
                    "(e.g. '%s'), found '%s'", what, dim_example(dim),
                    excerpt(ex, sizeof ex, text));
    case TF_QTY_UNIT:
        if (strchr(q.suffix, ','))
            return fail(st, col, "%s: expected '.' as the decimal mark, found '%s'", what,
                        excerpt(ex, sizeof ex, text));
        if (strchr(q.suffix, '#'))
            return fail(st, col, "%s: expected a unit, found '%s' (a comment after a value "
                        "starts with ' ;', not '#')", what, excerpt(ex, sizeof ex, text));
        return fail(st, col, "%s: expected an SI prefix (such as n, u, µ, m, k, M) and a unit after "
                    "the number, found '%s' in '%s'", what, excerpt(ex2, sizeof ex2, q.suffix),
                    excerpt(ex, sizeof ex, text));
    case TF_QTY_RANGE:
        return fail(st, col, "%s: number out of range in '%s'", what,
                    excerpt(ex, sizeof ex, text));
    }
    if (q.prefix_only)
        return fail(st, col, "%s expects %s, found a prefix without a unit in '%s'", what,
                    tf_dim_expects(dim), excerpt(ex, sizeof ex, text));
    if (!tf_dim_accepts(dim, q.unit)) {
        if (dim == TF_DIM_GAIN && strcmp(q.unit, "V/A") == 0)
            return fail(st, col, "%s expects the factor that multiplies the recorded value "
                        "(A/V or V/V), found volts per ampere in '%s' (a 10 mV/A probe is "
                        "100 A/V)", what, excerpt(ex, sizeof ex, text));
        return fail(st, col, "%s expects %s, found %s in '%s'", what, tf_dim_expects(dim),
                    tf_unit_long_name(q.unit), excerpt(ex, sizeof ex, text));
    }
    if (range == TF_RANGE_POS && !(q.value > 0))
        return fail(st, col, "%s must be greater than zero, found '%s'", what,
                    excerpt(ex, sizeof ex, text));
    if (range == TF_RANGE_NONNEG && q.value < 0)
        return fail(st, col, "%s must not be negative, found '%s'", what,
                    excerpt(ex, sizeof ex, text));
    *out = q.value;
    return 1;
}

/* A whole number: optional sign and decimal digits only. */
static int parse_int(pstate *st, const tf_dkey *k, const char *text, int col, int *out)
{
    const char *p = text;
    int neg = *p == '-';
    if (*p == '+' || *p == '-')
        p++;
    long long v = 0;
    int digits = 0;
    while (*p >= '0' && *p <= '9' && v < 1000000)
        v = v * 10 + (*p++ - '0'), digits++;
    if (neg)
        v = -v;
    char ex[64];
    if (!digits || *p || v < k->imin || v > k->imax)
        return fail(st, col, "%s expects a whole number from %d to %d, found '%s'", k->key,
                    k->imin, k->imax, excerpt(ex, sizeof ex, text));
    *out = (int)v;
    return 1;
}

static int parse_seed(pstate *st, const char *text, int col, unsigned long long *out)
{
    unsigned long long v = 0;
    const char *p = text;
    char ex[64];
    if (!*p)
        return fail(st, col, "seed expects a whole number from 0 to %llu, found nothing",
                    (unsigned long long)UINT64_MAX);
    for (; *p; p++) {
        unsigned d = (unsigned)(*p - '0');
        if (d > 9 || v > (UINT64_MAX - d) / 10)
            return fail(st, col, "seed expects a whole number from 0 to %llu, found '%s'",
                        (unsigned long long)UINT64_MAX, excerpt(ex, sizeof ex, text));
        v = v * 10 + d;
    }
    *out = v;
    return 1;
}

static int parse_bool(pstate *st, const tf_dkey *k, const char *text, int col, int *out)
{
    static const char *const yes[] = {"yes", "true", "on", "1", NULL};
    static const char *const no[] = {"no", "false", "off", "0", NULL};
    for (int i = 0; yes[i]; i++) {
        if (strcmp(text, yes[i]) == 0)
            return *out = 1, 1;
        if (strcmp(text, no[i]) == 0)
            return *out = 0, 1;
    }
    char ex[64];
    return fail(st, col, "%s expects yes or no, found '%s'", k->key, excerpt(ex, sizeof ex, text));
}

static int set_enum(pstate *st, const tf_dkey *k, const char *text, int col)
{
    int idx = -1, n = 0;
    for (; k->names[n]; n++)
        if (strcmp(text, k->names[n]) == 0)
            idx = n;
    if (idx < 0) {
        char list[160] = "", hint[80] = "", ex[64];
        for (int i = 0; i < n; i++)
            snprintf(list + strlen(list), sizeof list - strlen(list), "%s%s",
                     i ? (i == n - 1 ? " or " : ", ") : "", k->names[i]);
        const char *best = tf_suggest(text, k->names, (size_t)n);
        if (best)
            snprintf(hint, sizeof hint, " (did you mean '%s'?)", best);
        return fail(st, col, "%s expects %s, found '%s'%s", k->key, list,
                    excerpt(ex, sizeof ex, text), hint);
    }
    tf_design *d = st->d;
    if (strcmp(k->key, "topology") == 0)
        d->topology = tf_topology_parse(text);
    else if (strcmp(k->key, "capacitor") == 0)
        d->split_capacitor = idx == 1;
    else if (strcmp(k->key, "mode") == 0)
        d->mode = tf_mode_parse(text);
    else if (strcmp(k->key, "format") == 0)
        d->format_wav = idx == 1;
    return 1;
}

static int set_text(pstate *st, const tf_dkey *k, const char *text, int col, int append)
{
    char *dst = (char *)st->d + k->offset;
    size_t have = append ? strlen(dst) : 0, l = strlen(text);
    if (k->kind == TF_DK_COLUMN && l == 0)
        return fail(st, col, "%s expects a capture column name, found nothing", k->key);
    if (have + (append ? 1 : 0) + l >= k->size)
        return fail(st, col, "%s is longer than %zu bytes", k->key, k->size - 1);
    if (append)
        dst[have++] = '\n';
    memcpy(dst + have, text, l + 1);
    return 1;
}

/* Column of p in a value that starts at base, itself at column base_col. */
static int col_in(const char *base, int base_col, const char *p)
{
    if (base_col <= 0)
        return 0;
    int col = base_col;
    for (const char *q = base; q < p; q++)
        if (((unsigned char)*q & 0xC0) != 0x80)
            col++;
    return col;
}

/* Next comma-separated item of a list (value text at base, column base_col) at *p:
 * copies it trimmed into out, sets *col and advances *p. Returns 0 at the end, -1
 * for an empty item. */
static int next_item(const char *base, int base_col, const char **p, char *out, size_t size,
                     int *col)
{
    const char *s = *p;
    if (!*s)
        return 0;
    while (*s == ' ' || *s == '\t')
        s++;
    const char *e = strchr(s, ',');
    const char *end = e ? e : s + strlen(s);
    const char *t = end;
    while (t > s && (t[-1] == ' ' || t[-1] == '\t'))
        t--;
    *col = col_in(base, base_col, s);
    *p = e ? e + 1 : end;
    if (t == s)
        return e || s != *p ? -1 : 0;
    size_t l = (size_t)(t - s);
    if (l >= size)
        l = size - 1;
    memcpy(out, s, l);
    out[l] = '\0';
    return 1;
}

/* firing_times: instants, strictly increasing; continuation lines add more. */
static int add_firing_times(pstate *st, const char *text, int col0)
{
    tf_design *d = st->d;
    const char *p = text;
    char item[48];
    int col, r;
    char ex[64];
    while ((r = next_item(text, col0, &p, item, sizeof item, &col)) != 0) {
        if (r < 0)
            return fail(st, col, "firing_times: expected an instant, found an empty entry");
        double t = 0;
        if (!parse_qty(st, "firing_times", TF_DIM_S, TF_RANGE_ANY, item, col, &t))
            return 0;
        if (d->n_firing_times >= TF_DESIGN_MAX_FIRINGS)
            return fail(st, col, "too many firing times (at most %d)", TF_DESIGN_MAX_FIRINGS);
        if (d->n_firing_times && !(t > d->firing_times_s[d->n_firing_times - 1]))
            return fail(st, col, "firing times must increase: '%s' is not after '%s'",
                        excerpt(ex, sizeof ex, item), st->prev_item);
        d->firing_times_s[d->n_firing_times++] = t;
        snprintf(st->prev_item, sizeof st->prev_item, "%s", item);
    }
    return 1;
}

/* [schedule] point = time, resistance, inductance ('-' keeps the [tank] value). */
static int add_point(pstate *st, const char *text, int col0)
{
    tf_design *d = st->d;
    const char *p = text;
    char item[3][48];
    int col[3], n = 0, r, c;
    char tmp[48], ex[64];
    while ((r = next_item(text, col0, &p, tmp, sizeof tmp, &c)) != 0) {
        if (r < 0)
            return fail(st, c, "point: expected a value or '-', found an empty entry");
        if (n < 3) {
            memcpy(item[n], tmp, sizeof tmp);
            col[n] = c;
        }
        n++;
    }
    if (n != 3)
        return fail(st, col0, "point expects 'time, resistance, inductance' (write '-' to "
                    "keep the [tank] value), found %d entr%s", n, n == 1 ? "y" : "ies");
    if (d->nschedule >= TF_DESIGN_MAX_SCHEDULE)
        return fail(st, col0, "too many schedule points (at most %d)", TF_DESIGN_MAX_SCHEDULE);
    double t, rr = NAN, ll = NAN;
    if (!parse_qty(st, "point time", TF_DIM_S, TF_RANGE_ANY, item[0], col[0], &t))
        return 0;
    if (strcmp(item[1], "-") != 0 &&
        !parse_qty(st, "point resistance", TF_DIM_OHM, TF_RANGE_NONNEG, item[1], col[1], &rr))
        return 0;
    if (strcmp(item[2], "-") != 0 &&
        !parse_qty(st, "point inductance", TF_DIM_H, TF_RANGE_POS, item[2], col[2], &ll))
        return 0;
    size_t k = d->nschedule;
    if (k && !(t > d->sched_t_s[k - 1]))
        return fail(st, col[0], "schedule times must increase: '%s' is not after '%s' "
                    "(line %d)", excerpt(ex, sizeof ex, item[0]), st->prev_point,
                    st->point_line);
    d->sched_t_s[k] = t;
    d->sched_r_ohm[k] = rr;
    d->sched_l_h[k] = ll;
    d->nschedule++;
    snprintf(st->prev_point, sizeof st->prev_point, "%s", item[0]);
    st->point_line = st->lineno;
    return 1;
}

static int add_scale(pstate *st, const char *name, const char *text, int ncol, int col)
{
    tf_design *d = st->d;
    const char *column = name + 6;
    char ex[64];
    if (!*column)
        return fail(st, ncol, "expected a column name after 'scale.' (e.g. 'scale.i_probe = "
                    "100 A/V'), found nothing");
    if (strlen(column) >= sizeof d->scales[0].column)
        return fail(st, ncol, "column name '%s' is longer than %zu bytes",
                    excerpt(ex, sizeof ex, column), sizeof d->scales[0].column - 1);
    for (size_t i = 0; i < d->nscales; i++)
        if (strcmp(d->scales[i].column, column) == 0)
            return fail(st, ncol, "duplicate key '%s' in [channels] (first given at line %d)",
                        excerpt(ex, sizeof ex, name), st->scale_line[i]);
    if (d->nscales >= TF_DESIGN_MAX_SCALES)
        return fail(st, ncol, "too many scale factors (at most %d)", TF_DESIGN_MAX_SCALES);
    tf_design_scale *s = &d->scales[d->nscales];
    if (!parse_qty(st, name, TF_DIM_GAIN, TF_RANGE_POS, text, col, &s->factor))
        return 0;
    tf_quantity q;
    tf_quantity_parse(text, &q);
    snprintf(s->unit, sizeof s->unit, "%s", q.unit);
    snprintf(s->column, sizeof s->column, "%s", column);
    st->scale_line[d->nscales++] = st->lineno;
    return 1;
}

static int set_value(pstate *st, const tf_dkey *k, const char *name, const char *value,
                     int ncol, int col)
{
    char *base = (char *)st->d;
    switch (k->kind) {
    case TF_DK_QTY: {
        double v;
        if (!parse_qty(st, k->key, k->dim, k->range, value, col, &v))
            return 0;
        memcpy(base + k->offset, &v, sizeof v);
        return 1;
    }
    case TF_DK_INT: {
        int v = 0;
        if (!parse_int(st, k, value, col, &v))
            return 0;
        memcpy(base + k->offset, &v, sizeof v);
        return 1;
    }
    case TF_DK_BOOL: {
        int v = 0;
        if (!parse_bool(st, k, value, col, &v))
            return 0;
        memcpy(base + k->offset, &v, sizeof v);
        return 1;
    }
    case TF_DK_SEED:
        return parse_seed(st, value, col, &st->d->seed);
    case TF_DK_TEXT:
    case TF_DK_COLUMN:
        return set_text(st, k, value, col, 0);
    case TF_DK_ENUM:
        return set_enum(st, k, value, col);
    case TF_DK_TIMES:
        return add_firing_times(st, value, col);
    case TF_DK_POINT:
        return add_point(st, value, col);
    case TF_DK_SCALE:
        return add_scale(st, name, value, ncol, col);
    }
    return fail(st, col, "internal: key kind %d", (int)k->kind);
}

/* Which simulated channel a [capture] per-channel key belongs to, or -1. */
static int chan_of_key(const char *key, const char *field)
{
    const char *dot = strchr(key, '.');
    if (!dot || strcmp(dot + 1, field) != 0)
        return -1;
    for (int c = 0; c < TF_SYN_NCHAN; c++) {
        const char *n = tf_synth_channel_name((tf_synth_channel)c);
        if (strlen(n) == (size_t)(dot - key) && strncmp(key, n, (size_t)(dot - key)) == 0)
            return c;
    }
    return -1;
}

/* An indented line: inih hands it over as another value of the previous key,
 * without removing an inline comment (Debian's r55): cut " ;..." here. */
static int continuation(pstate *st, const char *value, int col)
{
    const tf_dkey *k = st->prev;
    char text[1024];
    size_t l = 0;
    for (; value[l] && l + 1 < sizeof text; l++) {
        if (value[l] == ';' && l > 0 && (value[l - 1] == ' ' || value[l - 1] == '\t'))
            break;
        text[l] = value[l];
    }
    while (l > 0 && (text[l - 1] == ' ' || text[l - 1] == '\t'))
        l--;
    text[l] = '\0';
    value = text;
    if (k && k->kind == TF_DK_TEXT && strcmp(k->key, "notes") == 0)
        return set_text(st, k, value, col, 1);
    if (k && k->kind == TF_DK_TIMES)
        return add_firing_times(st, value, col);
    return fail(st, col, "unexpected indented line: it would continue '%s' from line %d, "
                "which takes one value; remove the indentation (only notes and firing_times "
                "continue over several lines)", k ? k->key : "?", st->prev_line);
}

static int handler(void *user, const char *section, const char *name, const char *value,
                   int lineno)
{
    pstate *st = user;
    (void)lineno; /* the reader's count, which also covers lines inih skips */
    if (st->failed)
        return 1;
    int ncol = col_of(st, name), col = col_of(st, value);
    char ex[64];
    if (st->indented && st->have_prev)
        return continuation(st, value, col);
    if (!section[0])
        return fail(st, ncol, "expected a [section] header before '%s'",
                    excerpt(ex, sizeof ex, name));
    if (!tf_dsection_known(section)) /* the reader stops before this; kept for safety */
        return fail(st, ncol, "key '%s' is in unknown section [%s]",
                    excerpt(ex, sizeof ex, name), section);
    if (!name[0])
        return fail(st, col > 1 ? col - 1 : 1, "expected a key name before '='");
    const tf_dkey *k = tf_dkey_find(section, name);
    if (!k) {
        char hint[128];
        tf_dkey_suggest(section, name, hint, sizeof hint);
        return fail(st, ncol, "unknown key '%s' in [%s]%s", excerpt(ex, sizeof ex, name),
                    section, hint);
    }
    st->have_prev = 1;
    st->prev = k;
    st->prev_line = st->lineno;
    int idx = tf_dkey_index(k);
    if (idx >= 0 && idx < NKEYS_MAX && k->kind != TF_DK_POINT) {
        if (st->key_line[idx])
            return fail(st, ncol, "duplicate key '%s' in [%s] (first given at line %d)",
                        name, section, st->key_line[idx]);
        st->key_line[idx] = st->lineno;
    }
    int c;
    if ((c = chan_of_key(name, "bits")) >= 0)
        st->bits_given[c] = 1;
    if ((c = chan_of_key(name, "enabled")) >= 0)
        st->enabled_given[c] = 1;
    return set_value(st, k, name, value, ncol, col);
}

/* ---- after the last line: defaults that depend on other keys, contradictions --- */

static int line_of(const pstate *st, const char *section, const char *key)
{
    const tf_dkey *k = tf_dkey_find(section, key);
    int i = k ? tf_dkey_index(k) : -1;
    return i >= 0 && i < NKEYS_MAX ? st->key_line[i] : 0;
}

/* Gate channels a topology drives (g1..g4). */
static int gates_of(tf_topology t)
{
    switch (t) {
    case TF_TOPO_SINGLE: case TF_TOPO_RING_DOWN: return 1;
    case TF_TOPO_HALF_BRIDGE: return 2;
    case TF_TOPO_FULL_BRIDGE: return 4;
    case TF_TOPO_UNKNOWN: break;
    }
    return 4;
}

static int finish(pstate *st)
{
    tf_design *d = st->d;
    tf_topology t = d->topology;
    const char *tn = tf_topology_name(t);
    int lf = line_of(st, "inverter", "firing_frequency");
    int lt = line_of(st, "inverter", "firing_times");
    if (lt && d->n_firing_times == 0)
        return fail_at(st, lt, "firing_times expects a list of instants such as "
                       "'10 us, 180 us, 350 us', found nothing");
    if (lf && lt)
        return fail_at(st, lf > lt ? lf : lt, "[inverter] firing_frequency (line %d) and "
                       "firing_times (line %d) both given; keep one", lf, lt);
    if (t != TF_TOPO_UNKNOWN) {
        int l;
        if ((l = line_of(st, "inverter", "capacitor")) && d->split_capacitor &&
            t != TF_TOPO_HALF_BRIDGE)
            return fail_at(st, l, "capacitor = split needs topology = half-bridge, "
                           "found topology = %s", tn);
        static const char *const single_only[] = {"reset_inductance", "reset_resistance"};
        for (int i = 0; i < 2; i++)
            if ((l = line_of(st, "inverter", single_only[i])) && t != TF_TOPO_SINGLE)
                return fail_at(st, l, "%s is used only with topology = single, found "
                               "topology = %s", single_only[i], tn);
        if ((l = line_of(st, "inverter", "precharge")) && t != TF_TOPO_RING_DOWN)
            return fail_at(st, l, "precharge is used only with topology = ring-down, found "
                           "topology = %s", tn);
        if (t == TF_TOPO_RING_DOWN && lf)
            return fail_at(st, lf, "a ring-down is released once: give firing_times with "
                           "one instant (or none: released at [capture] start), not "
                           "firing_frequency");
        if (t == TF_TOPO_RING_DOWN && d->n_firing_times > 1)
            return fail_at(st, lt, "a ring-down is released once: firing_times has %zu "
                           "instants", d->n_firing_times);
        for (int g = gates_of(t); g < 4; g++) {
            int c = TF_SYN_G1 + g;
            char key[32];
            snprintf(key, sizeof key, "g%d.enabled", g + 1);
            if (st->enabled_given[c] && d->chan[c].enabled && (l = line_of(st, "capture", key)))
                return fail_at(st, l, "%s: topology = %s has no gate %d", key, tn, g + 1);
        }
    }
    for (int c = 0; c < TF_SYN_NCHAN; c++) {
        if (!st->bits_given[c])
            d->chan[c].bits = d->adc_bits;
        if (!st->enabled_given[c])
            d->chan[c].enabled = c < TF_SYN_G1 || c - TF_SYN_G1 < gates_of(t);
    }
    return 1;
}

/* The message for a line inih could not read (no '=', no ']'). */
static void syntax_error(pstate *st, int line)
{
    const char *s = st->text, *end = st->text + st->len;
    for (int l = 1; l < line && s < end; l++) {
        const char *nl = memchr(s, '\n', (size_t)(end - s));
        s = nl ? nl + 1 : end;
    }
    const char *nl = memchr(s, '\n', (size_t)(end - s));
    size_t n = nl ? (size_t)(nl - s) : (size_t)(end - s);
    if (n && s[n - 1] == '\r')
        n--;
    size_t lead = 0;
    while (lead < n && (s[lead] == ' ' || s[lead] == '\t'))
        lead++;
    char ex[64];
    tf_error_excerpt(ex, sizeof ex, s + lead, (unsigned)(n - lead), 40);
    st->failed = 0;
    if (lead < n && s[lead] == '[')
        fail_at(st, line, "expected ']' to close the section name, found '%s'", ex);
    else
        fail_at(st, line, "expected 'key = value', '[section]' or a comment, found '%s'", ex);
}

/* ---- public ------------------------------------------------------------------ */

void tf_design_init(tf_design *d)
{
    memset(d, 0, sizeof *d);
    double *nan_fields[] = {
        &d->dc_link_v, &d->firing_frequency_hz, &d->reset_inductance_h,
        &d->reset_resistance_ohm, &d->precharge_v, &d->capacitance_f, &d->inductance_h,
        &d->resistance_ohm, &d->coil_resistance_ohm, &d->turnoff_time_s,
        &d->thyristor_drop_v, &d->diode_drop_v, &d->stray_inductance_h,
        &d->turnoff_ratio_min, &d->resonance_tolerance, &d->q_tolerance,
        &d->resistance_tolerance, &d->current_thd_max, &d->voltage_thd_max,
        &d->peak_current_max_a, &d->capacitor_voltage_max_v};
    for (size_t i = 0; i < sizeof nan_fields / sizeof nan_fields[0]; i++)
        *nan_fields[i] = NAN;
    d->topology = TF_TOPO_UNKNOWN;
    d->mode = TF_MODE_ANY;
    d->sample_rate_hz = 10e6;
    d->duration_s = 2e-3;
    d->start_s = 0.0;
    d->format_wav = 0;
    d->time_digits = 9;
    d->value_digits = 6;
    d->seed = 1;
    for (int c = 0; c < TF_SYN_NCHAN; c++)
        d->chan[c].enabled = 1;
}

tf_status tf_design_parse(const char *text, size_t len, const char *name, tf_design *d,
                          tf_error *err)
{
    if (!d || !name || (!text && len))
        return tf_error_set(err, TF_ERR_USAGE, "tf_design_parse: text, name and d are required");
    tf_design_init(d);
    snprintf(d->path, sizeof d->path, "%s", name);
    pstate *st = calloc(1, sizeof *st);
    if (!st)
        return tf_error_set(err, TF_ERR_NOMEM, "%s: out of memory", name);
    st->d = d;
    st->name = name;
    st->err = err;
    st->text = text ? text : "";
    st->len = len;
    int r = ini_parse_stream(reader, st, handler, st);
    if (r > 0 && (!st->failed || r < st->failed))
        syntax_error(st, r);
    else if (r < 0 && !st->failed)
        tf_error_set(err, TF_ERR_NOMEM, "%s: out of memory", name), st->failed = -1;
    if (!st->failed)
        finish(st);
    int failed = st->failed;
    free(st);
    if (failed) {
        tf_design_init(d);
        return err ? err->code : TF_ERR_DATA;
    }
    tf_error_clear(err);
    return TF_OK;
}

tf_status tf_design_load(const char *path, tf_design *d, tf_error *err)
{
    if (!path || !d)
        return tf_error_set(err, TF_ERR_USAGE, "tf_design_load: path and d are required");
    FILE *f = fopen(path, "rb");
    if (!f)
        return tf_error_set(err, TF_ERR_NOINPUT, "%s: cannot open design file: %s", path,
                            strerror(errno));
    char *buf = malloc(MAX_FILE_BYTES + 1);
    if (!buf) {
        fclose(f);
        return tf_error_set(err, TF_ERR_NOMEM, "%s: out of memory", path);
    }
    size_t n = fread(buf, 1, MAX_FILE_BYTES + 1, f);
    int e = ferror(f) ? errno : 0;
    fclose(f);
    tf_status st;
    if (e == EISDIR)
        st = tf_error_set(err, TF_ERR_NOINPUT, "%s: is a directory, not a design file", path);
    else if (e)
        st = tf_error_set(err, TF_ERR_IO, "%s: cannot read design file: %s", path, strerror(e));
    else if (n > MAX_FILE_BYTES)
        st = tf_error_set(err, TF_ERR_DATA, "%s: larger than %u bytes; not a design file?",
                          path, MAX_FILE_BYTES);
    else
        st = tf_design_parse(buf, n, path, d, err);
    free(buf);
    if (st != TF_OK)
        tf_design_init(d);
    return st;
}

const char *tf_synth_channel_name(tf_synth_channel c)
{
    static const char *const n[] = {"i_load", "v_out", "v_c", "v_ak1", "g1", "g2", "g3", "g4"};
    return (unsigned)c < TF_SYN_NCHAN ? n[c] : "?";
}

const char *tf_design_key_unit(const char *section, const char *key)
{
    if (!section || !key)
        return NULL;
    const tf_dkey *k = tf_dkey_find(section, key);
    if (!k)
        return NULL;
    switch (k->kind) {
    case TF_DK_QTY: case TF_DK_TIMES: return tf_dim_unit(k->dim);
    case TF_DK_INT: case TF_DK_SEED: case TF_DK_SCALE: return "";
    default: return NULL;
    }
}
