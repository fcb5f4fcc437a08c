/* Shared test helpers: paths, temporary files, running external reference tools. */
#ifndef TF_TEST_H
#define TF_TEST_H

#include <stdarg.h>
#include <stddef.h>
#include <setjmp.h>
#include <stdint.h>
#include <cmocka.h>

/* Absolute path of a file in the source tree (static buffer, next call reuses it). */
const char *tf_test_src(const char *relative);

/* Path of the tankfit CLI binary built with the tests. */
const char *tf_test_cli(void);

/* A fresh temporary directory for this test process (created once, removed at exit
 * unless TF_KEEP_TMP is set). */
const char *tf_test_tmpdir(void);

/* tmpdir + "/" + name into a static rotating buffer (8 slots). */
const char *tf_test_tmpfile(const char *name);

/* Run a shell command; returns its exit status (or -1). Output goes to the test log. */
int tf_test_system(const char *fmt, ...) __attribute__((format(printf, 1, 2)));

/* Non-zero when an executable is on PATH (e.g. "/usr/bin/python3", "sox", "ngspice"). */
int tf_test_have(const char *program);

/* Read a whole file into a malloc'd NUL-terminated buffer (NULL on error). */
char *tf_test_slurp(const char *path, size_t *len);

/* Write text to path (overwrites). Returns 0 on success. */
int tf_test_write(const char *path, const char *text);

/* Run `/usr/bin/python3 SCRIPT --list` (SCRIPT relative to the source tree), call
 * run_case on each case name it prints and return how many cases ran; *failed gets
 * the sum of run_case's results (the number of failing cases). Asserts that the
 * script ran. */
int tf_test_run_listed(const char *script, int (*run_case)(const char *name), int *failed);

/* Relative difference |a - b| / max(|b|, tiny). */
double tf_test_reldiff(double a, double b);

#endif
