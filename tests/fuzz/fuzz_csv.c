/* libFuzzer harness for the CSV importer: any bytes give a consistent capture or
 * a positioned data/usage error, never a crash, a hang or a leak. The first byte
 * picks options (gap filling, a given sample rate, a column subset, threads); the
 * rest is the file, fed through the in-memory entry point. */
#include "../../src/numparse.c" /* first: it needs _GNU_SOURCE before any header */

/* compiled in here so that libFuzzer's coverage sees the importer (the library
 * itself is built without coverage); a low split threshold makes small inputs
 * take the two-thread path too */
#define TF_CSV_MIN_SPLIT 64
#include "../../src/csv_detect.c"
#include "../../src/csv_time.c"
#include "../../src/import_csv.c"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    tf_import_options opt;
    tf_import_options_init(&opt);
    if (size > 0) {
        unsigned o = data[0];
        opt.gaps_interpolate = o & 1;
        if (o & 2)
            opt.sample_rate_hz = 1e6;
        if (o & 4)
            snprintf(opt.channels, sizeof opt.channels, "col2");
        opt.threads = (o & 8) ? 1 : 2;
        data++;
        size--;
    }
    tf_capture *cap = NULL;
    tf_error err;
    tf_error_clear(&err);
    tf_status st = tf_csv_import_memory("fuzz.csv", data, size, &opt, &cap, &err);
    if (st == TF_OK) {
        if (!cap || cap->n == 0 || cap->nchan == 0 || !(cap->dt_s > 0) || !isfinite(cap->t0_s))
            abort();
        for (size_t c = 0; c < cap->nchan; c++)
            for (size_t k = 0; k < cap->n; k++)
                if (!isfinite(cap->ch[c].samples[k]))
                    abort();
        tf_capture_destroy(cap);
    } else {
        if (cap || (st != TF_ERR_DATA && st != TF_ERR_USAGE && st != TF_ERR_NOMEM))
            abort();
        if (st == TF_ERR_DATA && strncmp(err.msg, "fuzz.csv:", 9) != 0)
            abort();
    }
    return 0;
}
