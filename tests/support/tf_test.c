/* Shared test helpers (see tf_test.h). */
#include "tf_test.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

static char tmpdir[512];

static void cleanup(void)
{
    if (tmpdir[0] && !getenv("TF_KEEP_TMP")) {
        char cmd[600];
        snprintf(cmd, sizeof cmd, "rm -rf '%s'", tmpdir);
        if (system(cmd) != 0)
            fprintf(stderr, "could not remove %s\n", tmpdir);
    }
}

const char *tf_test_src(const char *relative)
{
    static char buf[8][4096];
    static int slot;
    const char *top = getenv("TF_SOURCE_DIR");
    char *b = buf[slot++ % 8];
    snprintf(b, sizeof buf[0], "%s/%s", top ? top : TF_SOURCE_DIR, relative);
    return b;
}

const char *tf_test_cli(void)
{
    const char *c = getenv("TF_CLI");
    static char buf[4096];
    if (c)
        return c;
    snprintf(buf, sizeof buf, "%s/tankfit", TF_BINARY_DIR);
    return buf;
}

const char *tf_test_tmpdir(void)
{
    if (!tmpdir[0]) {
        snprintf(tmpdir, sizeof tmpdir, "/tmp/tankfit-test-XXXXXX");
        if (!mkdtemp(tmpdir)) {
            perror("mkdtemp");
            abort();
        }
        atexit(cleanup);
    }
    return tmpdir;
}

const char *tf_test_tmpfile(const char *name)
{
    static char buf[8][1024];
    static int slot;
    char *b = buf[slot++ % 8];
    snprintf(b, sizeof buf[0], "%s/%s", tf_test_tmpdir(), name);
    return b;
}

int tf_test_system(const char *fmt, ...)
{
    char cmd[8192];
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(cmd, sizeof cmd, fmt, ap);
    va_end(ap);
    fflush(stdout);
    int r = system(cmd);
    if (r == -1)
        return -1;
    return WIFEXITED(r) ? WEXITSTATUS(r) : -1;
}

int tf_test_have(const char *program)
{
    return tf_test_system("command -v '%s' >/dev/null 2>&1", program) == 0;
}

char *tf_test_slurp(const char *path, size_t *len)
{
    FILE *f = fopen(path, "rb");
    if (!f)
        return NULL;
    fseek(f, 0, SEEK_END);
    long n = ftell(f);
    fseek(f, 0, SEEK_SET);
    char *buf = malloc((size_t)n + 1);
    if (buf && fread(buf, 1, (size_t)n, f) != (size_t)n) {
        free(buf);
        buf = NULL;
    }
    fclose(f);
    if (buf) {
        buf[n] = '\0';
        if (len)
            *len = (size_t)n;
    }
    return buf;
}

int tf_test_write(const char *path, const char *text)
{
    FILE *f = fopen(path, "wb");
    if (!f)
        return -1;
    size_t n = strlen(text);
    int ok = fwrite(text, 1, n, f) == n;
    return (fclose(f) == 0 && ok) ? 0 : -1;
}

double tf_test_reldiff(double a, double b)
{
    double d = fabs(b) > 1e-300 ? fabs(b) : 1e-300;
    return fabs(a - b) / d;
}

int tf_test_run_listed(const char *script, int (*run_case)(const char *name), int *failed)
{
    char list[1024];
    snprintf(list, sizeof list, "%s", tf_test_tmpfile("listed-cases.txt"));
    assert_int_equal(tf_test_system("/usr/bin/python3 '%s' --list > '%s'", tf_test_src(script),
                                    list),
                     0);
    FILE *f = fopen(list, "r");
    assert_non_null(f);
    char name[96];
    int ran = 0;
    *failed = 0;
    while (fscanf(f, "%95s", name) == 1) {
        *failed += run_case(name);
        ran++;
    }
    fclose(f);
    return ran;
}
