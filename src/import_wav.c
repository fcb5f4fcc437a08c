/* WAV importer (libsndfile: WAV, RF64, W64, FLAC, AIFF, ...): full scale from options or the .tfscale sidecar. */
#include <tankfit/import.h>

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <pthread.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include <sndfile.h>

#include "wav_sidecar.h"

/* Frames read per sf_readf_float call: at most 16384, and at most 1 MiB of
 * interleaved floats (files may hold up to 1024 channels), reused for the
 * whole file. */
#define TF_WAV_BLOCK 16384
#define TF_WAV_BLOCK_BYTES (1u << 20)
/* Files of at least this many frames are read by two threads. */
#define TF_WAV_PARALLEL_MIN (1u << 20)

/* How each file channel is named, scaled and whether it is kept. */
typedef struct {
    char name[TF_NAME_SIZE];
    char unit[TF_UNIT_SIZE];
    double full_scale;  /* 0: unscaled (stays in FS) */
    double skew_s;
    int skew_known;
    int keep;           /* selected by --channels */
    int dest;           /* index in the capture, -1 when not kept */
} wav_chan;

static const char *subformat_name(int format)
{
    static const struct { int code; const char *name; } names[] = {
        {SF_FORMAT_PCM_S8, "PCM_S8"}, {SF_FORMAT_PCM_16, "PCM_16"},
        {SF_FORMAT_PCM_24, "PCM_24"}, {SF_FORMAT_PCM_32, "PCM_32"},
        {SF_FORMAT_PCM_U8, "PCM_U8"}, {SF_FORMAT_FLOAT, "FLOAT"},
        {SF_FORMAT_DOUBLE, "DOUBLE"}, {SF_FORMAT_ULAW, "ULAW"}, {SF_FORMAT_ALAW, "ALAW"},
        {SF_FORMAT_IMA_ADPCM, "IMA_ADPCM"}, {SF_FORMAT_MS_ADPCM, "MS_ADPCM"},
        {SF_FORMAT_GSM610, "GSM610"}, {SF_FORMAT_VORBIS, "VORBIS"},
        {SF_FORMAT_OPUS, "OPUS"}, {SF_FORMAT_ALAC_16, "ALAC_16"},
        {SF_FORMAT_ALAC_24, "ALAC_24"}, {SF_FORMAT_ALAC_32, "ALAC_32"}};
    int sub = format & SF_FORMAT_SUBMASK;
    for (size_t k = 0; k < sizeof names / sizeof names[0]; k++)
        if (names[k].code == sub)
            return names[k].name;
    return "other";
}

static int is_float_subformat(int format)
{
    int sub = format & SF_FORMAT_SUBMASK;
    return sub == SF_FORMAT_FLOAT || sub == SF_FORMAT_DOUBLE;
}

/* Short name of the major format ("wav", "rf64", "w64", "flac", ...). */
static void major_name(int format, char *out, size_t size)
{
    SF_FORMAT_INFO fi;
    memset(&fi, 0, sizeof fi);
    fi.format = format & SF_FORMAT_TYPEMASK;
    if (sf_command(NULL, SFC_GET_FORMAT_INFO, &fi, sizeof fi) == 0 && fi.extension)
        snprintf(out, size, "%s", fi.extension);
    else
        snprintf(out, size, "sound");
}

/* Bytes per sample of the PCM and float subformats; 0 for others. */
static int sample_bytes(int format)
{
    switch (format & SF_FORMAT_SUBMASK) {
    case SF_FORMAT_PCM_S8: case SF_FORMAT_PCM_U8: case SF_FORMAT_ULAW: case SF_FORMAT_ALAW:
        return 1;
    case SF_FORMAT_PCM_16: return 2;
    case SF_FORMAT_PCM_24: return 3;
    case SF_FORMAT_PCM_32: case SF_FORMAT_FLOAT: return 4;
    case SF_FORMAT_DOUBLE: return 8;
    default: return 0;
    }
}

/* Value after "KEY :" at the start of a log line (leading spaces allowed), or -1. */
static long long log_value(const char *line, const char *key)
{
    while (*line == ' ')
        line++;
    size_t kl = strlen(key);
    if (strncmp(line, key, kl) != 0)
        return -1;
    line += kl;
    while (*line == ' ')
        line++;
    if (*line != ':')
        return -1;
    line++;
    while (*line == ' ')
        line++;
    if (line[0] < '0' || line[0] > '9' || (line[0] == '0' && line[1] == 'x'))
        return -1;
    return strtoll(line, NULL, 10);
}

/* libsndfile opens a file cut short and quietly shortens its data: the log
 * then says "data : N (should be M)" (WAV), "Calculated frame count ... does
 * not match" (RF64), or declares more data bytes than the frames it reports
 * (W64). Returns the number of data bytes declared when the file is cut,
 * 0 when it is cut but the size is unknown, -1 when it looks whole. */
static long long declared_data_cut(SNDFILE *sf, const SF_INFO *info)
{
    char log[8192];
    long long declared = -1;
    int cut = 0;
    log[0] = '\0';
    sf_command(sf, SFC_GET_LOG_INFO, log, sizeof log);
    for (char *p = log; p && *p;) {
        char *nl = strchr(p, '\n');
        if (nl)
            *nl = '\0';
        long long v = log_value(p, "data");
        if (v < 0)
            v = log_value(p, "Data size");
        if (v >= 0 && declared < 0)
            declared = v;
        /* "should be" a smaller size means cut; a larger one is a writer that
         * left the size unset (streaming), and libsndfile reads what is there */
        const char *sb = strstr(p, "(should be");
        if (log_value(p, "data") >= 0 && sb && strtoll(sb + 10, NULL, 10) < log_value(p, "data"))
            cut = 1;
        if (strstr(p, "frame count") && strstr(p, "does not match"))
            cut = 1;
        p = nl ? nl + 1 : NULL;
    }
    int bytes = sample_bytes(info->format);
    if (!cut && declared > 0 && bytes > 0) {
        long long align = (long long)bytes * info->channels;
        long long payload = declared;
        if ((info->format & SF_FORMAT_TYPEMASK) == SF_FORMAT_W64)
            payload -= 24; /* a W64 chunk size counts its 24-byte header */
        if (payload > (long long)info->frames * align + align)
            cut = 1;
    }
    if (!cut)
        return -1;
    return declared > 0 ? declared : 0;
}

static void channel_list(const wav_chan *ch, size_t n, char *out, size_t size)
{
    out[0] = '\0';
    for (size_t k = 0; k < n; k++) {
        size_t l = strlen(out);
        snprintf(out + l, size - l, "%s%s", k ? ", " : "", ch[k].name);
    }
}

/* Index of the channel named name (its current or its default "chN" name). */
static int find_chan(const wav_chan *ch, size_t n, const char *name)
{
    for (size_t k = 0; k < n; k++)
        if (strcmp(ch[k].name, name) == 0)
            return (int)k;
    if (name[0] == 'c' && name[1] == 'h' && name[2] >= '1' && name[2] <= '9') {
        char *end;
        unsigned long idx = strtoul(name + 2, &end, 10);
        if (*end == '\0' && idx >= 1 && idx <= n)
            return (int)idx - 1;
    }
    return -1;
}

/* Names, units and full scales: defaults, then the sidecar, then options. */
static tf_status name_and_scale(const char *path, const tf_import_options *opt, wav_chan *ch,
                                size_t nchan, double *t0, tf_error *err)
{
    for (size_t k = 0; k < nchan; k++) {
        snprintf(ch[k].name, TF_NAME_SIZE, "ch%zu", k + 1);
        ch[k].keep = 1;
    }
    char side[4096 + 16];
    if ((size_t)snprintf(side, sizeof side, "%s.tfscale", path) < sizeof side) {
        tf_wav_sidecar sc;
        int found;
        tf_status st = tf_wav_sidecar_read(side, nchan, &sc, &found, err);
        if (st != TF_OK)
            return st;
        for (size_t k = 0; k < sc.n; k++) {
            memcpy(ch[k].name, sc.ch[k].name, TF_NAME_SIZE);
            memcpy(ch[k].unit, sc.ch[k].unit, TF_UNIT_SIZE);
            ch[k].full_scale = sc.ch[k].full_scale;
            ch[k].skew_s = sc.ch[k].skew_s;
            ch[k].skew_known = sc.ch[k].skew_known;
        }
        if (sc.t0_known)
            *t0 = sc.t0_s;
        tf_wav_sidecar_free(&sc);
    }
    for (size_t i = 0; i < opt->nfull_scale; i++) {
        const tf_channel_opt *o = &opt->full_scale[i];
        int c = find_chan(ch, nchan, o->name);
        if (c < 0) {
            char have[512];
            channel_list(ch, nchan, have, sizeof have);
            return tf_error_set(err, TF_ERR_USAGE, "--full-scale: no channel '%s' in %s "
                                "(channels: %s)", o->name, path, have);
        }
        if (strlen(o->text) >= TF_UNIT_SIZE)
            return tf_error_set(err, TF_ERR_USAGE, "--full-scale: unit '%s' is longer than %d "
                                "characters", o->text, TF_UNIT_SIZE - 1);
        ch[c].full_scale = o->value;
        snprintf(ch[c].unit, TF_UNIT_SIZE, "%.15s", o->text);
    }
    return TF_OK;
}

/* Apply --channels "A,B": keep only those (file order). */
static tf_status select_channels(const char *path, const char *list, wav_chan *ch, size_t nchan,
                                 size_t *kept, tf_error *err)
{
    if (!list[0]) {
        *kept = nchan;
        return TF_OK;
    }
    for (size_t k = 0; k < nchan; k++)
        ch[k].keep = 0;
    const char *p = list;
    while (*p) {
        const char *comma = strchr(p, ',');
        size_t l = comma ? (size_t)(comma - p) : strlen(p);
        while (l && (*p == ' ' || *p == '\t')) {
            p++;
            l--;
        }
        while (l && (p[l - 1] == ' ' || p[l - 1] == '\t'))
            l--;
        char name[TF_NAME_SIZE];
        if (l == 0 || l >= sizeof name)
            return tf_error_set(err, TF_ERR_USAGE, "--channels: expected a list of channel "
                                "names like A,B, found '%s'", list);
        memcpy(name, p, l);
        name[l] = '\0';
        int c = find_chan(ch, nchan, name);
        if (c < 0) {
            char have[512];
            channel_list(ch, nchan, have, sizeof have);
            return tf_error_set(err, TF_ERR_USAGE, "--channels: no channel '%s' in %s "
                                "(channels: %s)", name, path, have);
        }
        ch[c].keep = 1;
        p = comma ? comma + 1 : p + strlen(p);
    }
    *kept = 0;
    for (size_t k = 0; k < nchan; k++)
        *kept += ch[k].keep != 0;
    return TF_OK;
}

/* Fill non-finite samples (float files) linearly between finite neighbours. */
static tf_status fill_gaps(const char *path, tf_channel *c, size_t n, tf_error *err)
{
    size_t k = 0, last = SIZE_MAX;
    while (k < n) {
        if (isfinite(c->samples[k])) {
            last = k++;
            continue;
        }
        size_t e = k;
        while (e < n && !isfinite(c->samples[e]))
            e++;
        if (last == SIZE_MAX && e == n)
            return tf_error_set(err, TF_ERR_DATA, "%s: channel %s has no finite sample", path,
                                c->name);
        double a = last == SIZE_MAX ? c->samples[e] : c->samples[last];
        double b = e == n ? a : c->samples[e];
        for (size_t j = k; j < e; j++) {
            double f = last == SIZE_MAX ? 1.0 : (double)(j - last) / (double)(e - last);
            c->samples[j] = (float)(a + (b - a) * f);
        }
        c->gaps_filled += e - k;
        k = e;
    }
    return TF_OK;
}

/* De-interleave one block into the kept channels, scaled to physical units. */
static size_t deinterleave(const float *buf, size_t got, size_t nchan, const wav_chan *ch,
                           tf_capture *cap, size_t pos, int check_finite)
{
    size_t bad = SIZE_MAX;
    for (size_t i = 0; i < nchan; i++) {
        if (ch[i].dest < 0)
            continue;
        float *dst = cap->ch[ch[i].dest].samples + pos;
        const float *src = buf + i;
        float g = (float)(ch[i].full_scale > 0 ? ch[i].full_scale : 1.0);
        for (size_t k = 0; k < got; k++)
            dst[k] = src[k * nchan] * g;
        if (check_finite)
            for (size_t k = 0; k < got && bad == SIZE_MAX; k++)
                if (!isfinite(dst[k]))
                    bad = pos + k;
    }
    return bad;
}

static void wav_metadata(SNDFILE *sf, tf_capture *cap)
{
    static const struct { int id; const char *key; } str[] = {
        {SF_STR_TITLE, "title"}, {SF_STR_COMMENT, "comment"}, {SF_STR_SOFTWARE, "software"},
        {SF_STR_DATE, "date"}, {SF_STR_ARTIST, "artist"}, {SF_STR_COPYRIGHT, "copyright"}};
    for (size_t k = 0; k < sizeof str / sizeof str[0]; k++) {
        const char *v = sf_get_string(sf, str[k].id);
        if (v && v[0]) {
            char line[512];
            int l = snprintf(line, sizeof line, "%s: %s", str[k].key, v);
            tf_capture_add_metadata(cap, line, (size_t)l < sizeof line ? (size_t)l
                                                                       : sizeof line - 1);
        }
    }
}

static tf_status open_sound(const char *path, SNDFILE **sf, SF_INFO *info, tf_error *err)
{
    int fd = open(path, O_RDONLY);
    if (fd < 0)
        return tf_error_set(err, TF_ERR_NOINPUT, "%s: cannot open: %s", path, strerror(errno));
    struct stat st;
    int regular = fstat(fd, &st) == 0 && S_ISREG(st.st_mode);
    close(fd);
    if (!regular)
        return tf_error_set(err, TF_ERR_NOINPUT, "%s: cannot open: not a regular file", path);
    memset(info, 0, sizeof *info);
    *sf = sf_open(path, SFM_READ, info);
    if (!*sf)
        return tf_error_set(err, TF_ERR_DATA, "%s: expected a sound file libsndfile can read, "
                            "found one it rejects: %s", path, sf_strerror(NULL));
    if (info->channels <= 0 || info->samplerate <= 0) {
        sf_close(*sf);
        *sf = NULL;
        return tf_error_set(err, TF_ERR_DATA, "%s: expected at least one channel and a positive "
                            "sample rate, found %d channels at %d Hz", path, info->channels,
                            info->samplerate);
    }
    return TF_OK;
}

/* Frames [from, to) of a file, read by one handle into the capture. */
typedef struct {
    const char *path;
    const wav_chan *ch;
    size_t nchan;
    tf_capture *cap;
    size_t from, to;
    int check;                 /* float data: look for non-finite samples */
    const tf_import_options *opt;
    int report;                /* this part reports progress */
    size_t bad;                /* first non-finite frame, SIZE_MAX when none */
    size_t done;               /* frames read */
    int nomem;
    int opened;                /* the thread's own handle opened and seeked */
} read_part;

static void read_range(SNDFILE *sf, read_part *p)
{
    size_t block = TF_WAV_BLOCK_BYTES / (p->nchan * sizeof(float));
    block = block > TF_WAV_BLOCK ? TF_WAV_BLOCK : block < 16 ? 16 : block;
    float *buf = malloc(block * p->nchan * sizeof *buf);
    if (!buf) {
        p->nomem = 1;
        return;
    }
    size_t pos = p->from, total = p->to - p->from;
    while (pos < p->to) {
        size_t want = p->to - pos < block ? p->to - pos : block;
        sf_count_t got = sf_readf_float(sf, buf, (sf_count_t)want);
        if (got <= 0)
            break;
        size_t bad = deinterleave(buf, (size_t)got, p->nchan, p->ch, p->cap, pos, p->check);
        pos += (size_t)got;
        if (bad != SIZE_MAX && p->bad == SIZE_MAX) {
            p->bad = bad;
            if (!p->opt->gaps_interpolate)
                break;
        }
        if (p->report && p->opt->progress && !p->opt->quiet_progress)
            p->opt->progress(p->opt->progress_ctx, (double)(pos - p->from) / (double)total);
    }
    p->done = pos - p->from;
    free(buf);
}

static void *read_part_thread(void *arg)
{
    read_part *p = arg;
    SF_INFO info;
    memset(&info, 0, sizeof info);
    SNDFILE *sf = sf_open(p->path, SFM_READ, &info);
    if (!sf)
        return NULL;
    if (sf_seek(sf, (sf_count_t)p->from, SEEK_SET) == (sf_count_t)p->from) {
        p->opened = 1;
        read_range(sf, p);
    }
    sf_close(sf);
    return NULL;
}

/* Read every frame into cap (allocated here for the kept channels). */
static tf_status read_frames(const char *path, SNDFILE *sf, const SF_INFO *info, wav_chan *ch,
                             size_t kept, const tf_import_options *opt, tf_capture *cap,
                             tf_error *err)
{
    size_t nchan = (size_t)info->channels;
    if (info->frames <= 0)
        return tf_error_set(err, TF_ERR_DATA, "%s: expected sample frames, found none", path);
    if ((uint64_t)info->frames > SIZE_MAX / sizeof(float) / (nchan > kept ? nchan : kept))
        return tf_error_set(err, TF_ERR_NOMEM, "%s: %lld frames do not fit in memory", path,
                            (long long)info->frames);
    size_t frames = (size_t)info->frames;
    tf_status st = tf_capture_alloc(cap, kept, frames, err);
    if (st != TF_OK)
        return st;
    size_t d = 0;
    for (size_t i = 0; i < nchan; i++) {
        ch[i].dest = ch[i].keep ? (int)d++ : -1;
        if (ch[i].dest < 0)
            continue;
        tf_channel *c = &cap->ch[ch[i].dest];
        snprintf(c->name, TF_NAME_SIZE, "%s", ch[i].name);
        snprintf(c->unit, TF_UNIT_SIZE, "%s", ch[i].full_scale > 0 ? ch[i].unit : "FS");
        c->full_scale = ch[i].full_scale > 0 ? ch[i].full_scale : 1.0;
        c->scale = c->full_scale;
        c->skew_s = ch[i].skew_s;
        c->skew_known = ch[i].skew_known;
    }
    int check = is_float_subformat(info->format);
    /* uncompressed data seeks exactly: the second half goes to a second
     * thread with its own handle (opt->threads == 1 keeps one) */
    size_t half = frames;
    if (frames >= TF_WAV_PARALLEL_MIN && sample_bytes(info->format) > 0 && info->seekable &&
        opt->threads != 1)
        half = frames / 2;
    read_part a = {path, ch, nchan, cap, 0, half, check, opt, 1, SIZE_MAX, 0, 0, 0};
    read_part b = {path, ch, nchan, cap, half, frames, check, opt, 0, SIZE_MAX, 0, 0, 0};
    pthread_t t;
    int threaded = half < frames && pthread_create(&t, NULL, read_part_thread, &b) == 0;
    read_range(sf, &a);
    if (threaded)
        pthread_join(t, NULL);
    if (half < frames && !b.opened && a.done == half) { /* no thread, or it could not open */
        if (sf_seek(sf, (sf_count_t)half, SEEK_SET) == (sf_count_t)half)
            read_range(sf, &b);
    }
    if (a.nomem || b.nomem)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory for a read buffer");
    size_t bad = a.bad < b.bad ? a.bad : b.bad;
    if (bad != SIZE_MAX && !opt->gaps_interpolate)
        return tf_error_set(err, TF_ERR_DATA, "%s: frame %zu: expected finite samples, found "
                            "NaN or infinity (--gaps interpolate fills them)", path, bad + 1);
    if (a.done < half || b.done < frames - half)
        return tf_error_set(err, TF_ERR_DATA, "%s: truncated: the header declares %zu frames, "
                            "only %zu could be read (libsndfile: %s)", path, frames,
                            a.done < half ? a.done : half + b.done, sf_strerror(sf));
    if (check && opt->gaps_interpolate) {
        size_t filled = 0;
        for (size_t c = 0; c < cap->nchan; c++) {
            if ((st = fill_gaps(path, &cap->ch[c], frames, err)) != TF_OK)
                return st;
            filled += cap->ch[c].gaps_filled;
        }
        if (filled)
            tf_capture_add_warning(cap, "%s: %zu non-finite samples filled by linear "
                                   "interpolation", path, filled);
    }
    return TF_OK;
}

static void warn_unscaled(const char *path, const wav_chan *ch, size_t nchan, tf_capture *cap)
{
    char list[512] = "";
    size_t count = 0;
    for (size_t k = 0; k < nchan; k++) {
        if (!ch[k].keep || ch[k].full_scale > 0)
            continue;
        size_t l = strlen(list);
        snprintf(list + l, sizeof list - l, "%s%s", count ? ", " : "", ch[k].name);
        count++;
    }
    if (count)
        tf_capture_add_warning(cap, "%s: no full-scale value for %s (give --full-scale "
                               "NAME=VALUE or a sidecar %s.tfscale): values stay in full-scale "
                               "units (FS)", path, list, path);
}

tf_status tf_import_wav(const char *path, const tf_import_options *opt, tf_capture **out,
                        tf_error *err)
{
    tf_import_options none;
    SNDFILE *sf = NULL;
    SF_INFO info;
    wav_chan *ch = NULL;
    tf_capture *cap = NULL;
    double t0 = 0;
    size_t kept = 0;
    *out = NULL;
    if (!opt) {
        tf_import_options_init(&none);
        opt = &none;
    }
    tf_status st = open_sound(path, &sf, &info, err);
    if (st != TF_OK)
        return st;
    long long cut = declared_data_cut(sf, &info);
    if (cut > 0) {
        st = tf_error_set(err, TF_ERR_DATA, "%s: truncated: the data chunk declares %lld bytes, "
                          "the file ends before (libsndfile read %lld frames)", path, cut,
                          (long long)info.frames);
        goto done;
    }
    if (cut == 0) {
        st = tf_error_set(err, TF_ERR_DATA, "%s: truncated: the header declares more frames "
                          "than the file holds (libsndfile read %lld frames)", path,
                          (long long)info.frames);
        goto done;
    }
    size_t nchan = (size_t)info.channels;
    ch = calloc(nchan, sizeof *ch);
    cap = tf_capture_create();
    if (!ch || !cap) {
        st = tf_error_set(err, TF_ERR_NOMEM, "out of memory opening %s", path);
        goto done;
    }
    if ((st = name_and_scale(path, opt, ch, nchan, &t0, err)) != TF_OK ||
        (st = select_channels(path, opt->channels, ch, nchan, &kept, err)) != TF_OK ||
        (st = read_frames(path, sf, &info, ch, kept, opt, cap, err)) != TF_OK)
        goto done;
    snprintf(cap->path, sizeof cap->path, "%s", path);
    cap->t0_s = t0;
    cap->dt_s = 1.0 / info.samplerate;
    if (opt->sample_rate_hz > 0)
        cap->dt_s = 1.0 / opt->sample_rate_hz;
    else if (opt->dt_s > 0)
        cap->dt_s = opt->dt_s;
    major_name(info.format, cap->dialect.format, sizeof cap->dialect.format);
    snprintf(cap->dialect.wav_subformat, sizeof cap->dialect.wav_subformat, "%s",
             subformat_name(info.format));
    cap->dialect.decimal = '.';
    wav_metadata(sf, cap);
    warn_unscaled(path, ch, nchan, cap);
    st = tf_import_apply_options(cap, opt, err);
done:
    if (sf)
        sf_close(sf);
    free(ch);
    if (st != TF_OK) {
        tf_capture_destroy(cap);
        return st;
    }
    *out = cap;
    return TF_OK;
}
