/* Segmenter internals shared by src/segment*.c: excursions, runs, boundaries, models. */
#ifndef TF_SEGMENT_INTERNAL_H
#define TF_SEGMENT_INTERNAL_H

#include <stddef.h>
#include <tankfit/segment.h>

/* Default hysteresis band in noise sigmas (docs/segmenter.md explains the choice). */
#define SEG_BAND_K 4.0
/* rests (dead zones) for the noise estimate: |i| within this fraction of the peak */
#define SEG_QUIET_FRACTION 0.1

/* Records at least this long are scanned, fitted and measured on two threads. */
#define SEG_THREAD_SAMPLES 2000000

/* A maximal stretch of samples outside the band on one side: [i0, i1] inclusive. */
typedef struct seg_exc {
    size_t i0, i1, ipk;
    float pk;        /* largest |x| in the stretch */
    int sign;
} seg_exc;

/* How a run (a stretch of one sign between two boundaries) starts or ends. */
typedef enum {
    SEG_B_EDGE = 0,  /* capture start or end: the lobe is partial */
    SEG_B_DIRECT,    /* a zero crossing straight to the other sign */
    SEG_B_DEAD,      /* the current rests inside the band (dead zone) */
    SEG_B_TOUCH,     /* the current touches zero and returns with the same sign */
    SEG_B_FIRING     /* split of a same-sign stretch at the next firing (overlapping) */
} seg_bkind;

typedef struct seg_run {
    size_t i0, i1;          /* first and last out-of-band samples */
    int sign;
    size_t ipk;
    float pk;
    double t_start, t_end;  /* boundaries, in sample-index units (fractional) */
    seg_bkind k_start, k_end;
    int start_model, end_model;
} seg_run;

/* Growable array of fixed-size items (amortised doubling: no per-sample allocation). */
typedef struct seg_vec {
    void *data;
    size_t n, cap, size;
} seg_vec;

void seg_vec_init(seg_vec *v, size_t item_size);
void *seg_vec_push(seg_vec *v);   /* NULL when out of memory */
void seg_vec_free(seg_vec *v);

/* Clipped stretches of the current, [i0, i1] inclusive. */
typedef struct seg_clip {
    size_t i0, i1;     /* span excluded from fits (rail samples plus a margin) */
    size_t at;         /* samples sitting at the rail */
    float rail;        /* the extreme value */
} seg_clip;

/* Noise sigma from the median absolute deviation of first differences
 * (1.4826 * MAD / sqrt 2); a bounded, evenly spread subset keeps it O(1) in memory. */
double seg_noise_sigma(const float *x, size_t n);
/* Evenly spread sample pairs (x[k], x[k+1]) of the record, at most 32768, malloc'd
 * (*m pairs; NULL when n < 3 or out of memory). */
float *seg_quiet_pairs(const float *x, size_t n, size_t *m);
/* Robust noise sigma of the pairs whose two samples lie within +/-quiet of zero
 * (dead zones and rests); NAN when too few pairs are quiet. rest (may be NULL) gets
 * the median level of those samples (NAN then too). */
double seg_quiet_sigma(const float *pairs, size_t m, double quiet, double *rest);

/* Quantisation step visible in x (0 when none): the smallest non-zero difference
 * when most differences are whole multiples of it. */
double seg_lsb(const float *x, size_t n);

/* Stretches of samples sitting at the channel's extreme value (lo, hi: the channel's
 * minimum and maximum) at the top of a run, longer than a quantised (unclipped) peak
 * could stay flat. */
tf_status seg_find_clipping(const float *x, float lo, float hi, double lsb, const seg_vec *runs,
                            seg_vec *clips);

/* Everything the attribution stage needs besides the runs. */
typedef struct seg_input {
    const tf_capture *cap;
    const tf_roles *roles;
    const float *x;
    size_t n;
    double band;
    const seg_clip *clips;
    size_t nclips;
    const double *fire;     /* firing instants (index units of the current), sorted */
    const int *fire_gate;   /* gate index 0..3 of each firing */
    size_t nfire;
    int ngates;             /* gate channels with activity */
} seg_input;

/* Topology, devices, overlapping splits, bursts, cycles, mode, anomalies: fills r
 * (lobes, bursts, cycles, anomalies, timing, mode) from the runs. */
tf_status seg_attribute(const seg_input *in, seg_vec *runs, tf_topology topo,
                        tf_segment_result *r);

/* Refine the boundaries of every run with the damped-sine models (chains of pieces
 * sharing zeros; single switch: each lobe on its own with an offset term). */
void seg_refine_boundaries(const seg_input *in, seg_vec *runs, tf_topology topo);

/* Topology from the gates and the pattern of dead zones; ev receives the evidence. */
tf_topology seg_infer_topology(const seg_input *in, const seg_run *r, size_t nr, char *ev,
                               size_t evsize);

/* Pass over the samples: every excursion out of the band [-band, band]. */
tf_status seg_scan(const float *x, size_t n, double band, seg_vec *exc);

/* Excursions to runs: drop noise fragments, merge dips, classify each gap and put
 * rough sub-sample boundaries (index units). lsb: the quantisation step (0: none). */
tf_status seg_runs_from_excursions(const float *x, size_t n, double band, double lsb,
                                   const seg_vec *exc,
                                   seg_vec *runs);

/* Least-squares line through x[a..b] (inclusive, index units); returns 0 and its
 * zero in *zero, or -1 when the slope is zero or the range too short. */
int seg_line_zero(const float *x, size_t a, size_t b, double *zero, double *slope);

/* Damped-sine model of one conduction piece near boundary t_b (index units):
 * x(k) = e^{-a tau} [(c1 + c3 tau) sin(w tau) + (c2 + c4 tau) cos(w tau)], tau = k - t_b,
 * fitted by linear least squares over samples [k0, k1] outside clipped stretches,
 * with priors w (rad/sample) and a (1/sample); the first-order terms c3, c4 absorb
 * errors of the priors; offset adds c5 + c6 tau / (k1 - k0) (a reset choke's slow
 * current). On success *zero is the full model's zero nearest t_b. */
int seg_model_zero(const float *x, size_t k0, size_t k1, const seg_clip *clips, size_t nclips,
                   double t_b, double w, double a, int offset, double *zero);

/* A chain of np conduction pieces that share their zeros: piece p spans
 * [ts + p pi/w, ts + (p+1) pi/w) and is A_p e^{-a tau} sin(w tau), tau = k - ts (index
 * units), as when every piece starts from zero under a constant drive (a burst of a
 * thyristor lobe and its diode lobe, or a ring-down). Least squares over [k0, k1]
 * outside clipped stretches by Gauss-Newton on ts, w, a with the amplitudes linear.
 * amp0 (np values, may be NULL) are prior amplitudes; *ts, *w, *a hold the priors and
 * receive the fit; ts_only holds w and a (Gauss-Newton on ts and the amplitudes alone,
 * for bursts after a full fit: on a clean chain iterated to convergence from one pass
 * over the samples, else stopped after a step under SEG_QUICK_ONE_STEP). Returns 0 on
 * success. */
int seg_chain_fit(const float *x, size_t k0, size_t k1, const seg_clip *clips, size_t nclips,
                  size_t np, const double *amp0, int ts_only, double *ts, double *w, double *a);

/* Split a same-sign stretch [k0, k1] holding the end of a diode piece (which started
 * at zero at z0) and the start of the next thyristor piece (which ends at zero at
 * z1): the split that minimises the residual of the two damped-sine pieces. Unless
 * fixed, w and a (in/out; w <= 0: searched from scratch) are fitted with it (GSL
 * Nelder-Mead). Returns 0 and *split (index units). */
int seg_split_pieces(const float *x, size_t k0, size_t k1, double z0, double z1, double *w,
                     double *a, int fixed, double *split);

/* The same split for a stretch cut by the record's end (k1): the thyristor piece's zero
 * lies past it and is searched; w and a (> 0: known) are held. Returns 0 and *split. */
int seg_split_open(const float *x, size_t k0, size_t k1, double z0, double w, double a,
                   double *split);

#endif
