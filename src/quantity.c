/* Numbers with SI prefixes and units ("2.2 uF", "20us", "6 kHz", "5 %"), locale-free. */
#include <tankfit/import.h>

#include <ctype.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "numparse.h"

/* Units the tool knows; a suffix that is exactly one of these has no prefix. */
static const char *const known_units[] = {
    "F", "H", "s", "Hz", "V", "A", "W", "VA", "ohm", "Ohm", "\xce\xa9", "\xe2\x84\xa6",
    "S/s", "Sa/s", "A/V", "V/V", "V/A", "J", "C", "%", "FS", NULL};

static int is_known_unit(const char *u)
{
    for (int i = 0; known_units[i]; i++)
        if (strcmp(u, known_units[i]) == 0)
            return 1;
    return 0;
}

/* Prefix at the start of s: its factor and byte length, or 0 when none. */
static int prefix_of(const char *s, double *factor)
{
    static const struct { const char *p; double f; } prefixes[] = {
        {"\xc2\xb5", 1e-6}, {"\xce\xbc", 1e-6}, /* micro sign and Greek mu */
        {"p", 1e-12}, {"n", 1e-9}, {"u", 1e-6}, {"m", 1e-3},
        {"k", 1e3}, {"M", 1e6}, {"G", 1e9}, {"f", 1e-15}, {NULL, 0}};
    for (int i = 0; prefixes[i].p; i++) {
        size_t l = strlen(prefixes[i].p);
        if (strncmp(s, prefixes[i].p, l) == 0) {
            *factor = prefixes[i].f;
            return (int)l;
        }
    }
    return 0;
}

int tf_parse_quantity(const char *text, double *value, char *unit, size_t unit_size)
{
    const char *p = text;
    while (*p && isspace((unsigned char)*p))
        p++;
    const char *end = NULL;
    double v;
    if (tf_parse_double(p, strlen(p), '.', &v, &end) != 0 || end == p)
        return -1;
    p = end;
    while (*p && isspace((unsigned char)*p))
        p++;
    char suffix[32];
    size_t len = strlen(p);
    while (len > 0 && isspace((unsigned char)p[len - 1]))
        len--;
    if (len >= sizeof suffix)
        return -1;
    memcpy(suffix, p, len);
    suffix[len] = '\0';

    double factor = 1.0;
    const char *u = suffix;
    if (suffix[0] && !is_known_unit(suffix)) {
        int pl = prefix_of(suffix, &factor);
        if (pl == 0)
            return -1;
        u = suffix + pl;
        if (u[0] && !is_known_unit(u))
            return -1;
    }
    if (strcmp(u, "%") == 0)
        factor = 0.01;
    if (strcmp(u, "\xce\xa9") == 0 || strcmp(u, "\xe2\x84\xa6") == 0 || strcmp(u, "Ohm") == 0)
        u = "ohm";
    if (strcmp(u, "Sa/s") == 0)
        u = "S/s";
    if (unit && unit_size) {
        strncpy(unit, u, unit_size - 1);
        unit[unit_size - 1] = '\0';
    }
    *value = v * factor;
    return isfinite(*value) ? 0 : -1;
}
