/* Error codes: every code has a message and the sysexits(3) exit code. */
#include "tf_test.h"

#include <string.h>
#include <tankfit/error.h>

static void test_error_every_code_has_message(void **state)
{
    (void)state;
    for (int c = 0; c < TF_ERR_COUNT_; c++) {
        const char *m = tf_strerror((tf_status)c);
        assert_non_null(m);
        assert_true(strlen(m) > 3);
        assert_string_not_equal(m, "unknown error");
    }
    assert_string_equal(tf_strerror((tf_status)999), "unknown error");
}

static void test_error_sysexits(void **state)
{
    (void)state;
    /* values from sysexits.h (BSD, also glibc's <sysexits.h>) */
    assert_int_equal(tf_exit_code(TF_OK), 0);
    assert_int_equal(tf_exit_code(TF_ERR_USAGE), 64);
    assert_int_equal(tf_exit_code(TF_ERR_DATA), 65);
    assert_int_equal(tf_exit_code(TF_ERR_NOINPUT), 66);
    assert_int_equal(tf_exit_code(TF_ERR_CANTCREAT), 73);
    assert_int_equal(tf_exit_code(TF_ERR_IO), 74);
}

static void test_error_set_and_excerpt(void **state)
{
    (void)state;
    tf_error e;
    assert_int_equal(tf_error_set(&e, TF_ERR_DATA, "f.csv:%d:%d: bad", 3, 4), TF_ERR_DATA);
    assert_string_equal(e.msg, "f.csv:3:4: bad");
    tf_error_clear(&e);
    assert_int_equal(e.code, TF_OK);
    char out[32];
    tf_error_excerpt(out, sizeof out, "abc\tdefghijkl", 13, 6);
    assert_string_equal(out, "abc?de...");
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_error_every_code_has_message),
        cmocka_unit_test(test_error_sysexits),
        cmocka_unit_test(test_error_set_and_excerpt),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
