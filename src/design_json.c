/* A design as JSON for records: sections, keys as written, SI values, units alongside. */
#include <tankfit/design.h>

#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <string.h>

#include "design_keys.h"

/* Add value under obj[key] (consumed); returns 0 when out of memory. */
static int put(json_t *obj, const char *key, json_t *value)
{
    return value && json_object_set_new(obj, key, value) == 0;
}

static int put_unit(json_t *units, const char *section, const char *key, const char *unit)
{
    char name[96];
    snprintf(name, sizeof name, "%s.%s", section, key);
    return put(units, name, json_string(unit[0] ? unit : "1"));
}

static const char *enum_value(const tf_design *d, const char *key)
{
    if (strcmp(key, "topology") == 0)
        return d->topology == TF_TOPO_UNKNOWN ? NULL : tf_topology_name(d->topology);
    if (strcmp(key, "capacitor") == 0)
        return d->split_capacitor ? "split" : "series";
    if (strcmp(key, "mode") == 0)
        return tf_mode_name(d->mode);
    if (strcmp(key, "format") == 0)
        return d->format_wav ? "wav" : "csv";
    return NULL;
}

static json_t *num_or_null(double v)
{
    return isnan(v) ? json_null() : json_real(v);
}

/* The keys that are not one value at an offset. */
static int put_special(const tf_design *d, const tf_dkey *k, json_t *sec, json_t *units)
{
    switch (k->kind) {
    case TF_DK_TIMES: {
        if (!d->n_firing_times)
            return 1;
        json_t *a = json_array();
        if (!put(sec, k->key, a))
            return 0;
        for (size_t i = 0; i < d->n_firing_times; i++)
            if (json_array_append_new(a, json_real(d->firing_times_s[i])) != 0)
                return 0;
        return put_unit(units, k->section, k->key, "s");
    }
    case TF_DK_POINT: {
        if (!d->nschedule)
            return 1;
        json_t *a = json_array();
        if (!put(sec, k->key, a))
            return 0;
        for (size_t i = 0; i < d->nschedule; i++)
            if (json_array_append_new(a, json_pack("[f o o]", d->sched_t_s[i],
                                                   num_or_null(d->sched_r_ohm[i]),
                                                   num_or_null(d->sched_l_h[i]))) != 0)
                return 0;
        return put_unit(units, k->section, k->key, "s, ohm, H");
    }
    case TF_DK_SEED:
        if (d->seed <= (unsigned long long)INT64_MAX)
            return put(sec, k->key, json_integer((json_int_t)d->seed));
        else {
            char s[32];
            snprintf(s, sizeof s, "%llu", d->seed);
            return put(sec, k->key, json_string(s));
        }
    case TF_DK_ENUM: {
        const char *v = enum_value(d, k->key);
        return !v || put(sec, k->key, json_string(v));
    }
    default:
        return 1;
    }
}

static int put_key(const tf_design *d, const tf_dkey *k, json_t *sec, json_t *units)
{
    const char *base = (const char *)d;
    switch (k->kind) {
    case TF_DK_QTY: {
        double v;
        memcpy(&v, base + k->offset, sizeof v);
        if (isnan(v))
            return 1;
        return put(sec, k->key, json_real(v)) &&
               put_unit(units, k->section, k->key, tf_dim_unit(k->dim));
    }
    case TF_DK_INT: {
        int v;
        memcpy(&v, base + k->offset, sizeof v);
        return put(sec, k->key, json_integer(v));
    }
    case TF_DK_BOOL: {
        int v;
        memcpy(&v, base + k->offset, sizeof v);
        return put(sec, k->key, json_boolean(v));
    }
    case TF_DK_TEXT:
    case TF_DK_COLUMN: {
        const char *s = base + k->offset;
        return !s[0] || put(sec, k->key, json_string(s));
    }
    default:
        return put_special(d, k, sec, units);
    }
}

json_t *tf_design_to_json(const tf_design *d)
{
    json_t *root = json_object(), *units = json_object();
    int ok = root && units;
    for (size_t s = 0; ok && tf_design_sections[s]; s++) {
        json_t *sec = json_object();
        ok = put(root, tf_design_sections[s], sec);
        for (size_t i = 0; ok && tf_dkeys[i].section; i++)
            if (strcmp(tf_dkeys[i].section, tf_design_sections[s]) == 0)
                ok = put_key(d, &tf_dkeys[i], sec, units);
        if (ok && strcmp(tf_design_sections[s], "channels") == 0)
            for (size_t i = 0; ok && i < d->nscales; i++) {
                char key[80];
                snprintf(key, sizeof key, "scale.%s", d->scales[i].column);
                ok = put(sec, key, json_real(d->scales[i].factor)) &&
                     put_unit(units, "channels", key, d->scales[i].unit);
            }
    }
    if (ok && put(root, "units", units))
        return root;
    if (!ok)
        json_decref(units);
    json_decref(root);
    return NULL;
}
