/* Short bench designs and simulated captures for the check, record and report tests. */
#include "check_samples.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "tf_test.h"
#include <tankfit/tankfit.h>

static int same_key(const char *line, const char *change)
{
    size_t n = strcspn(change, " =");
    return strncmp(line, change, n) == 0 && (line[n] == ' ' || line[n] == '=');
}

void tf_check_test_sample(const char *dir, const char *name, const char *const *changes,
                          char *design, char *capture)
{
    char *text = tf_test_slurp(tf_test_src("samples/ih-hb-2207-pass.ini"), NULL);
    assert_non_null(text);
    size_t cap = strlen(text) + 4096;
    char *out = malloc(cap);
    assert_non_null(out);
    out[0] = 0;
    for (char *line = strtok(text, "\n"); line; line = strtok(NULL, "\n")) {
        const char *use = line;
        if (strncmp(line, "duration", 8) == 0)
            use = "duration = 1 ms";
        for (size_t k = 0; changes && changes[k]; k++)
            if (same_key(line, changes[k]))
                use = changes[k];
        strcat(out, use);
        strcat(out, "\n");
    }
    snprintf(design, 4096, "%s/%s.ini", dir, name);
    snprintf(capture, 4096, "%s/%s.csv", dir, name);
    assert_int_equal(tf_test_write(design, out), 0);
    free(out);
    free(text);
    tf_design *d = malloc(sizeof *d);
    assert_non_null(d);
    tf_error err;
    if (tf_design_load(design, d, &err) != TF_OK)
        fail_msg("%s", err.msg);
    if (tf_synth_write(d, capture, NULL, 1, &err) != TF_OK)
        fail_msg("%s", err.msg);
    free(d);
}
