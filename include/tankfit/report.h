/* The acceptance report: one self-contained HTML file (inline CSS and SVG, no
 * scripts, no network) for screen and A4 print. Layout: docs/report.md. */
#ifndef TANKFIT_REPORT_H
#define TANKFIT_REPORT_H

#include <stddef.h>
#include <tankfit/analysis.h>
#include <tankfit/capture.h>
#include <tankfit/check.h>
#include <tankfit/design.h>
#include <tankfit/error.h>

#ifdef __cplusplus
extern "C" {
#endif

/* One checked capture. */
typedef struct tf_report_capture {
    const char *path;              /* as given on the command line */
    const char *sha256;            /* 64 hex digits */
    unsigned long long bytes;      /* file size */
    const tf_capture *cap;         /* required */
    const tf_analysis *an;         /* required */
    const tf_check_result *checks; /* required */
    const tf_analysis *expected;   /* design-expected analysis, or NULL */
} tf_report_capture;

/* Facts of the run (strings may be NULL or ""). */
typedef struct tf_report_info {
    const char *unit_serial, *operator_name, *test_id, *notes;
    const char *time_utc;          /* "2026-12-02T01:30:05Z" */
    const char *tool_version;
    const char *design_path, *design_sha256;
    const tf_design *design;       /* required */
    const char *record_name;       /* file name of the JSON record of this run */
    const char *expected_note;     /* why there are no design-expected values, or NULL */
    tf_verdict overall;
} tf_report_info;

/* Build the report of ncaps (>= 1) captures. *html receives a malloc'd
 * NUL-terminated text (caller frees) of *len bytes. Waveforms are min/max
 * decimated to the plot width, so the size does not grow with the capture length
 * (about 0.3 MB per capture). Errors: TF_ERR_USAGE (missing input), TF_ERR_NOMEM. */
tf_status tf_report_html(const tf_report_info *info, const tf_report_capture *caps,
                         size_t ncaps, char **html, size_t *len, tf_error *err);

#ifdef __cplusplus
}
#endif
#endif
