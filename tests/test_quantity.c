/* Quantities with SI prefixes and units, as written in design files and options. */
#include "tf_test.h"

#include <math.h>
#include <string.h>
#include <tankfit/import.h>

#include <tankfit/siformat.h>

#include "quantity.h"

static void check(const char *text, double want, const char *unit)
{
    double v;
    char u[16];
    assert_int_equal(tf_parse_quantity(text, &v, u, sizeof u), 0);
    /* SI prefixes as defined by the BIPM SI Brochure (source: SI Brochure, 9th ed., table 7) */
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
    /* every prefix of SI Brochure table 7 that the tool reads (source: SI Brochure, 9th ed.) */
    check("1 fF", 1e-15, "F");
    check("1 pF", 1e-12, "F");
    check("1 nF", 1e-9, "F");
    check("1 mF", 1e-3, "F");
    check("1 kA", 1e3, "A");
    check("1 MHz", 1e6, "Hz");
    check("1 GHz", 1e9, "Hz");
    check("4.7 \xce\xbc" "H", 4.7e-6, "H"); /* Greek small mu U+03BC */
    check("1 yF", 1e-24, "F");
    check("1 zF", 1e-21, "F");
    check("1 aF", 1e-18, "F");
    check("1 TW", 1e12, "W");
    check("1 PHz", 1e15, "Hz");
    check("1 EHz", 1e18, "Hz");
    check("1 ZHz", 1e21, "Hz");
    check("1 YHz", 1e24, "Hz");
}

/* A prefix scales the decimal exponent, so the result is the correctly rounded
 * double of the written decimal (reference: ISO C decimal floating constants,
 * which the compiler rounds correctly, IEEE 754 round-to-nearest). */
static void test_quantity_exact(void **state)
{
    (void)state;
    double v;
    char u[16];
    static const struct { const char *text; double want; } cases[] = {
        {"2.2 uF", 2.2e-6}, {"0.1 us", 0.1e-6}, {"3.3 nF", 3.3e-9}, {"0.7 mV", 0.7e-3},
        {"1.1 kHz", 1.1e3}, {"0.3 MHz", 0.3e6}, {"12.5e-3 us", 12.5e-9}, {"7 %", 0.07},
        {"33 %", 0.33}, {"0.1 pF", 0.1e-12}, {"2.2E+2 mohm", 2.2e-1},
        /* these differ by one ulp when the prefix is applied by multiplication
         * (checked with /usr/bin/python3: float(m) * 10**e != float(m + 'e' + e)) */
        {"3.3 uF", 3.3e-6}, {"180 us", 180e-6}, {"2.2 nF", 2.2e-9}, {"0.45 mohm", 0.45e-3},
        {"36 ms", 36e-3}, {"2.2 pF", 2.2e-12}, {"0.45 %", 0.45e-2}, {"0.33 %", 0.33e-2},
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        assert_int_equal(tf_parse_quantity(cases[i].text, &v, u, sizeof u), 0);
        assert_true(v == cases[i].want);
    }
}

/* Ohm spellings and sample-rate units map to one canonical unit. */
static void test_quantity_spellings(void **state)
{
    (void)state;
    check("0.45 \xce\xa9", 0.45, "ohm");          /* U+03A9 Greek capital omega */
    check("0.45 \xe2\x84\xa6", 0.45, "ohm");      /* U+2126 ohm sign */
    check("450 m\xce\xa9", 0.45, "ohm");
    check("2 Ohm", 2.0, "ohm");
    check("10 MSa/s", 10e6, "S/s");
    check("100 A/V", 100.0, "A/V");
    check("10 mV/A", 10e-3, "V/A");
    check("+5", 5.0, "");
    check(".5 V", 0.5, "V");
    check("5. V", 5.0, "V");
}

static void test_quantity_rejects(void **state)
{
    (void)state;
    double v;
    char u[16];
    static const char *const bad[] = {
        "", "   ", "abc", "2.2 uQ", "1e999", "0x10", "0x1p3 F", "inf", "nan", "-inf V",
        "5 m%", "5 k%", "1 kFS", "2,2 uF", "2.2 u F", "e5", ".", "-", "1 mm", "2.2uF extra",
    };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        if (tf_parse_quantity(bad[i], &v, u, sizeof u) != -1)
            fail_msg("accepted '%s'", bad[i]);
    }
}

/* The detailed parser says why a text is not a quantity. */
static void test_quantity_detail(void **state)
{
    (void)state;
    tf_quantity q;
    assert_int_equal(tf_quantity_parse("", &q), TF_QTY_EMPTY);
    assert_int_equal(tf_quantity_parse("F", &q), TF_QTY_NUMBER);
    assert_int_equal(tf_quantity_parse("inf", &q), TF_QTY_NUMBER);
    assert_int_equal(tf_quantity_parse("2.2 uQ", &q), TF_QTY_UNIT);
    assert_string_equal(q.suffix, "uQ");
    assert_int_equal(tf_quantity_parse("1e400 V", &q), TF_QTY_RANGE);
    assert_int_equal(tf_quantity_parse("3 m", &q), TF_QTY_OK);
    assert_true(q.prefix_only);
    assert_int_equal(tf_quantity_parse("3 ms", &q), TF_QTY_OK);
    assert_false(q.prefix_only);
    assert_string_equal(q.suffix, "ms");
    assert_string_equal(q.unit, "s");
    /* a tiny number underflows to zero, it is not out of range */
    assert_int_equal(tf_quantity_parse("1e-400 F", &q), TF_QTY_OK);
    assert_true(q.value == 0.0);
    assert_string_equal(tf_unit_long_name("H"), "henries (H)");
    assert_string_equal(tf_unit_long_name(""), "a plain number");
}

/* What reports print, the reader reads back (consistency of tf_si_format and
 * tf_parse_quantity over 48 decades; the printed value is rounded to `digits`
 * significant digits, so the two agree within half a unit in the last digit). */
static void test_quantity_reads_printed(void **state)
{
    (void)state;
    static const char *const units[] = {"F", "H", "s", "Hz", "V", "A", "ohm", "S/s", "%", ""};
    char buf[64], u[16];
    for (size_t k = 0; k < sizeof units / sizeof units[0]; k++)
        for (int e = -24; e <= 24; e++)
            for (int digits = 1; digits <= 9; digits += 4) {
                double x = (e % 2 ? -1.0 : 1.0) * 1.2345678901234 * pow(10.0, e), v;
                tf_si_format(buf, sizeof buf, x, units[k], digits);
                if (tf_parse_quantity(buf, &v, u, sizeof u) != 0)
                    fail_msg("cannot read '%s'", buf);
                /* percent is printed as given, read as a fraction */
                double want = strcmp(units[k], "%") == 0 ? x / 100 : x;
                if (!(tf_test_reldiff(v, want) <= 0.5 * pow(10.0, 1 - digits) * 1.0001))
                    fail_msg("'%s' read as %.17g, printed from %.17g", buf, v, x);
                assert_string_equal(u, units[k]);
            }
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_quantity_prefixes),
        cmocka_unit_test(test_quantity_exact),
        cmocka_unit_test(test_quantity_spellings),
        cmocka_unit_test(test_quantity_rejects),
        cmocka_unit_test(test_quantity_detail),
        cmocka_unit_test(test_quantity_reads_printed),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
