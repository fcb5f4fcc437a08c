/* SI-prefixed number formatting (prefixes: BIPM SI Brochure, 9th edition, table 7). */
#include "tf_test.h"

#include <math.h>
#include <string.h>
#include <tankfit/import.h>
#include <tankfit/siformat.h>

static void check(double v, const char *unit, int digits, const char *want)
{
    char buf[64];
    assert_ptr_equal(tf_si_format(buf, sizeof buf, v, unit, digits), buf);
    assert_string_equal(buf, want);
}

static void test_siformat_prefixes(void **state)
{
    (void)state;
    /* source: SI Brochure prefixes k = 1e3, m = 1e-3, u (micro) = 1e-6 ... */
    check(6012.0, "Hz", 4, "6.012 kHz");
    check(-0.00123, "A", 3, "-1.23 mA");
    check(6000.0, "Hz", 4, "6.000 kHz");
    check(1.5e-8, "s", 3, "15.0 ns");
    check(2.2e-6, "F", 2, "2.2 uF");
    check(36e-6, "H", 3, "36.0 uH");
    check(10e6, "Hz", 3, "10.0 MHz");
    check(450e-3, "ohm", 3, "450 mohm");
    check(123.456, "V", 5, "123.46 V");
    check(1e-24, "s", 2, "1.0 ys");
    check(2.5e26, "J", 2, "250 YJ");
}

static void test_siformat_rounding(void **state)
{
    (void)state;
    /* rounding to the digits may carry into the next prefix */
    check(999.96, "Hz", 4, "1.000 kHz");
    check(999.94, "Hz", 4, "999.9 Hz");
    check(-0.00099996, "A", 4, "-1.000 mA");
    check(123456.0, "V", 1, "100 kV");
}

static void test_siformat_special(void **state)
{
    (void)state;
    check(0.0, "V", 4, "0.000 V");
    check(NAN, "V", 4, "n/a");
    check(INFINITY, "A", 3, "inf A");
    check(-INFINITY, "A", 3, "-inf A");
    check(9.94, "", 3, "9.94");      /* dimensionless: no prefix */
    check(9.94, NULL, 3, "9.94");
    check(0.05, "%", 2, "0.05 %");   /* units that take no prefix */
    check(0.353553, "FS", 4, "0.3536 FS");
    check(1e30, "V", 3, "1.00e+30 V");
    check(1e-30, "V", 3, "1.00e-30 V");
    check(1.0, "V", 40, "1.0000000000000000 V"); /* digits clamped to 17 */
    check(1.0, "V", 0, "1 V");                   /* and to 1 */
}

static void test_siformat_truncates(void **state)
{
    (void)state;
    char buf[6];
    tf_si_format(buf, sizeof buf, 6012.0, "Hz", 4);
    assert_string_equal(buf, "6.012");
    assert_int_equal(strlen(buf), 5);
    assert_null(tf_si_format(NULL, 0, 1.0, "V", 3));
}

static void test_siformat_round_trip(void **state)
{
    (void)state;
    /* what the formatter writes, the quantity parser reads back (17 digits) */
    const double v[] = {6012.0, -0.00123, 1.5e-8, 36e-6, 10e6, 0.45, 3.3e-12};
    const char *u[] = {"Hz", "A", "s", "H", "Hz", "ohm", "F"};
    for (int k = 0; k < 7; k++) {
        char buf[64], unit[16];
        double back;
        tf_si_format(buf, sizeof buf, v[k], u[k], 17);
        assert_int_equal(tf_parse_quantity(buf, &back, unit, sizeof unit), 0);
        assert_true(tf_test_reldiff(back, v[k]) < 1e-15);
        assert_string_equal(unit, u[k]);
    }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_siformat_prefixes),
        cmocka_unit_test(test_siformat_rounding),
        cmocka_unit_test(test_siformat_special),
        cmocka_unit_test(test_siformat_truncates),
        cmocka_unit_test(test_siformat_round_trip),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
