/* The in-memory capture: uniformly sampled channels on one time base. */
#ifndef TANKFIT_CAPTURE_H
#define TANKFIT_CAPTURE_H

#include <stddef.h>
#include <jansson.h>
#include <tankfit/error.h>
#include <tankfit/stats.h>

#ifdef __cplusplus
extern "C" {
#endif

#define TF_NAME_SIZE 64
#define TF_UNIT_SIZE 16

/* One channel. samples holds n float32 values in physical units (scale and
 * offset already applied). */
typedef struct tf_channel {
    char name[TF_NAME_SIZE];
    char unit[TF_UNIT_SIZE];   /* "" when unknown; "FS" for unscaled WAV data */
    float *samples;            /* owned by the capture */
    double scale;              /* factor applied (1 when none) */
    double offset;             /* offset added after scaling (0 when none) */
    double full_scale;         /* WAV: physical value of full scale; 0 when not WAV */
    double skew_s;             /* known probe delay from a sidecar; 0 when unknown */
    int skew_known;            /* non-zero when skew_s came from the input */
    size_t gaps_filled;        /* non-finite or empty values interpolated */
    tf_channel_stats stats;    /* valid when stats_valid */
    int stats_valid;
} tf_channel;

/* How a CSV file was laid out, as detected by the importer. */
typedef struct tf_dialect {
    char format[8];            /* "csv" or "wav" (or another libsndfile major format) */
    char delimiter;            /* ',' ';' '\t' or ' ' (runs of spaces); 0 for WAV */
    char decimal;              /* '.' or ',' */
    int header_line;           /* 1-based line of the header row; 0 when none */
    size_t metadata_lines;     /* lines before the header (or the data) */
    int has_bom;
    char line_end[8];          /* "LF", "CRLF" or "CR" */
    int time_column;           /* 0-based column used as time base; -1 when none */
    double time_resolution_s;  /* printing resolution of the time column; 0 when none */
    char wav_subformat[32];    /* e.g. "PCM_16", "FLOAT"; "" for CSV */
} tf_dialect;

/* A capture. Create with tf_capture_create, fill, free with tf_capture_destroy. */
typedef struct tf_capture {
    double t0_s;               /* time of sample 0 */
    double dt_s;               /* sample period, > 0 */
    size_t n;                  /* samples per channel */
    size_t nchan;
    tf_channel *ch;            /* nchan channels */
    tf_dialect dialect;
    char path[4096];           /* file it came from ("" when synthetic) */
    char **metadata;           /* metadata lines kept for reports (nmeta of them) */
    size_t nmeta;
    char **warnings;           /* warnings raised while importing (nwarn of them) */
    size_t nwarn;
} tf_capture;

/* New empty capture (no channels, n = 0). NULL when out of memory. */
tf_capture *tf_capture_create(void);

/* Free a capture and everything it owns. NULL is a no-op. */
void tf_capture_destroy(tf_capture *cap);

/* Allocate nchan channels of n samples each (uninitialised samples, unit "",
 * scale 1). Replaces any channels already present. TF_ERR_NOMEM on failure. */
tf_status tf_capture_alloc(tf_capture *cap, size_t nchan, size_t n, tf_error *err);

/* Shrink every channel to n samples (n <= cap->n), releasing the tail. */
tf_status tf_capture_truncate(tf_capture *cap, size_t n, tf_error *err);

/* Make every channel hold n samples: a shrink as tf_capture_truncate, a growth
 * keeps the first cap->n samples and leaves the rest uninitialised.
 * TF_ERR_NOMEM on failure, with cap->n unchanged. */
tf_status tf_capture_resize(tf_capture *cap, size_t n, tf_error *err);

/* Append a metadata line (copied) or a formatted warning. */
tf_status tf_capture_add_metadata(tf_capture *cap, const char *line, size_t len);
tf_status tf_capture_add_warning(tf_capture *cap, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

/* Index of the channel called name, or -1. */
int tf_capture_find(const tf_capture *cap, const char *name);

/* Compute (or recompute) stats of every channel. */
void tf_capture_compute_stats(tf_capture *cap);

/* The capture as a JSON object (jansson) for `tankfit inspect --json` and
 * acceptance records: samples, sample_rate_hz, dt_s, duration_s (n * dt_s),
 * t0_s, path, dialect{...}, metadata[], warnings[] and channels[] with name,
 * unit, scaling and statistics (null where a value is unknown, e.g. stats not
 * computed). Every key is listed in docs/inspect.md. Returns a new reference
 * the caller owns (json_decref), or NULL when cap is NULL or memory runs out. */
json_t *tf_capture_to_json(const tf_capture *cap);

/* Time of sample k. */
static inline double tf_capture_time(const tf_capture *cap, size_t k)
{
    return cap->t0_s + (double)k * cap->dt_s;
}

#ifdef __cplusplus
}
#endif
#endif
