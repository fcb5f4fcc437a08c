/* Test helper: an independent circuit-simulator reference (ngspice, batch mode) for a design.
 *
 * tf_spice_run() writes a SPICE netlist of the same stage a design describes, runs
 * `ngspice -b` on it, and reads the result back into a tf_capture with the simulator's
 * channel names (i_load, v_out, v_c, v_ak1) on a uniform time grid. Tests of the
 * segmenter, the fitter and the simulator use it as their outside reference: name
 * "reference: ngspice" beside each check that uses it.
 *
 * Circuit (nodes: p = DC link +, 0 = DC link -, x = bridge output, y = the return of
 * the tank; the tank is x - L - R - C - y, i_load flows from x into L):
 *   half-bridge: T1/D1 from p to x, T2/D2 from x to 0; series capacitor: y = 0;
 *                split capacitor: C/2 from p to y and C/2 from y to 0 (the tank sees C).
 *   full-bridge: T1/D1 p->x and T2/D2 y->0 (diagonal pair fired together), T3/D3 p->y
 *                and T4/D4 x->0; the tank is between x and y.
 *   single:      T1/D1 from p to x, tank from x to 0, reset choke (Lr + Rr) across C.
 *   ring-down:   C charged to the precharge voltage, released through T1/D1 into L - R.
 * Each thyristor is a gate-controlled switch (S element, closed while its gate pulse is
 * high) in parallel with a latch (W element, closed while the thyristor's own current
 * exceeds 0.2 A, with 0.1 A hysteresis), in series with a blocking diode and a DC source
 * of the on-state drop; each anti-parallel diode is a diode in series with a DC source
 * of its forward drop. The diodes are near-ideal (IS 1e-12 A, N = 0.1, RS = 1 mohm:
 * about 0.2 V at 100 A), so the drops match the design's to within that. Full-bridge:
 * 100 kohm across each device keeps the floating legs defined. The turn-off time t_q is NOT modelled
 * (a thyristor blocks as soon as its current has stopped): compare only designs without
 * commutation failures. Channels as the simulator defines them: v_out = the level
 * across the L-R-C chain (v(x) - v(y); split: v(x) minus the link midpoint; ring-down:
 * v(x) - v(p)), v_c = the capacitor voltage along the loop (split: v(y) minus the
 * midpoint; ring-down: -v(p)), v_ak1 = v(p, x).
 *
 * Initial state and firings follow the simulator's conventions (docs/simulator.md):
 * at rest before the first firing, with the capacitor voltage opts->vc0_v, gate pulses
 * of opts->gate_width_s at the design's firing instants (ring-down: the gate is held
 * from the release on). The transient starts from the operating point with every
 * device blocking and the capacitor held by .ic (no uic), rshunt = 100 Mohm on every
 * node. Typical agreement with the simulator: docs/synth-output.md.
 */
#ifndef TF_TEST_SPICE_H
#define TF_TEST_SPICE_H

#include <stddef.h>
#include <stdio.h>
#include <tankfit/capture.h>
#include <tankfit/design.h>

/* Options of a reference run. tf_spice_options_init sets the defaults noted. */
typedef struct tf_spice_options {
    double t_stop_s;      /* end of the transient (default: design start + duration) */
    double t_step_s;      /* output grid step (default: 1 / design sample rate) */
    double max_step_s;    /* largest internal time step (default: min(t_step / 2, 20 ns)) */
    double vc0_v;         /* the simulator's v_c at rest before the first firing (default
                             NAN: its convention, see tf_spice_default_vc0) */
    double gate_width_s;  /* gate pulse width (default 0: the simulator's, 10 us or a
                             quarter firing period when that is shorter) */
    const char *workdir;  /* netlist, output and log go here (default: tf_test_tmpdir()) */
    const char *name;     /* base name of those files (default "spice") */
} tf_spice_options;

void tf_spice_options_init(tf_spice_options *o);

/* The simulator's initial v_c: half the link for a series-capacitor half-bridge, 0 for
 * split, full-bridge and single, -precharge for ring-down. */
double tf_spice_default_vc0(const tf_design *d);

/* Firing n (0-based) of design d: sets *t (s) and *pos (0: T1 or T1+T2, 1: T2 or T3+T4)
 * and returns 1, or returns 0 when there are no more before t_stop. */
int tf_spice_firing(const tf_design *d, size_t n, double t_stop, double *t, int *pos);

/* Write the netlist of design d to out; the simulation writes its data to data_path.
 * Returns 0, or -1 with a message in msg (unsupported topology, missing values). */
int tf_spice_write_netlist(const tf_design *d, const tf_spice_options *o, const char *data_path,
                           FILE *out, char *msg, size_t msg_size);

/* Non-zero when ngspice is on PATH. */
int tf_spice_available(void);

/* Write the netlist, run `ngspice -b`, read its data back. On success returns 0 and
 * *out (caller frees with tf_capture_destroy) holds i_load, v_out, v_c, v_ak1 on the
 * grid k * t_step (k >= 0, anchored at t = 0, as `linearize` gives it) from the first
 * grid point at or after the design's start (within half a step) to t_stop: with the
 * defaults, the same instants as tf_synth_to_capture() of the design when start is a
 * whole number of sample periods. On failure returns -1, *out is NULL and msg says
 * why (ngspice missing, run failed: see the .log file next to the netlist). */
int tf_spice_run(const tf_design *d, const tf_spice_options *o, tf_capture **out, char *msg,
                 size_t msg_size);

/* Crossings of x (n samples at t0 + k dt) through +level (dir +1: rising above it, -1:
 * falling below it) and -level (dir +2: falling below -level, -2: rising above it),
 * each time linearly interpolated. Stores at most max entries; returns the count
 * found (may exceed max). With a small level (e.g. 1 % of the peak) these are the
 * lobe starts and ends of a current, robust to the tiny currents of blocked devices.
 * Two crossings inside one sample step come out in time order. */
size_t tf_spice_crossings(const float *x, size_t n, double t0, double dt, double level,
                          double *times, int *dir, size_t max);

#endif
