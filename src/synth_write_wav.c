/* Streaming WAV writer (libsndfile, PCM_16 ADC codes or FLOAT) and its .tfscale sidecar text. */
#include "synth_write.h"

#include <math.h>
#include <sndfile.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define WAV_FRAMES 4096

struct tf_sw_wav {
    SNDFILE *sf;
    tf_sw_file *f;
    tf_sw_layout lay;
    short *ibuf;
    float *fbuf;
};

tf_sw_wav *tf_sw_wav_create(tf_sw_file *f, const tf_sw_layout *lay, tf_error *err)
{
    double rate = 1.0 / lay->dt_s;
    double rrate = floor(rate + 0.5);
    if (!(rrate >= 1 && rrate <= 2147483647.0) || fabs(rate - rrate) > 1e-9 * rrate) {
        tf_error_set(err, TF_ERR_USAGE,
                     "[capture] sample_rate: a WAV needs a whole number of hertz, found %.9g Hz",
                     rate);
        return NULL;
    }
    for (size_t c = 0; c < lay->nchan; c++)
        if (!(lay->full_scale[c] > 0) || (lay->pcm16 && (lay->bits[c] < 1 || lay->bits[c] > 16))) {
            tf_error_set(err, TF_ERR_INTERNAL, "WAV channel %s: full scale %g, %d bits",
                         lay->name[c], lay->full_scale[c], lay->bits[c]);
            return NULL;
        }
    tf_sw_wav *w = calloc(1, sizeof *w);
    if (!w) {
        tf_error_set(err, TF_ERR_NOMEM, "out of memory for the WAV writer");
        return NULL;
    }
    w->f = f;
    w->lay = *lay;
    if (lay->pcm16)
        w->ibuf = malloc(sizeof(short) * WAV_FRAMES * lay->nchan);
    else
        w->fbuf = malloc(sizeof(float) * WAV_FRAMES * lay->nchan);
    if (!w->ibuf && !w->fbuf) {
        free(w);
        tf_error_set(err, TF_ERR_NOMEM, "out of memory for the WAV writer");
        return NULL;
    }
    SF_INFO info;
    memset(&info, 0, sizeof info);
    info.samplerate = (int)rrate;
    info.channels = (int)lay->nchan;
    info.format = SF_FORMAT_WAV | (lay->pcm16 ? SF_FORMAT_PCM_16 : SF_FORMAT_FLOAT);
    w->sf = sf_open_fd(f->fd, SFM_WRITE, &info, SF_FALSE);
    if (!w->sf) {
        tf_error_set(err, TF_ERR_CANTCREAT, "%s: libsndfile cannot write it: %s", f->path,
                     sf_strerror(NULL));
        free(w->ibuf);
        free(w->fbuf);
        free(w);
        return NULL;
    }
    /* the PEAK chunk carries a time stamp: without it the same design gives the same bytes */
    sf_command(w->sf, SFC_SET_ADD_PEAK_CHUNK, NULL, SF_FALSE);
    return w;
}

tf_status tf_sw_wav_write(tf_sw_wav *w, const float *const ch[], size_t n, tf_error *err)
{
    size_t nc = w->lay.nchan;
    for (size_t k0 = 0; k0 < n; k0 += WAV_FRAMES) {
        size_t m = n - k0 < WAV_FRAMES ? n - k0 : WAV_FRAMES;
        sf_count_t done;
        if (w->lay.pcm16) {
            for (size_t c = 0; c < nc; c++) {
                /* code = value / LSB, LSB = 2 FS / 2^bits; 16-bit code = code * 2^(16-bits),
                 * i.e. value * 32768 / FS */
                double step = ldexp(1.0, 16 - w->lay.bits[c]);
                double k = 32768.0 / w->lay.full_scale[c] / step;
                double hi = 32767.0 / step, lo = -32768.0 / step;
                const float *x = ch[c] + k0;
                for (size_t j = 0; j < m; j++) {
                    /* the value is already on the ADC grid: its code, clamped, rounded
                     * half up by truncation of a value kept >= 0 */
                    double q = (double)x[j] * k;
                    q = q > hi ? hi : (q < lo ? lo : q);
                    q = ((double)(int64_t)(q - lo + 0.5) + lo) * step;
                    w->ibuf[j * nc + c] = (short)(q > 32767.0 ? 32767.0 : q);
                }
            }
            done = sf_writef_short(w->sf, w->ibuf, (sf_count_t)m);
        } else {
            for (size_t c = 0; c < nc; c++) {
                float inv = (float)(1.0 / w->lay.full_scale[c]);
                const float *x = ch[c] + k0;
                for (size_t j = 0; j < m; j++)
                    w->fbuf[j * nc + c] = w->lay.full_scale[c] == 1.0 ? x[j] : x[j] * inv;
            }
            done = sf_writef_float(w->sf, w->fbuf, (sf_count_t)m);
        }
        if (done != (sf_count_t)m)
            return tf_error_set(err, TF_ERR_IO, "%s: write failed: %s", w->f->path,
                                sf_strerror(w->sf));
    }
    return TF_OK;
}

tf_status tf_sw_wav_finish(tf_sw_wav *w, tf_error *err)
{
    if (!w)
        return TF_OK;
    tf_status st = TF_OK;
    if (sf_close(w->sf) != 0)
        st = tf_error_set(err, TF_ERR_IO, "%s: finishing the WAV failed", w->f->path);
    free(w->ibuf);
    free(w->fbuf);
    free(w);
    return st;
}

char *tf_sw_sidecar_text(const tf_sw_layout *lay)
{
    size_t cap = 512 + lay->nchan * 160;
    char *s = malloc(cap);
    if (!s)
        return NULL;
    size_t len = (size_t)snprintf(s, cap,
                                  "# tankfit scale file: one line per WAV channel, in order\n"
                                  "# name unit full_scale (physical value of digital full scale)\n"
                                  "t0 = %.17g\n", lay->t0_s);
    for (size_t c = 0; c < lay->nchan && len < cap; c++)
        len += (size_t)snprintf(s + len, cap - len, "%s %s %.17g\n", lay->name[c],
                                lay->unit[c][0] ? lay->unit[c] : "1", lay->full_scale[c]);
    return s;
}
