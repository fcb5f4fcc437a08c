/* The ".tfscale" sidecar of a WAV capture: channel names, units, full scales, skews (docs/import-wav.md). */
#ifndef TF_WAV_SIDECAR_H
#define TF_WAV_SIDECAR_H

#include <stddef.h>
#include <tankfit/capture.h>

/* Largest sidecar accepted (it holds one short line per channel). */
#define TF_SIDECAR_MAX_BYTES (1u << 20)
/* Longest line, without its line end. */
#define TF_SIDECAR_MAX_LINE 1000

/* What the sidecar says about one channel. */
typedef struct tf_wav_scale {
    char name[TF_NAME_SIZE];
    char unit[TF_UNIT_SIZE];  /* "" for a dimensionless channel ("1" or "-" in the file) */
    double full_scale;        /* physical value of digital full scale; 0: "-", unscaled */
    double skew_s;            /* probe delay (valid when skew_known) */
    int skew_known;
    int line;                 /* 1-based line it came from */
} tf_wav_scale;

/* A parsed sidecar: entries for channels 1..n (n <= the file's channels). */
typedef struct tf_wav_sidecar {
    size_t n;
    tf_wav_scale *ch;         /* malloc'd, n entries; free with tf_wav_sidecar_free */
    double t0_s;              /* "t0 = VALUE" (valid when t0_known) */
    int t0_known;
} tf_wav_sidecar;

/* Parse the sidecar text (len bytes, need not be NUL-terminated) for a capture
 * of nchan channels. name is the sidecar's path, used in messages. On error
 * TF_ERR_DATA with "name:line:column: expected ..., found '...'" and *out
 * empty; TF_ERR_NOMEM when out of memory. */
tf_status tf_wav_sidecar_parse(const char *text, size_t len, const char *name, size_t nchan,
                               tf_wav_sidecar *out, tf_error *err);

/* Read and parse the file at path. *found is set to 0 (and TF_OK returned, *out
 * empty) when no such file exists; TF_ERR_NOINPUT when it exists but cannot be
 * read; else as tf_wav_sidecar_parse. */
tf_status tf_wav_sidecar_read(const char *path, size_t nchan, tf_wav_sidecar *out, int *found,
                              tf_error *err);

/* Release what a parse allocated; the struct is left empty. NULL is a no-op. */
void tf_wav_sidecar_free(tf_wav_sidecar *s);

#endif
