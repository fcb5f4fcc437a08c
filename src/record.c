/* Acceptance records: figures and checks as JSON, SHA-256 of inputs, atomic
 * never-overwriting writes, and the comparison used by `tankfit verify`. */
#define _GNU_SOURCE
#include <tankfit/record.h>

#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#include <openssl/evp.h>

static int fault_after_temp;

void tf_record_fault_after_temp(int on)
{
    fault_after_temp = on;
}

tf_status tf_record_sha256_file(const char *path, char hex[65], unsigned long long *bytes,
                                tf_error *err)
{
    hex[0] = 0;
    FILE *f = fopen(path, "rb");
    if (!f)
        return tf_error_set(err, TF_ERR_NOINPUT, "%s: cannot open: %s", path, strerror(errno));
    EVP_MD_CTX *ctx = EVP_MD_CTX_new();
    if (!ctx || EVP_DigestInit_ex(ctx, EVP_sha256(), NULL) != 1) {
        EVP_MD_CTX_free(ctx);
        fclose(f);
        return tf_error_set(err, TF_ERR_INTERNAL, "SHA-256 not available from libcrypto");
    }
    static const size_t block = 65536;
    unsigned char *buf = malloc(block);
    if (!buf) {
        EVP_MD_CTX_free(ctx);
        fclose(f);
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory");
    }
    unsigned long long total = 0;
    size_t got;
    while ((got = fread(buf, 1, block, f)) > 0) {
        EVP_DigestUpdate(ctx, buf, got);
        total += got;
    }
    int bad = ferror(f);
    free(buf);
    fclose(f);
    unsigned char md[EVP_MAX_MD_SIZE];
    unsigned int mdlen = 0;
    if (bad) {
        EVP_MD_CTX_free(ctx);
        return tf_error_set(err, TF_ERR_IO, "%s: read error", path);
    }
    if (EVP_DigestFinal_ex(ctx, md, &mdlen) != 1 || mdlen != 32) {
        EVP_MD_CTX_free(ctx);
        return tf_error_set(err, TF_ERR_INTERNAL, "SHA-256 failed in libcrypto");
    }
    EVP_MD_CTX_free(ctx);
    for (unsigned k = 0; k < 32; k++)
        snprintf(hex + 2 * k, 3, "%02x", md[k]);
    if (bytes)
        *bytes = total;
    return TF_OK;
}

json_t *tf_record_number(double v)
{
    return isfinite(v) ? json_real(v) : json_null();
}

static void fig(json_t *o, const char *name, double v, double u, const char *unit)
{
    json_t *e = json_object();
    json_object_set_new(e, "value", tf_record_number(v));
    json_object_set_new(e, "u", tf_record_number(u));
    json_object_set_new(e, "unit", json_string(unit));
    json_object_set_new(o, name, e);
}

static void fig_est(json_t *o, const char *name, const tf_estimate *e, const char *unit)
{
    fig(o, name, e->value, e->u, unit);
}

static void fig_stat(json_t *o, const char *name, const tf_stat3 *s, const char *unit)
{
    char key[96];
    snprintf(key, sizeof key, "%s_min", name);
    fig(o, key, s->count ? s->min : NAN, NAN, unit);
    snprintf(key, sizeof key, "%s_median", name);
    fig(o, key, s->count ? s->median : NAN, NAN, unit);
    snprintf(key, sizeof key, "%s_max", name);
    fig(o, key, s->count ? s->max : NAN, NAN, unit);
}

json_t *tf_record_figures(const tf_capture *cap, const tf_analysis *an)
{
    json_t *o = json_object();
    if (!o)
        return NULL;
    const tf_segment_result *s = an->seg;
    if (s) {
        fig(o, "lobes", (double)s->nlobes, NAN, "1");
        fig(o, "cycles", (double)s->ncycles, NAN, "1");
        fig(o, "anomalies", (double)s->nanomalies, NAN, "1");
        fig(o, "current_noise_sigma", s->noise_sigma_a, NAN, "A");
        fig_stat(o, "output_frequency", &s->output_frequency_hz, "Hz");
        fig_stat(o, "thyristor_conduction", &s->thyristor_s, "s");
        fig_stat(o, "diode_conduction", &s->diode_s, "s");
        fig_stat(o, "turnoff_available", &s->turnoff_available_s, "s");
        fig_stat(o, "dead_time", &s->dead_s, "s");
        fig_stat(o, "overlap", &s->overlap_s, "s");
    }
    const tf_fit_result *f = an->fit;
    if (f) {
        fig_est(o, "damped_frequency", &f->damped_frequency_hz, "Hz");
        fig_est(o, "undamped_frequency", &f->undamped_frequency_hz, "Hz");
        fig_est(o, "decay", &f->decay_per_s, "1/s");
        fig_est(o, "q", &f->q, "1");
        fig_est(o, "inductance", &f->inductance_h, "H");
        fig_est(o, "capacitance", &f->capacitance_f, "F");
        fig_est(o, "resistance", &f->resistance_ohm, "ohm");
        fig_est(o, "resistance_plain_fit", &f->resistance_raw_ohm, "ohm");
        fig_est(o, "resistance_vi", &f->vi_r, "ohm");
        fig_est(o, "resistance_power", &f->power_r, "ohm");
        fig(o, "probe_skew", f->skew_s, f->skew_u_s, "s");
        fig(o, "bursts_fitted", (double)f->bursts_fitted, NAN, "1");
    }
    const tf_spectrum_result *sp = an->spec;
    if (sp) {
        fig(o, "fundamental", sp->fundamental_hz, NAN, "Hz");
        fig(o, "periods_analysed", (double)sp->periods, NAN, "1");
        for (size_t c = 0; c < sp->nch; c++) {
            const tf_channel_spectrum *ch = &sp->ch[c];
            const char *u = ch->unit[0] ? ch->unit : "1";
            char key[96];
            snprintf(key, sizeof key, "%s_rms", ch->role);
            fig(o, key, ch->rms, NAN, u);
            snprintf(key, sizeof key, "%s_dc", ch->role);
            fig(o, key, ch->dc, NAN, u);
            snprintf(key, sizeof key, "%s_peak", ch->role);
            fig(o, key, ch->peak, NAN, u);
            snprintf(key, sizeof key, "%s_thd", ch->role);
            fig(o, key, ch->thd, NAN, "1");
            for (size_t h = 0; h < ch->nharm && h < TF_CHECK_HARMONICS; h++) {
                snprintf(key, sizeof key, "%s_harmonic_%d", ch->role, ch->harm[h].n);
                fig(o, key, ch->harm[h].amplitude, NAN, u);
            }
        }
        if (sp->power.valid) {
            fig(o, "power", sp->power.mean_w, NAN, "W");
            fig(o, "power_factor", sp->power.power_factor, NAN, "1");
            fig(o, "apparent_power", sp->power.apparent_va, NAN, "VA");
        }
    }
    (void)cap;
    return o;
}

json_t *tf_record_checks(const tf_check_result *r)
{
    json_t *a = json_array();
    for (size_t k = 0; r && k < r->nchecks; k++) {
        const tf_check *c = &r->checks[k];
        json_t *o = json_object();
        json_object_set_new(o, "id", json_string(c->id));
        json_object_set_new(o, "title", json_string(c->title));
        json_object_set_new(o, "unit", json_string(c->unit[0] ? c->unit : "1"));
        json_object_set_new(o, "percent", json_boolean(c->percent));
        json_object_set_new(o, "value", tf_record_number(c->value));
        json_object_set_new(o, "u", tf_record_number(c->u));
        json_object_set_new(o, "limit_low", tf_record_number(c->limit_lo));
        json_object_set_new(o, "limit_high", tf_record_number(c->limit_hi));
        json_object_set_new(o, "nominal", tf_record_number(c->nominal));
        json_object_set_new(o, "limit_key", json_string(c->limit_key));
        json_object_set_new(o, "expected", tf_record_number(c->expected));
        json_object_set_new(o, "verdict", json_string(tf_verdict_name(c->verdict)));
        json_object_set_new(o, "reason", json_string(c->reason));
        json_t *off = json_array();
        for (size_t j = 0; j < c->noffenders; j++)
            json_array_append_new(off, json_pack("{s:o,s:o,s:s}", "time_s",
                                                 tf_record_number(c->offenders[j].time_s),
                                                 "value", tf_record_number(c->offenders[j].value),
                                                 "device", tf_device_name(c->offenders[j].device)));
        json_object_set_new(o, "offenders", off);
        json_object_set_new(o, "offenders_total", json_integer((json_int_t)c->offenders_total));
        json_array_append_new(a, o);
    }
    return a;
}

json_t *tf_record_compare(const tf_check_result *r)
{
    json_t *o = json_object();
    for (size_t k = 0; r && k < r->ncompare; k++) {
        const tf_check_compare *c = &r->compare[k];
        json_object_set_new(o, c->id,
                            json_pack("{s:s,s:s,s:o,s:o,s:o}", "label", c->label, "unit", c->unit,
                                      "measured", tf_record_number(c->measured), "expected",
                                      tf_record_number(c->expected), "difference",
                                      tf_record_number(c->measured - c->expected)));
    }
    return o;
}

void tf_record_utc(time_t t, char iso[32], char compact[32])
{
    struct tm tm;
    gmtime_r(&t, &tm);
    strftime(iso, 32, "%Y-%m-%dT%H:%M:%SZ", &tm);
    strftime(compact, 32, "%Y%m%dT%H%M%SZ", &tm);
}

/* ---------------------------------------------------------------- atomic writes */

static void dir_of(const char *path, char *dir, size_t size)
{
    const char *slash = strrchr(path, '/');
    if (!slash)
        snprintf(dir, size, ".");
    else if (slash == path)
        snprintf(dir, size, "/");
    else
        snprintf(dir, size, "%.*s", (int)(slash - path), path);
}

static void sync_dir(const char *dir)
{
    int fd = open(dir, O_RDONLY | O_DIRECTORY);
    if (fd >= 0) {
        fsync(fd);
        close(fd);
    }
}

/* Temporary file in dir holding data, synced; its name in tmp. */
static tf_status write_temp(const char *dir, const char *data, size_t len, char *tmp,
                            size_t tmp_size, tf_error *err)
{
    if ((size_t)snprintf(tmp, tmp_size, "%s/.tankfit-record-XXXXXX", dir) >= tmp_size)
        return tf_error_set(err, TF_ERR_CANTCREAT, "%s: path too long", dir);
    int fd = mkstemp(tmp);
    if (fd < 0)
        return tf_error_set(err, TF_ERR_CANTCREAT, "%s: cannot create a file there: %s", dir,
                            strerror(errno));
    fchmod(fd, 0644);
    size_t done = 0;
    while (done < len) {
        ssize_t w = write(fd, data + done, len - done);
        if (w < 0 && errno == EINTR)
            continue;
        if (w <= 0) {
            int e = errno;
            close(fd);
            unlink(tmp);
            return tf_error_set(err, TF_ERR_IO, "%s: write failed: %s", dir, strerror(e));
        }
        done += (size_t)w;
    }
    if (fsync(fd) != 0 || close(fd) != 0) {
        int e = errno;
        unlink(tmp);
        return tf_error_set(err, TF_ERR_IO, "%s: fsync failed: %s", dir, strerror(e));
    }
    if (fault_after_temp) {
        unlink(tmp);
        return tf_error_set(err, TF_ERR_IO, "%s: write interrupted (test fault)", dir);
    }
    return TF_OK;
}

/* link() refuses to replace an existing name: that is what keeps records intact. */
static int place(const char *tmp, const char *final)
{
    if (link(tmp, final) == 0)
        return 0;
    return errno == EEXIST ? 1 : -1;
}

tf_status tf_record_write_new(const char *path, const char *data, size_t len, tf_error *err)
{
    char dir[4096], tmp[4200];
    dir_of(path, dir, sizeof dir);
    tf_status st = write_temp(dir, data, len, tmp, sizeof tmp, err);
    if (st != TF_OK)
        return st;
    int r = place(tmp, path);
    int e = errno;
    unlink(tmp);
    if (r == 1)
        return tf_error_set(err, TF_ERR_CANTCREAT, "%s exists; not replacing it", path);
    if (r < 0)
        return tf_error_set(err, TF_ERR_CANTCREAT, "%s: cannot create: %s", path, strerror(e));
    sync_dir(dir);
    return TF_OK;
}

tf_status tf_record_write_unique(const char *dir, const char *stem, const char *ext,
                                 const char *data, size_t len, char *path, size_t path_size,
                                 tf_error *err)
{
    char clean[160];
    size_t k = 0;
    for (; stem[k] && k + 1 < sizeof clean; k++) {
        char ch = stem[k];
        int ok = (ch >= 'a' && ch <= 'z') || (ch >= 'A' && ch <= 'Z') || (ch >= '0' && ch <= '9') ||
                 ch == '.' || ch == '_' || ch == '-';
        clean[k] = ok ? ch : '_';
    }
    clean[k] = 0;
    if (!clean[0])
        snprintf(clean, sizeof clean, "record");
    if (clean[0] == '.')
        clean[0] = '_'; /* never a hidden file */
    struct stat sb;
    if (stat(dir, &sb) != 0 || !S_ISDIR(sb.st_mode))
        return tf_error_set(err, TF_ERR_CANTCREAT, "%s: no such directory", dir);
    char tmp[4200];
    tf_status st = write_temp(dir, data, len, tmp, sizeof tmp, err);
    if (st != TF_OK)
        return st;
    for (int n = 1; n <= 999; n++) {
        if ((size_t)snprintf(path, path_size, "%s/%s-%03d%s", dir, clean, n, ext) >= path_size) {
            unlink(tmp);
            return tf_error_set(err, TF_ERR_CANTCREAT, "%s: path too long", dir);
        }
        int r = place(tmp, path);
        if (r == 1)
            continue;
        int e = errno;
        unlink(tmp);
        if (r < 0)
            return tf_error_set(err, TF_ERR_CANTCREAT, "%s: cannot create: %s", path,
                                strerror(e));
        sync_dir(dir);
        return TF_OK;
    }
    unlink(tmp);
    return tf_error_set(err, TF_ERR_CANTCREAT, "%s: 999 records named %s-NNN%s already exist",
                        dir, clean, ext);
}

/* ---------------------------------------------------------------- verify */

static char *show(const json_t *v)
{
    if (!v)
        return strdup("(absent)");
    char *s = json_dumps(v, JSON_ENCODE_ANY | JSON_COMPACT | JSON_REAL_PRECISION(17));
    return s ? s : strdup("?");
}

static size_t note(json_t *diffs, const char *what, const json_t *a, const json_t *b)
{
    char *x = show(a), *y = show(b);
    char line[2048];
    snprintf(line, sizeof line, "%.600s: recorded %.600s, now %.600s", what, x, y);
    free(x);
    free(y);
    json_array_append_new(diffs, json_string(line));
    return 1;
}

static size_t diff_object(const char *prefix, const json_t *a, const json_t *b, json_t *diffs)
{
    size_t n = 0;
    const char *key;
    json_t *va;
    char what[512];
    json_object_foreach((json_t *)a, key, va) {
        json_t *vb = json_object_get(b, key);
        if (!json_equal(va, vb)) {
            snprintf(what, sizeof what, "%.300s %.150s", prefix, key);
            n += note(diffs, what, va, vb);
        }
    }
    json_object_foreach((json_t *)b, key, va) {
        if (!json_object_get(a, key)) {
            snprintf(what, sizeof what, "%.300s %.150s", prefix, key);
            n += note(diffs, what, NULL, va);
        }
    }
    return n;
}

static size_t diff_checks(const char *prefix, const json_t *a, const json_t *b, json_t *diffs)
{
    size_t n = 0, k;
    json_t *ca;
    char what[512];
    json_array_foreach(a, k, ca) {
        const char *id = json_string_value(json_object_get(ca, "id"));
        json_t *cb = NULL;
        size_t j;
        json_t *x;
        json_array_foreach(b, j, x) if (id && json_equal(json_object_get(x, "id"),
                                                         json_object_get(ca, "id"))) cb = x;
        snprintf(what, sizeof what, "%.300s check %.100s", prefix, id ? id : "?");
        if (!cb) {
            n += note(diffs, what, ca, NULL);
            continue;
        }
        n += diff_object(what, ca, cb, diffs);
    }
    if (json_array_size(a) != json_array_size(b)) {
        snprintf(what, sizeof what, "%.300s number of checks", prefix);
        json_t *na = json_integer((json_int_t)json_array_size(a));
        json_t *nb = json_integer((json_int_t)json_array_size(b));
        n += note(diffs, what, na, nb);
        json_decref(na);
        json_decref(nb);
    }
    return n;
}

size_t tf_record_diff(const json_t *rec, const json_t *now, json_t *diffs)
{
    size_t n = 0;
    static const char *const top[] = {"schema", "schema_version", "verdict"};
    for (size_t k = 0; k < 3; k++)
        if (!json_equal(json_object_get(rec, top[k]), json_object_get(now, top[k])))
            n += note(diffs, top[k], json_object_get(rec, top[k]), json_object_get(now, top[k]));
    const json_t *da = json_object_get(rec, "design"), *db = json_object_get(now, "design");
    if (!json_equal(json_object_get(da, "sha256"), json_object_get(db, "sha256")))
        n += note(diffs, "design sha256", json_object_get(da, "sha256"),
                  json_object_get(db, "sha256"));
    const json_t *ca = json_object_get(rec, "captures"), *cb = json_object_get(now, "captures");
    if (json_array_size(ca) != json_array_size(cb))
        return n + note(diffs, "captures", ca, cb);
    for (size_t k = 0; k < json_array_size(ca); k++) {
        const json_t *a = json_array_get(ca, k), *b = json_array_get(cb, k);
        char prefix[256];
        const char *path = json_string_value(json_object_get(a, "path"));
        snprintf(prefix, sizeof prefix, "capture %zu (%.200s):", k + 1, path ? path : "?");
        char what[300];
        static const char *const keys[] = {"sha256", "bytes", "verdict"};
        for (size_t j = 0; j < 3; j++)
            if (!json_equal(json_object_get(a, keys[j]), json_object_get(b, keys[j]))) {
                snprintf(what, sizeof what, "%s %s", prefix, keys[j]);
                n += note(diffs, what, json_object_get(a, keys[j]), json_object_get(b, keys[j]));
            }
        snprintf(what, sizeof what, "%s figure", prefix);
        n += diff_object(what, json_object_get(a, "figures"), json_object_get(b, "figures"), diffs);
        snprintf(what, sizeof what, "%s expected", prefix);
        n += diff_object(what, json_object_get(a, "expected"), json_object_get(b, "expected"),
                         diffs);
        n += diff_checks(prefix, json_object_get(a, "checks"), json_object_get(b, "checks"),
                         diffs);
    }
    return n;
}
