/* Test helper: ngspice netlist of a design's stage, batch run and read-back (see spice.h). */
#include "spice.h"

#include <math.h>
#include <stdarg.h>
#include <stdlib.h>
#include <string.h>

#include "tf_test.h"
#include <tankfit/synth.h>

static int spice_fail(char *msg, size_t size, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    if (msg && size)
        vsnprintf(msg, size, fmt, ap);
    va_end(ap);
    return -1;
}

static double or0(double v) { return isnan(v) ? 0.0 : v; }

void tf_spice_options_init(tf_spice_options *o)
{
    memset(o, 0, sizeof *o);
    o->vc0_v = NAN;
    o->gate_width_s = 0; /* the simulator's: TF_SYNTH_GATE_WIDTH_S, at most a quarter period */
}

double tf_spice_default_vc0(const tf_design *d)
{
    switch (d->topology) {
    case TF_TOPO_HALF_BRIDGE: return d->split_capacitor ? 0.0 : 0.5 * or0(d->dc_link_v);
    case TF_TOPO_RING_DOWN: return -or0(d->precharge_v);
    default: return 0.0;
    }
}

int tf_spice_firing(const tf_design *d, size_t n, double t_stop, double *t, int *pos)
{
    int npos = (d->topology == TF_TOPO_HALF_BRIDGE || d->topology == TF_TOPO_FULL_BRIDGE) ? 2 : 1;
    if (d->topology == TF_TOPO_RING_DOWN) {
        /* released once: the first explicit instant, else t = 0 */
        if (n > 0)
            return 0;
        *t = d->n_firing_times ? d->firing_times_s[0] : 0.0;
        *pos = 0;
        return *t <= t_stop;
    }
    if (d->n_firing_times) {
        if (n >= d->n_firing_times)
            return 0;
        *t = d->firing_times_s[n];
        *pos = (int)(n % (size_t)npos);
        return *t <= t_stop;
    }
    if (!(d->firing_frequency_hz > 0))
        return 0;
    double period = 1.0 / d->firing_frequency_hz;
    *t = (double)n * period / npos;
    *pos = (int)(n % (size_t)npos);
    return *t <= t_stop;
}

/* A thyristor from anode a to cathode k fired by gate node g, plus its anti-parallel
 * diode; tag names the elements (T1 -> VS1, S1, W1 ...). */
static void thyristor_pair(FILE *f, const char *tag, const char *a, const char *k, const char *g,
                           double vt, double vd)
{
    fprintf(f, "* %s: thyristor %s -> %s (gate %s), anti-parallel diode\n", tag, a, k, g);
    fprintf(f, "VS%s %s s%s 0\n", tag, a, tag);
    fprintf(f, "S%s s%s t%s %s 0 SWGATE\n", tag, tag, tag, g);
    fprintf(f, "W%s s%s t%s VS%s SWLATCH\n", tag, tag, tag, tag);
    fprintf(f, "DT%s t%s u%s DNEAR\n", tag, tag, tag);
    fprintf(f, "VT%s u%s %s DC %.12g\n", tag, tag, k, vt);
    fprintf(f, "DD%s %s w%s DNEAR\n", tag, k, tag);
    fprintf(f, "VD%s w%s %s DC %.12g\n", tag, tag, a, vd);
}

/* Gate source: pulses of width w at the firings of position pos. */
static void gate_source(FILE *f, const tf_design *d, int pos, const char *node, double t_stop,
                        double w)
{
    const double edge = 10e-9;
    fprintf(f, "V%s %s 0 PWL(0 0", node, node);
    double t;
    int p;
    double last = 0;
    for (size_t n = 0; tf_spice_firing(d, n, t_stop, &t, &p); n++) {
        if (p != pos)
            continue;
        if (t - edge <= last)
            t = last + 2 * edge;
        fprintf(f, "\n+ %.12g 0 %.12g 1 %.12g 1 %.12g 0", t - edge, t, t + w, t + w + edge);
        last = t + w + edge;
    }
    fprintf(f, ")\n");
}

int tf_spice_write_netlist(const tf_design *d, const tf_spice_options *o, const char *data_path,
                           FILE *f, char *msg, size_t msg_size)
{
    double L = d->inductance_h, R = d->resistance_ohm, C = d->capacitance_f;
    if (!(L > 0) || !(C > 0) || !(R >= 0))
        return spice_fail(msg, msg_size, "spice: design needs inductance, capacitance and resistance");
    if (d->nschedule)
        return spice_fail(msg, msg_size, "spice: a [schedule] (time-varying load) is not modelled");
    double vdc = or0(d->dc_link_v), vt = or0(d->thyristor_drop_v), vd = or0(d->diode_drop_v);
    double t_stop = o->t_stop_s, step = o->t_step_s, maxstep = o->max_step_s;
    double vc0 = isnan(o->vc0_v) ? tf_spice_default_vc0(d) : o->vc0_v;
    const char *cap_hi = "b", *cap_lo = "y";
    fprintf(f, "* tankfit reference netlist: %s stage\n", tf_topology_name(d->topology));
    fprintf(f, ".model DNEAR D(IS=1e-12 N=0.1 RS=1e-3 CJO=0)\n");
    fprintf(f, ".model SWGATE sw(vt=0.5 vh=0.1 ron=1e-4 roff=1e9)\n");
    fprintf(f, ".model SWLATCH csw(it=0.2 ih=0.1 ron=1e-4 roff=1e9)\n");
    switch (d->topology) {
    case TF_TOPO_HALF_BRIDGE:
        fprintf(f, "VDC p 0 DC %.12g\n", vdc);
        thyristor_pair(f, "1", "p", "x", "g1", vt, vd);
        thyristor_pair(f, "2", "x", "0", "g2", vt, vd);
        gate_source(f, d, 0, "g1", t_stop, o->gate_width_s);
        gate_source(f, d, 1, "g2", t_stop, o->gate_width_s);
        if (d->split_capacitor) {
            /* C/2 + C/2 from the link rails to the tank return y, charged to half the link */
            fprintf(f, "L1 x a %.12g\nR1 a y %.12g\n", L, R > 0 ? R : 1e-9);
            fprintf(f, "CA p y %.12g\nCB y 0 %.12g\n.ic v(y)=%.12g\n", C / 2, C / 2,
                    vdc / 2 + vc0);
            /* an ideal source marks the link midpoint m: v_out and v_c are taken from it */
            fprintf(f, "VM m 0 DC %.12g\n", vdc / 2);
            cap_hi = "y";
            cap_lo = "m";
        } else {
            fprintf(f, "L1 x a %.12g\nR1 a b %.12g\nC1 b y %.12g\nVY y 0 DC 0\n.ic v(b)=%.12g\n",
                    L, R > 0 ? R : 1e-9, C, vc0);
        }
        break;
    case TF_TOPO_FULL_BRIDGE:
        fprintf(f, "VDC p 0 DC %.12g\n", vdc);
        thyristor_pair(f, "1", "p", "x", "g1", vt, vd);
        thyristor_pair(f, "2", "y", "0", "g1", vt, vd);
        thyristor_pair(f, "3", "p", "y", "g2", vt, vd);
        thyristor_pair(f, "4", "x", "0", "g2", vt, vd);
        gate_source(f, d, 0, "g1", t_stop, o->gate_width_s);
        gate_source(f, d, 1, "g2", t_stop, o->gate_width_s);
        fprintf(f, "L1 x a %.12g\nR1 a b %.12g\nC1 b y %.12g\n", L, R > 0 ? R : 1e-9, C);
        /* while every device blocks both legs float: 100 kohm across each device (1.5 mA
         * at 150 V) defines them, and they start shared evenly, as the simulator assumes */
        fprintf(f, "RP1 p x 1e5\nRP2 y 0 1e5\nRP3 p y 1e5\nRP4 x 0 1e5\n");
        fprintf(f, ".ic v(b)=%.12g v(y)=%.12g\n", 0.5 * (vdc + vc0), 0.5 * (vdc - vc0));
        break;
    case TF_TOPO_SINGLE: {
        double Lr = d->reset_inductance_h, Rr = or0(d->reset_resistance_ohm);
        if (!(Lr > 0))
            return spice_fail(msg, msg_size, "spice: single needs reset_inductance");
        fprintf(f, "VDC p 0 DC %.12g\n", vdc);
        thyristor_pair(f, "1", "p", "x", "g1", vt, vd);
        gate_source(f, d, 0, "g1", t_stop, o->gate_width_s);
        fprintf(f, "L1 x a %.12g\nR1 a b %.12g\nC1 b y %.12g\nVY y 0 DC 0\n.ic v(b)=%.12g\n",
                L, R > 0 ? R : 1e-9, C, vc0);
        fprintf(f, "LR b r %.12g\nRR r 0 %.12g\n", Lr, Rr > 0 ? Rr : 1e-9);
        break;
    }
    case TF_TOPO_RING_DOWN:
        /* p is the capacitor's top; the coil returns to its bottom (0) */
        thyristor_pair(f, "1", "p", "x", "g1", vt, vd);
        /* the simulator holds T1's gate from the release on: free ringing */
        gate_source(f, d, 0, "g1", t_stop, 2 * t_stop);
        /* the simulator's v_c runs along the loop x - L - R - C: v(0) - v(p) = -precharge */
        fprintf(f, "C1 p 0 %.12g\nL1 x a %.12g\nR1 a 0 %.12g\n.ic v(p)=%.12g\n", C, L,
                R > 0 ? R : 1e-9, -vc0);
        cap_hi = "p"; /* v(p), negated by the reader: ngspice has no vector "0" */
        cap_lo = NULL;
        break;
    default:
        return spice_fail(msg, msg_size, "spice: topology %s is not modelled",
                    tf_topology_name(d->topology));
    }
    /* v_out: the level across the L-R-C chain (ring-down: from x round to p) */
    const char *yref = d->topology == TF_TOPO_RING_DOWN ? "p" : "y";
    if (d->topology == TF_TOPO_HALF_BRIDGE && d->split_capacitor)
        yref = "m";
    /* rshunt: 100 Mohm from every node to ground keeps blocked, floating nodes defined
     * (3 uA at 300 V); without it the first steps stall at 1e-10 s */
    fprintf(f, ".options method=gear reltol=1e-5 abstol=1e-9 vntol=1e-7 itl4=200 rshunt=1e8\n");
    fprintf(f, ".control\nset wr_singlescale\nset wr_vecnames\noption numdgt=12\n");
    /* no uic: the operating point with every device blocking, the capacitor held at
     * its initial voltage by .ic, starts the transient (uic fails to converge with
     * near-ideal diodes on floating bridge nodes) */
    fprintf(f, "tran %.12g %.12g 0 %.12g\n", step, t_stop, maxstep);
    fprintf(f, "linearize\n");
    if (cap_lo)
        fprintf(f, "wrdata %s i(L1) v(x,%s) v(%s,%s) v(p,x)\n", data_path, yref, cap_hi, cap_lo);
    else
        fprintf(f, "wrdata %s i(L1) v(x,%s) v(%s) v(p,x)\n", data_path, yref, cap_hi);
    fprintf(f, "quit\n.endc\n.end\n");
    return 0;
}

int tf_spice_available(void) { return tf_test_have("ngspice"); }

/* Read wrdata output: a header line, then rows "time v1 v2 v3 v4". */
static int read_data(const char *path, double t_from, double step, int negate_vc,
                     tf_capture **out, char *msg, size_t msg_size)
{
    FILE *f = fopen(path, "r");
    if (!f)
        return spice_fail(msg, msg_size, "spice: no output %s (see the .log beside it)", path);
    char line[1024];
    if (!fgets(line, sizeof line, f)) {
        fclose(f);
        return spice_fail(msg, msg_size, "spice: empty output %s", path);
    }
    size_t cap_rows = 1024, rows = 0;
    double *buf = malloc(cap_rows * 5 * sizeof *buf);
    while (buf && fgets(line, sizeof line, f)) {
        double v[5];
        if (sscanf(line, "%lf %lf %lf %lf %lf", &v[0], &v[1], &v[2], &v[3], &v[4]) != 5)
            continue;
        if (v[0] < t_from - 0.5 * step)
            continue;
        if (rows == cap_rows) {
            cap_rows *= 2;
            double *nb = realloc(buf, cap_rows * 5 * sizeof *buf);
            if (!nb) {
                free(buf);
                buf = NULL;
                break;
            }
            buf = nb;
        }
        memcpy(buf + rows * 5, v, sizeof v);
        rows++;
    }
    fclose(f);
    if (!buf || rows < 2) {
        free(buf);
        return spice_fail(msg, msg_size, "spice: %s has %zu usable rows", path, rows);
    }
    tf_capture *cap = tf_capture_create();
    tf_error err;
    if (!cap || tf_capture_alloc(cap, 4, rows, &err) != TF_OK) {
        tf_capture_destroy(cap);
        free(buf);
        return spice_fail(msg, msg_size, "spice: out of memory");
    }
    static const char *const names[] = {"i_load", "v_out", "v_c", "v_ak1"};
    for (size_t c = 0; c < 4; c++) {
        snprintf(cap->ch[c].name, sizeof cap->ch[c].name, "%s", names[c]);
        snprintf(cap->ch[c].unit, sizeof cap->ch[c].unit, "%s", c == 0 ? "A" : "V");
        for (size_t k = 0; k < rows; k++) {
            cap->ch[c].samples[k] = (float)((negate_vc && c == 2 ? -1 : 1) * buf[k * 5 + 1 + c]);
        }
    }
    cap->t0_s = buf[0];
    cap->dt_s = step;
    snprintf(cap->path, sizeof cap->path, "%s", path);
    free(buf);
    *out = cap;
    return 0;
}

int tf_spice_run(const tf_design *d, const tf_spice_options *opts, tf_capture **out, char *msg,
                 size_t msg_size)
{
    *out = NULL;
    tf_spice_options o;
    tf_spice_options_init(&o);
    if (opts)
        o = *opts;
    double start = or0(d->start_s);
    if (!(o.t_stop_s > 0))
        o.t_stop_s = start + d->duration_s;
    if (!(o.t_step_s > 0))
        o.t_step_s = 1.0 / d->sample_rate_hz;
    if (!(o.max_step_s > 0))
        o.max_step_s = fmin(o.t_step_s / 2, 20e-9);
    if (!(o.gate_width_s > 0)) {
        o.gate_width_s = TF_SYNTH_GATE_WIDTH_S;
        if (!d->n_firing_times && d->firing_frequency_hz > 0 &&
            0.25 / d->firing_frequency_hz < o.gate_width_s)
            o.gate_width_s = 0.25 / d->firing_frequency_hz;
    }
    if (!(o.t_stop_s > 0) || !(o.t_step_s > 0) || o.t_stop_s / o.t_step_s > 5e6)
        return spice_fail(msg, msg_size, "spice: bad time grid (stop %g s, step %g s)", o.t_stop_s,
                    o.t_step_s);
    if (!tf_spice_available())
        return spice_fail(msg, msg_size, "spice: ngspice is not installed (tests/install-deps test)");
    const char *dir = o.workdir ? o.workdir : tf_test_tmpdir();
    const char *name = o.name ? o.name : "spice";
    char cir[1024], data[1024], log[1024];
    snprintf(cir, sizeof cir, "%s/%s.cir", dir, name);
    snprintf(data, sizeof data, "%s/%s.data", dir, name);
    snprintf(log, sizeof log, "%s/%s.log", dir, name);
    remove(data);
    FILE *f = fopen(cir, "w");
    if (!f)
        return spice_fail(msg, msg_size, "spice: cannot write %s", cir);
    int rc = tf_spice_write_netlist(d, &o, data, f, msg, msg_size);
    if (fclose(f) != 0 && rc == 0)
        rc = spice_fail(msg, msg_size, "spice: cannot write %s", cir);
    if (rc != 0)
        return rc;
    int st = tf_test_system("ngspice -b '%s' > '%s' 2>&1", cir, log);
    if (st != 0)
        return spice_fail(msg, msg_size, "spice: ngspice exited with %d (see %s)", st, log);
    return read_data(data, start, o.t_step_s, d->topology == TF_TOPO_RING_DOWN, out, msg,
                     msg_size);
}

size_t tf_spice_crossings(const float *x, size_t n, double t0, double dt, double level,
                          double *times, int *dir, size_t max)
{
    size_t count = 0;
    for (size_t k = 1; k < n; k++) {
        double a = x[k - 1], b = x[k];
        const double lv[2] = {level, -level};
        double frac[2];
        int d[2], m = 0;
        for (int s = 0; s < 2; s++) {
            double l = lv[s];
            if ((a - l) * (b - l) < 0 || (b == l && a != l)) {
                frac[m] = (l - a) / (b - a);
                d[m++] = s == 0 ? (b > a ? 1 : -1) : (b < a ? 2 : -2);
            }
        }
        /* one step across both levels: emit the two crossings in time order */
        int first = m == 2 && frac[1] < frac[0];
        for (int j = 0; j < m; j++) {
            int e = first ? 1 - j : j;
            if (count < max) {
                times[count] = t0 + ((double)(k - 1) + frac[e]) * dt;
                dir[count] = d[e];
            }
            count++;
        }
    }
    return count;
}
