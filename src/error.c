/* Error codes, their messages and sysexits mapping, and the detail buffer. */
#include <tankfit/error.h>

#include <stdarg.h>
#include <stdio.h>
#include <string.h>

static const char *const messages[TF_ERR_COUNT_] = {
    [TF_OK] = "success",
    [TF_ERR_USAGE] = "invalid usage",
    [TF_ERR_DATA] = "bad input data",
    [TF_ERR_NOINPUT] = "cannot open input",
    [TF_ERR_CANTCREAT] = "cannot create output",
    [TF_ERR_IO] = "input/output error",
    [TF_ERR_NOMEM] = "out of memory",
    [TF_ERR_UNAVAILABLE] = "feature or tool not available",
    [TF_ERR_NUMERIC] = "numerical method failed",
    [TF_ERR_INTERNAL] = "internal error",
};

/* sysexits.h values, spelled out so the library does not depend on the header. */
static const int exit_codes[TF_ERR_COUNT_] = {
    [TF_OK] = 0,           [TF_ERR_USAGE] = 64,       [TF_ERR_DATA] = 65,
    [TF_ERR_NOINPUT] = 66, [TF_ERR_CANTCREAT] = 73,   [TF_ERR_IO] = 74,
    [TF_ERR_NOMEM] = 71,   [TF_ERR_UNAVAILABLE] = 69, [TF_ERR_NUMERIC] = 65,
    [TF_ERR_INTERNAL] = 70,
};

const char *tf_strerror(tf_status code)
{
    if ((int)code < 0 || code >= TF_ERR_COUNT_ || !messages[code])
        return "unknown error";
    return messages[code];
}

int tf_exit_code(tf_status code)
{
    if ((int)code < 0 || code >= TF_ERR_COUNT_)
        return 70;
    return exit_codes[code];
}

tf_status tf_error_set(tf_error *err, tf_status code, const char *fmt, ...)
{
    if (err) {
        va_list ap;
        va_start(ap, fmt);
        err->code = code;
        vsnprintf(err->msg, sizeof err->msg, fmt, ap);
        va_end(ap);
    }
    return code;
}

void tf_error_clear(tf_error *err)
{
    if (err) {
        err->code = TF_OK;
        err->msg[0] = '\0';
    }
}

char *tf_error_excerpt(char *out, unsigned out_size, const char *text, unsigned text_len,
                       unsigned max_chars)
{
    unsigned k = 0, i;
    if (out_size == 0)
        return out;
    for (i = 0; i < text_len && i < max_chars && k + 1 < out_size; i++) {
        unsigned char c = (unsigned char)text[i];
        out[k++] = (c < 0x20 || c == 0x7f) ? '?' : (char)c;
    }
    if (i < text_len && k + 4 < out_size) {
        memcpy(out + k, "...", 3);
        k += 3;
    }
    out[k] = '\0';
    return out;
}
