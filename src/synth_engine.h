/* Simulator engine internals: closed-form interval models, segments, engine state. */
#ifndef TF_SYNTH_ENGINE_H
#define TF_SYNTH_ENGINE_H

#include <complex.h>
#include <stddef.h>
#include <tankfit/synth.h>

/* ---- closed-form series R-L-C driven by a constant level E ---------------------------- */

/* Damping regime of a 2-state model. */
enum { TF_RLC_UNDER = -1, TF_RLC_CRITICAL = 0, TF_RLC_OVER = 1 };

/* L di/dt = E - R i - vc,  C dvc/dt = i. alpha = R / 2L, w0 = 1 / sqrt(LC),
 * wd = sqrt(w0^2 - alpha^2) (underdamped) or beta = sqrt(alpha^2 - w0^2) (over). */
typedef struct tf_rlc2 {
    double L, R, C, E;
    double alpha, w0, w; /* w: wd when underdamped, beta when overdamped, 0 critical */
    int regime;
} tf_rlc2;

void tf__rlc2_init(tf_rlc2 *m, double L, double R, double C, double E);

/* exp(-alpha tau) C(tau) and exp(-alpha tau) S(tau), the two fundamental solutions
 * with C(0) = 1, C'(0) = 0, S(0) = 0, S'(0) = 1 (cos/sin/wd, cosh/sinh/beta or 1/tau),
 * in forms that stay accurate and continuous through critical damping. */
void tf__rlc2_basis(const tf_rlc2 *m, double tau, double *ec, double *es);

/* State at tau >= 0 from (i0, vc0) at tau = 0. */
void tf__rlc2_eval(const tf_rlc2 *m, double i0, double vc0, double tau, double *i, double *vc);

/* First tau > 0 where u(tau) = exp(-alpha tau) (u0 C + k S) is zero (INFINITY if none).
 * For the current, u0 = i0 and k = (E - vc0) / L - alpha i0. */
double tf__rlc2_first_zero(const tf_rlc2 *m, double u0, double k);

/* ---- segments: spans of constant dynamics ---------------------------------------------- */

enum { TF_CS_NONE = -1 };           /* conduction state: -1 or 2 * position + kind */
enum { TF_K_THY = 0, TF_K_DIODE = 1 };

enum {
    TF_MODEL_REST = 0, /* i = 0, vc constant */
    TF_MODEL_TANK,     /* 2-state tank (L, R, C, E) */
    TF_MODEL_CHOKE,    /* single, no conduction: C rings with the reset choke (i = 0) */
    TF_MODEL_TANK3     /* single, conducting: tank + reset choke, 3 states */
};

typedef struct tf_seg {
    double t0, t1;    /* span [t0, t1] */
    int cs;           /* conduction state */
    int model;
    double E;         /* drive level of the tank (the output voltage while conducting) */
    double L, R;      /* tank values in force */
    double x0[3];     /* i, vc, i_choke at t0 */
    tf_rlc2 m;        /* TANK: tank; CHOKE: (Lr, Rr, C, 0) with current -i_choke */
    double A[9], xp[3]; /* TANK3: dx/dt = A (x - xp) */
    int ev, ev_arg;   /* what ends the segment (TF_EV_*) and its position or threshold */
    int nmodes;       /* TANK3 with a modal form: x = xp + sum_m coef[r][m] exp(lam_m tau) */
    double complex lam[3], coef[3][3];
} tf_seg;

enum { TF_EV_ZERO = 0, TF_EV_FIRE, TF_EV_THRESH, TF_EV_RESCAN, TF_EV_NONE };
enum { TF_TH_DIODE = 0, TF_TH_THYRISTOR, TF_TH_FORWARD };

/* State (i, vc, i_choke) and di/dt of the tank at absolute time t in seg. */
void tf__seg_state(const tf_seg *g, double t, double x[3], double *didt);

/* 3x3 propagator exp(A tau) of a TANK3 segment (row-major), via GSL. */
void tf__seg_prop3(const tf_seg *g, double tau, double P[9]);

/* Modal form of a TANK3 segment from GSL's eigen-decomposition (ws: a
 * gsl_eigen_nonsymmv workspace of size 3); kept only when it reproduces the matrix
 * exponential to 1e-12 at two check points, else g->nmodes = 0 (matrix exponential). */
void tf__seg_modal3(tf_seg *g, void *ws, double check_tau);

/* Exact 2x2 or 3x3 propagator of the deviation y = x - particular over a step h;
 * y_next = P y. For TANK: y = (i, vc - E); CHOKE: (i_choke, vc). Returns the dimension
 * (0 for REST). */
int tf__seg_step_matrix(const tf_seg *g, double h, double P[9]);

/* First tau in (0, win] with f(tau) changing sign from its sign just after 0, found by a
 * scan of step h and Brent refinement to 1e-13 s; INFINITY if none. */
typedef double (*tf__scalar_fn)(double tau, void *ctx);
double tf__first_crossing(tf__scalar_fn f, void *ctx, double win, double h);

/* ---- engine --------------------------------------------------------------------------- */

/* One thyristor conduction with the time it then had to turn off. */
typedef struct tf_synth_turnoff {
    int pos;             /* 0: T1 (or T1+T2), 1: T2 (or T3+T4) */
    int gated;           /* 1: started by a gate pulse; 0: re-conduction after a failure */
    double fire_s;       /* gate pulse start (NAN for re-conduction) */
    double start_s;      /* conduction start */
    double zero_s;       /* its current zero (NAN while conducting) */
    double forward_s;    /* forward voltage re-applied (NAN: not yet) */
    double reverse_end_s;/* anode-cathode voltage including stray L di/dt first >= 0 */
    int failed;          /* forward voltage back before t_q elapsed */
} tf_synth_turnoff;

/* Kinds of commutation failure. */
enum {
    TF_FAIL_RECONDUCTION = 0, /* forward voltage from the tank before t_q: conducts again */
    TF_FAIL_FORWARD,          /* forward voltage before t_q, too small to drive conduction */
    TF_FAIL_SHOOT_THROUGH,    /* opposite device fired before t_q: link short */
    TF_FAIL_FIRED_ON_CONDUCTING /* opposite device fired while this one conducts */
};

/* A commutation failure. */
typedef struct tf_synth_failure {
    double t_s;          /* when forward voltage returned (or the firing) */
    int pos;             /* thyristor that had not recovered */
    int kind;            /* TF_FAIL_* */
    double t_off_s;      /* time it had (< t_q), NAN for FIRED_ON_CONDUCTING */
} tf_synth_failure;

typedef struct tf_synth_accum tf_synth_accum; /* truth integrals (synth_truth.c) */

struct tf_synth {
    tf_design d;
    tf_topology topo;
    int npos;                    /* 1 (single, ring-down) or 2 (bridges) */
    double vdc, vt, vd, ls, tq, f, L, R, C, Lr, Rr, vref, gate_w;
    double E[2][2];              /* drive level per position and kind */
    int sgn[2][2];               /* current sign per position and kind */
    double t_begin;              /* simulation start (at rest before the first firing) */

    /* firing sequence */
    size_t next_fire;            /* index of the next firing not yet processed */

    /* segment history (deque) */
    tf_seg *seg;
    size_t seg_first, seg_count, seg_cap;
    double t_min_request;        /* earliest time callers may still ask for */
    double last_fill_t0;         /* t0 of the previous fill (-INFINITY before) */

    /* per position thyristor status */
    double t_zero[2];            /* last current zero of the thyristor (-INFINITY none) */
    long pending[2];             /* turnoff record awaiting forward voltage (-1 none) */
    long active[2];              /* turnoff record of the present conduction (-1 none) */
    double last_fire[2];         /* latest gate pulse start (-INFINITY none) */

    /* records */
    tf_synth_interval *iv;
    size_t niv, cap_iv;
    int iv_open;
    tf_synth_turnoff *to;
    size_t nto, cap_to;
    tf_synth_failure *fail;
    size_t nfail, cap_fail;
    double shoot_through_s;      /* first shoot-through (INFINITY none) */
    int nomem;

    tf_synth_accum *acc;         /* non-NULL while computing the truth */
    void *eig_ws;                /* single: gsl_eigen_nonsymmv workspace */
};

static inline double tf__or0(double v) { return v != v ? 0.0 : v; } /* NAN counts as 0 */

/* Check a design for the engine (messages name section and key). */
tf_status tf__check_design(const tf_design *d, tf_error *err);

/* Start of the latest gate pulse of pos at or before t (-INFINITY none). */
double tf__last_pulse(const tf_synth *s, int pos, double t);

/* Anode-cathode voltage of the thyristor at pos in conduction state cs, without the
 * stray L di/dt term. */
double tf__vak_static(const tf_synth *s, int pos, int cs, double vc);

/* Segment k of the kept history (0: oldest). */
static inline tf_seg *tf__seg_at(tf_synth *s, size_t k) { return &s->seg[s->seg_first + k]; }

/* Append a segment (NULL: out of memory); drop segments wholly before t_min_request. */
tf_seg *tf__seg_push(tf_synth *s);
void tf__seg_trim(tf_synth *s);

/* Fill g as the segment starting at t0 in conduction state cs from state x, with the
 * event that ends it. */
void tf__build_segment(tf_synth *s, tf_seg *g, double t0, int cs, const double x[3]);

/* Firing n of the sequence: time and position; 0 when there is none. */
int tf__firing(const tf_synth *s, size_t n, double *t, int *pos);

/* Gate of position pos high at t. */
int tf__gate_on(const tf_synth *s, int pos, double t);

/* Advance the simulation until a segment covers t. */
tf_status tf__advance(tf_synth *s, double t, tf_error *err);

/* Channel values from a segment's state at t (without gates). */
void tf__channels(const tf_synth *s, const tf_seg *g, const double x[3], double didt,
                  double out[4]);

/* Device of a conduction state. */
tf_device tf__device(const tf_synth *s, int cs);

/* The truth; force_quadrature computes every integral by Gauss-Legendre panels (tests
 * compare it with the closed forms). */
json_t *tf__truth(tf_synth *s, int force_quadrature, tf_error *err);

/* Truth accumulation hook: called once per completed segment (synth_truth.c). */
void tf__accum_segment(tf_synth *s, const tf_seg *g);

#endif
