/* Track: the tank burst by burst through a heating run (R_eff, L_eff or C, fd, Q, peak),
 * the workpiece's reflected resistance, and abrupt changes found by PELT. */
#ifndef TANKFIT_TRACK_H
#define TANKFIT_TRACK_H

#include <stddef.h>
#include <jansson.h>
#include <tankfit/error.h>
#include <tankfit/fit.h>

#ifdef __cplusplus
extern "C" {
#endif

/* One burst (NAN where not available). */
typedef struct tf_track_row {
    size_t burst;              /* index into the segmenter's bursts */
    double time_s;             /* burst start */
    int ok;                    /* fitted and used (else see status) */
    tf_fitb_status status;
    double r_eff_ohm, u_r_eff_ohm;
    double l_eff_h;            /* when C is known (or from v-i) */
    double c_f;                /* when L is known (or from v-i) */
    double fd_hz, q, peak_a;
    double r_w_ohm;            /* R_eff - R_coil (when R_coil is known) */
    double efficiency;         /* R_w / R_eff */
} tf_track_row;

/* One abrupt change: between rows index-1 and index (both ok rows). Sizes are the
 * jumps of the two segments' fitted lines at the change. */
typedef struct tf_track_change {
    size_t index;              /* first row after the change */
    double time_s;             /* that row's time */
    double r_before_ohm, r_after_ohm, r_step_ohm;
    double fd_before_hz, fd_after_hz, fd_step_hz;
    double duration_s;         /* 0 for a jump between two bursts; else the time a short
                                  steep transition took (before/after at its two ends) */
    int step;                  /* non-zero: a jump (R by > 4 sigma and > 2 %, or fd by > 4 sigma
                                  and > 0.5 %); else a change of trend or a minor change */
} tf_track_change;

typedef struct tf_track_result {
    tf_track_row *rows;        size_t nrows;
    tf_track_change *changes;  size_t nchanges;
    size_t rows_ok;
    double r_coil_ohm;         /* NAN when unknown */
    char r_source[32];         /* "ring-down+drops", "ring-down", "v-i" */
    double sigma_r_ohm, sigma_fd_hz; /* burst-to-burst noise (robust, first differences) */
    double penalty;            /* PELT penalty used, in units of the noise variance */
} tf_track_result;

/* Build the track from a fit (tf_fit_run over the capture's bursts). R_eff is the
 * ring-down R when C or L was known, else the burst's v-i R. r_coil_ohm (NAN when
 * unknown) gives R_w and the efficiency. Changes are searched jointly in R_eff and
 * fd by PELT (Killick, Fearnhead and Eckley 2012) with a piecewise-linear cost in
 * units of each series' noise variance and the penalty (0: default Schwarz
 * criterion, (2 m + 1) ln n for m = 2 series). Errors: TF_ERR_DATA when no burst
 * has an R_eff (neither C, L nor a voltage channel), TF_ERR_NOMEM. *out is owned by
 * the caller (tf_track_free). */
tf_status tf_track_build(const tf_fit_result *fit, double r_coil_ohm, double penalty,
                         tf_track_result **out, tf_error *err);
void tf_track_free(tf_track_result *t);   /* NULL is a no-op */

/* PELT change points of m series x[s][0..n-1] (each already divided by its noise
 * sigma) with a least-squares straight-line cost per segment, penalty beta per
 * change, segments of at least min_seg points (>= 3). The change indices (first
 * point of each new segment, ascending) go to *cps (malloc'd, caller frees), their
 * count to *ncp. Errors: TF_ERR_USAGE, TF_ERR_NOMEM. */
tf_status tf_changepoints_pelt(const double *const *x, size_t m, size_t n, double beta,
                               size_t min_seg, size_t **cps, size_t *ncp, tf_error *err);

/* JSON: {"rows": [...], "changes": [...], "r_coil_ohm", "r_source", "sigma_r_ohm",
 * "sigma_fd_hz", "penalty", "rows_ok"} (docs/fit.md). New reference. */
json_t *tf_track_to_json(const tf_track_result *t);

#ifdef __cplusplus
}
#endif
#endif
