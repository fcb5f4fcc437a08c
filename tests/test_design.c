/* Design files: keys, units, defaults, every error path, validation, JSON, the example. */
#include "tf_test.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <tankfit/design.h>

#include "design_keys.h"

static tf_design *D;
static tf_error E;

static tf_status parse(const char *text)
{
    return tf_design_parse(text, strlen(text), "t.ini", D, &E);
}

static void parse_ok(const char *text)
{
    if (parse(text) != TF_OK)
        fail_msg("unexpected error: %s\n--- text:\n%s", E.msg, text);
}

/* The text must fail with TF_ERR_DATA and a message holding every fragment. */
static void expect_error(const char *text, const char *frag, ...)
{
    tf_status st = parse(text);
    if (st != TF_ERR_DATA)
        fail_msg("expected a data error for:\n%s\ngot status %d (%s)", text, (int)st, E.msg);
    va_list ap;
    va_start(ap, frag);
    for (const char *f = frag; f; f = va_arg(ap, const char *))
        if (!strstr(E.msg, f)) {
            va_end(ap);
            fail_msg("message '%s' lacks '%s'", E.msg, f);
        }
    va_end(ap);
    /* on error the design holds the defaults again */
    assert_true(isnan(D->capacitance_f));
}

static int setup(void **state)
{
    (void)state;
    D = malloc(sizeof *D);
    return D ? 0 : -1;
}

static int teardown(void **state)
{
    (void)state;
    free(D);
    return 0;
}

/* ---- defaults and values ------------------------------------------------------ */

static void test_design_defaults(void **state)
{
    (void)state;
    parse_ok("");
    /* documented defaults (docs/design-file.md) */
    assert_int_equal(D->topology, TF_TOPO_UNKNOWN);
    assert_int_equal(D->mode, TF_MODE_ANY);
    assert_true(isnan(D->capacitance_f) && isnan(D->turnoff_ratio_min) && isnan(D->diode_drop_v));
    assert_true(D->sample_rate_hz == 10e6);
    assert_true(D->duration_s == 2e-3);
    assert_true(D->start_s == 0.0);
    assert_int_equal(D->format_wav, 0);
    assert_int_equal(D->time_digits, 9);
    assert_int_equal(D->value_digits, 6);
    assert_true(D->seed == 1);
    for (int c = 0; c < TF_SYN_NCHAN; c++)
        assert_int_equal(D->chan[c].enabled, 1);
    assert_string_equal(D->path, "t.ini");
}

/* Values with SI prefixes and units land in base units (source: SI Brochure, 9th ed.,
 * table 7 for the prefixes; ohm written as U+03A9 or U+2126). */
static void test_design_units(void **state)
{
    (void)state;
    parse_ok("[tank]\ncapacitance = 2.2 \xc2\xb5" "F\ninductance = 36uH\nresistance = 0.45 \xce\xa9\n"
             "coil_resistance = 60 m\xe2\x84\xa6\n"
             "[switch]\nturnoff_time = 20us\nthyristor_drop = 1600 mV\ndiode_drop = 1.1\n"
             "stray_inductance = 0.08 uH\n"
             "[inverter]\ndc_link = 0.54 kV\nfiring_frequency = 6 kHz\n"
             "[limits]\nresonance_tolerance = 5 %\nq_tolerance = 0.15\nturnoff_ratio_min = 130 %\n"
             "peak_current_max = 0.35 kA\n"
             "[capture]\nsample_rate = 10 MHz\nduration = 2e-3\n");
    assert_true(D->capacitance_f == 2.2e-6);
    assert_true(D->inductance_h == 36e-6);
    assert_true(D->resistance_ohm == 0.45);
    assert_true(D->coil_resistance_ohm == 60e-3);
    assert_true(D->turnoff_time_s == 20e-6);
    assert_true(D->thyristor_drop_v == 1.6);
    assert_true(D->diode_drop_v == 1.1); /* a bare number is in base units */
    assert_true(D->stray_inductance_h == 0.08e-6);
    assert_true(D->dc_link_v == 540.0);
    assert_true(D->firing_frequency_hz == 6e3);
    assert_true(D->resonance_tolerance == 0.05);
    assert_true(D->q_tolerance == 0.15);
    assert_true(D->turnoff_ratio_min == 1.3);
    assert_true(D->peak_current_max_a == 350.0);
    assert_true(D->sample_rate_hz == 10e6);
    assert_true(D->duration_s == 2e-3);
    /* the other spellings of micro: Greek mu and u */
    parse_ok("[tank]\ncapacitance = 2.2 \xce\xbc" "F\n");
    assert_true(D->capacitance_f == 2.2e-6);
    parse_ok("[tank]\ncapacitance = 2.2e-6 F\n");
    assert_true(D->capacitance_f == 2.2e-6);
}

static void test_design_choices(void **state)
{
    (void)state;
    static const struct { const char *name; tf_topology t; } topo[] = {
        {"single", TF_TOPO_SINGLE}, {"half-bridge", TF_TOPO_HALF_BRIDGE},
        {"full-bridge", TF_TOPO_FULL_BRIDGE}, {"ring-down", TF_TOPO_RING_DOWN}};
    char text[128];
    for (size_t i = 0; i < 4; i++) {
        snprintf(text, sizeof text, "[inverter]\ntopology = %s\n", topo[i].name);
        parse_ok(text);
        assert_int_equal(D->topology, topo[i].t);
    }
    parse_ok("[inverter]\ntopology = half-bridge\ncapacitor = split\n[limits]\nmode = overlapping\n"
             "[capture]\nformat = wav\n");
    assert_int_equal(D->split_capacitor, 1);
    assert_int_equal(D->mode, TF_MODE_OVERLAPPING);
    assert_int_equal(D->format_wav, 1);
    parse_ok("[limits]\nmode = non-overlapping\n");
    assert_int_equal(D->mode, TF_MODE_NON_OVERLAPPING);
    parse_ok("[limits]\nmode = any\n");
    assert_int_equal(D->mode, TF_MODE_ANY);
}

/* Channels default to what the topology has; per-channel keys take the channel's unit. */
static void test_design_capture_channels(void **state)
{
    (void)state;
    parse_ok("[inverter]\ntopology = half-bridge\n[capture]\nadc_bits = 12\ni_load.noise = 0.5 A\n"
             "i_load.range = 0.4 kA\nv_out.skew = 50 ns\nv_ak1.bits = 14\nv_c.enabled = no\n"
             "g1.noise = 0.01\nseed = 18446744073709551615\ntime_digits = 12\n");
    assert_true(D->chan[TF_SYN_I_LOAD].noise == 0.5);
    assert_true(D->chan[TF_SYN_I_LOAD].range == 400.0);
    assert_true(D->chan[TF_SYN_V_OUT].skew_s == 50e-9);
    assert_int_equal(D->chan[TF_SYN_V_AK1].bits, 14);
    assert_int_equal(D->chan[TF_SYN_I_LOAD].bits, 12); /* adc_bits is the default */
    assert_int_equal(D->chan[TF_SYN_V_C].enabled, 0);
    assert_int_equal(D->chan[TF_SYN_V_OUT].enabled, 1);
    assert_int_equal(D->chan[TF_SYN_G1].enabled, 1);
    assert_int_equal(D->chan[TF_SYN_G2].enabled, 1);
    assert_int_equal(D->chan[TF_SYN_G3].enabled, 0); /* a half-bridge has two gates */
    assert_int_equal(D->chan[TF_SYN_G4].enabled, 0);
    assert_true(D->chan[TF_SYN_G1].noise == 0.01);
    assert_true(D->seed == 18446744073709551615ull);
    assert_int_equal(D->time_digits, 12);
    parse_ok("[inverter]\ntopology = full-bridge\n");
    assert_int_equal(D->chan[TF_SYN_G4].enabled, 1);
    parse_ok("[inverter]\ntopology = single\n");
    assert_int_equal(D->chan[TF_SYN_G1].enabled, 1);
    assert_int_equal(D->chan[TF_SYN_G2].enabled, 0);
    assert_string_equal(tf_design_key_unit("capture", "i_load.noise"), "A");
    assert_string_equal(tf_design_key_unit("capture", "v_out.range"), "V");
    assert_string_equal(tf_design_key_unit("capture", "v_out.skew"), "s");
    assert_string_equal(tf_design_key_unit("capture", "g2.noise"), "");
    assert_string_equal(tf_design_key_unit("tank", "capacitance"), "F");
    assert_string_equal(tf_design_key_unit("capture", "sample_rate"), "S/s");
    assert_string_equal(tf_design_key_unit("limits", "q_tolerance"), "");
    assert_string_equal(tf_design_key_unit("channels", "scale.x"), "");
    assert_null(tf_design_key_unit("tank", "capacitence"));
    assert_null(tf_design_key_unit("inverter", "topology"));
    assert_null(tf_design_key_unit("nosuch", "capacitance"));
}

static void test_design_channels_record(void **state)
{
    (void)state;
    parse_ok("[channels]\ncurrent = i_coil\noutput_voltage = v bridge\ncapacitor_voltage = v_cap\n"
             "switch_voltage = v_t1\ngate1 = g_t1\ngate4 = g_t4\nscale.i_coil = 100 A/V\n"
             "scale.v bridge = 10 V/V\nscale.raw = 2.5\n"
             "[record]\nunit_serial = HB-0421\noperator = shift B\ntest_id = t-17\n"
             "notes = first line\n  second line ; with a comment\n\tthird line\n");
    assert_string_equal(D->ch_current, "i_coil");
    assert_string_equal(D->ch_output_voltage, "v bridge");
    assert_string_equal(D->ch_gate[0], "g_t1");
    assert_string_equal(D->ch_gate[3], "g_t4");
    assert_string_equal(D->ch_gate[1], "");
    assert_int_equal(D->nscales, 3);
    assert_string_equal(D->scales[0].column, "i_coil");
    assert_true(D->scales[0].factor == 100.0);
    assert_string_equal(D->scales[0].unit, "A/V");
    assert_string_equal(D->scales[1].column, "v bridge");
    assert_string_equal(D->scales[1].unit, "V/V");
    assert_true(D->scales[2].factor == 2.5);
    assert_string_equal(D->unit_serial, "HB-0421");
    assert_string_equal(D->operator_name, "shift B");
    assert_string_equal(D->notes, "first line\nsecond line\nthird line");
    /* names longer than inih's 50-byte name buffer reach the parser whole: 63 bytes
     * fit the column field, 64 do not */
    parse_ok("[channels]\nscale.a_rather_long_column_name_from_a_scope_export_0123456789abcdefg = 2 A/V\n");
    assert_string_equal(D->scales[0].column, "a_rather_long_column_name_from_a_scope_export_0123456789abcdefg");
    expect_error("[channels]\nscale.a_rather_long_column_name_from_a_scope_export_0123456789abcdefgX = 2\n", "is longer than 63 bytes", NULL);
}

static void test_design_lists(void **state)
{
    (void)state;
    parse_ok("[inverter]\nfiring_times = 10us, 180 us,350us,\n    0.52 ms, 690e-6\n"
             "[schedule]\npoint = 0 ms, 0.45 ohm, 36 uH\npoint = 1 ms, -, 35 uH\n"
             "point = 1.5 ms, 0.5, -\n");
    assert_int_equal(D->n_firing_times, 5);
    static const double want[] = {10e-6, 180e-6, 350e-6, 0.52e-3, 690e-6};
    for (int i = 0; i < 5; i++)
        assert_true(D->firing_times_s[i] == want[i]);
    assert_int_equal(D->nschedule, 3);
    assert_true(D->sched_t_s[1] == 1e-3);
    assert_true(isnan(D->sched_r_ohm[1]));
    assert_true(D->sched_l_h[1] == 35e-6);
    assert_true(D->sched_r_ohm[2] == 0.5);
    assert_true(isnan(D->sched_l_h[2]));
    /* an empty first line with the list on continuation lines */
    parse_ok("[inverter]\nfiring_times =\n  1 us, 2 us\n  3 us\n");
    assert_int_equal(D->n_firing_times, 3);
}

/* CRLF line ends, a UTF-8 byte order mark, comments and blank lines. */
static void test_design_crlf_bom(void **state)
{
    (void)state;
    parse_ok("\xEF\xBB\xBF; design\r\n[tank]\r\ncapacitance = 2.2 \xc2\xb5" "F\r\n\r\n"
             "# hash comment\r\nresistance = 0.45 \xce\xa9 ; inline\r\n[record]\r\nnotes = a\r\n  b\r\n");
    assert_true(D->capacitance_f == 2.2e-6);
    assert_true(D->resistance_ohm == 0.45);
    assert_string_equal(D->notes, "a\nb");
    /* line numbers stay right with CRLF: the error is on line 4, column 15 */
    expect_error("[tank]\r\ncapacitance = 1 uF\r\n\r\ninductance = 1 uF\r\n",
                 "t.ini:4:14: inductance expects henries (H), found farads (F)", NULL);
    /* a BOM does not count as a column */
    expect_error("\xEF\xBB\xBF[tnak]\n", "t.ini:1:2: unknown section '[tnak]'", NULL);
}

/* ---- errors ------------------------------------------------------------------- */

static void test_design_error_unknown(void **state)
{
    (void)state;
    expect_error("[tank]\ncapacitance = 1 uF\n[tnak]\n", "t.ini:3:2: unknown section '[tnak]'",
                 "did you mean [tank]?", NULL);
    expect_error("[limit]\nmode = any\n", "t.ini:1:", "did you mean [limits]?", NULL);
    expect_error("[nothing_like_it]\n", "t.ini:1:", "unknown section", "[inverter], [tank]", NULL);
    expect_error("[tank]\ncapacitence = 1 uF\n", "t.ini:2:1: unknown key 'capacitence' in [tank]",
                 "did you mean 'capacitance'?", NULL);
    expect_error("[switch]\n\n  turnof_time = 20 us\n", "t.ini:3:3: unknown key 'turnof_time'",
                 "did you mean 'turnoff_time'?", NULL);
    expect_error("[switch]\ncapacitance = 1 uF\n", "t.ini:2:1: unknown key 'capacitance' in [switch]",
                 "did you mean [tank] capacitance?", NULL);
    expect_error("[limits]\ninductanse = 1 uH\n", "did you mean [tank] inductance?", NULL);
    expect_error("[capture]\ni_laod.noise = 1 A\n", "did you mean 'i_load.noise'?", NULL);
    expect_error("[channels]\nscael.i = 2\n", "did you mean 'scale.i'?", NULL);
    expect_error("[tank]\nzzzzzzzz = 1\n", "t.ini:2:1: unknown key 'zzzzzzzz' in [tank]", NULL);
    assert_null(strstr(E.msg, "did you mean"));
    expect_error("capacitance = 1 uF\n", "t.ini:1:1: expected a [section] header before 'capacitance'",
                 NULL);
}

static void test_design_error_dimension(void **state)
{
    (void)state;
    expect_error("[tank]\ncapacitance = 20 uH\n",
                 "t.ini:2:15: capacitance expects farads (F), found henries (H) in '20 uH'", NULL);
    expect_error("[tank]\ninductance = 5 %\n", "expects henries (H), found percent (%)", NULL);
    expect_error("[switch]\nturnoff_time = 20 uF\n", "expects seconds (s), found farads (F)", NULL);
    expect_error("[inverter]\nfiring_frequency = 6 ks\n", "expects hertz (Hz), found seconds (s)", NULL);
    expect_error("[inverter]\ndc_link = 540 A\n", "expects volts (V), found amperes (A)", NULL);
    expect_error("[limits]\npeak_current_max = 3 kV\n", "expects amperes (A), found volts (V)", NULL);
    expect_error("[limits]\nq_tolerance = 5 ohm\n", "expects a ratio (a plain number or %), found ohms",
                 NULL);
    expect_error("[capture]\nsample_rate = 10 ms\n", "expects samples per second", NULL);
    expect_error("[capture]\nv_out.range = 400 A\n", "v_out.range expects volts (V), found amperes", NULL);
    expect_error("[capture]\ni_load.noise = 1 V\n", "i_load.noise expects amperes (A)", NULL);
    expect_error("[capture]\ng1.range = 1 V\n", "g1.range expects a plain number", NULL);
    expect_error("[channels]\nscale.i = 10 mV/A\n", "volts per ampere", "100 A/V", NULL);
    expect_error("[channels]\nscale.i = 10 A\n", "expects a probe factor", NULL);
    expect_error("[schedule]\npoint = 1 ohm, 1 ohm, 1 uH\n",
                 "t.ini:2:9: point time expects seconds (s), found ohms", NULL);
    expect_error("[schedule]\npoint = 0 s, 1 ohm, 1 uF\n",
                 "t.ini:2:21: point inductance expects henries (H), found farads", NULL);
    expect_error("[inverter]\nfiring_times = 1 us, 2 uH\n",
                 "t.ini:2:22: firing_times expects seconds (s), found henries", NULL);
    expect_error("[tank]\ncapacitance = 2.2 u\n", "expects farads (F), found a prefix without a unit",
                 NULL);
}

static void test_design_error_number(void **state)
{
    (void)state;
    expect_error("[tank]\ncapacitance = abc\n",
                 "t.ini:2:15: capacitance: expected a number with an optional SI prefix and unit "
                 "(e.g. '2.2 uF'), found 'abc'", NULL);
    expect_error("[tank]\ncapacitance = 2,2 uF\n", "expected '.' as the decimal mark", NULL);
    expect_error("[tank]\ncapacitance = 2.2 uQ\n", "found 'uQ' in '2.2 uQ'", NULL);
    expect_error("[tank]\ncapacitance = 1e999 F\n", "number out of range", NULL);
    expect_error("[tank]\ncapacitance = 2.2 uF # note\n", "a comment after a value starts with ' ;'",
                 NULL);
    expect_error("[tank]\ncapacitance = 0x10\n", "expected a number", NULL);
    expect_error("[tank]\ncapacitance = inf\n", "expected a number", NULL);
    expect_error("[tank]\ncapacitance = nan\n", "expected a number", NULL);
    expect_error("[tank]\ncapacitance =\n", "t.ini:2:14: capacitance expects farads (F), found nothing",
                 NULL);
    expect_error("[tank]\ncapacitance = 0 F\n", "capacitance must be greater than zero, found '0 F'",
                 NULL);
    expect_error("[tank]\ncapacitance = -2 uF\n", "must be greater than zero", NULL);
    expect_error("[switch]\ndiode_drop = -1 V\n", "diode_drop must not be negative", NULL);
    expect_error("[capture]\ntime_digits = 0\n", "time_digits expects a whole number from 1 to 15, found '0'",
                 NULL);
    expect_error("[capture]\nvalue_digits = 16\n", "whole number from 1 to 15, found '16'", NULL);
    expect_error("[capture]\ntime_digits = 9.5\n", "whole number from 1 to 15, found '9.5'", NULL);
    expect_error("[tank]\nresistance = -0.1 ohm\n", "resistance must not be negative", NULL);
    parse_ok("[tank]\nresistance = 0 ohm\n"); /* an ideal lossless tank */
    assert_true(D->resistance_ohm == 0.0);
    expect_error("[capture]\nv_out.bits = 33\n", "from 0 to 32", NULL);
    expect_error("[capture]\nadc_bits = 12 bits\n", "adc_bits expects a whole number", NULL);
    expect_error("[capture]\nseed = 18446744073709551616\n", "seed expects a whole number", NULL);
    expect_error("[capture]\nseed = -1\n", "seed expects a whole number", NULL);
    expect_error("[capture]\ng1.enabled = maybe\n", "g1.enabled expects yes or no, found 'maybe'", NULL);
}

static void test_design_error_enum(void **state)
{
    (void)state;
    expect_error("[inverter]\ntopology = halfbridge\n",
                 "t.ini:2:12: topology expects single, half-bridge, full-bridge or ring-down, "
                 "found 'halfbridge' (did you mean 'half-bridge'?)", NULL);
    expect_error("[inverter]\ncapacitor = splitted\n", "capacitor expects series or split",
                 "did you mean 'split'?", NULL);
    expect_error("[limits]\nmode = continuous\n", "mode expects non-overlapping, overlapping or any", NULL);
    expect_error("[capture]\nformat = flac\n", "format expects csv or wav, found 'flac'", NULL);
    expect_error("[inverter]\ntopology = Single\n", "did you mean 'single'?", NULL);
}

static void test_design_error_duplicate(void **state)
{
    (void)state;
    expect_error("[tank]\ncapacitance = 1 uF\n; again\ncapacitance = 2 uF\n",
                 "t.ini:4:1: duplicate key 'capacitance' in [tank] (first given at line 2)", NULL);
    expect_error("[tank]\ncapacitance = 1 uF\n[switch]\n[tank]\n",
                 "t.ini:4:2: duplicate section [tank] (first at line 1)", NULL);
    expect_error("[channels]\nscale.a = 1\nscale.a = 2\n",
                 "t.ini:3:1: duplicate key 'scale.a' in [channels] (first given at line 2)", NULL);
    expect_error("[inverter]\nfiring_frequency = 6 kHz\nfiring_times = 1 us\n",
                 "t.ini:3: [inverter] firing_frequency (line 2) and firing_times (line 3) both given",
                 NULL);
}

static void test_design_error_order(void **state)
{
    (void)state;
    expect_error("[inverter]\nfiring_times = 10 us, 180 us, 100 us\n",
                 "t.ini:2:31: firing times must increase: '100 us' is not after '180 us'", NULL);
    expect_error("[inverter]\nfiring_times = 10 us, 180 us,\n  180 us\n",
                 "t.ini:3:3: firing times must increase", NULL);
    expect_error("[inverter]\nfiring_times = 10 us,, 20 us\n", "t.ini:2:22: firing_times: expected an "
                 "instant, found an empty entry", NULL);
    expect_error("[inverter]\nfiring_times =\n", "t.ini:2: firing_times expects a list of instants", NULL);
    expect_error("[schedule]\npoint = 0 ms, 0.45 ohm, 36 uH\npoint = 2 ms, 0.5 ohm, 36 uH\n"
                 "point = 1 ms, 0.5 ohm, 36 uH\n",
                 "t.ini:4:9: schedule times must increase: '1 ms' is not after '2 ms' (line 3)", NULL);
    expect_error("[schedule]\npoint = 0 ms, 0.45 ohm\n",
                 "point expects 'time, resistance, inductance'", "found 2 entries", NULL);
    expect_error("[schedule]\npoint = 0 ms, -1 ohm, 1 uH\n", "point resistance must not be negative",
                 NULL);
    expect_error("[schedule]\npoint = 0 ms, 1 ohm, 0 uH\n", "point inductance must be greater than zero",
                 NULL);
}

/* Too many entries: firing times, schedule points, scale factors. */
static void test_design_error_too_many(void **state)
{
    (void)state;
    size_t cap = 64 * 1024 + (size_t)TF_DESIGN_MAX_FIRINGS * 16;
    char *text = malloc(cap);
    assert_non_null(text);
    size_t n = (size_t)snprintf(text, cap, "[inverter]\nfiring_times =\n");
    for (int i = 0; i <= TF_DESIGN_MAX_FIRINGS; i++)
        n += (size_t)snprintf(text + n, cap - n, "%s%d us%s", i % 10 ? "" : "  ", i + 1,
                              i % 10 == 9 ? "\n" : ", ");
    text[n++] = '\n';
    text[n] = '\0';
    /* entry 4097 sits on continuation line 411 (line 3 holds entries 1..10) */
    char want[64];
    snprintf(want, sizeof want, "t.ini:%d:", 3 + TF_DESIGN_MAX_FIRINGS / 10);
    expect_error(text, want, "too many firing times (at most 4096)", NULL);
    /* exactly the maximum is fine */
    char *cut = strstr(text, "4097 us");
    assert_non_null(cut);
    strcpy(cut, "\n");
    parse_ok(text);
    assert_int_equal(D->n_firing_times, TF_DESIGN_MAX_FIRINGS);
    assert_true(D->firing_times_s[TF_DESIGN_MAX_FIRINGS - 1] == 4096e-6);

    n = (size_t)snprintf(text, cap, "[schedule]\n");
    for (int i = 0; i <= TF_DESIGN_MAX_SCHEDULE; i++)
        n += (size_t)snprintf(text + n, cap - n, "point = %d us, 1 ohm, 1 uH\n", i);
    expect_error(text, "too many schedule points (at most 256)", NULL);
    snprintf(want, sizeof want, "t.ini:%d:", 2 + TF_DESIGN_MAX_SCHEDULE);
    assert_non_null(strstr(E.msg, want));

    n = (size_t)snprintf(text, cap, "[channels]\n");
    for (int i = 0; i <= TF_DESIGN_MAX_SCALES; i++)
        n += (size_t)snprintf(text + n, cap - n, "scale.c%d = 2\n", i);
    expect_error(text, "too many scale factors (at most 16)", NULL);
    free(text);
}

static void test_design_error_syntax(void **state)
{
    (void)state;
    expect_error("[tank]\ncapacitance = 1 uF\njust words\n",
                 "t.ini:3: expected 'key = value', '[section]' or a comment, found 'just words'", NULL);
    expect_error("[tank\ncapacitance = 1 uF\n", "t.ini:1: expected ']' to close the section name", NULL);
    expect_error("[tank]\n = 1 uF\n", "t.ini:2:", "expected a key name before '='", NULL);
    expect_error("[tank] extra\n", "t.ini:1:8: expected a comment or the end of the line after '[tank]'",
                 NULL);
    /* an indented line continues the previous key in INI: only notes and lists may */
    expect_error("[tank]\ncapacitance = 1 uF\n  inductance = 36 uH\n",
                 "t.ini:3:3: unexpected indented line: it would continue 'capacitance' from line 2",
                 NULL);
    expect_error("[tank]\ncapacitance = 1 uF\n\n; comment\n  inductance = 36 uH\n", "t.ini:5:3:", NULL);
    /* after a section header an indented key is a key */
    parse_ok("[tank]\n  capacitance = 1 uF\n[switch]\n\tdiode_drop = 1 V\n");
    assert_true(D->capacitance_f == 1e-6);
    assert_true(D->diode_drop_v == 1.0);
}

/* Bytes a text file should not hold, and lines longer than the parser's buffer. */
static void test_design_error_bytes(void **state)
{
    (void)state;
    static const char nul[] = "[tank]\ncapac\0itance = 1 uF\n";
    assert_int_equal(tf_design_parse(nul, sizeof nul - 1, "t.ini", D, &E), TF_ERR_DATA);
    assert_non_null(strstr(E.msg, "t.ini:2:6: expected text, found a NUL byte"));
    expect_error("[tank]\ncapacitance = 2.2 \xb5" "F\n", "t.ini:2:19: expected UTF-8 text, found byte 0xB5",
                 NULL);
    expect_error("[record]\nnotes = a\x01" "b\n", "t.ini:2:10: expected text, found control character 0x01",
                 NULL);
    expect_error("[record]\nnotes = a\rb\n", "t.ini:2:10: expected text, found a carriage return", NULL);
    expect_error("[tank]\r[switch]\r", "t.ini:1:7: expected text, found a carriage return", NULL);
    expect_error("[record]\nnotes = \xed\xa0\x80\n", "expected UTF-8 text", NULL); /* a surrogate */
    expect_error("[record]\nnotes = \xc0\xaf\n", "expected UTF-8 text", NULL);     /* overlong */
    char line[400];
    memset(line, 'x', sizeof line);
    memcpy(line, "[record]\nnotes = ", 17);
    line[sizeof line - 2] = '\n';
    line[sizeof line - 1] = '\0';
    expect_error(line, "t.ini:2: line is longer than", "continuation lines", NULL);
    /* text longer than its field */
    char big[2400];
    size_t n = (size_t)snprintf(big, sizeof big, "[record]\nnotes = a\n");
    for (int i = 0; i < 12; i++)
        n += (size_t)snprintf(big + n, sizeof big - n, "  %0100d\n", i);
    expect_error(big, "notes is longer than 1023 bytes", NULL);
    expect_error("[channels]\ncurrent =\n", "current expects a capture column name, found nothing", NULL);
    assert_int_equal(tf_design_parse(NULL, 3, "t.ini", D, &E), TF_ERR_USAGE);
    assert_int_equal(tf_design_parse(NULL, 0, "t.ini", D, &E), TF_OK);
}

/* Keys that contradict the topology. */
static void test_design_error_topology(void **state)
{
    (void)state;
    expect_error("[inverter]\ntopology = full-bridge\ncapacitor = split\n",
                 "t.ini:3: capacitor = split needs topology = half-bridge, found topology = full-bridge",
                 NULL);
    expect_error("[inverter]\nreset_inductance = 2 mH\ntopology = half-bridge\n",
                 "t.ini:2: reset_inductance is used only with topology = single", NULL);
    expect_error("[inverter]\ntopology = single\nprecharge = 300 V\n",
                 "t.ini:3: precharge is used only with topology = ring-down", NULL);
    expect_error("[inverter]\ntopology = ring-down\nfiring_frequency = 1 kHz\n",
                 "t.ini:3: a ring-down is released once", NULL);
    expect_error("[inverter]\ntopology = ring-down\nfiring_times = 1 us, 2 us\n",
                 "firing_times has 2 instants", NULL);
    expect_error("[inverter]\ntopology = half-bridge\n[capture]\ng3.enabled = yes\n",
                 "t.ini:4: g3.enabled: topology = half-bridge has no gate 3", NULL);
    parse_ok("[inverter]\ntopology = half-bridge\n[capture]\ng3.enabled = no\n");
}

static void test_design_load_errors(void **state)
{
    (void)state;
    assert_int_equal(tf_design_load("/nonexistent/d.ini", D, &E), TF_ERR_NOINPUT);
    assert_non_null(strstr(E.msg, "/nonexistent/d.ini: cannot open design file"));
    assert_int_equal(tf_design_load(tf_test_tmpdir(), D, &E), TF_ERR_NOINPUT);
    assert_non_null(strstr(E.msg, "is a directory"));
    const char *p = tf_test_tmpfile("bad.ini");
    assert_int_equal(tf_test_write(p, "[tank]\ncapacitance = 20 uH\n"), 0);
    assert_int_equal(tf_design_load(p, D, &E), TF_ERR_DATA);
    char want[600];
    snprintf(want, sizeof want, "%s:2:15: capacitance expects farads (F)", p);
    assert_non_null(strstr(E.msg, want));
    /* more than 1 MiB is not a design file (comment lines, so only the size fails) */
    size_t big = (1u << 20) + 1;
    char *text = malloc(big + 1);
    assert_non_null(text);
    for (size_t i = 0; i < big; i++)
        text[i] = i % 64 == 63 ? '\n' : i % 64 == 0 ? ';' : 'x';
    text[big] = '\0';
    const char *q = tf_test_tmpfile("big.ini");
    assert_int_equal(tf_test_write(q, text), 0);
    assert_int_equal(tf_design_load(q, D, &E), TF_ERR_DATA);
    assert_non_null(strstr(E.msg, "larger than 1048576 bytes"));
    text[big - 2] = '\n';
    text[big - 1] = '\0'; /* exactly 1 MiB loads */
    assert_int_equal(tf_test_write(q, text), 0);
    assert_int_equal(tf_design_load(q, D, &E), TF_OK);
    free(text);
}

/* ---- validation --------------------------------------------------------------- */

static const char *const complete_half_bridge =
    "[inverter]\ntopology = half-bridge\ndc_link = 540 V\nfiring_frequency = 6 kHz\n"
    "[tank]\ncapacitance = 2.2 uF\ninductance = 36 uH\nresistance = 0.45 ohm\n"
    "[switch]\nturnoff_time = 20 us\n";

static void expect_invalid(int for_synth, const char *frag)
{
    assert_int_equal(tf_design_validate(D, for_synth, &E), TF_ERR_DATA);
    if (!strstr(E.msg, frag))
        fail_msg("message '%s' lacks '%s'", E.msg, frag);
}

static void test_design_validate(void **state)
{
    (void)state;
    parse_ok(complete_half_bridge);
    assert_int_equal(tf_design_validate(D, 1, &E), TF_OK);
    assert_int_equal(tf_design_validate(D, 0, &E), TF_OK);

    /* each required key, removed in turn, is named */
    static const struct { const char *line, *frag; } req[] = {
        {"topology = half-bridge\n", "t.ini: [inverter] topology: required to simulate"},
        {"dc_link = 540 V\n", "[inverter] dc_link: required to simulate the design, not given"},
        {"firing_frequency = 6 kHz\n", "[inverter] firing_frequency: required"},
        {"capacitance = 2.2 uF\n", "t.ini: [tank] capacitance: required to simulate the design, not given"},
        {"inductance = 36 uH\n", "[tank] inductance: required"},
        {"resistance = 0.45 ohm\n", "[tank] resistance: required"},
        {"turnoff_time = 20 us\n", "[switch] turnoff_time: required"},
    };
    for (size_t i = 0; i < sizeof req / sizeof req[0]; i++) {
        char text[512];
        const char *at = strstr(complete_half_bridge, req[i].line);
        assert_non_null(at);
        size_t pre = (size_t)(at - complete_half_bridge);
        snprintf(text, sizeof text, "%.*s%s", (int)pre, complete_half_bridge, at + strlen(req[i].line));
        parse_ok(text);
        expect_invalid(1, req[i].frag);
        assert_int_equal(tf_design_validate(D, 0, &E), TF_OK); /* checks need none of them */
    }

    parse_ok("[inverter]\ntopology = single\ndc_link = 300 V\nfiring_frequency = 2 kHz\n"
             "reset_resistance = 1 ohm\n[tank]\ncapacitance = 2 uF\ninductance = 40 uH\n"
             "resistance = 1 ohm\n[switch]\nturnoff_time = 30 us\n");
    expect_invalid(1, "[inverter] reset_inductance: required for a single stage");
    parse_ok("[inverter]\ntopology = ring-down\n[tank]\ncapacitance = 2 uF\ninductance = 40 uH\n"
             "resistance = 1 ohm\n");
    expect_invalid(1, "[inverter] precharge: required to simulate a ring-down");
    parse_ok("[inverter]\ntopology = ring-down\nprecharge = -300 V\n[tank]\ncapacitance = 2 uF\n"
             "inductance = 40 uH\nresistance = 1 ohm\n");
    assert_int_equal(tf_design_validate(D, 1, &E), TF_OK);

    char text[1024];
    snprintf(text, sizeof text, "%s[capture]\nv_out.skew = 2 ms\n", complete_half_bridge);
    parse_ok(text);
    expect_invalid(1, "[capture] v_out.skew: must be within +/- 1 ms");
    snprintf(text, sizeof text, "%s[capture]\nduration = 100 ns\n", complete_half_bridge);
    parse_ok(text);
    expect_invalid(1, "fewer than two samples");

    /* acceptance checks: each limit needs the design value it is compared against */
    parse_ok("[limits]\nturnoff_ratio_min = 1.3\n");
    expect_invalid(0, "t.ini: [switch] turnoff_time: needed by [limits] turnoff_ratio_min, not given");
    parse_ok("[limits]\nq_tolerance = 10 %\n[tank]\ncapacitance = 1 uF\ninductance = 1 uH\n");
    expect_invalid(0, "[tank] resistance: needed by [limits] q_tolerance");
    parse_ok("[limits]\nresonance_tolerance = 5 %\n[tank]\ncapacitance = 1 uF\n");
    expect_invalid(0, "[tank] inductance: needed by [limits] resonance_tolerance");
    parse_ok("[limits]\nresistance_tolerance = 5 %\n");
    expect_invalid(0, "[tank] resistance: needed by [limits] resistance_tolerance");
    parse_ok("[limits]\nresistance_tolerance = 5 %\n[tank]\nresistance = 0\n");
    expect_invalid(0, "[limits] resistance_tolerance: relative to [tank] resistance, which is 0 ohm");
    parse_ok("[limits]\nq_tolerance = 5 %\n[tank]\nresistance = 0\ncapacitance = 1 uF\ninductance = 1 uH\n");
    expect_invalid(0, "[limits] q_tolerance: [tank] resistance is 0 ohm");
    parse_ok("[channels]\ncurrent = a\ngate2 = b\ngate3 = a\n");
    expect_invalid(0, "[channels] current and gate3 both name column 'a'");
    parse_ok("[channels]\ncurrent = i\nscale.i = 10 V/V\n");
    expect_invalid(0, "[channels] scale.i: V/V on a current column");
    parse_ok("[channels]\noutput_voltage = v\nscale.v = 10 A/V\n");
    expect_invalid(0, "[channels] scale.v: A/V on a voltage column");
}

/* ---- JSON and the documented example ------------------------------------------ */

static void test_design_json(void **state)
{
    (void)state;
    parse_ok("[inverter]\ntopology = half-bridge\ndc_link = 540 V\nfiring_times = 10 us, 20 us\n"
             "[tank]\ncapacitance = 2.2 uF\n[limits]\nq_tolerance = 5 %\n"
             "[channels]\ncurrent = i\nscale.i = 100 A/V\n[record]\nnotes = a\n  b\n"
             "[schedule]\npoint = 0 s, -, 1 uH\n");
    json_t *j = tf_design_to_json(D);
    assert_non_null(j);
    assert_string_equal(json_string_value(json_object_get(json_object_get(j, "inverter"), "topology")),
                        "half-bridge");
    assert_true(json_real_value(json_object_get(json_object_get(j, "tank"), "capacitance")) == 2.2e-6);
    assert_true(json_real_value(json_object_get(json_object_get(j, "limits"), "q_tolerance")) == 0.05);
    assert_null(json_object_get(json_object_get(j, "tank"), "inductance")); /* not given */
    json_t *ft = json_object_get(json_object_get(j, "inverter"), "firing_times");
    assert_int_equal(json_array_size(ft), 2);
    assert_true(json_real_value(json_array_get(ft, 1)) == 20e-6);
    json_t *units = json_object_get(j, "units");
    assert_string_equal(json_string_value(json_object_get(units, "tank.capacitance")), "F");
    assert_string_equal(json_string_value(json_object_get(units, "limits.q_tolerance")), "1");
    assert_string_equal(json_string_value(json_object_get(units, "channels.scale.i")), "A/V");
    assert_true(json_real_value(json_object_get(json_object_get(j, "channels"), "scale.i")) == 100.0);
    assert_string_equal(json_string_value(json_object_get(json_object_get(j, "record"), "notes")), "a\nb");
    json_t *pt = json_array_get(json_object_get(json_object_get(j, "schedule"), "point"), 0);
    assert_true(json_is_null(json_array_get(pt, 1)));
    assert_true(json_real_value(json_array_get(pt, 2)) == 1e-6);
    assert_int_equal(json_integer_value(json_object_get(json_object_get(j, "capture"), "seed")), 1);
    assert_true(json_is_true(json_object_get(json_object_get(j, "capture"), "g2.enabled")));
    assert_true(json_is_false(json_object_get(json_object_get(j, "capture"), "g3.enabled")));
    /* the whole object serialises (valid UTF-8, no NAN) */
    char *s = json_dumps(j, JSON_COMPACT);
    assert_non_null(s);
    free(s);
    json_decref(j);
}

/* Write a design back as INI from its JSON (bare numbers in base units), for the round trip. */
static char *json_to_ini(json_t *j)
{
    json_t *units = json_object_get(j, "units");
    size_t cap = 1 << 20, n = 0;
    char *out = malloc(cap);
    const char *sec;
    json_t *obj;
    json_object_foreach(j, sec, obj) {
        if (strcmp(sec, "units") == 0)
            continue;
        n += (size_t)snprintf(out + n, cap - n, "[%s]\n", sec);
        const char *key;
        json_t *v;
        json_object_foreach(obj, key, v) {
            if (json_is_string(v)) {
                const char *s = json_string_value(v);
                n += (size_t)snprintf(out + n, cap - n, "%s = ", key);
                for (; *s; s++) /* notes: newlines become continuation lines */
                    n += (size_t)snprintf(out + n, cap - n, *s == '\n' ? "\n  " : "%c", *s);
                n += (size_t)snprintf(out + n, cap - n, "\n");
            } else if (json_is_boolean(v)) {
                n += (size_t)snprintf(out + n, cap - n, "%s = %s\n", key, json_is_true(v) ? "yes" : "no");
            } else if (json_is_integer(v)) {
                n += (size_t)snprintf(out + n, cap - n, "%s = %lld\n", key, (long long)json_integer_value(v));
            } else if (json_is_real(v) && strncmp(key, "scale.", 6) == 0) {
                /* a probe factor keeps its unit as written (A/V or V/V) */
                char uk[96];
                snprintf(uk, sizeof uk, "channels.%s", key);
                const char *u = json_string_value(json_object_get(units, uk));
                n += (size_t)snprintf(out + n, cap - n, "%s = %.17g %s\n", key, json_real_value(v),
                                      u && strcmp(u, "1") != 0 ? u : "");
            } else if (json_is_real(v)) {
                n += (size_t)snprintf(out + n, cap - n, "%s = %.17g\n", key, json_real_value(v));
            } else if (strcmp(key, "firing_times") == 0) {
                n += (size_t)snprintf(out + n, cap - n, "%s =\n", key);
                size_t i;
                json_t *x;
                json_array_foreach(v, i, x)
                    n += (size_t)snprintf(out + n, cap - n, "  %.17g,\n", json_real_value(x));
            } else { /* schedule points */
                size_t i;
                json_t *p;
                json_array_foreach(v, i, p) {
                    n += (size_t)snprintf(out + n, cap - n, "point = %.17g", json_real_value(json_array_get(p, 0)));
                    for (size_t k = 1; k < 3; k++) {
                        json_t *x = json_array_get(p, k);
                        if (json_is_null(x))
                            n += (size_t)snprintf(out + n, cap - n, ", -");
                        else
                            n += (size_t)snprintf(out + n, cap - n, ", %.17g", json_real_value(x));
                    }
                    n += (size_t)snprintf(out + n, cap - n, "\n");
                }
            }
        }
    }
    return out;
}

/* D -> JSON -> INI with bare numbers -> a design equal to D byte for byte. */
static void round_trip(void)
{
    tf_design *copy = malloc(sizeof *copy);
    assert_non_null(copy);
    memcpy(copy, D, sizeof *copy);
    json_t *j = tf_design_to_json(D);
    assert_non_null(j);
    char *ini = json_to_ini(j);
    json_decref(j);
    if (parse(ini) != TF_OK)
        fail_msg("%s\n%s", E.msg, ini);
    snprintf(D->path, sizeof D->path, "%s", copy->path);
    assert_memory_equal(D, copy, sizeof *copy);
    free(ini);
    free(copy);
}

/* The documented example parses, holds what its comments say, validates for both
 * uses, and survives a round trip through JSON and back to INI unchanged. */
static void test_design_example_round_trip(void **state)
{
    (void)state;
    const char *path = tf_test_src("docs/example-design.ini");
    if (tf_design_load(path, D, &E) != TF_OK)
        fail_msg("%s", E.msg);
    assert_int_equal(D->topology, TF_TOPO_HALF_BRIDGE);
    assert_true(D->capacitance_f == 2.2e-6);
    assert_true(D->inductance_h == 36e-6);
    assert_true(D->resistance_ohm == 0.45);
    assert_true(D->firing_frequency_hz == 6e3);
    assert_true(D->turnoff_time_s == 20e-6);
    assert_int_equal(D->mode, TF_MODE_NON_OVERLAPPING);
    assert_int_equal(D->nschedule, 3);
    assert_int_equal(D->nscales, 0);
    assert_string_equal(D->ch_current, "i_load"); /* the simulator's column names */
    assert_string_equal(D->ch_gate[1], "g2");
    assert_int_equal(D->chan[TF_SYN_I_LOAD].bits, 12);
    assert_int_equal(D->chan[TF_SYN_V_AK1].bits, 14);
    assert_true(D->seed == 42);
    assert_non_null(strchr(D->notes, '\n'));
    assert_int_equal(tf_design_validate(D, 1, &E), TF_OK);
    assert_int_equal(tf_design_validate(D, 0, &E), TF_OK);
    /* the comment's figures: f0 = 1 / (2 pi sqrt(L C)) ~ 17.9 kHz, Q = w0 L / R ~ 9
     * (source: textbook series RLC response) */
    double w0 = 1.0 / sqrt(D->inductance_h * D->capacitance_f);
    assert_true(fabs(w0 / (2 * M_PI) - 17.9e3) < 0.05e3);
    assert_true(fabs(w0 * D->inductance_h / D->resistance_ohm - 9.0) < 0.1);

    round_trip();
    /* and a design with what the example leaves out: scales, firing times, a split
     * capacitor, wav, a seed beyond 2^63 (written as a string), disabled channels */
    parse_ok("[inverter]\ntopology = half-bridge\ncapacitor = split\nfiring_times = 1 us, 2.5 us,\n"
             "  7 us\n[limits]\nmode = overlapping\n[channels]\ncurrent = i\nscale.i = 50 A/V\n"
             "scale.v = 10 V/V\nscale.w = 3\n[capture]\nformat = wav\nseed = 18446744073709551615\n"
             "v_c.enabled = no\nstart = -1 us\n[record]\noperator = a; b\n");
    round_trip();
}

/* docs/design-file.md names every section and key the parser knows. */
static void test_design_docs_cover_keys(void **state)
{
    (void)state;
    char *doc = tf_test_slurp(tf_test_src("docs/design-file.md"), NULL);
    assert_non_null(doc);
    char want[96], missing[160] = "";
    for (size_t i = 0; tf_design_sections[i] && !missing[0]; i++) {
        snprintf(want, sizeof want, "### `[%s]`", tf_design_sections[i]);
        if (!strstr(doc, want))
            snprintf(missing, sizeof missing, "the heading %s", want);
    }
    for (size_t i = 0; tf_dkeys[i].section && !missing[0]; i++) {
        const char *dot = strchr(tf_dkeys[i].key, '.');
        snprintf(want, sizeof want, "`%s%s`", dot ? "CH" : tf_dkeys[i].key, dot ? dot : "");
        if (!strstr(doc, want))
            snprintf(missing, sizeof missing, "[%s] %s", tf_dkeys[i].section, tf_dkeys[i].key);
    }
    if (!missing[0] && !strstr(doc, "`scale.COLUMN`"))
        snprintf(missing, sizeof missing, "scale.COLUMN");
    free(doc);
    if (missing[0])
        fail_msg("docs/design-file.md does not describe %s", missing);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_design_defaults),
        cmocka_unit_test(test_design_units),
        cmocka_unit_test(test_design_choices),
        cmocka_unit_test(test_design_capture_channels),
        cmocka_unit_test(test_design_channels_record),
        cmocka_unit_test(test_design_lists),
        cmocka_unit_test(test_design_crlf_bom),
        cmocka_unit_test(test_design_error_unknown),
        cmocka_unit_test(test_design_error_dimension),
        cmocka_unit_test(test_design_error_number),
        cmocka_unit_test(test_design_error_enum),
        cmocka_unit_test(test_design_error_duplicate),
        cmocka_unit_test(test_design_error_order),
        cmocka_unit_test(test_design_error_too_many),
        cmocka_unit_test(test_design_error_syntax),
        cmocka_unit_test(test_design_error_bytes),
        cmocka_unit_test(test_design_error_topology),
        cmocka_unit_test(test_design_load_errors),
        cmocka_unit_test(test_design_validate),
        cmocka_unit_test(test_design_json),
        cmocka_unit_test(test_design_example_round_trip),
        cmocka_unit_test(test_design_docs_cover_keys),
    };
    return cmocka_run_group_tests(tests, setup, teardown);
}
