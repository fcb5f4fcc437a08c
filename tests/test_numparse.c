/* Tests of the fast exact number parser against glibc strtod and Python float() (correctly rounded). */
#define _GNU_SOURCE /* strtod_l */
#include "tf_test.h"

#include <locale.h>
#include <math.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "numparse.h"

static locale_t c_locale;

/* reference: glibc strtod_l in the C locale, correctly rounded (ISO C Annex F,
 * IEEE 754 round to nearest) */
static double ref_strtod(const char *s, size_t *used)
{
    char *e;
    double v = strtod_l(s, &e, c_locale);
    *used = (size_t)(e - s);
    return v;
}

static uint64_t bits(double v)
{
    uint64_t u;
    memcpy(&u, &v, sizeof u);
    return u;
}

/* Parse s with tf_parse_double and strtod; both must agree bit for bit and on
 * how much text is a number. */
static void check_same(const char *s)
{
    size_t used;
    double want = ref_strtod(s, &used);
    double got = -12345;
    const char *end = NULL;
    int r = tf_parse_double(s, strlen(s), '.', &got, &end);
    if (used == 0) {
        if (r != -1)
            fail_msg("'%s': strtod finds no number, tf_parse_double does", s);
        return;
    }
    if (r != 0)
        fail_msg("'%s': tf_parse_double found no number", s);
    if ((size_t)(end - s) != used)
        fail_msg("'%s': consumed %zu chars, strtod %zu", s, (size_t)(end - s), used);
    if (isnan(want)) {
        assert_true(isnan(got));
        return;
    }
    if (bits(got) != bits(want))
        fail_msg("'%s': got %a, strtod %a", s, got, want);
}

static void test_numparse_known_values(void **state)
{
    (void)state;
    /* the benchmark's value shape, exact powers, the fast path's edges */
    const char *cases[] = {
        "-1.23456e-03", "1.2345678e-05", "0", "-0", "0.0", "+7", "5.", ".5", "-.5e1",
        "1e22", "1e23", "9007199254740992", "9007199254740993", "9007199254740995e-5",
        "123456789012345678901234567890", "0.1", "0.30000000000000004", "2.2250738585072014e-308",
        "4.9e-324", "2.4703282292062327e-324", "1.7976931348623157e308", "1.8e308", "1e-400",
        "1e", "1e+", "1.5e-", "3.25x", "12,5", "1234e25", "1234e30", "00000000000000000000001.5",
        "0.000000000000000000000000000000000000001", "1E5", "-2.5E-3", NULL};
    for (int i = 0; cases[i]; i++)
        check_same(cases[i]);
}

static void test_numparse_special_and_invalid(void **state)
{
    (void)state;
    const char *cases[] = {"inf", "-inf", "Infinity", "-INFINITY", "nan", "NaN", "-nan",
                           "nan(123)", "infin", "", "-", "+", ".", "e5", "abc", "-e", NULL};
    for (int i = 0; cases[i]; i++)
        check_same(cases[i]);
    double v;
    const char *end;
    assert_int_equal(tf_parse_double("1.5", 0, '.', &v, &end), -1); /* empty range */
}

/* seeded xorshift64*: reproducible random strings */
static uint64_t rng_state = 0x9e3779b97f4a7c15ull;
static uint64_t next_u64(void)
{
    rng_state ^= rng_state >> 12;
    rng_state ^= rng_state << 25;
    rng_state ^= rng_state >> 27;
    return rng_state * 2685821657736338717ull;
}

static void random_number(char *buf, size_t size)
{
    size_t k = 0;
    int ndig = 1 + (int)(next_u64() % 24);
    int point = (int)(next_u64() % (uint64_t)(ndig + 2)) - 1; /* -1: no point */
    if (next_u64() & 1)
        buf[k++] = '-';
    for (int d = 0; d < ndig && k + 12 < size; d++) {
        if (d == point)
            buf[k++] = '.';
        int lead_zero = (next_u64() % 8) == 0;
        buf[k++] = (char)('0' + (lead_zero ? 0 : next_u64() % 10));
    }
    if (next_u64() % 4 != 0) {
        int e = (int)(next_u64() % 700) - 360;
        if (next_u64() % 2)
            e = (int)(next_u64() % 50) - 25; /* mostly the fast path's range */
        k += (size_t)snprintf(buf + k, size - k, "%c%d", (next_u64() & 1) ? 'e' : 'E', e);
    }
    buf[k] = '\0';
}

static void test_numparse_random_vs_strtod(void **state)
{
    (void)state;
    char buf[64];
    for (int i = 0; i < 300000; i++) {
        random_number(buf, sizeof buf);
        check_same(buf);
    }
}

/* Short mantissas with small exponents are the fast path; these values are the
 * ones a scope export prints (6 to 8 significant digits). */
static void test_numparse_random_short_vs_strtod(void **state)
{
    (void)state;
    char buf[64];
    for (int i = 0; i < 300000; i++) {
        double x = (double)(int64_t)(next_u64() % 20000001) - 10000000;
        int e = (int)(next_u64() % 30) - 15;
        snprintf(buf, sizeof buf, "%.*e", (int)(next_u64() % 9), x * pow(10, e));
        check_same(buf);
    }
}

static void test_numparse_decimal_comma(void **state)
{
    (void)state;
    char buf[64];
    for (int i = 0; i < 50000; i++) {
        random_number(buf, sizeof buf);
        size_t used;
        double want = ref_strtod(buf, &used);
        if (used == 0)
            continue;
        char *dot = strchr(buf, '.');
        if (dot)
            *dot = ',';
        double got;
        const char *end;
        assert_int_equal(tf_parse_double(buf, strlen(buf), ',', &got, &end), 0);
        assert_int_equal((size_t)(end - buf), used);
        if (bits(got) != bits(want))
            fail_msg("'%s' with decimal comma: got %a, strtod %a", buf, got, want);
    }
    /* with a decimal comma a point ends the number */
    double v;
    const char *end;
    const char *s = "1.5";
    assert_int_equal(tf_parse_double(s, 3, ',', &v, &end), 0);
    assert_true(v == 1.0 && end == s + 1);
}

static void test_numparse_long_input(void **state)
{
    (void)state;
    /* a number of 400 digits (not NUL-terminated in the middle of a buffer)
     * takes the exact fallback with a heap copy */
    char buf[512];
    memset(buf, '7', 400);
    buf[1] = '.';
    memcpy(buf + 400, "e-2;junk", 9);
    double got;
    const char *end;
    assert_int_equal(tf_parse_double(buf, 403, '.', &got, &end), 0);
    assert_ptr_equal(end, buf + 403);
    buf[403] = '\0';
    size_t used;
    double want = ref_strtod(buf, &used);
    assert_int_equal(used, 403);
    assert_true(bits(got) == bits(want));
}

/* tf_parse_field takes the whole field or nothing: it must accept exactly the
 * texts strtod reads to their end, with strtod's value bit for bit. The field is
 * copied into a buffer of exactly its length (no NUL), so a read past the field
 * is an AddressSanitizer error; and again followed by digits, which must not
 * change the value. */
static void check_field_dec(const char *s, char decimal)
{
    size_t len = strlen(s), used = 0;
    char ref[80];
    snprintf(ref, sizeof ref, "%s", s);
    if (decimal != '.') { /* strtod reads '.', the field has the other mark */
        char *d = strchr(ref, decimal);
        if (d)
            *d = '.';
        else if (strchr(ref, '.'))
            ref[0] = 'x'; /* a '.' in a decimal-comma field ends the number early */
    }
    double want = len ? ref_strtod(ref, &used) : 0;
    int whole = len > 0 && used == len && ref[0] != ' ';
    char *exact = malloc(len ? len : 1);
    assert_non_null(exact);
    memcpy(exact, s, len);
    double got = -12345;
    int r = tf_parse_field(exact, len, decimal, &got);
    free(exact);
    if (r != (whole ? 0 : -1))
        fail_msg("'%s': tf_parse_field returns %d, strtod reads %zu of %zu chars", s, r, used, len);
    if (!whole)
        return;
    if (isnan(want) ? !isnan(got) : bits(got) != bits(want))
        fail_msg("'%s': tf_parse_field %a, strtod %a", s, got, want);
    char padded[96];
    snprintf(padded, sizeof padded, "%s99999999", s);
    double again = -12345;
    assert_int_equal(tf_parse_field(padded, len, decimal, &again), 0);
    if (isnan(want) ? !isnan(again) : bits(again) != bits(got))
        fail_msg("'%s' followed by digits: %a, alone %a", s, again, got);
}

static void check_field(const char *s)
{
    check_field_dec(s, '.');
}

/* Random digits for the shapes below: a leading zero now and then. */
static void put_digits(char *buf, size_t *k, int n)
{
    for (int d = 0; d < n; d++)
        buf[(*k)++] = (char)('0' + (next_u64() % 8 == 0 ? 0 : next_u64() % 10));
}

/* One text of the shapes the fast path distinguishes: sign, 0-3 integer digits,
 * no mark or a mark with 0-18 fraction digits (the eight-byte step and its
 * edges), an exponent in each form it reads (two digits with a sign without a
 * loop, others with one) or a broken one, and now and then a byte after the
 * digits that is near a digit in value (':', '/') or not ASCII. */
static void shape_number(char *buf, size_t size, int intd, int fracd, int form, int tail)
{
    static const char *const exps[] = {"",     "e-03", "E+02", "e5",   "e+5",  "e-22", "e22",
                                       "e-23", "e0005", "e",   "e-",   "e+0a", "e-0",  "ee",
                                       "e+99", "E-1",  "e123", "e-08", "e+1x", "e1000"};
    static const char *const tails[] = {"", ":", "/", "x", "\x80", "\xff", " ", "."};
    size_t k = 0;
    int sign = (int)(next_u64() % 3);
    if (sign)
        buf[k++] = sign == 1 ? '-' : '+';
    put_digits(buf, &k, intd);
    if (fracd >= 0) {
        buf[k++] = '.';
        put_digits(buf, &k, fracd);
    }
    k += (size_t)snprintf(buf + k, size - k, "%s%s", exps[form % 20], tails[tail % 8]);
    buf[k] = '\0';
}

static void test_numparse_field_shapes(void **state)
{
    (void)state;
    char buf[80];
    for (int intd = 0; intd <= 3; intd++)
        for (int fracd = -1; fracd <= 18; fracd++)
            for (int form = 0; form < 20; form++)
                for (int tail = 0; tail < 8; tail++)
                    for (int rep = 0; rep < 3; rep++) {
                        shape_number(buf, sizeof buf, intd, fracd, form, tail);
                        check_field(buf);
                    }
    const char *cases[] = {"", "-", "+", ".", "-.", "e5", ".e5", "1.5e-03", "-0.0", "+0",
                           "123456789012345", "1234567890123456", "0.12345678", "0.123456789",
                           "12345678.1234567", "1.2345678901234e-22", "9.99999999999999e22",
                           "inf", "-nan",
                           /* the %e shape read from both ends, and near misses of it */
                           "1.2:456e-03", "1.23456e-0:", "1.2345ee-03", "1..2345e-03",
                           "1.2345678e+05", "-1.23456789e+05", "1.234567890e+05", "-1.2345e+22",
                           "1.2345e+27", "1.2345e-19", "12.3456e-03", "1.2345e-3", "+9.9999e-07",
                           "1,2345e-03", "1.2345E-03", "1.2345e*03", "a.2345e-03", NULL};
    for (int i = 0; cases[i]; i++)
        check_field(cases[i]);
    /* a number, then a NUL byte, is not one number; nor is a hexadecimal float,
     * which strtod reads (docs/import-csv.md: not numbers in a capture) */
    double v;
    assert_int_equal(tf_parse_field("1.5\0" "5", 4, '.', &v), -1);
    assert_int_equal(tf_parse_field("0x1p3", 5, '.', &v), -1);
    /* the decimal comma takes the same paths */
    for (int i = 0; i < 20000; i++) {
        shape_number(buf, sizeof buf, (int)(next_u64() % 4), (int)(next_u64() % 20) - 1,
                     (int)(next_u64() % 20), (int)(next_u64() % 8));
        char *d = strchr(buf, '.');
        if (d)
            *d = ',';
        check_field_dec(buf, ',');
    }
}

static void test_numparse_field_random_vs_strtod(void **state)
{
    (void)state;
    char buf[64];
    for (int i = 0; i < 300000; i++) {
        random_number(buf, sizeof buf);
        check_field(buf);
    }
    for (int i = 0; i < 100000; i++) { /* the scope-export shape, both signs of everything */
        double x = (double)(int64_t)(next_u64() % 20000001) - 10000000;
        snprintf(buf, sizeof buf, "%.*e", (int)(next_u64() % 12),
                 x * pow(10, (int)(next_u64() % 40) - 20));
        check_field(buf);
    }
}

/* A second reference: Python's float() (CPython reads decimal text correctly
 * rounded, with David Gay's algorithm), bit patterns printed by struct.pack. */
static void test_numparse_field_vs_python(void **state)
{
    (void)state;
    if (!tf_test_have("/usr/bin/python3"))
        skip();
    enum { N = 4000 };
    static char texts[N][80];
    static double got[N];
    size_t n = 0;
    while (n < N) {
        char buf[80];
        if (next_u64() % 2)
            shape_number(buf, sizeof buf, (int)(next_u64() % 4), (int)(next_u64() % 19),
                         (int)(next_u64() % 8), 0);
        else
            random_number(buf, sizeof buf);
        if (tf_parse_field(buf, strlen(buf), '.', &got[n]) != 0)
            continue;
        memcpy(texts[n++], buf, sizeof buf);
    }
    const char *in = tf_test_tmpfile("numparse-texts.txt");
    const char *out = tf_test_tmpfile("numparse-python.txt");
    FILE *f = fopen(in, "w");
    assert_non_null(f);
    for (size_t i = 0; i < n; i++)
        fprintf(f, "%s\n", texts[i]);
    assert_int_equal(fclose(f), 0);
    assert_int_equal(tf_test_system("/usr/bin/python3 -c 'import struct, sys\n"
                                    "for t in open(sys.argv[1]).read().split():\n"
                                    "    print(struct.pack(\">d\", float(t)).hex())' '%s' > '%s'",
                                    in, out),
                     0);
    f = fopen(out, "r");
    assert_non_null(f);
    size_t i = 0;
    unsigned long long want;
    while (i < n && fscanf(f, "%llx", &want) == 1) {
        if (bits(got[i]) != (uint64_t)want)
            fail_msg("'%s': tf_parse_field %a, Python float() bits %016llx", texts[i], got[i], want);
        i++;
    }
    fclose(f);
    assert_int_equal(i, n);
}

/* One check of tf_short_float: when it decides, its float must equal the
 * float of the correctly rounded quotient (glibc strtod_l, correctly rounded:
 * ISO C Annex F) times factor. Returns 1 when it decided. */
static int check_short_float(const char *text, double factor)
{
    tf_short_dec d;
    if (tf_scan_short(text, strlen(text), '.', &d) != 0)
        fail_msg("'%s': not a short decimal", text);
    size_t used;
    float want = (float)(ref_strtod(text, &used) * factor), got = -1;
    if (!tf_short_float(&d, factor, &got))
        return 0;
    if (memcmp(&got, &want, sizeof got) != 0)
        fail_msg("'%s' x %.17g: got %a, want %a", text, factor, (double)got, (double)want);
    return 1;
}

/* The division-free single-precision route (see tf_short_float): random
 * short decimals, and decimals printed near the points halfway between two
 * adjacent floats, where only the exact route may decide. */
static void test_numparse_short_float_vs_strtod(void **state)
{
    (void)state;
    static const double factors[] = {1, 1000, 1e-3, 1e6, 2.5, 0.1, -1, 3.0517578125e-5};
    char buf[64];
    size_t decided = 0, near = 0, near_decided = 0;
    for (int i = 0; i < 400000; i++) {
        uint64_t m = next_u64() % 1000000000000000ull + 1;
        int k = (int)(next_u64() % 22) + 1;
        snprintf(buf, sizeof buf, "%s%llue-%d", next_u64() & 1 ? "-" : "", (unsigned long long)m, k);
        decided += (size_t)check_short_float(buf, factors[i % 8]);
    }
    assert_true(decided > 399000); /* the guard band is narrow */
    for (int i = 0; i < 200000; i++) {
        /* a float f, the exact halfway point h to the next float up, and
         * doubles a few ulp around h, printed to 15 significant digits */
        float f = ldexpf(1.0f + (float)(next_u64() % (1u << 23)) / 8388608.0f,
                         (int)(next_u64() % 110) - 70);
        double h = ((double)f + (double)nextafterf(f, INFINITY)) / 2;
        for (int step = -3; step <= 3; step++) {
            double x = h;
            for (int s = 0; s < (step < 0 ? -step : step); s++)
                x = nextafter(x, step < 0 ? -INFINITY : INFINITY);
            snprintf(buf, sizeof buf, "%.14e", x);
            tf_short_dec d;
            if (tf_scan_short(buf, strlen(buf), '.', &d) != 0)
                continue; /* exponent beyond the fast path */
            near++;
            near_decided += (size_t)check_short_float(buf, 1.0);
        }
    }
    assert_true(near > 100000);
    assert_true(near_decided < near); /* some met the guard band and went the exact way */
}

int main(void)
{
    c_locale = newlocale(LC_ALL_MASK, "C", (locale_t)0);
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_numparse_known_values),
        cmocka_unit_test(test_numparse_special_and_invalid),
        cmocka_unit_test(test_numparse_random_vs_strtod),
        cmocka_unit_test(test_numparse_random_short_vs_strtod),
        cmocka_unit_test(test_numparse_decimal_comma),
        cmocka_unit_test(test_numparse_long_input),
        cmocka_unit_test(test_numparse_field_shapes),
        cmocka_unit_test(test_numparse_field_random_vs_strtod),
        cmocka_unit_test(test_numparse_field_vs_python),
        cmocka_unit_test(test_numparse_short_float_vs_strtod),
    };
    int r = cmocka_run_group_tests(tests, NULL, NULL);
    freelocale(c_locale);
    return r;
}
