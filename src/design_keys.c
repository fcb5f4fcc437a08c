/* The design-file vocabulary: one table of every section and key, and did-you-mean. */
#include "design_keys.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

const char *const tf_design_sections[] = {
    "inverter", "tank", "switch", "limits", "channels", "record", "capture", "schedule", NULL};

static const char *const topology_names[] = {"single", "half-bridge", "full-bridge",
                                              "ring-down", NULL};
static const char *const capacitor_names[] = {"series", "split", NULL};
static const char *const mode_names[] = {"non-overlapping", "overlapping", "any", NULL};
static const char *const format_names[] = {"csv", "wav", NULL};

#define OFF(field) offsetof(tf_design, field)
#define QTY(sec, key, dim, range, field) {sec, key, TF_DK_QTY, dim, range, OFF(field), 0, 0, 0, NULL}
#define TEXT(sec, key, field) \
    {sec, key, TF_DK_TEXT, TF_DIM_RATIO, TF_RANGE_ANY, OFF(field), sizeof(((tf_design *)0)->field), 0, 0, NULL}
#define COLUMN(key, field) \
    {"channels", key, TF_DK_COLUMN, TF_DIM_RATIO, TF_RANGE_ANY, OFF(field), sizeof(((tf_design *)0)->field), 0, 0, NULL}
#define ENUM(sec, key, names) {sec, key, TF_DK_ENUM, TF_DIM_RATIO, TF_RANGE_ANY, 0, 0, 0, 0, names}
#define INT(sec, key, field, lo, hi) {sec, key, TF_DK_INT, TF_DIM_RATIO, TF_RANGE_ANY, OFF(field), 0, lo, hi, NULL}
/* The five per-channel scope settings of one simulated channel. */
#define CHAN(name, idx, dim)                                                          \
    QTY("capture", name ".noise", dim, TF_RANGE_NONNEG, chan[idx].noise),             \
    QTY("capture", name ".range", dim, TF_RANGE_NONNEG, chan[idx].range),             \
    QTY("capture", name ".skew", TF_DIM_S, TF_RANGE_ANY, chan[idx].skew_s),           \
    INT("capture", name ".bits", chan[idx].bits, 0, 32),                              \
    {"capture", name ".enabled", TF_DK_BOOL, TF_DIM_RATIO, TF_RANGE_ANY, OFF(chan[idx].enabled), 0, 0, 0, NULL}

const tf_dkey tf_dkeys[] = {
    ENUM("inverter", "topology", topology_names),
    ENUM("inverter", "capacitor", capacitor_names),
    QTY("inverter", "dc_link", TF_DIM_V, TF_RANGE_POS, dc_link_v),
    QTY("inverter", "firing_frequency", TF_DIM_HZ, TF_RANGE_POS, firing_frequency_hz),
    {"inverter", "firing_times", TF_DK_TIMES, TF_DIM_S, TF_RANGE_ANY, 0, 0, 0, 0, NULL},
    QTY("inverter", "reset_inductance", TF_DIM_H, TF_RANGE_POS, reset_inductance_h),
    QTY("inverter", "reset_resistance", TF_DIM_OHM, TF_RANGE_NONNEG, reset_resistance_ohm),
    QTY("inverter", "precharge", TF_DIM_V, TF_RANGE_ANY, precharge_v),

    QTY("tank", "capacitance", TF_DIM_F, TF_RANGE_POS, capacitance_f),
    QTY("tank", "inductance", TF_DIM_H, TF_RANGE_POS, inductance_h),
    QTY("tank", "resistance", TF_DIM_OHM, TF_RANGE_NONNEG, resistance_ohm),
    QTY("tank", "coil_resistance", TF_DIM_OHM, TF_RANGE_NONNEG, coil_resistance_ohm),

    QTY("switch", "turnoff_time", TF_DIM_S, TF_RANGE_POS, turnoff_time_s),
    QTY("switch", "thyristor_drop", TF_DIM_V, TF_RANGE_NONNEG, thyristor_drop_v),
    QTY("switch", "diode_drop", TF_DIM_V, TF_RANGE_NONNEG, diode_drop_v),
    QTY("switch", "stray_inductance", TF_DIM_H, TF_RANGE_NONNEG, stray_inductance_h),

    QTY("limits", "turnoff_ratio_min", TF_DIM_RATIO, TF_RANGE_POS, turnoff_ratio_min),
    QTY("limits", "resonance_tolerance", TF_DIM_RATIO, TF_RANGE_NONNEG, resonance_tolerance),
    QTY("limits", "q_tolerance", TF_DIM_RATIO, TF_RANGE_NONNEG, q_tolerance),
    QTY("limits", "resistance_tolerance", TF_DIM_RATIO, TF_RANGE_NONNEG, resistance_tolerance),
    QTY("limits", "current_thd_max", TF_DIM_RATIO, TF_RANGE_NONNEG, current_thd_max),
    QTY("limits", "voltage_thd_max", TF_DIM_RATIO, TF_RANGE_NONNEG, voltage_thd_max),
    QTY("limits", "peak_current_max", TF_DIM_A, TF_RANGE_POS, peak_current_max_a),
    QTY("limits", "capacitor_voltage_max", TF_DIM_V, TF_RANGE_POS, capacitor_voltage_max_v),
    ENUM("limits", "mode", mode_names),

    COLUMN("current", ch_current),
    COLUMN("output_voltage", ch_output_voltage),
    COLUMN("capacitor_voltage", ch_capacitor_voltage),
    COLUMN("switch_voltage", ch_switch_voltage),
    COLUMN("gate1", ch_gate[0]),
    COLUMN("gate2", ch_gate[1]),
    COLUMN("gate3", ch_gate[2]),
    COLUMN("gate4", ch_gate[3]),

    TEXT("record", "unit_serial", unit_serial),
    TEXT("record", "operator", operator_name),
    TEXT("record", "test_id", test_id),
    TEXT("record", "notes", notes),

    QTY("capture", "sample_rate", TF_DIM_RATE, TF_RANGE_POS, sample_rate_hz),
    QTY("capture", "duration", TF_DIM_S, TF_RANGE_POS, duration_s),
    QTY("capture", "start", TF_DIM_S, TF_RANGE_ANY, start_s),
    ENUM("capture", "format", format_names),
    INT("capture", "time_digits", time_digits, 1, 15),
    INT("capture", "value_digits", value_digits, 1, 15),
    {"capture", "seed", TF_DK_SEED, TF_DIM_RATIO, TF_RANGE_ANY, 0, 0, 0, 0, NULL},
    INT("capture", "adc_bits", adc_bits, 0, 32),
    CHAN("i_load", TF_SYN_I_LOAD, TF_DIM_A),
    CHAN("v_out", TF_SYN_V_OUT, TF_DIM_V),
    CHAN("v_c", TF_SYN_V_C, TF_DIM_V),
    CHAN("v_ak1", TF_SYN_V_AK1, TF_DIM_V),
    CHAN("g1", TF_SYN_G1, TF_DIM_LOGIC),
    CHAN("g2", TF_SYN_G2, TF_DIM_LOGIC),
    CHAN("g3", TF_SYN_G3, TF_DIM_LOGIC),
    CHAN("g4", TF_SYN_G4, TF_DIM_LOGIC),

    {"schedule", "point", TF_DK_POINT, TF_DIM_S, TF_RANGE_ANY, 0, 0, 0, 0, NULL},
    {NULL, NULL, TF_DK_QTY, TF_DIM_RATIO, TF_RANGE_ANY, 0, 0, 0, 0, NULL},
};

static const tf_dkey scale_key = {"channels", "scale.COLUMN", TF_DK_SCALE, TF_DIM_GAIN,
                                  TF_RANGE_POS, 0, 0, 0, 0, NULL};

size_t tf_dkey_count(void) { return sizeof tf_dkeys / sizeof tf_dkeys[0] - 1; }

int tf_dkey_index(const tf_dkey *k)
{
    for (size_t i = 0; tf_dkeys[i].section; i++)
        if (k == &tf_dkeys[i])
            return (int)i;
    return -1;
}

int tf_dsection_known(const char *section)
{
    for (size_t i = 0; tf_design_sections[i]; i++)
        if (strcmp(section, tf_design_sections[i]) == 0)
            return 1;
    return 0;
}

const tf_dkey *tf_dkey_find(const char *section, const char *key)
{
    if (strcmp(section, "channels") == 0 && strncmp(key, "scale.", 6) == 0)
        return &scale_key;
    for (size_t i = 0; tf_dkeys[i].section; i++)
        if (strcmp(tf_dkeys[i].section, section) == 0 && strcmp(tf_dkeys[i].key, key) == 0)
            return &tf_dkeys[i];
    return NULL;
}

const char *tf_dim_unit(tf_dim d)
{
    switch (d) {
    case TF_DIM_F: return "F";
    case TF_DIM_H: return "H";
    case TF_DIM_OHM: return "ohm";
    case TF_DIM_S: return "s";
    case TF_DIM_HZ: return "Hz";
    case TF_DIM_V: return "V";
    case TF_DIM_A: return "A";
    case TF_DIM_RATE: return "S/s";
    case TF_DIM_RATIO: case TF_DIM_GAIN: case TF_DIM_LOGIC: break;
    }
    return "";
}

const char *tf_dim_expects(tf_dim d)
{
    switch (d) {
    case TF_DIM_RATIO: return "a ratio (a plain number or %)";
    case TF_DIM_F: return "farads (F)";
    case TF_DIM_H: return "henries (H)";
    case TF_DIM_OHM: return "ohms (ohm)";
    case TF_DIM_S: return "seconds (s)";
    case TF_DIM_HZ: return "hertz (Hz)";
    case TF_DIM_V: return "volts (V)";
    case TF_DIM_A: return "amperes (A)";
    case TF_DIM_RATE: return "samples per second (S/s or Hz)";
    case TF_DIM_GAIN: return "a probe factor (A/V, V/V or a plain number)";
    case TF_DIM_LOGIC: return "a plain number (gate channels are 0/1)";
    }
    return "?";
}

int tf_dim_accepts(tf_dim d, const char *unit)
{
    if (!unit[0])
        return 1; /* a bare number is in base units, for every key */
    switch (d) {
    case TF_DIM_RATIO: return strcmp(unit, "%") == 0;
    case TF_DIM_RATE: return strcmp(unit, "S/s") == 0 || strcmp(unit, "Hz") == 0;
    case TF_DIM_GAIN: return strcmp(unit, "A/V") == 0 || strcmp(unit, "V/V") == 0;
    case TF_DIM_LOGIC: return 0;
    default: return strcmp(unit, tf_dim_unit(d)) == 0;
    }
}

/* Optimal string alignment distance (Levenshtein plus adjacent transposition). */
static size_t edit_distance(const char *a, const char *b)
{
    size_t la = strlen(a), lb = strlen(b);
    if (la > 64 || lb > 64)
        return (size_t)-1;
    size_t d[65][65];
    for (size_t i = 0; i <= la; i++)
        d[i][0] = i;
    for (size_t j = 0; j <= lb; j++)
        d[0][j] = j;
    for (size_t i = 1; i <= la; i++)
        for (size_t j = 1; j <= lb; j++) {
            size_t cost = a[i - 1] == b[j - 1] ? 0 : 1;
            size_t v = d[i - 1][j] + 1;
            if (d[i][j - 1] + 1 < v)
                v = d[i][j - 1] + 1;
            if (d[i - 1][j - 1] + cost < v)
                v = d[i - 1][j - 1] + cost;
            if (i > 1 && j > 1 && a[i - 1] == b[j - 2] && a[i - 2] == b[j - 1] &&
                d[i - 2][j - 2] + 1 < v)
                v = d[i - 2][j - 2] + 1;
            d[i][j] = v;
        }
    return d[la][lb];
}

/* Distance up to which a suggestion is worth showing: a third of the word, at least 1. */
static size_t max_distance(const char *word)
{
    size_t l = strlen(word);
    return l < 6 ? 1 : l < 9 ? 2 : 3;
}

const char *tf_suggest(const char *word, const char *const *candidates, size_t n)
{
    const char *best = NULL;
    size_t best_d = max_distance(word) + 1;
    for (size_t i = 0; i < n; i++) {
        size_t dist = edit_distance(word, candidates[i]);
        if (dist < best_d) {
            best_d = dist;
            best = candidates[i];
        }
    }
    /* otherwise a candidate the word starts with ("splitted" -> "split") */
    for (size_t i = 0; !best && i < n; i++) {
        size_t l = strlen(candidates[i]);
        if (l >= 3 && strncmp(word, candidates[i], l) == 0)
            best = candidates[i];
    }
    return best;
}

void tf_dkey_suggest(const char *section, const char *key, char *out, size_t size)
{
    out[0] = '\0';
    /* a key of another section, spelled right */
    for (size_t i = 0; tf_dkeys[i].section; i++)
        if (strcmp(tf_dkeys[i].key, key) == 0 && strcmp(tf_dkeys[i].section, section) != 0) {
            snprintf(out, size, " (did you mean [%s] %s? it belongs to that section)",
                     tf_dkeys[i].section, key);
            return;
        }
    const char *cand[160];
    size_t n = 0;
    char scale_guess[80] = "";
    for (size_t i = 0; tf_dkeys[i].section && n < 150; i++)
        if (strcmp(tf_dkeys[i].section, section) == 0)
            cand[n++] = tf_dkeys[i].key;
    const char *dot = strchr(key, '.');
    if (strcmp(section, "channels") == 0 && dot) {
        snprintf(scale_guess, sizeof scale_guess, "scale%s", dot);
        cand[n++] = scale_guess;
    }
    const char *best = tf_suggest(key, cand, n);
    if (best) {
        snprintf(out, size, " (did you mean '%s'?)", best);
        return;
    }
    /* a misspelt key of another section */
    n = 0;
    for (size_t i = 0; tf_dkeys[i].section && n < 150; i++)
        cand[n++] = tf_dkeys[i].key;
    best = tf_suggest(key, cand, n);
    if (best) {
        const tf_dkey *k = NULL;
        for (size_t i = 0; tf_dkeys[i].section; i++)
            if (tf_dkeys[i].key == best)
                k = &tf_dkeys[i];
        snprintf(out, size, " (did you mean [%s] %s?)", k ? k->section : "?", best);
    }
}

void tf_dsection_suggest(const char *section, char *out, size_t size)
{
    size_t n = 0;
    while (tf_design_sections[n])
        n++;
    const char *best = tf_suggest(section, tf_design_sections, n);
    out[0] = '\0';
    if (best)
        snprintf(out, size, " (did you mean [%s]?)", best);
}
