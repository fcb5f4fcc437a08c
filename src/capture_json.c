/* A capture as JSON (jansson): layout, channels and their statistics, for inspect and records. */
#include <tankfit/capture.h>

#include <math.h>
#include <stdlib.h>
#include <string.h>

/* jansson rejects NaN and infinities: they become null. */
static json_t *num(double v)
{
    return isfinite(v) ? json_real(v) : json_null();
}

static json_t *opt_str(const char *s)
{
    return s && s[0] ? json_string(s) : json_null();
}

/* Set key to value, tracking failure in *ok (json_object_set_new steals value). */
static void put(json_t *obj, const char *key, json_t *value, int *ok)
{
    if (!value || json_object_set_new(obj, key, value) != 0)
        *ok = 0;
}

static json_t *dialect_json(const tf_dialect *d)
{
    int ok = 1;
    json_t *j = json_object();
    if (!j)
        return NULL;
    int is_text = d->delimiter != 0;
    char delim[2] = {d->delimiter, 0}, dec[2] = {d->decimal ? d->decimal : '.', 0};
    put(j, "format", json_string(d->format[0] ? d->format : "unknown"), &ok);
    put(j, "delimiter", is_text ? json_string(delim) : json_null(), &ok);
    put(j, "decimal", is_text ? json_string(dec) : json_null(), &ok);
    put(j, "header_line", d->header_line > 0 ? json_integer(d->header_line) : json_null(), &ok);
    put(j, "metadata_lines", json_integer((json_int_t)d->metadata_lines), &ok);
    put(j, "bom", json_boolean(d->has_bom), &ok);
    put(j, "line_end", opt_str(d->line_end), &ok);
    put(j, "time_column", d->time_column >= 0 ? json_integer(d->time_column) : json_null(),
        &ok);
    put(j, "time_resolution_s", d->time_resolution_s > 0 ? num(d->time_resolution_s)
                                                         : json_null(), &ok);
    put(j, "wav_subformat", opt_str(d->wav_subformat), &ok);
    if (!ok) {
        json_decref(j);
        return NULL;
    }
    return j;
}

static json_t *channel_json(const tf_channel *c)
{
    int ok = 1;
    json_t *j = json_object();
    if (!j)
        return NULL;
    const tf_channel_stats *s = &c->stats;
    int v = c->stats_valid;
    put(j, "name", json_string(c->name), &ok);
    put(j, "unit", json_string(c->unit), &ok);
    put(j, "min", v ? num(s->min) : json_null(), &ok);
    put(j, "max", v ? num(s->max) : json_null(), &ok);
    put(j, "mean", v ? num(s->mean) : json_null(), &ok);
    put(j, "rms", v ? num(s->rms) : json_null(), &ok);
    put(j, "noise_sigma", v ? num(s->noise_sigma) : json_null(), &ok);
    put(j, "lsb", v ? num(s->lsb) : json_null(), &ok);
    put(j, "clipped_samples", v ? json_integer((json_int_t)s->clipped_samples) : json_null(),
        &ok);
    put(j, "clipped_runs", v ? json_integer((json_int_t)s->clipped_runs) : json_null(), &ok);
    put(j, "clipped_high", v ? json_boolean(s->clipped_high) : json_null(), &ok);
    put(j, "clipped_low", v ? json_boolean(s->clipped_low) : json_null(), &ok);
    put(j, "scale", num(c->scale), &ok);
    put(j, "offset", num(c->offset), &ok);
    put(j, "full_scale", c->full_scale > 0 ? num(c->full_scale) : json_null(), &ok);
    put(j, "skew_s", c->skew_known ? num(c->skew_s) : json_null(), &ok);
    put(j, "gaps_filled", json_integer((json_int_t)c->gaps_filled), &ok);
    if (!ok) {
        json_decref(j);
        return NULL;
    }
    return j;
}

/* json_string rejects invalid UTF-8 (a metadata line in a legacy code page):
 * keep the line with every non-ASCII byte shown as '?'. */
static json_t *ascii_string(const char *text)
{
    size_t n = strlen(text);
    char *copy = malloc(n + 1);
    if (!copy)
        return NULL;
    for (size_t k = 0; k <= n; k++)
        copy[k] = (unsigned char)text[k] >= 0x80 ? '?' : text[k];
    json_t *s = json_string(copy);
    free(copy);
    return s;
}

static json_t *lines_json(char *const *lines, size_t n)
{
    json_t *a = json_array();
    for (size_t k = 0; a && k < n; k++) {
        json_t *s = json_string(lines[k]);
        if (!s)
            s = ascii_string(lines[k]);
        if (!s || json_array_append_new(a, s) != 0) {
            json_decref(a);
            return NULL;
        }
    }
    return a;
}

json_t *tf_capture_to_json(const tf_capture *cap)
{
    if (!cap)
        return NULL;
    int ok = 1;
    json_t *j = json_object();
    if (!j)
        return NULL;
    double rate = cap->dt_s > 0 ? 1.0 / cap->dt_s : NAN;
    put(j, "path", opt_str(cap->path), &ok);
    put(j, "samples", json_integer((json_int_t)cap->n), &ok);
    put(j, "sample_rate_hz", num(rate), &ok);
    put(j, "dt_s", num(cap->dt_s), &ok);
    put(j, "duration_s", num((double)cap->n * cap->dt_s), &ok);
    put(j, "t0_s", num(cap->t0_s), &ok);
    put(j, "dialect", dialect_json(&cap->dialect), &ok);
    put(j, "metadata", lines_json(cap->metadata, cap->nmeta), &ok);
    put(j, "warnings", lines_json(cap->warnings, cap->nwarn), &ok);
    json_t *chans = json_array();
    for (size_t c = 0; chans && c < cap->nchan; c++) {
        json_t *cj = channel_json(&cap->ch[c]);
        if (!cj || json_array_append_new(chans, cj) != 0) {
            json_decref(chans);
            chans = NULL;
        }
    }
    put(j, "channels", chans, &ok);
    if (!ok) {
        json_decref(j);
        return NULL;
    }
    return j;
}
