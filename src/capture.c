/* The capture container: allocation, metadata, warnings, lookup and statistics. */
#include <tankfit/capture.h>

#include <pthread.h>
#include <stdarg.h>
#include <stdint.h>
#include <stdatomic.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <unistd.h>

tf_capture *tf_capture_create(void)
{
    tf_capture *cap = calloc(1, sizeof *cap);
    if (cap) {
        cap->dt_s = 1.0;
        cap->dialect.time_column = -1;
    }
    return cap;
}

static void free_channels(tf_capture *cap)
{
    for (size_t c = 0; c < cap->nchan; c++)
        free(cap->ch[c].samples);
    free(cap->ch);
    cap->ch = NULL;
    cap->nchan = 0;
}

static void free_lines(char **lines, size_t n)
{
    for (size_t i = 0; i < n; i++)
        free(lines[i]);
    free(lines);
}

void tf_capture_destroy(tf_capture *cap)
{
    if (!cap)
        return;
    free_channels(cap);
    free_lines(cap->metadata, cap->nmeta);
    free_lines(cap->warnings, cap->nwarn);
    free(cap);
}

tf_status tf_capture_alloc(tf_capture *cap, size_t nchan, size_t n, tf_error *err)
{
    free_channels(cap);
    cap->n = 0;
    if (nchan == 0)
        return TF_OK;
    cap->ch = calloc(nchan, sizeof *cap->ch);
    if (!cap->ch)
        return tf_error_set(err, TF_ERR_NOMEM, "out of memory for %zu channels", nchan);
    cap->nchan = nchan;
    for (size_t c = 0; c < nchan; c++) {
        cap->ch[c].scale = 1.0;
        snprintf(cap->ch[c].name, sizeof cap->ch[c].name, "col%zu", c + 1);
        cap->ch[c].samples = malloc((n ? n : 1) * sizeof(float));
        if (!cap->ch[c].samples) {
            free_channels(cap);
            return tf_error_set(err, TF_ERR_NOMEM, "out of memory for %zu samples x %zu channels",
                                n, nchan);
        }
    }
    cap->n = n;
    return TF_OK;
}

tf_status tf_capture_truncate(tf_capture *cap, size_t n, tf_error *err)
{
    if (n > cap->n)
        return tf_error_set(err, TF_ERR_INTERNAL, "truncate to %zu > %zu samples", n, cap->n);
    return tf_capture_resize(cap, n, err);
}

tf_status tf_capture_resize(tf_capture *cap, size_t n, tf_error *err)
{
    if (n > SIZE_MAX / sizeof(float))
        return tf_error_set(err, TF_ERR_NOMEM, "%zu samples do not fit in memory", n);
    for (size_t c = 0; c < cap->nchan; c++) {
        float *p = realloc(cap->ch[c].samples, (n ? n : 1) * sizeof(float));
        if (p)
            cap->ch[c].samples = p;
        else if (n > cap->n) /* a failed shrink keeps the larger block, which is harmless */
            return tf_error_set(err, TF_ERR_NOMEM, "out of memory for %zu samples x %zu "
                                "channels", n, cap->nchan);
    }
    cap->n = n;
    return TF_OK;
}

static tf_status push_line(char ***lines, size_t *count, const char *text, size_t len)
{
    char **grown = realloc(*lines, (*count + 1) * sizeof **lines);
    if (!grown)
        return TF_ERR_NOMEM;
    *lines = grown;
    char *copy = malloc(len + 1);
    if (!copy)
        return TF_ERR_NOMEM;
    memcpy(copy, text, len);
    copy[len] = '\0';
    grown[(*count)++] = copy;
    return TF_OK;
}

tf_status tf_capture_add_metadata(tf_capture *cap, const char *line, size_t len)
{
    return push_line(&cap->metadata, &cap->nmeta, line, len);
}

tf_status tf_capture_add_warning(tf_capture *cap, const char *fmt, ...)
{
    char buf[512];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(buf, sizeof buf, fmt, ap);
    va_end(ap);
    return push_line(&cap->warnings, &cap->nwarn, buf, strlen(buf));
}

int tf_capture_find(const tf_capture *cap, const char *name)
{
    for (size_t c = 0; c < cap->nchan; c++)
        if (strcmp(cap->ch[c].name, name) == 0)
            return (int)c;
    return -1;
}

#define STATS_THREADS_MAX 8
#define STATS_THREAD_SAMPLES ((size_t)1 << 20) /* shorter channels: one thread */

typedef struct stats_job {
    tf_capture *cap;
    atomic_size_t next; /* the next channel to take */
} stats_job;

static void *stats_worker(void *arg)
{
    stats_job *j = arg;
    for (size_t c; (c = atomic_fetch_add(&j->next, 1)) < j->cap->nchan;) {
        tf_stats_compute(j->cap->ch[c].samples, j->cap->n, &j->cap->ch[c].stats);
        j->cap->ch[c].stats_valid = 1;
    }
    return NULL;
}

/* Channels are independent: long ones are shared out over the cores, each channel
 * computed whole by one thread, so the figures do not depend on the thread count. */
void tf_capture_compute_stats(tf_capture *cap)
{
    if (cap->n == 0)
        return;
    stats_job j = {cap, 0};
    long cpus = sysconf(_SC_NPROCESSORS_ONLN);
    size_t want = cap->n >= STATS_THREAD_SAMPLES && cpus > 1 ? (size_t)cpus : 1;
    if (want > cap->nchan)
        want = cap->nchan;
    if (want > STATS_THREADS_MAX)
        want = STATS_THREADS_MAX;
    pthread_t th[STATS_THREADS_MAX];
    size_t started = 0;
    while (started + 1 < want && pthread_create(&th[started], NULL, stats_worker, &j) == 0)
        started++;
    stats_worker(&j);
    for (size_t t = 0; t < started; t++)
        pthread_join(th[t], NULL);
}
