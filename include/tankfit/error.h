/* tankfit error codes and the detail buffer every fallible call fills. */
#ifndef TANKFIT_ERROR_H
#define TANKFIT_ERROR_H

#ifdef __cplusplus
extern "C" {
#endif

/* Status of a library call. TF_OK is zero; every other code has a message
 * (tf_strerror) and a sysexits exit code (tf_exit_code) for the CLI. */
typedef enum {
    TF_OK = 0,
    TF_ERR_USAGE,       /* a caller or command-line argument is invalid      (64) */
    TF_ERR_DATA,        /* input data is malformed or cannot be analysed     (65) */
    TF_ERR_NOINPUT,     /* an input file cannot be opened or read            (66) */
    TF_ERR_CANTCREAT,   /* an output file cannot be created                  (73) */
    TF_ERR_IO,          /* an I/O error while reading or writing             (74) */
    TF_ERR_NOMEM,       /* out of memory                                     (71) */
    TF_ERR_UNAVAILABLE, /* a feature or external tool is not available       (69) */
    TF_ERR_NUMERIC,     /* a numerical method did not converge               (65) */
    TF_ERR_INTERNAL,    /* a bug in tankfit                                  (70) */
    TF_ERR_COUNT_       /* number of codes, not a code */
} tf_status;

/* Size of the detail message, including the terminating NUL. */
#define TF_ERROR_MSG_SIZE 1024

/* Detail of the last failure: the code and a message of the form
 * "file:line:column: expected ..., found ..." where a position applies. */
typedef struct tf_error {
    tf_status code;
    char msg[TF_ERROR_MSG_SIZE];
} tf_error;

/* Short fixed description of a status code; never NULL (unknown codes give
 * "unknown error"). */
const char *tf_strerror(tf_status code);

/* The sysexits(3) exit code the CLI uses for a status (0 for TF_OK). */
int tf_exit_code(tf_status code);

/* Set err (may be NULL) to code with a printf-style message; returns code so a
 * caller can write `return tf_error_set(err, TF_ERR_DATA, "...")`. */
tf_status tf_error_set(tf_error *err, tf_status code, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 3, 4)))
#endif
    ;

/* Reset err (may be NULL) to TF_OK with an empty message. */
void tf_error_clear(tf_error *err);

/* Copy at most max_chars characters of text into out (size out_size) for use in
 * "found '...'" messages: control characters become '?', and a cut is marked
 * with "...". Returns out. */
char *tf_error_excerpt(char *out, unsigned out_size, const char *text, unsigned text_len,
                       unsigned max_chars);

#ifdef __cplusplus
}
#endif
#endif
