/* Acceptance records: JSON (jansson) with hashes of every input (SHA-256 via
 * libcrypto EVP), written atomically under a unique name, and compared on verify.
 * Format: docs/record.md (schema version TF_RECORD_SCHEMA_VERSION). */
#ifndef TANKFIT_RECORD_H
#define TANKFIT_RECORD_H

#include <stddef.h>
#include <time.h>
#include <jansson.h>
#include <tankfit/analysis.h>
#include <tankfit/capture.h>
#include <tankfit/check.h>
#include <tankfit/error.h>

#ifdef __cplusplus
extern "C" {
#endif

#define TF_RECORD_SCHEMA "tankfit-acceptance-record"
#define TF_RECORD_SCHEMA_VERSION 1

/* SHA-256 of the file at path as 64 lowercase hex digits plus NUL in hex, and its
 * size in bytes in *bytes (may be NULL). Streams the file (64 KiB blocks).
 * Errors: TF_ERR_NOINPUT (cannot open), TF_ERR_IO (read error), TF_ERR_INTERNAL
 * (libcrypto failure). */
tf_status tf_record_sha256_file(const char *path, char hex[65], unsigned long long *bytes,
                                tf_error *err);

/* A number for a record: a JSON real, or null when v is not finite. New reference. */
json_t *tf_record_number(double v);

/* Every measured figure of one analysed capture as an object
 * name -> {"value", "u", "unit"} (null where unknown), names in docs/record.md.
 * Deterministic: the same analysis gives the same object. New reference (NULL
 * when out of memory). */
json_t *tf_record_figures(const tf_capture *cap, const tf_analysis *an);

/* The checks of r as an array of objects (id, title, unit, percent, value, u,
 * limit_low, limit_high, nominal, limit_key, expected, verdict, reason,
 * offenders, offenders_total). New reference. */
json_t *tf_record_checks(const tf_check_result *r);

/* Measured beside design-expected: object id -> {label, unit, measured, expected,
 * difference}. New reference. */
json_t *tf_record_compare(const tf_check_result *r);

/* UTC time t as "2026-12-02T01:30:05Z" (iso, 21 bytes) and "20261202T013005Z"
 * (compact, 17 bytes, for file names). */
void tf_record_utc(time_t t, char iso[32], char compact[32]);

/* Write len bytes of data as a new file DIR/STEM-NNNEXT (NNN = 001, 002, ...: the
 * first name not taken). The data goes to a temporary file in dir, is fsync'ed
 * and then linked to the final name, which fails rather than replace an existing
 * file (the next counter is tried); the temporary is removed and the directory
 * fsync'ed. stem: characters other than letters, digits, '.', '_' and '-' become
 * '_'. The chosen path goes to path (size path_size). dir must exist. Errors:
 * TF_ERR_CANTCREAT (dir missing or not writable, 999 names taken), TF_ERR_IO
 * (write or fsync failed); nothing is left behind on error. */
tf_status tf_record_write_unique(const char *dir, const char *stem, const char *ext,
                                 const char *data, size_t len, char *path, size_t path_size,
                                 tf_error *err);

/* Write data atomically as the new file path (same method); an existing path is
 * TF_ERR_CANTCREAT and stays untouched. */
tf_status tf_record_write_new(const char *path, const char *data, size_t len, tf_error *err);

/* For tests: make the next writes fail right after the temporary file has been
 * written and synced (as if the process were interrupted there), with TF_ERR_IO.
 * on = 0 restores normal writes. */
void tf_record_fault_after_temp(int on);

/* Compare a record read back with one rebuilt from the same inputs. Appends one
 * human-readable line per difference to the JSON array diffs (input hashes,
 * figures, checks, expected values, verdicts; the time and the tool version are
 * not figures and are ignored). Returns the number of differences (0: the record
 * is reproduced exactly). */
size_t tf_record_diff(const json_t *recorded, const json_t *fresh, json_t *diffs);

#ifdef __cplusplus
}
#endif
#endif
