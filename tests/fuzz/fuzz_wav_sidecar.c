/* libFuzzer harness for the .tfscale sidecar parser: any bytes give TF_OK with
 * sane entries or a data error naming the file, never a crash or a leak. */
#include <math.h>
#include <stdint.h>
#include <stdlib.h>
#include <string.h>

#include "../../src/wav_sidecar.h" /* private parser, in the instrumented library */

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size < 1)
        return 0;
    size_t nchan = 1 + data[0] % 8;
    tf_wav_sidecar sc;
    tf_error err;
    tf_status st = tf_wav_sidecar_parse((const char *)data + 1, size - 1, "fuzz.tfscale", nchan,
                                        &sc, &err);
    if (st != TF_OK) {
        if (st != TF_ERR_DATA || strncmp(err.msg, "fuzz.tfscale:", 13) != 0 || sc.ch)
            abort();
        return 0;
    }
    if (sc.n > nchan)
        abort();
    for (size_t k = 0; k < sc.n; k++) {
        const tf_wav_scale *e = &sc.ch[k];
        if (!e->name[0] || strlen(e->name) >= TF_NAME_SIZE || strpbrk(e->name, ",= \t#"))
            abort();
        if (!(e->full_scale >= 0) || !isfinite(e->full_scale) || !isfinite(e->skew_s))
            abort();
        for (size_t j = 0; j < k; j++)
            if (strcmp(sc.ch[j].name, e->name) == 0)
                abort();
    }
    if (sc.t0_known && !isfinite(sc.t0_s))
        abort();
    tf_wav_sidecar_free(&sc);
    return 0;
}
