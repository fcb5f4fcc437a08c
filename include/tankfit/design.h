/* Design files (INI via inih): one inverter design, its test limits, channel roles,
 * record fields and, for the simulator, capture settings and a load schedule. */
#ifndef TANKFIT_DESIGN_H
#define TANKFIT_DESIGN_H

#include <stddef.h>
#include <jansson.h>
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
    double factor;               /* multiplies the recorded value (a 100 A/V probe: 100) */
    char unit[8];                /* as written: "A/V", "V/V" or "" (plain number) */
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
    int adc_bits;                 /* default ADC bits of every channel (0 = none given) */
    tf_capture_channel_cfg chan[TF_SYN_NCHAN];

    /* [schedule] (simulator): piecewise-linear R(t), L(t) */
    size_t nschedule;
    double sched_t_s[TF_DESIGN_MAX_SCHEDULE];
    double sched_r_ohm[TF_DESIGN_MAX_SCHEDULE];  /* NAN: keep [tank] resistance */
    double sched_l_h[TF_DESIGN_MAX_SCHEDULE];    /* NAN: keep [tank] inductance */
} tf_design;

/* Fill d with the documented defaults (docs/design-file.md): every numeric key
 * not given is NAN (a limit that stays NAN is not evaluated), text keys are "",
 * topology TF_TOPO_UNKNOWN, capacitor series, mode TF_MODE_ANY; [capture]
 * sample_rate 10 MHz, duration 2 ms, start 0, csv, time_digits 9, value_digits 6,
 * seed 1, adc_bits 0, no noise, range, skew or quantisation, every channel
 * enabled (parsing then enables only the channels the topology has, unless a
 * CH.enabled key says otherwise). The drops stay NAN (the simulator alone treats a
 * missing drop as 0 V). d must not be NULL. */
void tf_design_init(tf_design *d);

/* Read and parse the design file at path (UTF-8 INI, at most 1 MiB) into d, which
 * is initialised first (no need to call tf_design_init). d->path is set to path.
 * Errors: TF_ERR_NOINPUT when the file cannot be opened (or is a directory),
 * TF_ERR_IO on a read error, TF_ERR_DATA with "path:line:column: ..." for any
 * mistake in the text: syntax, unknown section or key (with a did-you-mean
 * suggestion), duplicate key or section, wrong dimension ("capacitance expects
 * farads (F), found henries (H) in '20 uH'"), bad number, bad choice, a value out
 * of range, list entries not increasing, too many entries, keys that contradict
 * the topology. On error d holds the defaults again. The struct is large
 * (about 47 kB): allocate it, do not put it on a small stack. Whether the keys a
 * use needs are present is checked separately by tf_design_validate. */
tf_status tf_design_load(const char *path, tf_design *d, tf_error *err);

/* Same as tf_design_load, from len bytes of text in memory (need not be
 * NUL-terminated; text may be NULL when len is 0). name (not NULL) is used in
 * messages and copied to d->path. TF_ERR_USAGE when text is NULL with len > 0. */
tf_status tf_design_parse(const char *text, size_t len, const char *name, tf_design *d,
                          tf_error *err);

/* Check that d holds what a use needs, naming the section and key of the first
 * thing missing or inconsistent ("design.ini: [tank] capacitance: required to
 * simulate the design, not given"). for_synth non-zero: everything the
 * simulator needs for the topology (topology, [tank] capacitance, inductance and
 * resistance, dc_link or precharge, firing_frequency or firing_times, the reset
 * choke of a single stage, turnoff_time, skews within +/- 1 ms, at least two
 * samples). for_synth zero (acceptance checks): each limit that is given has the
 * design values it is compared against (q_tolerance needs capacitance,
 * inductance and resistance, turnoff_ratio_min needs turnoff_time, ...), no
 * relative tolerance on a 0 ohm tank, probe factors fit their columns (no V/V on
 * the current), no column named for two roles. The checks of for_synth zero are
 * always made. Returns TF_OK or TF_ERR_DATA (TF_ERR_USAGE when d is NULL). */
tf_status tf_design_validate(const tf_design *d, int for_synth, tf_error *err);

/* The design as a JSON object for records: one object per section, the keys as
 * written in design files, numbers in SI base units (percent as fractions), keys
 * that were not given left out, and a "units" object mapping "section.key" to the
 * unit of every number present ("1" for ratios and gate levels, "A/V" or "V/V"
 * for probe factors as written). Per-channel [capture] settings appear under
 * "capture" as e.g. "v_out.range"; firing_times is an array; schedule points are
 * [t, R, L] arrays with null for '-'; seed is an integer (a string above 2^63 - 1).
 * Written back as INI with bare numbers it parses to the same design. NULL only
 * when out of memory. The caller owns the result (json_decref). */
json_t *tf_design_to_json(const tf_design *d);

/* Unit of a key's value as stored in tf_design and written by tf_design_to_json:
 * "F", "H", "ohm", "s", "Hz", "V", "A", "S/s" (sample_rate), "" for ratios,
 * probe factors, gate levels and counts; NULL when the section has no such key or
 * the key holds text or a choice (topology, mode, column names ...). The
 * per-channel keys take their channel's unit ("capture", "i_load.noise" -> "A");
 * "channels", "scale.ANY" -> "". [schedule] point -> NULL (three values). */
const char *tf_design_key_unit(const char *section, const char *key);

/* Name of a simulator channel ("i_load", "v_out", "v_c", "v_ak1", "g1".."g4"). */
const char *tf_synth_channel_name(tf_synth_channel c);

#ifdef __cplusplus
}
#endif
#endif
