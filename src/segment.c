/* Segmenter: PLACEHOLDER until the segmenter lands; reports itself unavailable. */
#include <tankfit/segment.h>

#include <stdlib.h>

void tf_segment_options_init(tf_segment_options *o) { o->topology = TF_TOPO_UNKNOWN; o->band_k = 0; }
tf_status tf_segment_run(const tf_capture *cap, const tf_roles *roles,
                         const tf_segment_options *opt, tf_segment_result **out, tf_error *err)
{
    (void)cap; (void)roles; (void)opt;
    *out = NULL;
    return tf_error_set(err, TF_ERR_UNAVAILABLE, "the segmenter is not built yet");
}
void tf_segment_free(tf_segment_result *r) { free(r); }
json_t *tf_segment_to_json(const tf_segment_result *r) { (void)r; return json_object(); }
