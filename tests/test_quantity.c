/* Quantities with SI prefixes and units, as written in design files and options. */
#include "tf_test.h"

#include <math.h>
#include <string.h>
#include <tankfit/import.h>

static void check(const char *text, double want, const char *unit)
{
    double v;
    char u[16];
    assert_int_equal(tf_parse_quantity(text, &v, u, sizeof u), 0);
    /* SI prefixes as defined by the BIPM SI Brochure (source: SI Brochure, 9th ed.) */
    assert_true(tf_test_reldiff(v, want) < 1e-15);
    assert_string_equal(u, unit);
}

static void test_quantity_prefixes(void **state)
{
    (void)state;
    check("2.2 uF", 2.2e-6, "F");
    check("2.2 \xc2\xb5" "F", 2.2e-6, "F");
    check("2.2e-6 F", 2.2e-6, "F");
    check("20us", 20e-6, "s");
    check("6 kHz", 6e3, "Hz");
    check("5 %", 0.05, "%");
    check("  -1.5e-3  ", -1.5e-3, "");
    check("36 uH", 36e-6, "H");
    check("0.45 ohm", 0.45, "ohm");
    check("10 MS/s", 10e6, "S/s");
    check("2kV", 2e3, "V");
    check("3 m", 3e-3, "");
}

static void test_quantity_rejects(void **state)
{
    (void)state;
    double v;
    char u[16];
    assert_int_equal(tf_parse_quantity("", &v, u, sizeof u), -1);
    assert_int_equal(tf_parse_quantity("abc", &v, u, sizeof u), -1);
    assert_int_equal(tf_parse_quantity("2.2 uQ", &v, u, sizeof u), -1);
    assert_int_equal(tf_parse_quantity("1e999", &v, u, sizeof u), -1);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_quantity_prefixes),
        cmocka_unit_test(test_quantity_rejects),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
