/* Locale-independent number parsing. Placeholder until the fast parser lands:
 * glibc strtod_l in the C locale (correctly rounded, slower). */
#define _GNU_SOURCE /* strtod_l */
#include "numparse.h"

#include <locale.h>
#include <stdlib.h>
#include <string.h>

int tf_parse_double(const char *s, size_t len, char decimal, double *value, const char **end)
{
    static locale_t c_locale;
    char buf[128];
    if (len == 0 || len >= sizeof buf)
        return -1;
    if (!c_locale)
        c_locale = newlocale(LC_ALL_MASK, "C", (locale_t)0);
    memcpy(buf, s, len);
    buf[len] = '\0';
    if (decimal != '.') {
        char *d = memchr(buf, decimal, len);
        if (d)
            *d = '.';
    }
    char *e;
    double v = strtod_l(buf, &e, c_locale);
    if (e == buf)
        return -1;
    *value = v;
    *end = s + (e - buf);
    return 0;
}
