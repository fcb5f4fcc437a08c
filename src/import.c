/* Import options shared by every importer, and the choice of importer by content. */
#include <tankfit/import.h>

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <string.h>

void tf_import_options_init(tf_import_options *o)
{
    memset(o, 0, sizeof *o);
}

tf_status tf_import_options_add(tf_import_options *o, tf_opt_kind kind, const char *arg,
                                tf_error *err)
{
    static const char *const flag[] = {"--scale", "--offset", "--unit", "--rename",
                                       "--full-scale"};
    tf_channel_opt *list;
    size_t *count;
    switch (kind) {
    case TF_OPT_SCALE: list = o->scale; count = &o->nscale; break;
    case TF_OPT_OFFSET: list = o->offset; count = &o->noffset; break;
    case TF_OPT_UNIT: list = o->unit; count = &o->nunit; break;
    case TF_OPT_RENAME: list = o->rename; count = &o->nrename; break;
    case TF_OPT_FULL_SCALE: list = o->full_scale; count = &o->nfull_scale; break;
    default: return tf_error_set(err, TF_ERR_INTERNAL, "unknown option kind");
    }
    const char *eq = strchr(arg, '=');
    if (!eq || eq == arg || eq[1] == '\0' || (size_t)(eq - arg) >= TF_NAME_SIZE)
        return tf_error_set(err, TF_ERR_USAGE, "%s: expected NAME=VALUE, found '%s'",
                            flag[kind], arg);
    if (*count >= TF_MAX_CHANNEL_OPTS)
        return tf_error_set(err, TF_ERR_USAGE, "%s: at most %d are accepted", flag[kind],
                            TF_MAX_CHANNEL_OPTS);
    tf_channel_opt *e = &list[*count];
    memset(e, 0, sizeof *e);
    memcpy(e->name, arg, (size_t)(eq - arg));
    const char *val = eq + 1;
    if (kind == TF_OPT_UNIT || kind == TF_OPT_RENAME) {
        if (strlen(val) >= (kind == TF_OPT_UNIT ? TF_UNIT_SIZE : TF_NAME_SIZE))
            return tf_error_set(err, TF_ERR_USAGE, "%s: '%s' is too long", flag[kind], val);
        strcpy(e->text, val);
    } else {
        char unit[TF_NAME_SIZE];
        if (tf_parse_quantity(val, &e->value, unit, sizeof unit) != 0 || !isfinite(e->value))
            return tf_error_set(err, TF_ERR_USAGE,
                                "%s: expected a number (optionally with unit) after '=', "
                                "found '%s'", flag[kind], val);
        if (kind == TF_OPT_SCALE && e->value == 0)
            return tf_error_set(err, TF_ERR_USAGE, "%s: a scale factor of 0 is not allowed",
                                flag[kind]);
        if (kind == TF_OPT_FULL_SCALE && !(e->value > 0))
            return tf_error_set(err, TF_ERR_USAGE, "%s: expected a positive full scale, found '%s'",
                                flag[kind], val);
        /* "A/V" on a scale means the result is in A */
        char *slash = strchr(unit, '/');
        if (slash && kind == TF_OPT_SCALE)
            *slash = '\0';
        strcpy(e->text, unit);
    }
    (*count)++;
    return TF_OK;
}

static int find_or_fail(tf_capture *cap, const char *name, const char *flag, tf_error *err)
{
    int c = tf_capture_find(cap, name);
    if (c < 0) {
        char have[512] = "";
        for (size_t k = 0; k < cap->nchan; k++) {
            size_t l = strlen(have);
            snprintf(have + l, sizeof have - l, "%s%s", k ? ", " : "", cap->ch[k].name);
        }
        tf_error_set(err, TF_ERR_USAGE, "%s: no channel '%s' in %s (channels: %s)", flag, name,
                     cap->path[0] ? cap->path : "the capture", have);
    }
    return c;
}

tf_status tf_import_apply_options(tf_capture *cap, const tf_import_options *opt,
                                  tf_error *err)
{
    for (size_t i = 0; i < opt->nrename; i++) {
        int c = find_or_fail(cap, opt->rename[i].name, "--rename", err);
        if (c < 0)
            return TF_ERR_USAGE;
        snprintf(cap->ch[c].name, TF_NAME_SIZE, "%s", opt->rename[i].text);
    }
    for (size_t i = 0; i < opt->nscale; i++) {
        int c = find_or_fail(cap, opt->scale[i].name, "--scale", err);
        if (c < 0)
            return TF_ERR_USAGE;
        float *x = cap->ch[c].samples;
        for (size_t k = 0; k < cap->n; k++)
            x[k] = (float)((double)x[k] * opt->scale[i].value);
        cap->ch[c].scale *= opt->scale[i].value;
        cap->ch[c].offset *= opt->scale[i].value;
        if (opt->scale[i].text[0])
            snprintf(cap->ch[c].unit, TF_UNIT_SIZE, "%.15s", opt->scale[i].text);
    }
    for (size_t i = 0; i < opt->noffset; i++) {
        int c = find_or_fail(cap, opt->offset[i].name, "--offset", err);
        if (c < 0)
            return TF_ERR_USAGE;
        float *x = cap->ch[c].samples;
        for (size_t k = 0; k < cap->n; k++)
            x[k] = (float)((double)x[k] + opt->offset[i].value);
        cap->ch[c].offset += opt->offset[i].value;
    }
    for (size_t i = 0; i < opt->nunit; i++) {
        int c = find_or_fail(cap, opt->unit[i].name, "--unit", err);
        if (c < 0)
            return TF_ERR_USAGE;
        snprintf(cap->ch[c].unit, TF_UNIT_SIZE, "%.15s", opt->unit[i].text);
    }
    return TF_OK;
}

/* First bytes of the containers libsndfile reads (its format list): RIFF/RIFX/RF64/BW64
 * WAV, W64 ("riff" GUID), AIFF/SVX ("FORM"), FLAC, Ogg, AU (both byte orders), CAF,
 * NIST SPHERE, VOC, AVR, PAF (both orders), MAT5, IRCAM (its four magic words). */
static int sound_magic(const unsigned char *h, size_t got)
{
    static const char *const magics[] = {"RIFF", "RIFX", "RF64", "BW64", "riff", "FORM",
                                         "fLaC", "OggS", ".snd", "dns.", "caff", "NIST",
                                         "Crea", "2BIT", " paf", "fap ", "MATL", NULL};
    static const unsigned char ircam[][4] = {{0x64, 0xa3, 0x01, 0x00}, {0x00, 0x01, 0xa3, 0x64},
                                             {0x64, 0xa3, 0x02, 0x00}, {0x00, 0x02, 0xa3, 0x64},
                                             {0x64, 0xa3, 0x03, 0x00}, {0x00, 0x03, 0xa3, 0x64},
                                             {0x64, 0xa3, 0x04, 0x00}, {0x00, 0x04, 0xa3, 0x64}};
    if (got < 4)
        return 0;
    for (int i = 0; magics[i]; i++)
        if (memcmp(h, magics[i], 4) == 0)
            return 1;
    for (size_t i = 0; i < sizeof ircam / sizeof ircam[0]; i++)
        if (memcmp(h, ircam[i], 4) == 0)
            return 1;
    return 0;
}

tf_status tf_import_file(const char *path, const tf_import_options *opt, tf_capture **out,
                         tf_error *err)
{
    unsigned char head[4096];
    FILE *f = fopen(path, "rb");
    if (!f)
        return tf_error_set(err, TF_ERR_NOINPUT, "%s: cannot open: %s", path, strerror(errno));
    size_t got = fread(head, 1, sizeof head, f);
    fclose(f);
    if (sound_magic(head, got))
        return tf_import_wav(path, opt, out, err);
    /* text has no zero bytes (UTF-16 with its byte-order mark goes to the CSV reader,
     * which asks for UTF-8); binary data may still be a sound file libsndfile knows */
    int utf16 = got >= 2 && ((head[0] == 0xFF && head[1] == 0xFE) ||
                             (head[0] == 0xFE && head[1] == 0xFF));
    const unsigned char *zero = utf16 ? NULL : memchr(head, 0, got);
    if (zero) {
        tf_status st = tf_import_wav(path, opt, out, err);
        if (st != TF_ERR_DATA)
            return st;
        return tf_error_set(err, TF_ERR_DATA,
                            "%s:1:1: expected a text capture (CSV, UTF-8) or a sound file "
                            "that libsndfile reads, found binary data (a zero byte at byte %zu)",
                            path, (size_t)(zero - head) + 1);
    }
    return tf_import_csv(path, opt, out, err);
}
