/* Private pieces of the simulator output: seeded noise, scope imperfections, a fast
 * number printer, atomic output files and the streaming CSV and WAV writers. */
#ifndef TF_SYNTH_WRITE_H
#define TF_SYNTH_WRITE_H

#include <stddef.h>
#include <stdint.h>
#include <jansson.h>
#include <tankfit/design.h>
#include <tankfit/error.h>

/* ---- seeded noise (synth_write_scope.c) ---------------------------------------- */

/* xoshiro256** generator (D. Blackman and S. Vigna, "Scrambled linear pseudorandom
 * number generators", ACM TOMS 47(4), 2021), seeded through splitmix64 as the
 * authors recommend. Same seed, same stream on every platform. */
typedef struct tf_sw_rng {
    uint64_t s[4];
} tf_sw_rng;

/* Seed a generator from (seed, stream): each channel gets its own stream so its
 * noise does not depend on which other channels are written. */
void tf_sw_rng_seed(tf_sw_rng *r, uint64_t seed, uint64_t stream);

/* Next 64 random bits. */
uint64_t tf_sw_rng_next(tf_sw_rng *r);

/* Uniform double in [0, 1) with 53 random bits. */
double tf_sw_rng_uniform(tf_sw_rng *r);

/* Standard normal deviate: GSL's ziggurat (G. Marsaglia and W. W. Tsang, "The ziggurat
 * method for generating random variables", J. Statistical Software 5(8), 2000) driven
 * by this generator's upper 32 bits. */
double tf_sw_rng_normal(tf_sw_rng *r);

/* The imperfections of one scope channel: add noise (sigma in the channel's unit),
 * clip at +/- range (range > 0), quantise to bits over +/- range (bits in 1..24,
 * needs range > 0): codes -2^(bits-1) .. 2^(bits-1) - 1, value = code * LSB with
 * LSB = 2 range / 2^bits. */
typedef struct tf_sw_scope {
    double noise;
    double range;
    int bits;
    tf_sw_rng rng;
} tf_sw_scope;

/* Set up a channel's imperfections from its [capture] settings (noiseless: none).
 * TF_ERR_USAGE (naming the channel) when bits are given without a range, or a
 * value is out of its valid range. */
tf_status tf_sw_scope_init(tf_sw_scope *sc, const tf_capture_channel_cfg *cfg, const char *name,
                           uint64_t seed, uint64_t stream, int noiseless, tf_error *err);

/* Apply the imperfections to x[0..n) in place (in stream order). */
void tf_sw_scope_apply(tf_sw_scope *sc, float *x, size_t n);

/* The ADC code of an already quantised value (bits > 0), for the 16-bit WAV writer:
 * code in -2^(bits-1) .. 2^(bits-1) - 1. */
long tf_sw_scope_code(const tf_sw_scope *sc, float v);

/* ---- number printing (synth_write_csv.c) ---------------------------------------- */

/* Print v in scientific notation with `digits` significant digits (1..15), as
 * printf("%.*e", digits - 1, v) does ("-1.23456e-03"); zero prints "0.00000e+00",
 * non-finite values "nan", "inf", "-inf". Writes at most 24 bytes, no NUL;
 * returns the count. The digits are those printf gives (correct rounding of the
 * binary value, exact ties to even): one scaling by an exact power of ten, and
 * near a tie the exact residual of that scaling (FMA) decides. */
size_t tf_sw_format_sci(char *out, double v, int digits);

/* ---- atomic output files (synth_write_file.c) ----------------------------------- */

/* A file being written: a temporary file in the target's directory that becomes
 * the target only at tf_sw_file_commit (fsync, then link or rename). */
typedef struct tf_sw_file {
    int fd;
    char path[4096];
    char tmp[4096];
    int overwrite;
} tf_sw_file;

/* TF_ERR_CANTCREAT when path exists and overwrite is 0 (message suggests --force). */
tf_status tf_sw_file_check(const char *path, int overwrite, tf_error *err);

/* Create the temporary file for path. TF_ERR_CANTCREAT when the directory cannot
 * take it, or path exists and overwrite is 0. */
tf_status tf_sw_file_open(tf_sw_file *f, const char *path, int overwrite, tf_error *err);

/* Write all of buf (retrying short writes). TF_ERR_IO on failure. */
tf_status tf_sw_file_write(tf_sw_file *f, const void *buf, size_t len, tf_error *err);

/* fsync, close and move the temporary file into place (without overwrite, link()
 * so an existing target is never replaced). The temporary file is gone afterwards
 * whatever happens. */
tf_status tf_sw_file_commit(tf_sw_file *f, tf_error *err);

/* Close and remove the temporary file (no-op when not open). */
void tf_sw_file_abort(tf_sw_file *f);

/* ---- streaming writers (synth_write_csv.c, synth_write_wav.c) ------------------- */

#define TF_SW_MAXCHAN 8

/* What a writer is told about the channels it writes. */
typedef struct tf_sw_layout {
    size_t nchan;
    const char *name[TF_SW_MAXCHAN];
    const char *unit[TF_SW_MAXCHAN];      /* "" for gate channels */
    double full_scale[TF_SW_MAXCHAN];     /* WAV: physical value of full scale (> 0) */
    int bits[TF_SW_MAXCHAN];              /* WAV PCM_16: ADC bits of the channel (1..16) */
    double t0_s, dt_s;
    int time_digits, value_digits;        /* CSV: significant digits, 1..15 */
    int pcm16;                            /* WAV: 1 = PCM_16 codes, 0 = FLOAT */
} tf_sw_layout;

typedef struct tf_sw_csv tf_sw_csv;

/* Start a CSV on f: header "time (s),i_load (A),..." (a gate channel is just its
 * name). NULL with err set on failure. */
tf_sw_csv *tf_sw_csv_create(tf_sw_file *f, const tf_sw_layout *lay, tf_error *err);

/* Write rows k0 .. k0 + n - 1 (time t0 + k dt) from ch[c][0..n). */
tf_status tf_sw_csv_write(tf_sw_csv *w, size_t k0, const float *const ch[], size_t n,
                          tf_error *err);

/* Flush and free (the file itself is committed by the caller). NULL is a no-op. */
tf_status tf_sw_csv_finish(tf_sw_csv *w, tf_error *err);

typedef struct tf_sw_wav tf_sw_wav;

/* Start a WAV on f (sample rate 1 / dt must be a whole number of hertz). PCM_16:
 * each value is written as its ADC code scaled to 16 bits (code x 2^(16 - bits)),
 * so code / 32768 x full_scale is the quantised value exactly; FLOAT: value /
 * full_scale. No PEAK chunk (it holds a time stamp: output would not repeat). */
tf_sw_wav *tf_sw_wav_create(tf_sw_file *f, const tf_sw_layout *lay, tf_error *err);

tf_status tf_sw_wav_write(tf_sw_wav *w, const float *const ch[], size_t n, tf_error *err);

tf_status tf_sw_wav_finish(tf_sw_wav *w, tf_error *err);

/* Text of the sidecar "<file>.tfscale" for a layout (format: docs/import-wav.md):
 * comment lines, "t0 = <time of the first sample>", then one line per channel
 * "name unit full_scale" (unit "1" for a gate). Returns a malloc'd string or NULL
 * when out of memory. */
char *tf_sw_sidecar_text(const tf_sw_layout *lay);

/* ---- what to write for a design (synth_write_plan.c) ---------------------------- */

/* Everything the output side derives from a design before simulating. */
typedef struct tf_sw_plan {
    size_t n;                           /* samples per channel */
    double t0_s, dt_s;
    int noiseless;
    int wav;                            /* 1: WAV (+ sidecar), 0: CSV */
    size_t nchan;
    tf_synth_channel chan[TF_SW_MAXCHAN]; /* written channels, in order */
    tf_sw_scope scope[TF_SW_MAXCHAN];
    double skew_s[TF_SYN_NCHAN];        /* per engine channel (0 when noiseless) */
    tf_sw_layout lay;
} tf_sw_plan;

/* Fill p from design d: sample count, channels, imperfections, layout and, for a
 * WAV, the subformat: PCM_16 when every analogue channel has a range and 1..16
 * bits (the file then holds the ADC codes exactly), else FLOAT. TF_ERR_USAGE
 * naming the [capture] key that is out of range. */
tf_status tf_sw_plan_make(const tf_design *d, int noiseless, int wav, tf_sw_plan *p,
                          tf_error *err);

/* The "capture" object added to the truth JSON: what was written and with which
 * imperfections. New reference. */
json_t *tf_sw_plan_json(const tf_sw_plan *p, const tf_design *d);

/* Non-zero when path ends in ".wav" (1) or ".csv" (0, returned as 0 with *known set). */
int tf_sw_ext_format(const char *path, int *known);

#endif
