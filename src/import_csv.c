/* CSV importer: PLACEHOLDER until the importer lands. */
#include <tankfit/import.h>

tf_status tf_import_csv(const char *path, const tf_import_options *opt, tf_capture **out,
                        tf_error *err)
{
    (void)opt;
    *out = NULL;
    return tf_error_set(err, TF_ERR_UNAVAILABLE, "%s: CSV import is not built yet", path);
}
