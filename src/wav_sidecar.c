/* The ".tfscale" sidecar of a WAV capture: one line per channel, "NAME UNIT FULL_SCALE [SKEW]". */
#include "wav_sidecar.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <tankfit/import.h>

#define MAX_TOKENS 5

typedef struct {
    const char *p; /* start in the line */
    size_t len;
    int col;       /* 1-based column */
} token;

typedef struct {
    const char *name;
    int line;
    tf_error *err;
} ctx;

static tf_status fail_at(const ctx *c, int col, const char *what, const char *found,
                         size_t found_len)
{
    char ex[48];
    if (!found)
        return tf_error_set(c->err, TF_ERR_DATA, "%s:%d:%d: expected %s, found end of line",
                            c->name, c->line, col, what);
    tf_error_excerpt(ex, sizeof ex, found, (unsigned)found_len, 32);
    return tf_error_set(c->err, TF_ERR_DATA, "%s:%d:%d: expected %s, found '%s'", c->name,
                        c->line, col, what, ex);
}

/* Split a line (comment removed) into tokens at spaces and tabs. Returns the
 * count, or MAX_TOKENS + 1 when there are more. */
static int tokenize(const char *line, size_t len, token *t)
{
    int n = 0;
    size_t k = 0;
    while (k < len) {
        while (k < len && (line[k] == ' ' || line[k] == '\t'))
            k++;
        if (k >= len)
            break;
        size_t s = k;
        while (k < len && line[k] != ' ' && line[k] != '\t')
            k++;
        if (n == MAX_TOKENS)
            return MAX_TOKENS + 1; /* t[0..MAX_TOKENS-1] are filled */
        t[n].p = line + s;
        t[n].len = k - s;
        t[n].col = (int)s + 1;
        n++;
    }
    return n;
}

/* Parse a token as a quantity; 0 on success. */
static int quantity(const token *t, double *v, char *unit, size_t usize)
{
    char buf[64];
    if (t->len >= sizeof buf)
        return -1;
    memcpy(buf, t->p, t->len);
    buf[t->len] = '\0';
    return tf_parse_quantity(buf, v, unit, usize);
}

static int valid_name(const token *t)
{
    if (t->len == 0 || t->len >= TF_NAME_SIZE)
        return 0;
    for (size_t k = 0; k < t->len; k++) {
        unsigned char ch = (unsigned char)t->p[k];
        /* ',' separates --channels lists and '=' NAME=VALUE options */
        if (ch < 0x21 || ch == 0x7f || ch == ',' || ch == '=')
            return 0;
    }
    return 1;
}

static tf_status parse_t0(const ctx *c, const token *t, int nt, tf_wav_sidecar *out)
{
    double v;
    char unit[16];
    if (nt < 3)
        return fail_at(c, t[1].col + (int)t[1].len, "a time after 't0 =', e.g. -20us", NULL, 0);
    if (quantity(&t[2], &v, unit, sizeof unit) != 0 || (unit[0] && strcmp(unit, "s") != 0))
        return fail_at(c, t[2].col, "a time after 't0 =', e.g. -20us", t[2].p, t[2].len);
    if (nt > 3)
        return fail_at(c, t[3].col, "end of line after the t0 value", t[3].p, t[3].len);
    if (out->t0_known)
        return fail_at(c, t[0].col, "one t0 line only (t0 given again)", t[0].p, t[0].len);
    out->t0_s = v;
    out->t0_known = 1;
    return TF_OK;
}

static tf_status parse_channel(const ctx *c, const token *t, int nt, tf_wav_sidecar *out,
                               size_t nchan)
{
    if (out->n >= nchan)
        return tf_error_set(c->err, TF_ERR_DATA,
                            "%s:%d:1: expected at most %zu channel line%s (the capture has %zu "
                            "channel%s), found another one", c->name, c->line, nchan,
                            nchan == 1 ? "" : "s", nchan, nchan == 1 ? "" : "s");
    tf_wav_scale *e = &out->ch[out->n];
    memset(e, 0, sizeof *e);
    e->line = c->line;
    if (!valid_name(&t[0]))
        return fail_at(c, t[0].col, "a channel name (1 to 63 characters, no ',' or '=')",
                       t[0].p, t[0].len);
    memcpy(e->name, t[0].p, t[0].len);
    for (size_t k = 0; k < out->n; k++)
        if (strcmp(out->ch[k].name, e->name) == 0) {
            char what[160];
            snprintf(what, sizeof what, "a new channel name ('%s' is already on line %d)",
                     e->name, out->ch[k].line);
            return fail_at(c, t[0].col, what, t[0].p, t[0].len);
        }
    if (nt < 2)
        return fail_at(c, t[0].col + (int)t[0].len, "a unit after the name (e.g. V, A, or 1)",
                       NULL, 0);
    if (t[1].len >= TF_UNIT_SIZE || t[1].p[0] == '#')
        return fail_at(c, t[1].col, "a unit of at most 15 characters", t[1].p, t[1].len);
    if (!((t[1].len == 1 && (t[1].p[0] == '1' || t[1].p[0] == '-'))))
        memcpy(e->unit, t[1].p, t[1].len);
    if (nt < 3)
        return fail_at(c, t[1].col + (int)t[1].len,
                       "a full-scale value after the unit (e.g. 500 or 2k, or - for none)",
                       NULL, 0);
    if (!(t[2].len == 1 && t[2].p[0] == '-')) {
        double v;
        char unit[TF_UNIT_SIZE];
        if (quantity(&t[2], &v, unit, sizeof unit) != 0 || !(v > 0) || !isfinite(v))
            return fail_at(c, t[2].col, "a positive full-scale value (e.g. 500, 2k or 200A)",
                           t[2].p, t[2].len);
        if (unit[0] && strcmp(unit, e->unit) != 0) {
            char what[96];
            snprintf(what, sizeof what, "a full-scale value in the channel's unit '%s'",
                     e->unit[0] ? e->unit : "1");
            return fail_at(c, t[2].col, what, t[2].p, t[2].len);
        }
        e->full_scale = v;
    }
    if (nt >= 4) {
        double v;
        char unit[16];
        if (quantity(&t[3], &v, unit, sizeof unit) != 0 || (unit[0] && strcmp(unit, "s") != 0))
            return fail_at(c, t[3].col, "a probe skew in seconds (e.g. 12ns or -3.5e-9)",
                           t[3].p, t[3].len);
        e->skew_s = v;
        e->skew_known = 1;
    }
    if (nt > 4)
        return fail_at(c, t[4].col, "end of line after the skew (comments start with #)",
                       t[4].p, t[4].len);
    out->n++;
    return TF_OK;
}

static tf_status parse_line(const ctx *c, const char *line, size_t len, tf_wav_sidecar *out,
                            size_t nchan)
{
    token t[MAX_TOKENS];
    const char *hash = memchr(line, '#', len);
    if (hash)
        len = (size_t)(hash - line);
    for (size_t k = 0; k < len; k++)
        if ((unsigned char)line[k] < 0x20 && line[k] != '\t')
            return fail_at(c, (int)k + 1, "printable text", line + k, len - k);
    int nt = tokenize(line, len, t);
    if (nt == 0)
        return TF_OK;
    if (nt > MAX_TOKENS)
        nt = MAX_TOKENS; /* the parsers report the first token past what a line holds */
    if (nt >= 2 && t[1].len == 1 && t[1].p[0] == '=') {
        if (t[0].len == 2 && memcmp(t[0].p, "t0", 2) == 0)
            return parse_t0(c, t, nt, out);
        return fail_at(c, t[0].col, "a setting name ('t0') before '='", t[0].p, t[0].len);
    }
    return parse_channel(c, t, nt, out, nchan);
}

tf_status tf_wav_sidecar_parse(const char *text, size_t len, const char *name, size_t nchan,
                               tf_wav_sidecar *out, tf_error *err)
{
    memset(out, 0, sizeof *out);
    out->ch = calloc(nchan ? nchan : 1, sizeof *out->ch);
    if (!out->ch)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory reading %s", name);
    ctx c = {name, 0, err};
    size_t pos = 0;
    if (len >= 3 && memcmp(text, "\xEF\xBB\xBF", 3) == 0)
        pos = 3;
    while (pos < len) {
        c.line++;
        const char *s = text + pos;
        const char *nl = memchr(s, '\n', len - pos);
        size_t l = nl ? (size_t)(nl - s) : len - pos;
        pos += l + (nl ? 1 : 0);
        if (l && s[l - 1] == '\r')
            l--;
        if (l > TF_SIDECAR_MAX_LINE) {
            tf_error_set(err, TF_ERR_DATA, "%s:%d:%d: expected a line of at most %d characters, "
                         "found one of %zu", name, c.line, TF_SIDECAR_MAX_LINE + 1,
                         TF_SIDECAR_MAX_LINE, l);
            tf_wav_sidecar_free(out);
            return TF_ERR_DATA;
        }
        if (parse_line(&c, s, l, out, nchan) != TF_OK) {
            tf_wav_sidecar_free(out);
            return TF_ERR_DATA;
        }
    }
    return TF_OK;
}

tf_status tf_wav_sidecar_read(const char *path, size_t nchan, tf_wav_sidecar *out, int *found,
                              tf_error *err)
{
    memset(out, 0, sizeof *out);
    *found = 0;
    FILE *f = fopen(path, "rb");
    if (!f) {
        if (errno == ENOENT)
            return TF_OK;
        return tf_error_set(err, TF_ERR_NOINPUT, "%s: cannot open the scale file: %s", path,
                            strerror(errno));
    }
    *found = 1;
    char *buf = malloc(TF_SIDECAR_MAX_BYTES + 1);
    if (!buf) {
        fclose(f);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory reading %s", path);
    }
    size_t got = fread(buf, 1, TF_SIDECAR_MAX_BYTES + 1, f);
    int bad = ferror(f);
    fclose(f);
    tf_status st;
    if (bad)
        st = tf_error_set(err, TF_ERR_NOINPUT, "%s: cannot read the scale file", path);
    else if (got > TF_SIDECAR_MAX_BYTES)
        st = tf_error_set(err, TF_ERR_DATA, "%s:1:1: expected a scale file of at most %u bytes, "
                          "found a larger one", path, TF_SIDECAR_MAX_BYTES);
    else
        st = tf_wav_sidecar_parse(buf, got, path, nchan, out, err);
    free(buf);
    return st;
}

void tf_wav_sidecar_free(tf_wav_sidecar *s)
{
    if (!s)
        return;
    free(s->ch);
    memset(s, 0, sizeof *s);
}
