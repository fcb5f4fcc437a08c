/* Channel roles: explicit names, the design's [channels], guesses from names and units. */
#include "tf_test.h"

#include <string.h>
#include <tankfit/capture.h>
#include <tankfit/design.h>
#include <tankfit/roles.h>

/* A capture with the given channel names and units (4 samples each, zero). */
static tf_capture *make(size_t nchan, const char *const *names, const char *const *units)
{
    tf_capture *cap = tf_capture_create();
    tf_error err;
    assert_non_null(cap);
    assert_int_equal(tf_capture_alloc(cap, nchan, 4, &err), TF_OK);
    cap->dt_s = 1e-6;
    for (size_t c = 0; c < nchan; c++) {
        snprintf(cap->ch[c].name, sizeof cap->ch[c].name, "%s", names[c]);
        snprintf(cap->ch[c].unit, sizeof cap->ch[c].unit, "%s", units[c]);
        memset(cap->ch[c].samples, 0, 4 * sizeof(float));
    }
    return cap;
}

static void test_roles_explicit(void **state)
{
    (void)state;
    static const char *const nm[] = {"probe_a", "probe_b", "gate_a"};
    static const char *const un[] = {"A", "V", "V"};
    tf_capture *cap = make(3, nm, un);
    tf_role_names want = {.current = "probe_a", .voltage = "probe_b", .gate = {"gate_a"}};
    tf_roles r;
    tf_error err;
    assert_int_equal(tf_roles_resolve(cap, &want, NULL, &r, &err), TF_OK);
    assert_int_equal(r.current, 0);
    assert_int_equal(r.voltage, 1);
    assert_int_equal(r.gate[0], 2);
    assert_int_equal(r.gate[1], -1);
    assert_int_equal(r.cap_voltage, -1);
    assert_string_equal(r.guessed, ""); /* nothing guessed when all were named */

    /* a requested name that is not there names the channels that are */
    tf_role_names bad = {.current = "i_load"};
    assert_int_equal(tf_roles_resolve(cap, &bad, NULL, &r, &err), TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "'i_load'"));
    assert_non_null(strstr(err.msg, "probe_a (A)"));
    assert_non_null(strstr(err.msg, "gate_a (V)"));
    tf_capture_destroy(cap);
}

static void test_roles_design(void **state)
{
    (void)state;
    static const char *const nm[] = {"ch1", "ch2", "ch3"};
    static const char *const un[] = {"V", "A", "V"};
    tf_capture *cap = make(3, nm, un);
    tf_design d;
    tf_design_init(&d);
    snprintf(d.ch_current, sizeof d.ch_current, "ch2");
    snprintf(d.ch_output_voltage, sizeof d.ch_output_voltage, "ch3");
    snprintf(d.ch_gate[1], sizeof d.ch_gate[1], "ch1");
    tf_roles r;
    tf_error err;
    assert_int_equal(tf_roles_resolve(cap, NULL, &d, &r, &err), TF_OK);
    assert_int_equal(r.current, 1);
    assert_int_equal(r.voltage, 2);
    assert_int_equal(r.gate[1], 0);
    assert_int_equal(r.gate[0], -1);
    assert_string_equal(r.guessed, "");

    /* an explicit name wins over the design */
    tf_role_names want = {.voltage = "ch1"};
    assert_int_equal(tf_roles_resolve(cap, &want, &d, &r, &err), TF_OK);
    assert_int_equal(r.voltage, 0);

    /* a design naming a channel that is not there is an error, not a guess */
    snprintf(d.ch_current, sizeof d.ch_current, "i_coil");
    assert_int_equal(tf_roles_resolve(cap, NULL, &d, &r, &err), TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "[channels] current"));
    assert_non_null(strstr(err.msg, "'i_coil'"));
    tf_capture_destroy(cap);
}

static void test_roles_guessed(void **state)
{
    (void)state;
    /* common practice names, any case */
    static const char *const nm[] = {"I_Load", "V_OUT", "vc", "G1", "gate2"};
    static const char *const un[] = {"A", "V", "", "", "V"};
    tf_capture *cap = make(5, nm, un);
    tf_roles r;
    tf_error err;
    assert_int_equal(tf_roles_resolve(cap, NULL, NULL, &r, &err), TF_OK);
    assert_int_equal(r.current, 0);
    assert_int_equal(r.voltage, 1);
    assert_int_equal(r.cap_voltage, 2);
    assert_int_equal(r.gate[0], 3);
    assert_int_equal(r.gate[1], 4);
    assert_int_equal(r.switch_voltage, -1);
    assert_non_null(strstr(r.guessed, "current = 'I_Load'"));
    assert_non_null(strstr(r.guessed, "capacitor voltage = 'vc'"));
    tf_capture_destroy(cap);

    /* no current-like name: the only channel in amperes (a mA column is converted
     * to A by the importer) */
    static const char *const nm2[] = {"ch1", "ch2"};
    static const char *const un2[] = {"V", "A"};
    cap = make(2, nm2, un2);
    assert_int_equal(tf_roles_resolve(cap, NULL, NULL, &r, &err), TF_OK);
    assert_int_equal(r.current, 1);
    assert_non_null(strstr(r.guessed, "only channel in A"));
    tf_capture_destroy(cap);
}

static void test_roles_unit_contradicts_name(void **state)
{
    (void)state;
    /* a column called i_load but stated in volts is not taken as the current */
    static const char *const nm[] = {"i_load", "probe"};
    static const char *const un[] = {"V", "A"};
    tf_capture *cap = make(2, nm, un);
    tf_roles r;
    tf_error err;
    assert_int_equal(tf_roles_resolve(cap, NULL, NULL, &r, &err), TF_OK);
    assert_int_equal(r.current, 1);
    tf_capture_destroy(cap);

    static const char *const nm2[] = {"i_load"};
    static const char *const un2[] = {"V"};
    cap = make(1, nm2, un2);
    assert_int_equal(tf_roles_resolve(cap, NULL, NULL, &r, &err), TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "i_load (V)"));
    tf_capture_destroy(cap);
}

static void test_roles_no_reuse(void **state)
{
    (void)state;
    /* a channel given explicitly to one role is not guessed for another */
    static const char *const nm[] = {"i", "x"};
    static const char *const un[] = {"", "A"};
    tf_capture *cap = make(2, nm, un);
    tf_role_names want = {.voltage = "i"};
    tf_roles r;
    tf_error err;
    assert_int_equal(tf_roles_resolve(cap, &want, NULL, &r, &err), TF_OK);
    assert_int_equal(r.voltage, 0);
    assert_int_equal(r.current, 1);
    tf_capture_destroy(cap);
}

static void test_roles_ambiguous(void **state)
{
    (void)state;
    /* two channels in A, no telling name: refuse and name both */
    static const char *const nm[] = {"ch1", "ch2", "ch3"};
    static const char *const un[] = {"A", "A", "V"};
    tf_capture *cap = make(3, nm, un);
    tf_roles r;
    tf_error err;
    assert_int_equal(tf_roles_resolve(cap, NULL, NULL, &r, &err), TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "2 channels are in A"));
    assert_non_null(strstr(err.msg, "'ch1'"));
    assert_non_null(strstr(err.msg, "'ch2'"));
    assert_non_null(strstr(err.msg, "--current"));
    tf_capture_destroy(cap);

    /* two current-like names: neither is guessed; the unit rule then decides */
    static const char *const nm2[] = {"i", "current", "v"};
    static const char *const un2[] = {"", "A", "V"};
    cap = make(3, nm2, un2);
    assert_int_equal(tf_roles_resolve(cap, NULL, NULL, &r, &err), TF_OK);
    assert_int_equal(r.current, 1);
    assert_non_null(strstr(r.guessed, "only channel in A"));
    tf_capture_destroy(cap);

    /* two v_out-like names: no output voltage guessed */
    static const char *const nm3[] = {"i_load", "vout", "v_out"};
    static const char *const un3[] = {"A", "V", "V"};
    cap = make(3, nm3, un3);
    assert_int_equal(tf_roles_resolve(cap, NULL, NULL, &r, &err), TF_OK);
    assert_int_equal(r.voltage, -1);
    tf_capture_destroy(cap);
}

static void test_roles_missing_current(void **state)
{
    (void)state;
    /* voltages only, and a gate named differently (never guessed as a gate) */
    static const char *const nm[] = {"v_out", "gate_a"};
    static const char *const un[] = {"V", "V"};
    tf_capture *cap = make(2, nm, un);
    tf_roles r;
    tf_error err;
    assert_int_equal(tf_roles_resolve(cap, NULL, NULL, &r, &err), TF_ERR_USAGE);
    assert_non_null(strstr(err.msg, "no load-current channel"));
    assert_non_null(strstr(err.msg, "v_out (V)"));
    assert_non_null(strstr(err.msg, "--current"));
    tf_capture_destroy(cap);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_roles_explicit),
        cmocka_unit_test(test_roles_design),
        cmocka_unit_test(test_roles_guessed),
        cmocka_unit_test(test_roles_unit_contradicts_name),
        cmocka_unit_test(test_roles_no_reuse),
        cmocka_unit_test(test_roles_ambiguous),
        cmocka_unit_test(test_roles_missing_current),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
