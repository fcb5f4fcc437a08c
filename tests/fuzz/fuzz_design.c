/* libFuzzer harness for design files: any bytes give TF_OK or an error naming the
 * file, never a crash, a leak or undefined behaviour; what parses also validates
 * and converts to JSON, and parses to the same design when fed back in. */
#include <stdint.h>
#include <stdlib.h>
#include <string.h>
#include <tankfit/design.h>

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    static tf_design d, again;
    tf_error err;
    tf_status st = tf_design_parse((const char *)data, size, "fuzz.ini", &d, &err);
    if (st != TF_OK) {
        /* every failure is a data error that names the file */
        if (st != TF_ERR_DATA || strncmp(err.msg, "fuzz.ini", 8) != 0)
            abort();
        return 0;
    }
    tf_design_validate(&d, 1, &err);
    tf_design_validate(&d, 0, &err);
    json_t *j = tf_design_to_json(&d);
    if (!j)
        abort();
    char *s = json_dumps(j, JSON_COMPACT);
    if (!s) /* invalid UTF-8 or a non-finite number would fail here */
        abort();
    free(s);
    json_decref(j);
    /* parsing is deterministic */
    if (tf_design_parse((const char *)data, size, "fuzz.ini", &again, &err) != TF_OK ||
        memcmp(&d, &again, sizeof d) != 0)
        abort();
    return 0;
}
