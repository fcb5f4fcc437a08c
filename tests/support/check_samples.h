/* Test helper of the check, record and report tests: short bench designs and their
 * simulated captures written into the test's temporary directory. */
#ifndef TF_CHECK_SAMPLES_H
#define TF_CHECK_SAMPLES_H

/* Write DIR/NAME.ini (the sample passing half-bridge design of samples/, 1 ms long,
 * with each "key = value" line whose key appears in `changes` replaced: changes is
 * a list of "key = value" lines, may be NULL) and simulate it to DIR/NAME.csv (with
 * the design's noise). Paths go to design (and capture); both buffers hold 4096
 * bytes. Fails the test on error. */
void tf_check_test_sample(const char *dir, const char *name, const char *const *changes,
                          char *design, char *capture);

#endif
