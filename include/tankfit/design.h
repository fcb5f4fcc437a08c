/* Design files (INI via inih): one inverter design, its test limits, channel roles,
 * record fields and, for the simulator, capture settings and a load schedule. */
#ifndef TANKFIT_DESIGN_H
#define TANKFIT_DESIGN_H

#include <stddef.h>
#include <tankfit/error.h>
#include <tankfit/types.h>

#ifdef __cplusplus
extern "C" {
#endif

#define TF_DESIGN_TEXT 256
#define TF_DESIGN_MAX_SCALES 16
#define TF_DESIGN_MAX_SCHEDULE 256
#define TF_DESIGN_MAX_FIRINGS 4096

/* Simulator output channels, in this order (names as in the capture). */
typedef enum {
    TF_SYN_I_LOAD = 0, TF_SYN_V_OUT, TF_SYN_V_C, TF_SYN_V_AK1,
    TF_SYN_G1, TF_SYN_G2, TF_SYN_G3, TF_SYN_G4,
    TF_SYN_NCHAN
} tf_synth_channel;

/* Scope imperfections for one simulated channel ([capture] section). */
typedef struct tf_capture_channel_cfg {
    int enabled;         /* written to the output (default: all that the topology has) */
    double noise;        /* Gaussian noise sigma, physical unit; 0 = none */
    double range;        /* vertical range +/- range, clipped beyond; 0 = no clipping */
    double skew_s;       /* delay of this probe (the channel shows x(t - skew)) */
    int bits;            /* ADC bits over +/- range; 0 = no quantisation */
} tf_capture_channel_cfg;

/* A per-column scale factor from [channels] (e.g. a current probe's A/V). */
typedef struct tf_design_scale {
    char column[64];
    double factor;
} tf_design_scale;

/* Every value in SI base units; NAN marks a numeric key that was not given
 * (empty strings for text keys). */
typedef struct tf_design {
    char path[4096];

    /* [inverter] */
    tf_topology topology;
    int split_capacitor;          /* capacitor = split (0: series) */
    double dc_link_v;
    double firing_frequency_hz;   /* firing rate of each thyristor (output frequency) */
    double firing_times_s[TF_DESIGN_MAX_FIRINGS]; /* explicit firing instants, if given */
    size_t n_firing_times;
    double reset_inductance_h;    /* single: reset choke across the capacitor */
    double reset_resistance_ohm;
    double precharge_v;           /* ring-down: initial capacitor voltage */

    /* [tank] */
    double capacitance_f;         /* what the coil sees (C1 + C2 for split) */
    double inductance_h;
    double resistance_ohm;
    double coil_resistance_ohm;   /* empty-coil resistance, for R_w = R_eff - R_coil */

    /* [switch] */
    double turnoff_time_s;        /* t_q */
    double thyristor_drop_v;
    double diode_drop_v;
    double stray_inductance_h;    /* thyristor-diode loop inductance (switch voltage only) */

    /* [limits] (tolerances and THD as fractions: 5 % -> 0.05) */
    double turnoff_ratio_min;
    double resonance_tolerance;
    double q_tolerance;
    double resistance_tolerance;
    double current_thd_max;
    double voltage_thd_max;
    double peak_current_max_a;
    double capacitor_voltage_max_v;
    tf_mode mode;                 /* TF_MODE_ANY when not given */

    /* [channels]: capture column names per role ("" = not given) */
    char ch_current[64], ch_output_voltage[64], ch_capacitor_voltage[64], ch_switch_voltage[64];
    char ch_gate[4][64];
    tf_design_scale scales[TF_DESIGN_MAX_SCALES];
    size_t nscales;

    /* [record] */
    char unit_serial[TF_DESIGN_TEXT], operator_name[TF_DESIGN_TEXT], test_id[TF_DESIGN_TEXT];
    char notes[1024];

    /* [capture] (simulator) */
    double sample_rate_hz;
    double duration_s;
    double start_s;               /* time of the first sample (default 0) */
    int format_wav;               /* format = wav (0: csv) */
    int time_digits;              /* significant digits of the printed time column */
    int value_digits;             /* significant digits of printed channel values */
    unsigned long long seed;
    tf_capture_channel_cfg chan[TF_SYN_NCHAN];

    /* [schedule] (simulator): piecewise-linear R(t), L(t) */
    size_t nschedule;
    double sched_t_s[TF_DESIGN_MAX_SCHEDULE];
    double sched_r_ohm[TF_DESIGN_MAX_SCHEDULE];  /* NAN: keep [tank] resistance */
    double sched_l_h[TF_DESIGN_MAX_SCHEDULE];    /* NAN: keep [tank] inductance */
} tf_design;

/* Fill d with defaults (all numeric keys NAN or their documented default). */
void tf_design_init(tf_design *d);

/* Parse a design file. Errors are TF_ERR_NOINPUT (cannot open) or TF_ERR_DATA
 * with "path:line: ..." (unknown key with a did-you-mean suggestion, wrong
 * dimension such as "capacitance = 20 uH: expects farads", bad number,
 * missing required key). The struct is large: allocate it, do not put it on a
 * small stack. */
tf_status tf_design_load(const char *path, tf_design *d, tf_error *err);

/* Same, from text in memory (name is used in messages). */
tf_status tf_design_parse(const char *text, size_t len, const char *name, tf_design *d,
                          tf_error *err);

/* Name of a simulator channel ("i_load", "v_out", "v_c", "v_ak1", "g1".."g4"). */
const char *tf_synth_channel_name(tf_synth_channel c);

#ifdef __cplusplus
}
#endif
#endif
