/* libFuzzer harness for the WAV importer: any file content gives a capture with
 * consistent sizes or a data error naming the file, never a crash or a leak. */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include <tankfit/capture.h>
#include <tankfit/import.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    static char path[64];
    if (!path[0])
        snprintf(path, sizeof path, "/tmp/tankfit-fuzz-wav-%ld.wav", (long)getpid());
    FILE *f = fopen(path, "wb");
    if (!f)
        abort();
    if (size && fwrite(data, 1, size, f) != size)
        abort();
    fclose(f);
    tf_capture *cap = NULL;
    tf_error err;
    tf_status st = tf_import_wav(path, NULL, &cap, &err);
    if (st != TF_OK) {
        if (cap || (st != TF_ERR_DATA && st != TF_ERR_NOMEM) || !strstr(err.msg, path))
            abort();
        return 0;
    }
    if (!cap || cap->n == 0 || cap->nchan == 0 || !(cap->dt_s > 0))
        abort();
    tf_capture_compute_stats(cap);
    json_t *j = tf_capture_to_json(cap);
    if (!j)
        abort();
    json_decref(j);
    tf_capture_destroy(cap);
    return 0;
}
