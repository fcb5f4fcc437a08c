/* Design files: PLACEHOLDER until the parser lands; reports itself unavailable. */
#include <tankfit/design.h>

#include <math.h>
#include <string.h>

void tf_design_init(tf_design *d) { memset(d, 0, sizeof *d); }
tf_status tf_design_load(const char *path, tf_design *d, tf_error *err)
{
    (void)d;
    return tf_error_set(err, TF_ERR_UNAVAILABLE, "%s: design files are not supported yet", path);
}
tf_status tf_design_parse(const char *text, size_t len, const char *name, tf_design *d,
                          tf_error *err)
{
    (void)text; (void)len; (void)d;
    return tf_error_set(err, TF_ERR_UNAVAILABLE, "%s: design files are not supported yet", name);
}
const char *tf_synth_channel_name(tf_synth_channel c)
{
    static const char *const n[] = {"i_load", "v_out", "v_c", "v_ak1", "g1", "g2", "g3", "g4"};
    return (unsigned)c < TF_SYN_NCHAN ? n[c] : "?";
}
