/* Simulator output: runs the engine block by block through the scope model into a file or memory. */
#include <tankfit/synth_output.h>

#include <stdlib.h>
#include <string.h>
#include <unistd.h>

#include "synth_write.h"

#define BLOCK 8192

void tf_synth_write_options_init(tf_synth_write_options *o) { memset(o, 0, sizeof *o); }

tf_status tf_synth_write(const tf_design *d, const char *out_path, const char *truth_path,
                         int overwrite, tf_error *err)
{
    tf_synth_write_options o;
    tf_synth_write_options_init(&o);
    o.overwrite = overwrite;
    return tf_synth_write_opts(d, out_path, truth_path, &o, err);
}

/* One block of samples k0 .. k0 + m - 1 of every planned channel into dst[i]. */
static tf_status fill_block(tf_synth *s, tf_sw_plan *p, size_t k0, size_t m, float *const dst[],
                            tf_error *err)
{
    float *out[TF_SYN_NCHAN] = {0};
    for (size_t i = 0; i < p->nchan; i++)
        out[p->chan[i]] = dst[i];
    tf_status st = tf_synth_fill(s, p->t0_s + (double)k0 * p->dt_s, p->dt_s, m, p->skew_s, out,
                                 err);
    if (st != TF_OK)
        return st;
    for (size_t i = 0; i < p->nchan; i++)
        tf_sw_scope_apply(&p->scope[i], dst[i], m);
    return TF_OK;
}

/* The engine's truth plus a "capture" object about the samples written. */
static json_t *truth_of(tf_synth *s, const tf_sw_plan *p, const tf_design *d, tf_error *err)
{
    json_t *t = tf_synth_truth(s, err);
    if (!t)
        return NULL;
    if (!json_is_object(t)) {
        json_decref(t);
        tf_error_set(err, TF_ERR_INTERNAL, "simulator truth is not a JSON object");
        return NULL;
    }
    json_object_set_new(t, "capture", tf_sw_plan_json(p, d));
    return t;
}

typedef struct outputs {
    tf_sw_file data, sidecar, truth;
    tf_sw_csv *csv;
    tf_sw_wav *wav;
} outputs;

static void outputs_abort(outputs *o)
{
    tf_sw_csv_finish(o->csv, NULL);
    tf_sw_wav_finish(o->wav, NULL);
    o->csv = NULL;
    o->wav = NULL;
    tf_sw_file_abort(&o->data);
    tf_sw_file_abort(&o->sidecar);
    tf_sw_file_abort(&o->truth);
}

static tf_status outputs_open(outputs *o, const tf_sw_plan *p, const char *out_path,
                              const char *truth_path, int overwrite, tf_error *err)
{
    char side[4096 + 16];
    snprintf(side, sizeof side, "%s.tfscale", out_path);
    /* refuse before any work when a target exists */
    tf_status st = tf_sw_file_check(out_path, overwrite, err);
    if (st == TF_OK && p->wav)
        st = tf_sw_file_check(side, overwrite, err);
    if (st == TF_OK && truth_path)
        st = tf_sw_file_check(truth_path, overwrite, err);
    if (st == TF_OK && truth_path && strcmp(truth_path, out_path) == 0)
        st = tf_error_set(err, TF_ERR_USAGE, "--truth: '%s' is also the capture output", truth_path);
    if (st == TF_OK)
        st = tf_sw_file_open(&o->data, out_path, overwrite, err);
    if (st == TF_OK && p->wav)
        st = tf_sw_file_open(&o->sidecar, side, overwrite, err);
    if (st == TF_OK && truth_path)
        st = tf_sw_file_open(&o->truth, truth_path, overwrite, err);
    if (st != TF_OK)
        return st;
    if (p->wav)
        o->wav = tf_sw_wav_create(&o->data, &p->lay, err);
    else
        o->csv = tf_sw_csv_create(&o->data, &p->lay, err);
    return (o->wav || o->csv) ? TF_OK : err->code;
}

static tf_status write_truth_and_sidecar(outputs *o, tf_synth *s, const tf_sw_plan *p,
                                         const tf_design *d, int want_truth, tf_error *err)
{
    tf_status st = TF_OK;
    if (p->wav) {
        char *text = tf_sw_sidecar_text(&p->lay);
        if (!text)
            return tf_error_set(err, TF_ERR_NOMEM, "out of memory for the sidecar");
        st = tf_sw_file_write(&o->sidecar, text, strlen(text), err);
        free(text);
    }
    if (st == TF_OK && want_truth) {
        json_t *t = truth_of(s, p, d, err);
        if (!t)
            return err->code ? err->code : TF_ERR_INTERNAL;
        char *text = json_dumps(t, JSON_INDENT(2) | JSON_REAL_PRECISION(17));
        json_decref(t);
        if (!text)
            return tf_error_set(err, TF_ERR_NOMEM, "out of memory for the truth JSON");
        st = tf_sw_file_write(&o->truth, text, strlen(text), err);
        if (st == TF_OK)
            st = tf_sw_file_write(&o->truth, "\n", 1, err);
        free(text);
    }
    return st;
}

static tf_status stream(outputs *o, tf_synth *s, tf_sw_plan *p,
                        const tf_synth_write_options *opt, float *const blk[], tf_error *err)
{
    for (size_t k0 = 0; k0 < p->n; k0 += BLOCK) {
        size_t m = p->n - k0 < BLOCK ? p->n - k0 : BLOCK;
        tf_status st = fill_block(s, p, k0, m, blk, err);
        if (st == TF_OK)
            st = o->wav ? tf_sw_wav_write(o->wav, (const float *const *)blk, m, err)
                        : tf_sw_csv_write(o->csv, k0, (const float *const *)blk, m, err);
        if (st != TF_OK)
            return st;
        if (opt->progress)
            opt->progress(opt->progress_ctx, (double)(k0 + m) / (double)p->n);
    }
    return TF_OK;
}

tf_status tf_synth_write_opts(const tf_design *d, const char *out_path, const char *truth_path,
                              const tf_synth_write_options *opt, tf_error *err)
{
    tf_error local;
    if (!err)
        err = &local;
    tf_synth_write_options defaults;
    tf_synth_write_options_init(&defaults);
    if (!opt)
        opt = &defaults;
    tf_error_clear(err);
    if (!d || !out_path)
        return tf_error_set(err, TF_ERR_USAGE, "tf_synth_write: a design and an output path "
                            "are required");
    int known, wav = tf_sw_ext_format(out_path, &known);
    if (opt->format)
        wav = opt->format == 2;
    else if (!known)
        wav = d->format_wav != 0;
    tf_sw_plan plan;
    tf_status st = tf_sw_plan_make(d, opt->noiseless, wav, &plan, err);
    if (st != TF_OK)
        return st;
    outputs o;
    memset(&o, 0, sizeof o);
    o.data.fd = o.sidecar.fd = o.truth.fd = -1;
    float *blk[TF_SW_MAXCHAN] = {0};
    float *mem = malloc(sizeof(float) * BLOCK * plan.nchan);
    if (!mem)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory for the sample blocks");
    for (size_t i = 0; i < plan.nchan; i++)
        blk[i] = mem + i * BLOCK;
    tf_synth *s = tf_synth_create(d, err);
    st = s ? outputs_open(&o, &plan, out_path, truth_path, opt->overwrite, err)
           : (err->code ? err->code : TF_ERR_INTERNAL);
    if (st == TF_OK)
        st = stream(&o, s, &plan, opt, blk, err);
    if (st == TF_OK)
        st = o.wav ? tf_sw_wav_finish(o.wav, err) : tf_sw_csv_finish(o.csv, err);
    o.wav = NULL;
    o.csv = NULL;
    if (st == TF_OK)
        st = write_truth_and_sidecar(&o, s, &plan, d, truth_path != NULL, err);
    /* every output is complete: move them into place, the capture last; should a later
     * one fail (a file appeared meanwhile), the ones this run just created go again */
    int truth_done = 0, side_done = 0;
    if (st == TF_OK && truth_path && (st = tf_sw_file_commit(&o.truth, err)) == TF_OK)
        truth_done = 1;
    if (st == TF_OK && plan.wav && (st = tf_sw_file_commit(&o.sidecar, err)) == TF_OK)
        side_done = 1;
    if (st == TF_OK)
        st = tf_sw_file_commit(&o.data, err);
    if (st != TF_OK) {
        outputs_abort(&o);
        if (!opt->overwrite && truth_done)
            unlink(o.truth.path);
        if (!opt->overwrite && side_done)
            unlink(o.sidecar.path);
    }
    free(mem);
    tf_synth_destroy(s);
    return st;
}

tf_status tf_synth_to_capture(const tf_design *d, int noiseless, tf_capture **out, json_t **truth,
                              tf_error *err)
{
    tf_error local;
    if (!err)
        err = &local;
    if (!out)
        return tf_error_set(err, TF_ERR_USAGE, "tf_synth_to_capture: out is required");
    *out = NULL;
    if (truth)
        *truth = NULL;
    tf_error_clear(err);
    if (!d)
        return tf_error_set(err, TF_ERR_USAGE, "tf_synth_to_capture: a design is required");
    tf_sw_plan plan;
    tf_status st = tf_sw_plan_make(d, noiseless, 0, &plan, err);
    if (st != TF_OK)
        return st;
    tf_capture *cap = tf_capture_create();
    if (!cap)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory for a capture");
    st = tf_capture_alloc(cap, plan.nchan, plan.n, err);
    tf_synth *s = st == TF_OK ? tf_synth_create(d, err) : NULL;
    if (st == TF_OK && !s)
        st = err->code ? err->code : TF_ERR_INTERNAL;
    if (st == TF_OK) {
        cap->t0_s = plan.t0_s;
        cap->dt_s = plan.dt_s;
        snprintf(cap->dialect.format, sizeof cap->dialect.format, "synth");
        for (size_t i = 0; i < plan.nchan; i++) {
            snprintf(cap->ch[i].name, sizeof cap->ch[i].name, "%s", plan.lay.name[i]);
            snprintf(cap->ch[i].unit, sizeof cap->ch[i].unit, "%s", plan.lay.unit[i]);
        }
    }
    for (size_t k0 = 0; st == TF_OK && k0 < plan.n; k0 += BLOCK) {
        size_t m = plan.n - k0 < BLOCK ? plan.n - k0 : BLOCK;
        float *dst[TF_SW_MAXCHAN];
        for (size_t i = 0; i < plan.nchan; i++)
            dst[i] = cap->ch[i].samples + k0;
        st = fill_block(s, &plan, k0, m, dst, err);
    }
    if (st == TF_OK && truth) {
        *truth = truth_of(s, &plan, d, err);
        if (!*truth)
            st = err->code ? err->code : TF_ERR_INTERNAL;
    }
    tf_synth_destroy(s);
    if (st != TF_OK) {
        tf_capture_destroy(cap);
        return st;
    }
    *out = cap;
    return TF_OK;
}
