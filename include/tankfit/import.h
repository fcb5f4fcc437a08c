/* Importers: CSV (libcsv) and WAV/RF64/W64/FLAC... (libsndfile) into a tf_capture. */
#ifndef TANKFIT_IMPORT_H
#define TANKFIT_IMPORT_H

#include <stddef.h>
#include <tankfit/capture.h>

#ifdef __cplusplus
extern "C" {
#endif

#define TF_MAX_CHANNEL_OPTS 32

/* One NAME=VALUE channel option from the command line or a design file. */
typedef struct tf_channel_opt {
    char name[TF_NAME_SIZE];
    double value;              /* factor, offset or full-scale value */
    char text[TF_NAME_SIZE];   /* unit or new name; for full-scale the unit ("A") */
} tf_channel_opt;

/* Options shared by every command that reads a capture. Zero-initialise, or
 * call tf_import_options_init. */
typedef struct tf_import_options {
    double sample_rate_hz;     /* 0: not given (then a time column is required) */
    double dt_s;               /* 0: not given */
    int gaps_interpolate;      /* 0: non-finite/empty value is an error */
    char channels[1024];       /* "A,B": load only these; "" loads all */
    tf_channel_opt scale[TF_MAX_CHANNEL_OPTS];      size_t nscale;
    tf_channel_opt offset[TF_MAX_CHANNEL_OPTS];     size_t noffset;
    tf_channel_opt unit[TF_MAX_CHANNEL_OPTS];       size_t nunit;
    tf_channel_opt rename[TF_MAX_CHANNEL_OPTS];     size_t nrename;
    tf_channel_opt full_scale[TF_MAX_CHANNEL_OPTS]; size_t nfull_scale;
    int threads;               /* parser threads; 0 = one per core (at most 2 used) */
    int quiet_progress;        /* non-zero: never report progress */
    void (*progress)(void *ctx, double fraction); /* optional progress callback */
    void *progress_ctx;
} tf_import_options;

/* Kinds of NAME=VALUE option, for tf_import_options_add. */
typedef enum {
    TF_OPT_SCALE, TF_OPT_OFFSET, TF_OPT_UNIT, TF_OPT_RENAME, TF_OPT_FULL_SCALE
} tf_opt_kind;

void tf_import_options_init(tf_import_options *o);

/* Parse "NAME=VALUE" (for TF_OPT_FULL_SCALE "NAME=200A" or "NAME=200 A",
 * SI prefixes allowed, e.g. "ch2=2kV") and add it. TF_ERR_USAGE with a message
 * naming what was expected when malformed or when too many are given. */
tf_status tf_import_options_add(tf_import_options *o, tf_opt_kind kind, const char *arg,
                                tf_error *err);

/* Read a CSV capture from path. On failure *out is NULL and err holds
 * "path:line:column: expected ..., found ..." with TF_ERR_DATA, or
 * TF_ERR_NOINPUT when the file cannot be opened. The caller owns *out. */
tf_status tf_import_csv(const char *path, const tf_import_options *opt, tf_capture **out,
                        tf_error *err);

/* Read any file libsndfile can read (WAV, RF64, W64, FLAC, AIFF, ...) into a new
 * capture: channel k is "chK" unless named; samples are libsndfile's normalised
 * floats times the channel's full scale. The sidecar "<path>.tfscale" (format:
 * docs/import-wav.md) gives names, units, full scales, skews and t0;
 * opt->full_scale (by sidecar name or "chK") overrides it; without either a
 * channel stays in unit "FS" with a warning. opt->channels keeps only the named
 * channels; opt->sample_rate_hz / dt_s replace the file's rate; then
 * tf_import_apply_options. opt may be NULL. Errors: TF_ERR_NOINPUT (cannot
 * open; sidecar unreadable), TF_ERR_DATA (rejected by libsndfile, truncated, no
 * frames, non-finite sample without gaps_interpolate, sidecar
 * "path:line:column: expected ..."), TF_ERR_USAGE (option naming no channel),
 * TF_ERR_NOMEM. On failure *out is NULL; else the caller owns *out. */
tf_status tf_import_wav(const char *path, const tf_import_options *opt, tf_capture **out,
                        tf_error *err);

/* Pick the importer from the file's first bytes (RIFF/RF64/FORM/fLaC/...:
 * libsndfile, else CSV) and run it. */
tf_status tf_import_file(const char *path, const tf_import_options *opt, tf_capture **out,
                         tf_error *err);

/* Apply scale/offset/unit/rename options to an imported capture (used by both
 * importers; an option naming no channel is TF_ERR_USAGE). */
tf_status tf_import_apply_options(tf_capture *cap, const tf_import_options *opt,
                                  tf_error *err);

/* Parse a number with an optional SI prefix and unit, "2.2 uF", "2.2µF", "20us",
 * "6 kHz", "5 %", "-1.5e-3". On success stores the value in base units (percent
 * becomes a fraction) and the bare unit ("F", "s", "Hz", "%", "" ...) in unit.
 * Returns 0 on success, -1 when the text is not of that form. */
int tf_parse_quantity(const char *text, double *value, char *unit, size_t unit_size);

#ifdef __cplusplus
}
#endif
#endif
